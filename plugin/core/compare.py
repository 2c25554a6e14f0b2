"""What a regime changes: two runs compared element by element, and per segment and zone.

The base run and the alternative run must lie on the same elements first: the same grid, the same
mesh, or both resampled onto one common grid (``core/regrid.py``, ``gis/resample.py``). Then, over
the *union* of the elements wet in either run:

* **wet/dry change**: 1 wet in both, 2 wet only in the base run, 3 wet only in the alternative run;
* **speed and depth change** = alternative minus base. An element dry in one run counts there as
  0 m deep and still (0 m/s), so where the alternative dries an element the change is minus the
  base's value. Elements dry in both are not part of the union (nodata on the maps);
* **states** and **transitions**: the state of an element in a run is ``dry`` (code 0) or its class
  (1..N; plus ``no class``, N+1, when a custom table leaves some wet values unclassified). A
  transition is the pair (state in base, state in alternative). The **transition matrix** holds the
  area of every pair; (dry, dry) is empty by construction, so the matrix sums to the union of the wet
  areas. Matrices are made for the whole reach, every zone and every segment.

Per segment and zone, the *statistics* of each run (class shares, median and 90th-percentile speed,
wet area, diversity) come from ``core/habitat.analyse_run`` -- exactly what ``maphabitat`` reports for
that run -- and the change columns are alternative minus base. When the runs were resampled, the
statistics are those of each run on its own grid or mesh (``base_stats`` / ``alt_stats``), while the
element-by-element products (maps, transitions, wet/dry areas) are those of the common grid; the two
agree within the resampling error.

Field names: ``base_*`` and ``alt_*`` hold each run's value, ``chg_*`` the change (alternative minus
base); ``chg_pct_<class>`` is in percentage points of each run's own wet area.
"""

from __future__ import annotations

import copy
import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

from . import stats
from .classes import ClassScheme
from .errors import ChannelHabitatError, as_progress
from .field import GridSupport, HydraulicField, MeshSupport
from .habitat import RunAnalysis, analyse_run, reach_in_crs, segment_table_keys, zone_table_keys
from .reach import Reach, locate_field
from .regrid import crs_equal

DRY = "dry"
NO_CLASS = "no class"
WET_BOTH, WET_BASE_ONLY, WET_ALT_ONLY = 1, 2, 3
WET_DRY_NAMES = {WET_BOTH: "wet in both", WET_BASE_ONLY: "wet only in base", WET_ALT_ONLY: "wet only in alternative"}
WET_DRY_KEYS = {WET_BOTH: "wet_both_m2", WET_BASE_ONLY: "wet_base_only_m2", WET_ALT_ONLY: "wet_alt_only_m2"}
ARROW = " -> "


# ----------------------------------------------------------------------------------------------
# Checks
# ----------------------------------------------------------------------------------------------

def same_support(a: HydraulicField, b: HydraulicField, rtol: float = 1e-9) -> bool:
    """True when both runs lie on the same grid (geotransform and size) or the same mesh (nodes and
    faces), in the same CRS: they can be compared element by element as they are."""
    if not crs_equal(a.crs_wkt, b.crs_wkt):
        return False
    sa, sb = a.support, b.support
    if isinstance(sa, GridSupport) and isinstance(sb, GridSupport):
        if tuple(sa.shape) != tuple(sb.shape):
            return False
        ta, tb = np.asarray(sa.transform, float), np.asarray(sb.transform, float)
        return bool(np.allclose(ta, tb, rtol=0.0, atol=rtol * max(1.0, abs(ta[1]))))
    if isinstance(sa, MeshSupport) and isinstance(sb, MeshSupport):
        if len(sa.node_x) != len(sb.node_x) or sa.face_nodes.shape != sb.face_nodes.shape:
            return False
        return sa.geometry_key() == sb.geometry_key()
    return False


def check_same_scheme(scheme: ClassScheme, other: ClassScheme, parameter: str = "ALT_CLASS_FILE",
                      scheme_parameter: str = "SCHEME") -> list:
    """Refuse a second class table that differs from the scheme in class names, order or bounds
    (transitions between two different schemes have no meaning). Returns notes (e.g. colours differ)."""
    what = (f"Transitions between two different class schemes have no meaning: classify both runs with one "
            f"scheme ({scheme_parameter}) and clear {parameter}, or make the two tables identical.")
    if scheme.names != other.names:
        a, b = scheme.names, other.names
        if len(a) != len(b):
            raise ChannelHabitatError(f"the alternative's class table has {len(b)} classes ({', '.join(b)}) but "
                                      f"the scheme has {len(a)} ({', '.join(a)}). {what}", parameter)
        i = next(k for k in range(len(a)) if a[k] != b[k])
        raise ChannelHabitatError(f"class {i + 1} is '{a[i]}' in the scheme but '{b[i]}' in the alternative's "
                                  f"class table. {what}", parameter)
    for ca, cb in zip(scheme.classes, other.classes):
        for var in sorted(set(ca.bounds) | set(cb.bounds)):
            ba = ca.bounds.get(var, (None, None))
            bb = cb.bounds.get(var, (None, None))
            for label, x, y in (("lower", ba[0], bb[0]), ("upper", ba[1], bb[1])):
                same = (x is None and y is None) or (x is not None and y is not None and
                                                     math.isclose(x, y, rel_tol=1e-9, abs_tol=1e-12))
                if not same:
                    fx = "unbounded" if x is None else f"{x:g}"
                    fy = "unbounded" if y is None else f"{y:g}"
                    raise ChannelHabitatError(
                        f"class '{ca.name}': the {label} {var} bound is {fx} in the scheme but {fy} in the "
                        f"alternative's class table. {what}", parameter)
    notes = []
    if scheme.colours != other.colours:
        notes.append("The alternative's class table has the same classes and bounds as the scheme but other "
                      "colours; the scheme's colours are used.")
    return notes


# ----------------------------------------------------------------------------------------------
# Pairing two runs on the same elements
# ----------------------------------------------------------------------------------------------

@dataclass
class Pairing:
    """Two runs on the same support, over the union of their wet elements (sorted by element index)."""

    union: HydraulicField  # x, y, area of the union elements; depth/speed: the larger of the two runs
    index: np.ndarray  # element index (flat cell index or face number) of every union element
    pos_base: np.ndarray  # position in the union of each base element
    pos_alt: np.ndarray
    base_depth: np.ndarray  # over the union, NaN where dry in that run
    base_speed: np.ndarray
    alt_depth: np.ndarray
    alt_speed: np.ndarray

    @property
    def wet_base(self) -> np.ndarray:
        return np.isfinite(self.base_depth)

    @property
    def wet_alt(self) -> np.ndarray:
        return np.isfinite(self.alt_depth)


def pair_fields(base: HydraulicField, alt: HydraulicField, alt_parameter: str = "ALT_DEPTH") -> Pairing:
    """The union of two runs on the same support. Refuses runs that share no wet element."""
    if not same_support(base, alt):
        raise ValueError("pair_fields needs two runs on the same grid or mesh (resample them first)")
    ia = np.asarray(base.support.index, dtype=np.int64)
    ib = np.asarray(alt.support.index, dtype=np.int64)
    union = np.union1d(ia, ib)
    pa = np.searchsorted(union, ia)
    pb = np.searchsorted(union, ib)
    n = union.size
    common = np.intersect1d(ia, ib, assume_unique=True).size
    if common == 0:
        raise ChannelHabitatError(
            "the base and alternative runs share no wet element: they do not overlap. Check that both runs "
            "are of the same reach and in the right CRS (and the time step or wet-depth threshold).", alt_parameter)

    def spread(pos_a, va, pos_b, vb, dtype=np.float64):
        out = np.empty(n, dtype=dtype)
        out[pos_b] = vb
        out[pos_a] = va
        return out

    def over_union(pos, values):
        out = np.full(n, np.nan, dtype=np.float32)
        out[pos] = values
        return out

    x = spread(pa, base.x, pb, alt.x)
    y = spread(pa, base.y, pb, alt.y)
    area = spread(pa, base.area, pb, alt.area)
    bd, bs = over_union(pa, base.depth), over_union(pa, base.speed)
    ad, as_ = over_union(pb, alt.depth), over_union(pb, alt.speed)
    sup = base.support
    if isinstance(sup, GridSupport):
        usup = GridSupport(tuple(sup.transform), tuple(sup.shape), union)
    else:
        usup = MeshSupport(sup.node_x, sup.node_y, sup.face_nodes, union)
    ufld = HydraulicField(x=x, y=y, area=area, depth=np.fmax(bd, ad), speed=np.fmax(bs, as_), crs_wkt=base.crs_wkt,
                          support=usup, name="union", wet_depth_m=base.wet_depth_m)
    return Pairing(ufld, union, pa, pb, bd, bs, ad, as_)


def subset_location(loc, positions):
    """A copy of a ``Location`` (a dataclass or plain object holding per-element arrays) for the elements at
    ``positions``; scalars (e.g. counts) are kept as they are."""
    n = len(loc.chainage)
    if dataclasses.is_dataclass(loc):
        names = [f.name for f in dataclasses.fields(loc)]
    else:
        names = list(getattr(loc, "__dict__", {})) or [k for k in getattr(loc, "__slots__", ())]
    out = copy.copy(loc)
    for name in names:
        value = getattr(loc, name, None)
        if isinstance(value, np.ndarray) and value.ndim >= 1 and value.shape[0] == n:
            object.__setattr__(out, name, value[positions])
    return out


def _outside(reach: Reach, loc) -> np.ndarray:
    """Elements whose nearest axis point is beyond an end of the axis (as core/habitat treats them)."""
    for name in ("outside", "clamped"):
        m = getattr(loc, name, None)
        if isinstance(m, np.ndarray) and m.dtype == bool and m.shape == loc.chainage.shape:
            return m
    ch = np.asarray(loc.chainage)
    return (ch <= reach.axis.start_m) | (ch >= reach.axis.end_m) | ~np.isfinite(ch)


# ----------------------------------------------------------------------------------------------
# The comparison
# ----------------------------------------------------------------------------------------------

@dataclass
class Comparison:
    """Everything two runs give when compared. Per-element arrays are over ``pairing.union``."""

    pairing: Pairing
    reach: Reach
    scheme: ClassScheme
    states: list  # ['dry', class names..., ('no class')]
    base_state: np.ndarray  # uint8 state per union element (0 = dry)
    alt_state: np.ndarray
    wet_dry: np.ndarray  # uint8: 1 wet in both, 2 only base, 3 only alternative
    speed_change: np.ndarray  # float64, m/s, alternative minus base (dry = still)
    depth_change: np.ndarray  # float64, m (dry = 0 m)
    chainage: np.ndarray
    segment: np.ndarray  # int32, -1 outside the reach
    zone: np.ndarray
    matrix_reach: np.ndarray  # (S, S) m2 from base state (rows) to alternative state (columns)
    matrix_zone: np.ndarray  # (zones, S, S)
    matrix_segment: np.ndarray  # (segments, S, S)
    base: RunAnalysis  # statistics of each run (its own elements)
    alt: RunAnalysis
    segment_change: dict
    zone_change: dict
    reach_change: dict
    outside_area_m2: float = 0.0
    notes: list = field(default_factory=list)

    @property
    def union(self) -> HydraulicField:
        return self.pairing.union

    @property
    def state_keys(self) -> list:
        return [stats.field_key(s) for s in self.states]

    @property
    def inside(self) -> np.ndarray:
        return self.segment >= 0

    def transition_key(self) -> np.ndarray:
        """from * S + to per union element (int64)."""
        return self.base_state.astype(np.int64) * len(self.states) + self.alt_state

    def label(self, from_state: int, to_state: int) -> str:
        return f"{self.states[from_state]}{ARROW}{self.states[to_state]}"


def states_of(scheme: ClassScheme, unclassified: bool) -> list:
    """The states an element can be in: dry, every class, and 'no class' when needed."""
    keys = [stats.field_key(n) for n in scheme.names]
    for bad in (DRY, stats.field_key(NO_CLASS)):
        if bad in keys:
            name = scheme.names[keys.index(bad)]
            raise ChannelHabitatError(
                f"a class is named '{name}', which the comparison uses for elements that are "
                f"{'dry' if bad == DRY else 'wet but in no class'}; rename that class", "CLASS_TABLE")
    return [DRY] + list(scheme.names) + ([NO_CLASS] if unclassified else [])


def grouped_matrix(key, area, groups, n_groups: int, n_states: int) -> np.ndarray:
    """(n_groups, S, S) area per transition key (from * S + to) in every group (-1 = in none)."""
    g = np.asarray(groups, dtype=np.int64)
    ok = (g >= 0) & (g < n_groups)
    flat = g[ok] * (n_states * n_states) + np.asarray(key)[ok]
    m = np.bincount(flat, weights=np.asarray(area, dtype=np.float64)[ok], minlength=n_groups * n_states * n_states)
    return m.reshape(n_groups, n_states, n_states)


def compare_runs(base: HydraulicField, alt: HydraulicField, reach: Reach, scheme: ClassScheme,
                 base_stats: HydraulicField | None = None, alt_stats: HydraulicField | None = None,
                 progress=None, threads: int = 2, alt_parameter: str = "ALT_DEPTH") -> Comparison:
    """Compare two runs on the same support (see the module docstring).

    ``base_stats`` / ``alt_stats``: the runs on their own grid or mesh when ``base`` / ``alt`` were
    resampled; their statistics per segment and zone are then computed from those (and may be in
    another CRS: the reach is reprojected for them). None: the statistics come from ``base`` / ``alt``.
    The reach must be in the CRS of ``base``.
    """
    progress = as_progress(progress)
    progress(0.0, "pairing the two runs element by element")
    pairing = pair_fields(base, alt, alt_parameter)
    uf = pairing.union
    progress(0.05, "locating elements along the reach")
    loc = locate_field(reach, uf)
    progress.check()
    chainage = np.asarray(loc.chainage, dtype=np.float64)
    outside = _outside(reach, loc)
    seg = np.where(outside, -1, reach.segment_of(chainage)).astype(np.int32)
    zone = np.where(outside, -1, reach.zone_of(chainage)).astype(np.int32)
    if not (seg >= 0).any():
        raise ChannelHabitatError(
            "no wet element of either run lies along the reach: the runs and the centreline do not overlap. "
            "Check that they are the same river and in the same CRS.", "CENTRELINE")

    # --- statistics of each run (as maphabitat gives them) -------------------------------------
    def analyse(fld, own, pos, part):
        sub = progress.sub(part, part + 0.3)
        if own is None:
            return analyse_run(fld, reach, scheme, location=subset_location(loc, pos), progress=sub, threads=threads)
        r = reach
        if not crs_equal(own.crs_wkt, uf.crs_wkt):
            r, _ = reach_in_crs(reach, own.crs_wkt)
        return analyse_run(own, r, scheme, progress=sub, threads=threads)

    base_an = analyse(base, base_stats, pairing.pos_base, 0.1)
    alt_an = analyse(alt, alt_stats, pairing.pos_alt, 0.4)
    progress(0.7, "class transitions")

    # --- element by element ----------------------------------------------------------------------
    codes = []
    for d, sp in ((pairing.base_depth, pairing.base_speed), (pairing.alt_depth, pairing.alt_speed)):
        c = np.zeros(d.shape, dtype=np.uint8)
        wet = np.isfinite(d)
        c[wet] = scheme.classify(d[wet], sp[wet])
        codes.append((c, wet & (c == 0)))
    unclassified_any = bool(codes[0][1].any() or codes[1][1].any())
    states = states_of(scheme, unclassified_any)
    S = len(states)
    bstate, astate = (np.where(un, S - 1, c).astype(np.uint8) for c, un in codes)
    wb, wa = pairing.wet_base, pairing.wet_alt
    wet_dry = np.where(wb & wa, WET_BOTH, np.where(wb, WET_BASE_ONLY, WET_ALT_ONLY)).astype(np.uint8)
    bd = np.nan_to_num(pairing.base_depth.astype(np.float64), nan=0.0)
    ad = np.nan_to_num(pairing.alt_depth.astype(np.float64), nan=0.0)
    bs = np.nan_to_num(pairing.base_speed.astype(np.float64), nan=0.0)
    as_ = np.nan_to_num(pairing.alt_speed.astype(np.float64), nan=0.0)
    key = bstate.astype(np.int64) * S + astate
    area = uf.area
    m_seg = grouped_matrix(key, area, seg, reach.n_segments, S)
    m_zone = grouped_matrix(key, area, zone, reach.n_zones, S)
    m_reach = grouped_matrix(key, area, np.where(seg >= 0, 0, -1), 1, S)[0]
    outside_area = float(area[seg < 0].sum())
    notes = []
    if outside_area > 0:
        notes.append(f"{outside_area:,.0f} m2 of the union of the wet areas lies beyond the ends of the reach axis: "
                     "it is on the change maps but not in the transition matrix, TRANSITIONS or the tables.")
    if unclassified_any:
        notes.append(f"Some wet elements match no class of the scheme '{scheme.name}': they are in the state "
                     f"'{NO_CLASS}' in the transitions.")
    progress(0.8, "changes per segment and zone")

    # --- tables -------------------------------------------------------------------------------
    def wetdry_cols(groups, n):
        cols = {}
        for code, k in WET_DRY_KEYS.items():
            cols[k] = stats.grouped_sum(np.where(wet_dry == code, area, 0.0), groups, n)
        cols["union_wet_m2"] = stats.grouped_sum(area, groups, n)
        cols["changed_m2"] = stats.grouped_sum(np.where(bstate != astate, area, 0.0), groups, n)
        with np.errstate(invalid="ignore", divide="ignore"):
            cols["pct_changed"] = np.where(cols["union_wet_m2"] > 0,
                                           100.0 * cols["changed_m2"] / cols["union_wet_m2"], np.nan)
        return cols

    reach_groups = np.where(seg >= 0, 0, -1)
    seg_change = change_columns(segment_table_keys(reach), base_an.segment_stats, alt_an.segment_stats, scheme,
                                wetdry_cols(seg, reach.n_segments))
    zone_change = change_columns(zone_table_keys(reach), base_an.zone_stats, alt_an.zone_stats, scheme,
                                 wetdry_cols(zone, reach.n_zones))
    reach_keys = {"zone": ["whole reach"], "chainage_from_m": np.array([reach.axis.start_m]),
                  "chainage_to_m": np.array([reach.axis.end_m])}
    reach_change = change_columns(reach_keys, base_an.reach_stats, alt_an.reach_stats, scheme,
                                  wetdry_cols(reach_groups, 1))
    progress(1.0)
    return Comparison(pairing, reach, scheme, states, bstate, astate, wet_dry, as_ - bs, ad - bd, chainage, seg,
                      zone, m_reach, m_zone, m_seg, base_an, alt_an, seg_change, zone_change, reach_change,
                      outside_area, notes)


# Statistics carried into the change tables: (column in the run's table, name stem)
CHANGE_STATS = (("wet_area_m2", "wet_area_m2"), ("v_p50_ms", "v_p50_ms"), ("v_p90_ms", "v_p90_ms"),
                ("v_mean_ms", "v_mean_ms"), ("d_p50_m", "d_p50_m"))


def change_columns(keys: dict, base: dict, alt: dict, scheme: ClassScheme, extra: dict | None = None) -> dict:
    """Ordered columns: the identifying ``keys``, then for each statistic base_, alt_ and chg_ (alternative
    minus base), the element-wise ``extra`` columns (wet/dry areas), class shares and areas, diversity."""
    cols = dict(keys)

    def trio(src_key, stem):
        b = np.asarray(base[src_key], dtype=float)
        a = np.asarray(alt[src_key], dtype=float)
        if src_key == "wet_area_m2":  # a run dry in a segment has 0 m2 there, not "unknown"
            b, a = np.nan_to_num(b), np.nan_to_num(a)
        cols[f"base_{stem}"] = b
        cols[f"alt_{stem}"] = a
        cols[f"chg_{stem}"] = a - b

    for src_key, stem in CHANGE_STATS:
        if src_key in base and src_key in alt:
            trio(src_key, stem)
    if extra:
        cols.update(extra)
    for n in scheme.names:
        k = stats.field_key(n)
        trio(f"pct_{k}", f"pct_{k}")
    for n in scheme.names:
        k = stats.field_key(n)
        b = np.asarray(base[f"area_{k}_m2"], dtype=float)
        a = np.asarray(alt[f"area_{k}_m2"], dtype=float)
        cols[f"chg_area_{k}_m2"] = a - b
    for k in ("shannon", "simpson"):
        trio(k, k)
    return cols


# ----------------------------------------------------------------------------------------------
# Tables of transitions
# ----------------------------------------------------------------------------------------------

def transition_table(cmp: Comparison) -> dict:
    """The TRANSITION_TABLE: one row per (scope unit, base state) with the area going to every
    alternative state. Columns: scope ('reach' | 'zone'), unit, chainage_from_m, chainage_to_m,
    from_class, from_code (0 = dry), to_<state>_m2 ..., total_m2 (row sum: the state's area in the base
    run, or for 'dry' the area that becomes wet), kept_m2 (the diagonal)."""
    S = len(cmp.states)
    reach = cmp.reach
    units = [("reach", "reach", reach.axis.start_m, reach.axis.end_m, cmp.matrix_reach)]
    for z, name in enumerate(reach.zone_names):
        units.append(("zone", name, reach.zone_edges[z], reach.zone_edges[z + 1], cmp.matrix_zone[z]))
    cols = {"scope": [], "unit": [], "chainage_from_m": [], "chainage_to_m": [], "from_class": [], "from_code": []}
    to_cols = {f"to_{k}_m2": [] for k in cmp.state_keys}
    total, kept = [], []
    for scope, name, a, b, m in units:
        for i in range(S):
            cols["scope"].append(scope)
            cols["unit"].append(name)
            cols["chainage_from_m"].append(float(a))
            cols["chainage_to_m"].append(float(b))
            cols["from_class"].append(cmp.states[i])
            cols["from_code"].append(i)
            for j, k in enumerate(cmp.state_keys):
                to_cols[f"to_{k}_m2"].append(float(m[i, j]))
            total.append(float(m[i].sum()))
            kept.append(float(m[i, i]))
    out = {k: (np.asarray(v, dtype=np.int64) if k == "from_code" else
               np.asarray(v, dtype=float) if k.endswith("_m") else v) for k, v in cols.items()}
    out.update({k: np.asarray(v, dtype=float) for k, v in to_cols.items()})
    out["total_m2"] = np.asarray(total)
    out["kept_m2"] = np.asarray(kept)
    return out


def class_balance(cmp: Comparison, matrix: np.ndarray | None = None) -> dict:
    """Per state, from a transition matrix (default: the whole reach): base_area_m2 (row sum),
    alt_area_m2 (column sum), chg_area_m2, kept_m2 (diagonal), lost_m2 (to other states),
    gained_m2 (from other states)."""
    m = cmp.matrix_reach if matrix is None else matrix
    row, col, diag = m.sum(axis=1), m.sum(axis=0), np.diag(m)
    return {"state": list(cmp.states), "base_area_m2": row, "alt_area_m2": col, "chg_area_m2": col - row,
            "kept_m2": diag, "lost_m2": row - diag, "gained_m2": col - diag}


def transition_codes(cmp: Comparison, max_codes: int = 255):
    """Dense codes 1..K for the transitions that occur inside the reach (0 elsewhere) and, for each code,
    (from state, to state, label). K is at most ``max_codes`` (a Byte raster for polygonizing)."""
    key = cmp.transition_key()
    inside = cmp.segment >= 0
    present = np.unique(key[inside])
    if present.size > max_codes:
        raise ChannelHabitatError(
            f"{present.size} different class transitions occur, more than the {max_codes} that can be mapped; "
            "use a scheme with fewer classes", "CLASS_TABLE")
    S = len(cmp.states)
    lut = np.zeros(S * S, dtype=np.uint8)
    lut[present] = np.arange(1, present.size + 1, dtype=np.uint8)
    codes = np.where(inside, lut[key], 0).astype(np.uint8)
    info = [(int(k // S), int(k % S), cmp.label(int(k // S), int(k % S))) for k in present]
    return codes, info


def element_table(cmp: Comparison) -> dict:
    """Per union element (mesh faces): face, depths, speeds and their changes, wet/dry change, states and
    transition, segment (1-based, 0 outside), chainage_m, area_m2."""
    p = cmp.pairing
    names = np.array(cmp.states, dtype=object)
    return {
        "face": p.index.astype(np.int64),
        "wet_change": np.array([""] + [WET_DRY_NAMES[k] for k in (1, 2, 3)], dtype=object)[cmp.wet_dry],
        "wet_change_code": cmp.wet_dry.astype(np.int64),
        "from_class": names[cmp.base_state],
        "to_class": names[cmp.alt_state],
        "transition": np.char.add(np.char.add(names[cmp.base_state].astype(str), ARROW),
                                  names[cmp.alt_state].astype(str)).astype(object),
        "changed": cmp.base_state != cmp.alt_state,
        "base_depth_m": np.nan_to_num(p.base_depth.astype(np.float64), nan=0.0),
        "alt_depth_m": np.nan_to_num(p.alt_depth.astype(np.float64), nan=0.0),
        "chg_depth_m": cmp.depth_change,
        "base_speed_ms": np.nan_to_num(p.base_speed.astype(np.float64), nan=0.0),
        "alt_speed_ms": np.nan_to_num(p.alt_speed.astype(np.float64), nan=0.0),
        "chg_speed_ms": cmp.speed_change,
        "segment": (cmp.segment + 1).astype(np.int64),
        "chainage_m": cmp.chainage,
        "area_m2": cmp.union.area.astype(np.float64),
    }
