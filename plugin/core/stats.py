"""Area-weighted statistics per group (chainage segment, reach zone, whole reach).

Percentiles
-----------
An area-weighted percentile here is numpy's default ("linear") percentile of a sample in which
every element is repeated in proportion to its area: weight w_i = area_i / unit, where the unit is
the grid cell area for rasters (so on a regular grid the result is exactly ``np.percentile`` of the
cell values) and the median face area for meshes. For integer weights the result equals
``np.percentile(np.repeat(values, weights), q)`` exactly (tested). With real weights the same
formula is applied to cumulative weights: position h = (W - 1) q / 100 in the repeated sample.

Diversity over class area fractions p_i: Shannon H = -sum p_i ln p_i; Simpson 1 - sum p_i^2.
Coefficient of variation: area-weighted population standard deviation over the weighted mean.
"""

from __future__ import annotations

import re

import numpy as np

PERCENTILES = (0.0, 10.0, 25.0, 50.0, 75.0, 90.0, 100.0)
PERCENTILE_LABELS = ("min", "p10", "p25", "p50", "p75", "p90", "max")


def weighted_percentiles(values, weights, q) -> np.ndarray:
    """Frequency-weighted linear percentiles of one sample (see module docstring)."""
    values = np.asarray(values, dtype=np.float64)
    weights = np.asarray(weights, dtype=np.float64)
    groups = np.zeros(values.shape, dtype=np.int32)
    return grouped_weighted_percentiles(values, weights, groups, 1, q)[0]


def group_order(values, groups) -> np.ndarray:
    """Indices sorting elements by group, then by value within the group."""
    order = np.argsort(values, kind="quicksort")
    g = groups[order]
    if g.size and g.max() < 32767 and g.min() >= -32768:
        g = g.astype(np.int16)  # radix sort on 16-bit keys is several times faster
    # Stable sort on small integer keys keeps the value order inside each group (radix sort).
    order2 = np.argsort(g, kind="stable")
    return order[order2]


def grouped_weighted_percentiles(values, weights, groups, n_groups: int, q, order=None) -> np.ndarray:
    """(n_groups, len(q)) percentiles; NaN for groups with no weight. Elements with a group
    outside [0, n_groups) are ignored. ``order`` may be passed from :func:`group_order`."""
    values = np.asarray(values)
    weights = np.asarray(weights, dtype=np.float64)
    groups = np.asarray(groups)
    q = np.atleast_1d(np.asarray(q, dtype=np.float64))
    if np.any((q < 0) | (q > 100)):
        raise ValueError("percentiles must lie in [0, 100]")
    keep = (groups >= 0) & (groups < n_groups) & (weights > 0) & np.isfinite(values)
    if not np.all(keep):
        values, weights, groups = values[keep], weights[keep], groups[keep]
        order = None
    out = np.full((n_groups, len(q)), np.nan)
    if values.size == 0:
        return out
    if order is None:
        order = group_order(values, groups)
    v = values[order].astype(np.float64)
    g = groups[order]
    cw = np.cumsum(weights[order])
    counts = np.bincount(g, minlength=n_groups)
    ends = np.cumsum(counts)
    starts = ends - counts
    present = counts > 0
    gi = np.nonzero(present)[0]
    s, e = starts[gi], ends[gi]
    base = np.where(s > 0, cw[np.maximum(s - 1, 0)], 0.0)
    base[s == 0] = 0.0
    total = cw[e - 1] - base
    for j, qq in enumerate(q):
        h = np.maximum((total - 1.0) * qq / 100.0, 0.0)
        j0 = np.floor(h)
        frac = h - j0
        k0 = np.searchsorted(cw, base + j0, side="right")
        k1 = np.searchsorted(cw, base + j0 + 1.0, side="right")
        k0 = np.clip(k0, s, e - 1)
        k1 = np.clip(k1, s, e - 1)
        out[gi, j] = v[k0] + (v[k1] - v[k0]) * frac
    return out


def grouped_sum(values, groups, n_groups: int) -> np.ndarray:
    groups = np.asarray(groups)
    keep = (groups >= 0) & (groups < n_groups)
    return np.bincount(groups[keep], weights=np.asarray(values, dtype=np.float64)[keep],
                       minlength=n_groups)


def grouped_mean_cv(values, weights, groups, n_groups: int):
    """Area-weighted mean and coefficient of variation (population std / mean) per group."""
    values = np.asarray(values, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64)
    sw = grouped_sum(w, groups, n_groups)
    swx = grouped_sum(w * values, groups, n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = swx / sw
        g = np.asarray(groups)
        keep = (g >= 0) & (g < n_groups)
        dev = np.zeros_like(values)
        dev[keep] = values[keep] - mean[g[keep]]
        var = grouped_sum(w * dev * dev, groups, n_groups) / sw
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


def summarise(speed, depth, area, codes, groups, n_groups: int, class_names, weight_unit: float,
              froude=None) -> dict:
    """The statistics table of DESIGN.md / maphabitat for each group, as ordered columns.

    Returns {column name: array of length n_groups}. Speed in m/s, depth in m, areas in m2,
    percentages in % of the group's wet area.
    """
    groups = np.asarray(groups)
    area = np.asarray(area, dtype=np.float64)
    w = area / float(weight_unit)
    cols = {}
    wet = grouped_sum(area, groups, n_groups)
    cols["wet_area_m2"] = wet
    inside = (groups >= 0) & (groups < n_groups)
    cols["n_elements"] = np.bincount(groups[inside], minlength=n_groups).astype(np.int64)
    for var, vals, unit in (("v", speed, "ms"), ("d", depth, "m")):
        pct = grouped_weighted_percentiles(vals, w, groups, n_groups, PERCENTILES)
        for j, lab in enumerate(PERCENTILE_LABELS):
            cols[f"{var}_{lab}_{unit}"] = pct[:, j]
        mean, cv = grouped_mean_cv(vals, area, groups, n_groups)
        cols[f"{var}_mean_{unit}"] = mean
        cols[f"{var}_cv"] = cv
    if froude is not None:
        fmean, _ = grouped_mean_cv(froude, area, groups, n_groups)
        cols["fr_mean"] = fmean
    ca = class_areas(codes, area, groups, n_groups, len(class_names))
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = ca / wet[:, None]
    for j, name in enumerate(class_names):
        cols[f"area_{field_key(name)}_m2"] = ca[:, j]
    for j, name in enumerate(class_names):
        cols[f"pct_{field_key(name)}"] = np.where(wet > 0, 100.0 * frac[:, j], np.nan)
    cols["shannon"] = shannon(np.nan_to_num(frac))
    cols["simpson"] = simpson(np.nan_to_num(frac))
    cols["shannon"] = np.where(wet > 0, cols["shannon"], np.nan)
    cols["simpson"] = np.where(wet > 0, cols["simpson"], np.nan)
    return cols
