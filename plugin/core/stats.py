"""Area-weighted statistics per group (chainage segment, reach zone, whole reach, chainage bin).

Percentiles
-----------
An area-weighted percentile here is numpy's default ("linear") percentile of a sample in which
every element is repeated in proportion to its area: weight w_i = area_i / unit, where the unit is
the grid cell area for rasters (so on a regular grid the result is exactly ``np.percentile`` of the
cell values) and the median face area for meshes. For integer weights the result equals
``np.percentile(np.repeat(values, weights), q)`` exactly (tested). With real weights the same
formula is applied to cumulative weights: position h = (W - 1) q / 100 in the repeated sample,
W = sum of the weights; the value at position j is the value of the first element whose cumulative
weight exceeds j, and positions between two integers interpolate linearly.

Moments
-------
Mean: sum(a x) / sum(a). Coefficient of variation: the area-weighted population standard deviation
sqrt(sum(a (x - mean)^2) / sum(a)) over the mean (computed from shifted sums in float64).

Diversity over class area fractions p_i (of the classified area): Shannon H = -sum p_i ln p_i
(natural log, 0 ln 0 = 0; Shannon 1948); Simpson 1 - sum p_i^2 (Simpson 1949, the Gini-Simpson form).

Speed: when every weight is 1 (a raster) the percentiles of a group are order statistics of its
values: each group's values are gathered once and the two values around every percentile position are
selected in place (``np.partition``, linear time, no full sort; :func:`grouped_unit_percentiles`), the
interpolation being the same formula as for cumulative weights. With unequal weights (meshes) one value
sort per variable is shared by every grouping (``value_orders``). The sums of every grouping come from one
pass over a combined group key.
"""

from __future__ import annotations

import re

import numpy as np

PERCENTILES = (0.0, 10.0, 25.0, 50.0, 75.0, 90.0, 100.0)
PERCENTILE_LABELS = ("min", "p10", "p25", "p50", "p75", "p90", "max")


# ----------------------------------------------------------------------------------------------
# Sorting helpers
# ----------------------------------------------------------------------------------------------

def value_order(values) -> np.ndarray:
    """Indices sorting ``values`` ascending (NaN last). Compute once per variable and pass it to
    :func:`group_order` / :func:`grouped_weighted_percentiles` for every grouping of the same
    elements (segments, zones, whole reach, chainage bins): the value sort is the costly part."""
    return np.argsort(values, kind="quicksort")


def _pool_map(func, items, threads: int):
    items = list(items)
    if threads <= 1 or len(items) < 2:
        return [func(i) for i in items]
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=min(threads, len(items))) as pool:
        return list(pool.map(func, items))


def value_orders(arrays, threads: int = 2) -> list:
    """:func:`value_order` of several arrays, sorted side by side in threads (numpy's sort
    releases the GIL, so two cores sort two variables at once)."""
    arrays = list(arrays)
    if max((a.size for a in arrays), default=0) < 200_000:
        threads = 1
    return _pool_map(value_order, arrays, threads)


def group_keys(groups, n_groups: int, valid=None) -> np.ndarray:
    """Group number per element as a small integer key; elements outside [0, n_groups) or not
    ``valid`` get the key ``n_groups`` (sorted last and ignored)."""
    g = np.asarray(groups)
    bad = (g < 0) | (g >= n_groups)
    if valid is not None:
        bad |= ~np.asarray(valid)
    dtype = np.int16 if n_groups < 32767 else np.int32  # radix sort on 16-bit keys is fastest
    key = g.astype(dtype)
    if bad.any():
        key[bad] = n_groups
    return key


def group_order(values, groups, vorder=None, n_groups: int | None = None, valid=None) -> np.ndarray:
    """Indices sorting elements by group, then by value within the group. ``vorder`` (from
    :func:`value_order`) saves the value sort. Elements outside the groups (or not ``valid``) go
    last."""
    if vorder is None:
        vorder = value_order(values)
    if n_groups is None:
        g = np.asarray(groups)
        n_groups = int(g.max()) + 1 if g.size else 0
    key = group_keys(groups, n_groups, valid)
    # A stable sort on small integer keys keeps the value order inside each group (radix sort).
    return vorder[np.argsort(key[vorder], kind="stable")]


# ----------------------------------------------------------------------------------------------
# Percentiles
# ----------------------------------------------------------------------------------------------

def weighted_percentiles(values, weights, q) -> np.ndarray:
    """Frequency-weighted linear percentiles of one sample (see module docstring)."""
    values = np.asarray(values, dtype=np.float64)
    weights = np.asarray(weights, dtype=np.float64)
    groups = np.zeros(values.shape, dtype=np.int32)
    return grouped_weighted_percentiles(values, weights, groups, 1, q)[0]


def _check_q(q) -> np.ndarray:
    q = np.atleast_1d(np.asarray(q, dtype=np.float64))
    if np.any((q < 0) | (q > 100)):
        raise ValueError("percentiles must lie in [0, 100]")
    return q


def grouped_weighted_percentiles(values, weights, groups, n_groups: int, q, order=None,
                                 vorder=None) -> np.ndarray:
    """(n_groups, len(q)) area-weighted percentiles; NaN for groups with no weight.

    Elements with a group outside [0, n_groups), a non-finite value or no weight are ignored.
    ``vorder`` (from :func:`value_order`) or ``order`` (from :func:`group_order` with the same
    validity) may be passed to save sorting. When every weight is 1 (a raster: weight = cell area /
    cell area) the positions in the sorted sample are found directly, without cumulative weights.
    """
    values = np.asarray(values)
    weights = np.asarray(weights, dtype=np.float64)
    q = _check_q(q)
    out = np.full((n_groups, len(q)), np.nan)
    if values.size == 0 or n_groups == 0:
        return out
    finite = np.isfinite(values)
    positive = weights > 0
    valid = None if (finite.all() and positive.all()) else (finite & positive)
    key = group_keys(groups, n_groups, valid)
    if order is None:
        if vorder is None:
            vorder = value_order(values)
        perm = np.argsort(key[vorder], kind="stable")  # radix sort of small keys: cheap
    else:
        vorder, perm = order, None
    counts = np.bincount(key, minlength=n_groups + 1)[:n_groups]
    n_used = int(counts.sum())
    if n_used == 0:
        return out

    def element(k):  # element index at positions k of the group-then-value order
        return vorder[perm[k]] if perm is not None else vorder[k]

    ends = np.cumsum(counts)
    starts = ends - counts
    gi = np.nonzero(counts > 0)[0]
    s, e = starts[gi], ends[gi]
    unit = bool(np.all(weights[positive] == 1.0)) if valid is not None else bool(np.all(weights == 1.0))
    if unit:
        total = counts[gi].astype(np.float64)
        for j, qq in enumerate(q):
            h = (total - 1.0) * qq / 100.0
            j0 = np.floor(h)
            frac = h - j0
            k0 = s + j0.astype(np.int64)
            k1 = np.minimum(k0 + 1, e - 1)
            v0 = values[element(k0)].astype(np.float64)
            v1 = values[element(k1)].astype(np.float64)
            out[gi, j] = v0 + (v1 - v0) * frac
        return out
    order_used = element(np.arange(n_used))
    cw = np.cumsum(weights[order_used])
    base = np.where(s > 0, cw[np.maximum(s - 1, 0)], 0.0)
    total = cw[e - 1] - base
    for j, qq in enumerate(q):
        h = np.maximum((total - 1.0) * qq / 100.0, 0.0)
        j0 = np.floor(h)
        frac = h - j0
        k0 = np.searchsorted(cw, base + j0, side="right")
        k1 = np.searchsorted(cw, base + j0 + 1.0, side="right")
        k0 = np.clip(k0, s, e - 1)
        k1 = np.clip(k1, s, e - 1)
        v0 = values[order_used[k0]].astype(np.float64)
        v1 = values[order_used[k1]].astype(np.float64)
        out[gi, j] = v0 + (v1 - v0) * frac
    return out


def grouped_unit_percentiles(values, grouping, q) -> np.ndarray:
    """(n_groups, len(q)) percentiles of equally weighted elements (every weight 1), NaN for empty
    groups; the same values as :func:`grouped_weighted_percentiles` with unit weights, bit for bit.

    ``grouping``: a :class:`Grouping` (its stable group order is reused). Position h = (n - 1) q / 100
    in the group's sorted values; the values at floor(h) and floor(h) + 1 are found by selection
    (``np.partition`` on the group's gathered values, linear time; numpy releases the GIL, so groupings
    and variables can run in threads) and interpolated as v0 + (v1 - v0) (h - floor h). Non-finite values
    are ignored."""
    values = np.asarray(values)
    q = _check_q(q)
    g = grouping
    if values.size == 0 or g.n_groups == 0:
        return np.full((g.n_groups, len(q)), np.nan)
    finite = np.isfinite(values)
    if finite.all():
        perm, counts = g.perm, g.counts
    else:
        key = group_keys(g.groups, g.n_groups, finite)
        counts = np.bincount(key, minlength=g.n_groups + 1)[: g.n_groups]
        perm = np.argsort(key, kind="stable")[: int(counts.sum())]
    return _run_percentiles(values[perm], np.cumsum(counts), q)


def _run_percentiles(gathered, ends, q) -> np.ndarray:
    """Percentiles (as :func:`grouped_unit_percentiles`) of consecutive runs of ``gathered``: group g
    holds positions ends[g-1] .. ends[g] - 1. ``gathered`` is partitioned in place."""
    ends = np.asarray(ends, dtype=np.int64)
    counts = np.diff(np.r_[0, ends])
    starts = ends - counts
    out = np.full((len(ends), len(q)), np.nan)
    for gi in np.nonzero(counts > 0)[0]:
        x = gathered[starts[gi]:ends[gi]]
        total = float(counts[gi])
        h = (total - 1.0) * q / 100.0
        j0 = np.floor(h)
        frac = h - j0
        k0 = j0.astype(np.int64)
        k1 = np.minimum(k0 + 1, x.size - 1)
        if x.size < _SELECT_FEW:
            x.partition(np.unique(np.concatenate([k0, k1])))
            v0 = x[k0].astype(np.float64)
            v1 = x[k1].astype(np.float64)
        else:
            v0, v1 = _select_pairs(x, k0, np.where(frac > 0, k1, k0))
        out[gi] = v0 + (v1 - v0) * frac
    return out


_SELECT_FEW = 20_000  # smaller groups: one partition at every needed rank (less Python per group)


def _select_pairs(x, k0, k1):
    """Values of rank k0 and k1 (0-based, in ascending order) of ``x`` (partitioned in place), as
    float64. One partition at the interior ranks k0 only; a rank just after a partition point (k0 + 1)
    is the smallest value of the block that follows it, rank 0 and the last rank the smallest and
    largest of the first and last block (min/max are much cheaper than more partition points);
    any other rank is selected inside its block. Where the interpolation weight is 0 pass k1 = k0
    (the result v0 + (v1 - v0) * 0 does not depend on v1)."""
    n = x.size
    pts = np.unique(k0[(k0 > 0) & (k0 < n - 1)])
    if pts.size:
        x.partition(pts)
    bounds = np.concatenate([[-1], pts, [n]])
    found = {}

    def at(r):
        r = int(r)
        if r in found:
            return found[r]
        i = int(np.searchsorted(pts, r))
        if i < pts.size and pts[i] == r:
            v = x[r]
        else:
            lo, hi = int(bounds[i]) + 1, int(bounds[i + 1])  # the block of ranks lo .. hi - 1 holding r
            if r == lo:
                v = x[lo:hi].min()
            elif r == hi - 1:
                v = x[lo:hi].max()
            else:
                block = x[lo:hi]
                block.partition(r - lo)
                v = block[r - lo]
        found[r] = v
        return v

    return (np.array([at(r) for r in k0], dtype=np.float64), np.array([at(r) for r in k1], dtype=np.float64))


def _common_runs(groupings, combo, sizes):
    """(order, [ends per grouping]) when one element order makes every group of every grouping a
    consecutive run (e.g. segments, zones, the whole reach and chainage bins: all intervals of
    chainage), else None. The order sorts elements by their combined key (the cells of all groupings
    at once: one radix sort of small keys); the runs of grouping i end at ends[i] (elements outside
    grouping i come after them). Checked, not assumed: each grouping's numbers must not decrease along
    the order."""
    total = int(np.prod(sizes, dtype=np.float64))
    occ = np.bincount(combo, minlength=total)
    used = np.flatnonzero(occ)
    n_cells = len(used)
    dtype = np.int16 if n_cells < 32767 else np.int32
    rem = used.copy()
    bounds = []
    for g, size in zip(groupings, sizes):
        gid = rem % size
        rem //= size
        if n_cells > 1 and np.any(gid[1:] < gid[:-1]):
            return None
        per_group = np.bincount(gid, weights=occ[used].astype(np.float64), minlength=size)[: g.n_groups]
        bounds.append(np.cumsum(per_group.astype(np.int64)))
    lut = np.zeros(total, dtype=dtype)
    lut[used] = np.arange(n_cells, dtype=dtype)
    return np.argsort(lut[combo], kind="stable"), bounds


def grouped_percentiles(values, groups, n_groups: int, q, perm=None, counts=None) -> np.ndarray:
    """(n_groups, len(q)) unweighted percentiles (numpy 'linear'), each group by ``np.percentile``
    on its own values (a partial sort). ``perm``/``counts``: a stable group order and group sizes
    from :class:`Grouping`, reused across variables. Non-finite values are ignored."""
    values = np.asarray(values)
    q = _check_q(q)
    out = np.full((n_groups, len(q)), np.nan)
    if values.size == 0 or n_groups == 0:
        return out
    finite = np.isfinite(values)
    if perm is None or counts is None or not finite.all():
        key = group_keys(groups, n_groups, finite)
        counts = np.bincount(key, minlength=n_groups + 1)[:n_groups]
        perm = np.argsort(key, kind="stable") if n_groups > 1 else np.flatnonzero(key == 0)
    ends = np.cumsum(counts)
    starts = ends - counts
    gathered = values[perm[: int(ends[-1])]] if len(ends) else values[:0]
    for g in np.nonzero(counts > 0)[0]:
        out[g] = np.percentile(gathered[starts[g]:ends[g]].astype(np.float64), q)
    return out


# ----------------------------------------------------------------------------------------------
# Sums and moments
# ----------------------------------------------------------------------------------------------

def grouped_sum(values, groups, n_groups: int) -> np.ndarray:
    """Sum of ``values`` per group (elements outside [0, n_groups) ignored)."""
    key = group_keys(groups, n_groups)
    return np.bincount(key, weights=np.asarray(values, dtype=np.float64), minlength=n_groups + 1)[:n_groups]


def grouped_mean_cv(values, weights, groups, n_groups: int):
    """Area-weighted mean and coefficient of variation (population std / mean) per group."""
    values = np.asarray(values, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    key = group_keys(groups, n_groups)
    sw = np.bincount(key, weights=w, minlength=n_groups + 1)[:n_groups]
    swx = np.bincount(key, weights=w * values, minlength=n_groups + 1)[:n_groups]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = swx / sw
        dev = values - np.append(mean, 0.0)[key]
        var = np.bincount(key, weights=w * dev * dev, minlength=n_groups + 1)[:n_groups] / sw
        cv = np.sqrt(var) / mean
    mean[sw <= 0] = np.nan
    cv[sw <= 0] = np.nan
    return mean, cv


def class_areas(codes, area, groups, n_groups: int, n_classes: int) -> np.ndarray:
    """(n_groups, n_classes) area of each class code 1..n_classes in each group."""
    codes = np.asarray(codes).astype(np.int64)
    groups = np.asarray(groups).astype(np.int64)
    keep = (groups >= 0) & (groups < n_groups) & (codes >= 1) & (codes <= n_classes)
    key = groups[keep] * n_classes + (codes[keep] - 1)
    a = np.bincount(key, weights=np.asarray(area, dtype=np.float64)[keep],
                    minlength=n_groups * n_classes)
    return a.reshape(n_groups, n_classes)


def shannon(fractions, axis=-1) -> np.ndarray:
    """Shannon H = -sum p ln p (natural log), 0 ln 0 = 0. NaN where fractions sum to 0."""
    p = np.asarray(fractions, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(p > 0, -p * np.log(p), 0.0)
    h = terms.sum(axis=axis)
    return np.where(p.sum(axis=axis) > 0, h, np.nan)


def simpson(fractions, axis=-1) -> np.ndarray:
    """Simpson diversity 1 - sum p^2. NaN where fractions sum to 0."""
    p = np.asarray(fractions, dtype=np.float64)
    d = 1.0 - (p * p).sum(axis=axis)
    return np.where(p.sum(axis=axis) > 0, d, np.nan)


def field_key(class_name: str) -> str:
    """A class name as a field-name fragment: 'very slow' -> 'very_slow'."""
    k = re.sub(r"[^0-9a-zA-Z]+", "_", class_name.strip().lower()).strip("_")
    return k or "class"


# ----------------------------------------------------------------------------------------------
# The statistics table
# ----------------------------------------------------------------------------------------------

class Grouping:
    """One way of grouping the elements (segments, zones, ...): keys and, lazily, a stable order."""

    def __init__(self, groups, n_groups: int):
        self.n_groups = int(n_groups)
        self.groups = np.asarray(groups)
        self.key = group_keys(self.groups, self.n_groups)
        self.counts = np.bincount(self.key, minlength=self.n_groups + 1)[: self.n_groups]
        self._perm = None

    @property
    def perm(self) -> np.ndarray:
        """Element indices ordered by group (stable; elements outside the groups left out)."""
        if self._perm is None:
            n_used = int(self.counts.sum())
            if self.n_groups == 1:
                self._perm = np.flatnonzero(self.key == 0)
            else:
                self._perm = np.argsort(self.key, kind="stable")[:n_used]
        return self._perm


def _combo_key(groupings, max_cells: int = 1 << 22):
    """(combined key, sizes): every element's cell in the table of all groupings at once (the first
    grouping is the least significant digit; size n_groups + 1 each, the last for elements outside);
    the key is None when that table would have more than ``max_cells`` cells."""
    sizes = [g.n_groups + 1 for g in groupings]
    if np.prod(sizes, dtype=np.float64) > max_cells:
        return None, sizes
    combo = np.zeros(len(groupings[0].key), dtype=np.int64)
    for g, size in zip(reversed(groupings), reversed(sizes)):
        combo *= size
        combo += g.key
    return combo, sizes


def _combined_sums(groupings, quantities, max_cells: int = 1 << 22, combo=None):
    """Sums of each quantity per group of each grouping, from one bincount per quantity over the
    combined key of all groupings (when the combined table is small), else per grouping.
    ``quantities`` may yield arrays lazily (one is alive at a time); ``None`` repeats the sums of the
    first quantity. ``combo``: the combined key from :func:`_combo_key` when already made."""
    sizes = [g.n_groups + 1 for g in groupings]
    total = int(np.prod(sizes, dtype=np.float64))
    out = [[] for _ in groupings]
    if total <= max_cells:
        if combo is None:
            combo, _ = _combo_key(groupings, max_cells)
        nd = len(groupings)
        for qv in quantities:
            if qv is None:  # the same as the first quantity
                for i in range(nd):
                    out[i].append(out[i][0].copy())
                continue
            t = np.bincount(combo, weights=qv, minlength=total).reshape(sizes[::-1])
            for i, g in enumerate(groupings):
                axis_i = nd - 1 - i  # the first grouping is the least significant digit
                other = tuple(a for a in range(nd) if a != axis_i)
                out[i].append(t.sum(axis=other)[: g.n_groups])
        return out
    for qv in quantities:
        for i, g in enumerate(groupings):
            if qv is None:
                out[i].append(out[i][0].copy())
                continue
            out[i].append(np.bincount(g.key, weights=qv, minlength=g.n_groups + 1)[: g.n_groups])
    return out


def _class_sums(groupings, cls_key, area, n_cls: int, max_cells: int = 1 << 22, combo=None):
    """Per grouping, an (n_groups, n_cls) table of class areas, from one weighted bincount over
    (combined group key, class). ``combo``: the combined group key when already made."""
    sizes = [g.n_groups + 1 for g in groupings]
    total = int(np.prod(sizes, dtype=np.float64)) * (n_cls + 1)
    if total <= max_cells:
        combo = _combo_key(groupings, max_cells)[0] * (n_cls + 1) if combo is None else combo * (n_cls + 1)
        combo += cls_key
        t = np.bincount(combo, weights=area, minlength=total).reshape(sizes[::-1] + [n_cls + 1])
        nd = len(groupings)
        out = []
        for i, g in enumerate(groupings):
            axis_i = nd - 1 - i
            other = tuple(a for a in range(nd) if a != axis_i)
            out.append(t.sum(axis=other)[: g.n_groups, 1:])
        return out
    return [np.bincount(g.key.astype(np.int64) * (n_cls + 1) + cls_key, weights=area,
                        minlength=(g.n_groups + 1) * (n_cls + 1)).reshape(g.n_groups + 1, n_cls + 1)[: g.n_groups, 1:]
            for g in groupings]


def _percentile_wish(percentiles, n_groupings: int) -> list:
    """Per grouping, the set of variables ('v', 'd') whose percentile columns are wanted: ``True`` = both
    for every grouping, ``False`` = none, or a sequence with one entry per grouping (a bool or a
    collection of variable names)."""
    if isinstance(percentiles, (bool, np.bool_)) or percentiles is None:
        return [{"v", "d"} if percentiles else set()] * n_groupings
    wish = list(percentiles)
    if len(wish) != n_groupings:
        raise ValueError("percentiles: give one entry per grouping")
    return [({"v", "d"} if w else set()) if isinstance(w, (bool, np.bool_)) else set(w) for w in wish]


def summarise_groupings(speed, depth, area, codes, groupings, class_names, weight_unit: float, froude=None,
                        vorders=None, percentiles: bool = True, threads: int = 2) -> list:
    """:func:`summarise` for several groupings of the same elements at once, sharing the work.

    ``groupings``: list of (groups, n_groups) or :class:`Grouping`. Returns one ordered column dict
    per grouping (columns as :func:`summarise`). ``percentiles``: True (every grouping), False, or one
    entry per grouping: a bool or the variables wanted, e.g. ``("v",)`` for speed percentiles only (the
    percentile columns of the other variable are then left out of that grouping's table).
    """
    groupings = [g if isinstance(g, Grouping) else Grouping(*g) for g in groupings]
    speed = np.asarray(speed)
    depth = np.asarray(depth)
    area = np.asarray(area, dtype=np.float64)
    codes = np.asarray(codes)
    n_cls = len(class_names)
    # --- sums: area, moments (shifted for accuracy), class areas --------------------------------
    variables = [("v", speed, "ms"), ("d", depth, "m")]
    if froude is not None:
        variables.append(("fr", np.asarray(froude), ""))
    shifts = []

    def quantities():  # one array alive at a time: memory stays proportional to one column
        yield area
        for _, vals, _ in variables:
            x = vals.astype(np.float64)
            fin = np.isfinite(x)
            if fin.all():
                # the weighted mean as a shift (einsum, not np.dot: BLAS would start threads that
                # keep spinning on the other core for ~0.1 s after each call)
                c = float(np.einsum("i,i->", x, area) / area.sum()) if area.sum() > 0 else 0.0
                x -= c
                a = area
            else:
                c = float(np.average(x[fin], weights=area[fin])) if area[fin].sum() > 0 else 0.0
                x = np.where(fin, x - c, 0.0)
                a = np.where(fin, area, 0.0)
            shifts.append(c)
            yield None if a is area else a  # None: the same as the area sums (no second pass)
            ax = a * x
            yield ax
            ax *= x
            yield ax
            del ax, x

    combo, sizes = _combo_key(groupings)
    sums = _combined_sums(groupings, quantities(), combo=combo)
    if n_cls:
        cls_key = np.where((codes >= 1) & (codes <= n_cls), codes, 0).astype(np.int64)
        for gi, ca in enumerate(_class_sums(groupings, cls_key, area, n_cls, combo=combo)):
            sums[gi].extend(ca.T)
    # --- percentiles ---------------------------------------------------------------------------
    w = area / float(weight_unit)
    pct = [dict() for _ in groupings]
    want = _percentile_wish(percentiles, len(groupings))
    if any(want):
        pvars = [(var, vals) for var, vals, _ in variables[:2]]
        jobs = [(gi, var, vals, vi) for gi in range(len(groupings)) for vi, (var, vals) in enumerate(pvars)
                if var in want[gi]]
        if bool(np.all(w == 1.0)):  # equal weights (a raster): selection per group, no value sort
            runs = None
            if combo is not None and len(groupings) > 1 and all(np.isfinite(vals).all() for _, vals in pvars):
                runs = _common_runs(groupings, combo, sizes)
            if runs is not None:  # one order for all groupings: one gather per variable
                order, ends = runs
                used = max(int(e[-1]) if len(e) else 0 for e in ends)
                gathered = {var: vals[order[:used]] for var, vals in pvars if any(var in w_ for w_ in want)}

                def run(job):
                    gi, var, _, _ = job
                    e = ends[gi]
                    return _run_percentiles(gathered[var][: int(e[-1]) if len(e) else 0].copy(), e,
                                            _check_q(PERCENTILES))
            else:

                def run(job):
                    gi, var, vals, _ = job
                    return grouped_unit_percentiles(vals, groupings[gi], PERCENTILES)
        else:
            if vorders is None or vorders[0] is None:
                used = sorted({job[3] for job in jobs})
                vo = value_orders([pvars[i][1] for i in used], threads=threads)
                vorders = [vo[used.index(i)] if i in used else None for i in range(len(pvars))]

            def run(job):
                gi, var, vals, vi = job
                g = groupings[gi]
                return grouped_weighted_percentiles(vals, w, g.groups, g.n_groups, PERCENTILES, vorder=vorders[vi])

        results = _pool_map(run, jobs, threads if speed.size >= 200_000 else 1)
        for job, res in zip(jobs, results):
            pct[job[0]][job[1]] = res
    # --- assemble ------------------------------------------------------------------------------
    out = []
    for gi, g in enumerate(groupings):
        s = sums[gi]
        wet = s[0]
        cols = {"wet_area_m2": wet, "n_elements": g.counts.astype(np.int64)}
        for vi, (var, _, unit) in enumerate(variables):
            sa, sax, saxx = s[1 + 3 * vi: 4 + 3 * vi]
            with np.errstate(invalid="ignore", divide="ignore"):
                m = sax / sa
                var_ = np.maximum(saxx / sa - m * m, 0.0)
                mean = m + shifts[vi]
                cv = np.sqrt(var_) / mean
            mean = np.where(sa > 0, mean, np.nan)
            cv = np.where(sa > 0, cv, np.nan)
            if var == "fr":
                cols["fr_mean"] = mean
                continue
            if var in pct[gi]:
                for j, lab in enumerate(PERCENTILE_LABELS):
                    cols[f"{var}_{lab}_{unit}"] = pct[gi][var][:, j]
            cols[f"{var}_mean_{unit}"] = mean
            cols[f"{var}_cv"] = cv
        if froude is not None:  # keep fr_mean after the depth columns
            cols["fr_mean"] = cols.pop("fr_mean")
        ca = np.column_stack(s[1 + 3 * len(variables):]) if n_cls else np.zeros((g.n_groups, 0))
        classified = ca.sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = ca / wet[:, None]
            # Diversity over the class distribution: fractions of the classified area (= the wet
            # area for a scheme that covers every value, as the presets do).
            p = ca / classified[:, None]
        for j, name in enumerate(class_names):
            cols[f"area_{field_key(name)}_m2"] = ca[:, j]
        for j, name in enumerate(class_names):
            cols[f"pct_{field_key(name)}"] = np.where(wet > 0, 100.0 * frac[:, j], np.nan)
        has = classified > 0
        cols["shannon"] = np.where(has, shannon(np.nan_to_num(p)), np.nan)
        cols["simpson"] = np.where(has, simpson(np.nan_to_num(p)), np.nan)
        out.append(cols)
    return out


def summarise(speed, depth, area, codes, groups, n_groups: int, class_names, weight_unit: float,
              froude=None, vorders=None, percentiles: bool = True) -> dict:
    """The statistics table of DESIGN.md / maphabitat for each group, as ordered columns.

    Returns {column name: array of length n_groups}. Speed in m/s, depth in m, areas in m2,
    percentages in % of the group's wet area. ``vorders``: optional (speed order, depth order) from
    :func:`value_orders`, shared between groupings of the same elements. ``percentiles=False``
    leaves out the percentile columns (v_min_ms ... d_max_m), which need the sort.

    Columns: wet_area_m2, n_elements, v_min_ms, v_p10_ms, v_p25_ms, v_p50_ms, v_p75_ms, v_p90_ms,
    v_max_ms, v_mean_ms, v_cv, the same for depth (d_..._m, d_mean_m, d_cv), fr_mean (with
    ``froude``), area_<class>_m2 and pct_<class> per class, shannon, simpson.
    """
    return summarise_groupings(speed, depth, area, codes, [(groups, n_groups)], class_names, weight_unit,
                               froude=froude, vorders=vorders, percentiles=percentiles)[0]
