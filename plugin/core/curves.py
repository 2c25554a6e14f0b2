"""Flow-habitat curves: how much of each class each regime gives as discharge rises, targets such as
``lower: moderate+fast >= 50%``, and the smallest discharge that meets them.

Inputs and the CURVES table
---------------------------
Every run of a scenario table (one regime at one discharge) gives, for every *scope unit* (the
whole reach, each zone, each chainage segment), the wet area and the area of each class
(:class:`RunAreas`; :func:`run_areas_from_stats` builds one from ``core.stats.summarise``
columns). :class:`FlowHabitatCurves` holds them all, per regime ordered by discharge, writes the
CURVES long table (one row per regime x discharge x scope unit x class: regime, q_mld, q_m3s,
scope, unit, chainage_from_m, chainage_to_m, class, area_m2, wet_area_m2, percent) and reads it
back (:meth:`FlowHabitatCurves.from_table`), so later steps (habitatseries) can work from the
table alone.

Interpolation between ladder discharges
---------------------------------------
Percentages are interpolated between the runs of a regime by a monotone piecewise cubic Hermite
interpolant (PCHIP) in ln(discharge): Fritsch, F. N. & Carlson, R. E. (1980) "Monotone piecewise
cubic interpolation", SIAM Journal on Numerical Analysis 17(2):238-246, with the interior slopes of
Fritsch, F. N. & Butland, J. (1984) "A method for constructing local monotone piecewise cubic
interpolants", SIAM Journal on Scientific and Statistical Computing 5(2):300-304 (weighted harmonic
mean of the neighbouring secant slopes; zero at local extrema) and the shape-preserving
three-point end slopes of Moler, C. (2004) "Numerical Computing with MATLAB", section 3.4. The
interpolant

* passes exactly through every run (ladder point);
* is monotone between two runs whenever the two runs' values are (no overshoot: it never leaves
  the range of the two runs it lies between);
* is never extrapolated: outside the regime's lowest and highest run it is NaN (with a flag).

Interpolating in ln q treats the discharge ladder (typically roughly geometric, 3000 ... 40000
ML/d) evenly. A class *set* (``moderate+fast``) is interpolated as one curve: the percentage of
the summed areas at each run, then PCHIP; the sum of the classes' separate interpolants would not
in general be monotone where the set's percentage is.

Targets
-------
``<unit>: <class>[+<class>...] <op> <number>%`` with ``op`` one of >=, >, <=, < (also the signs
>= and <= typed as one character); several separated by ';' or new lines; ``unit`` is a zone name,
``reach`` or ``segment N`` (1-based, as in the SEGMENTS layer). :func:`required_discharge` finds,
per regime, the smallest discharge at which the target holds: "met at the lowest run" (the true
requirement may be lower still: the runs do not tell), "interpolated" (the first crossing in
increasing discharge, found on the PCHIP curve between the last run that fails and the first run
that meets it; exactly the run's discharge when the run meets it with equality), or "not reached
within the runs". Curves need not be monotone: when the target is met and then lost again at higher
flows, the result says so (``lost_above_q_mld`` and the note).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import brentq

from .errors import ChannelHabitatError
from .units import mld_to_m3s

METHOD = ("PCHIP monotone cubic interpolation on ln(discharge) (Fritsch & Carlson 1980; "
          "Fritsch & Butland 1984 slopes); no extrapolation outside the runs")
SCOPES = ("reach", "zone", "segment")
CURVE_COLUMNS = ("regime", "q_mld", "q_m3s", "scope", "unit", "chainage_from_m", "chainage_to_m",
                 "class", "area_m2", "wet_area_m2", "percent")
TARGET_COLUMNS = ("regime", "target", "unit", "classes", "op", "threshold_pct", "status", "q_mld",
                  "q_m3s", "pct_at_lowest", "pct_at_highest", "q_lowest_mld", "q_highest_mld",
                  "met_at_highest", "lost_above_q_mld", "note", "method")
MET_AT_LOWEST = "met at the lowest run"
INTERPOLATED = "interpolated"
NOT_REACHED = "not reached within the runs"
MET_AT_RUN = "met at a run (no interpolation)"  # only when the run below has no wet area
# A discharge within this relative distance of the lowest/highest run counts as that run (so a
# flow given in m3/s and converted to ML/d is not lost to rounding at the ends of the ladder).
END_RTOL = 1e-9


# ============================================================================================
# Monotone interpolation on ln(discharge)
# ============================================================================================

def _end_slope(h0, h1, m0, m1):
    """Shape-preserving three-point end slope (Moler 2004, section 3.4)."""
    d = ((2.0 * h0 + h1) * m0 - h0 * m1) / (h0 + h1)
    wrong_sign = np.sign(d) != np.sign(m0)
    too_steep = (np.sign(m0) != np.sign(m1)) & (np.abs(d) > 3.0 * np.abs(m0))
    d = np.where(wrong_sign, 0.0, np.where(too_steep, 3.0 * m0, d))
    # A NaN neighbour (a dry unit at the third run) must not spoil the first interval: secant.
    return np.where(np.isfinite(m1), d, m0)


def pchip_slopes(x, y) -> np.ndarray:
    """PCHIP node slopes dy/dx, shape of ``y`` ((n, ...): curves along the trailing axes).

    Interior: weighted harmonic mean of the two secants (Fritsch & Butland 1984), zero where the
    secants differ in sign or one is zero. Ends: three-point formula limited to keep the shape.
    Two nodes: the secant (a straight line)."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    n = x.size
    if n < 2:
        return np.zeros_like(y)
    shape = (-1,) + (1,) * (y.ndim - 1)
    h = np.diff(x).reshape(shape)
    m = np.diff(y, axis=0) / h
    if n == 2:
        return np.concatenate([m, m], axis=0)
    d = np.zeros_like(y)
    m0, m1 = m[:-1], m[1:]
    h0, h1 = h[:-1], h[1:]
    w1 = 2.0 * h1 + h0
    w2 = h1 + 2.0 * h0
    same = (np.sign(m0) == np.sign(m1)) & (m0 != 0) & (m1 != 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        interior = (w1 + w2) / (w1 / m0 + w2 / m1)
    d[1:-1] = np.where(same, interior, 0.0)
    with np.errstate(invalid="ignore"):
        d[0] = _end_slope(h[0], h[1], m[0], m[1])
        d[-1] = _end_slope(h[-1], h[-2], m[-1], m[-2])
    return d


def inside_ladder(q_nodes, q) -> np.ndarray:
    """True where discharge ``q`` lies within the runs [lowest, highest] (relative slack END_RTOL)."""
    qn = np.asarray(q_nodes, dtype=np.float64)
    q = np.asarray(q, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        return (q >= qn[0] * (1.0 - END_RTOL)) & (q <= qn[-1] * (1.0 + END_RTOL))


def pchip_log_q(q_nodes, values, q, slopes=None) -> np.ndarray:
    """Interpolate ``values`` given at increasing discharges ``q_nodes`` to discharges ``q``.

    ``values`` has shape (n_nodes, ...): any number of curves along the trailing axes, evaluated
    together (vectorised over ``q`` of any shape). Returns ``q.shape + values.shape[1:]``.
    Exactly the node value at a node; PCHIP on ln q between nodes; NaN outside the nodes or where
    ``q`` is not finite. ``slopes`` (from :func:`pchip_slopes` on ln q) may be passed to reuse."""
    qn = np.asarray(q_nodes, dtype=np.float64)
    y = np.asarray(values, dtype=np.float64)
    if qn.ndim != 1 or y.shape[:1] != qn.shape:
        raise ValueError("values must have one row per node discharge")
    if qn.size == 0:
        raise ValueError("no node discharges")
    if np.any(~np.isfinite(qn)) or np.any(qn <= 0) or np.any(np.diff(qn) <= 0):
        raise ValueError("node discharges must be positive and strictly increasing")
    q = np.asarray(q, dtype=np.float64)
    qf = q.ravel()
    tail = y.shape[1:]
    out = np.full((qf.size,) + tail, np.nan)
    inside = inside_ladder(qn, qf)
    if not inside.any():
        return out.reshape(q.shape + tail)
    if qn.size == 1:
        out[inside] = y[0]
        return out.reshape(q.shape + tail)
    x = np.log(qn)
    d = pchip_slopes(x, y) if slopes is None else np.asarray(slopes, dtype=np.float64)
    qc = np.clip(qf[inside], qn[0], qn[-1])
    xq = np.log(qc)
    k = np.clip(np.searchsorted(x, xq, side="right") - 1, 0, qn.size - 2)
    shape = (-1,) + (1,) * len(tail)
    hk = (x[k + 1] - x[k]).reshape(shape)
    t = ((xq - x[k]) / (x[k + 1] - x[k])).reshape(shape)
    s = 1.0 - t
    val = (1.0 + 2.0 * t) * s * s * y[k] + t * s * s * hk * d[k] \
        + t * t * (3.0 - 2.0 * t) * y[k + 1] - t * t * s * hk * d[k + 1]
    at_lo = qc == qn[k]
    at_hi = qc == qn[k + 1]
    val[at_lo] = y[k[at_lo]]
    val[at_hi] = y[k[at_hi] + 1]
    out[inside] = val
    return out.reshape(q.shape + tail)


def _hermite(y0, y1, d0, d1, h, t):
    s = 1.0 - t
    return (1.0 + 2.0 * t) * s * s * y0 + t * s * s * h * d0 + t * t * (3.0 - 2.0 * t) * y1 - t * t * s * h * d1


# ============================================================================================
# Scope units and per-run class areas
# ============================================================================================

@dataclass(frozen=True)
class ScopeUnit:
    """The whole reach, one zone or one segment. ``unit`` is 'reach', the zone name, or the
    segment number (1-based) as text."""

    scope: str
    unit: str
    chainage_from_m: float
    chainage_to_m: float

    @property
    def key(self) -> str:
        """The name a target statement uses: 'reach', the zone name, or 'segment N'."""
        return f"segment {self.unit}" if self.scope == "segment" else self.unit


def scope_units(reach) -> list[ScopeUnit]:
    """Reach, zones, then segments of a ``core.reach.Reach`` (anything with ``zone_edges``,
    ``zone_names`` and ``segment_edges``), in the order of the CURVES table."""
    ze = np.asarray(reach.zone_edges, dtype=float)
    se = np.asarray(reach.segment_edges, dtype=float)
    units = [ScopeUnit("reach", "reach", float(min(ze[0], se[0])), float(max(ze[-1], se[-1])))]
    units += [ScopeUnit("zone", str(n), float(a), float(b)) for n, a, b in zip(reach.zone_names, ze[:-1], ze[1:])]
    units += [ScopeUnit("segment", str(i + 1), float(a), float(b)) for i, (a, b) in enumerate(zip(se[:-1], se[1:]))]
    return units


@dataclass
class RunAreas:
    """Class areas of one run: ``class_areas`` (n_units, n_classes) and ``wet_area`` (n_units,),
    m2, one row per scope unit (the order of :func:`scope_units`). ``q_m3s`` is kept as given
    when the scenario table was in m3/s (else converted)."""

    regime: str
    q_mld: float
    class_areas: np.ndarray
    wet_area: np.ndarray
    q_m3s: float | None = None
    label: str = ""


def unit_groups(reach, location) -> tuple:
    """(segment, zone) of every located element, 0-based, -1 for elements beyond the ends of the axis
    (``location.outside``, as in every habitat statistic) or outside the edges."""
    ch = np.asarray(location.chainage, dtype=np.float64)
    outside = getattr(location, "outside", None)
    seg = reach.segment_of(ch)
    zone = reach.zone_of(ch)
    if outside is not None:
        out = np.asarray(outside, dtype=bool)
        seg = np.where(out, -1, seg).astype(np.int32)
        zone = np.where(out, -1, zone).astype(np.int32)
    return seg, zone


@dataclass
class UnitClassAreas:
    """Class areas (n_units, n_classes) and wet areas (n_units,) in scope-unit order (reach, zones,
    segments), and the areas left out: beyond the axis ends, and matching no class."""

    class_areas: np.ndarray
    wet_area: np.ndarray
    outside_m2: float
    unclassified_m2: float


def class_areas_by_unit(reach, location, codes, area, n_classes: int) -> UnitClassAreas:
    """Area of every class (codes 1..n_classes; 0 = none) in the whole reach, each zone and each
    segment, from one weighted count over the combined (segment, zone, class) key. The reach row is
    the elements inside the axis; an element matching no class adds to the wet area only."""
    seg, zone = unit_groups(reach, location)
    area = np.asarray(area, dtype=np.float64)
    codes = np.asarray(codes).astype(np.int64)
    ns, nz, nc = reach.n_segments, reach.n_zones, int(n_classes)
    key = ((seg.astype(np.int64) + 1) * (nz + 1) + (zone.astype(np.int64) + 1)) * (nc + 1) + codes
    t = np.bincount(key, weights=area, minlength=(ns + 1) * (nz + 1) * (nc + 1)).reshape(ns + 1, nz + 1, nc + 1)
    inside = t[1:]  # segment >= 0
    per_seg = inside.sum(axis=1)  # (ns, nc + 1)
    per_zone = inside.sum(axis=0)[1:]  # (nz, nc + 1)
    per_reach = inside.sum(axis=(0, 1))[None, :]
    rows = np.concatenate([per_reach, per_zone, per_seg])
    return UnitClassAreas(rows[:, 1:].copy(), rows.sum(axis=1), float(t[0].sum()), float(per_reach[0, 0]))


def run_areas_from_stats(regime: str, q_mld: float, class_names, reach_stats: dict, zone_stats: dict,
                         segment_stats: dict, q_m3s: float | None = None, label: str = "") -> RunAreas:
    """A RunAreas from the ordered columns of ``core.stats.summarise`` (``wet_area_m2`` and
    ``area_<class key>_m2``) for the reach (one row), the zones and the segments."""
    from .stats import field_key

    parts = [reach_stats, zone_stats, segment_stats]
    wet = np.concatenate([np.asarray(p["wet_area_m2"], dtype=float).ravel() for p in parts])
    cols = []
    for name in class_names:
        key = f"area_{field_key(name)}_m2"
        cols.append(np.concatenate([np.asarray(p[key], dtype=float).ravel() for p in parts]))
    return RunAreas(regime, float(q_mld), np.column_stack(cols), wet, q_m3s, label)


# ============================================================================================
# The curves
# ============================================================================================

@dataclass
class RegimeCurves:
    """One regime's runs, by increasing discharge: areas (n_q, n_units, n_classes), wet (n_q, n_units)."""

    q_mld: np.ndarray
    q_m3s: np.ndarray
    areas: np.ndarray
    wet: np.ndarray
    labels: list = field(default_factory=list)

    def percent(self) -> np.ndarray:
        """(n_q, n_units, n_classes) % of each unit's wet area; NaN where the unit is dry."""
        with np.errstate(invalid="ignore", divide="ignore"):
            p = 100.0 * self.areas / self.wet[:, :, None]
        return np.where(self.wet[:, :, None] > 0, p, np.nan)


def _norm(name: str) -> str:
    return re.sub(r"[^0-9a-z]+", "_", str(name).strip().casefold()).strip("_")


class FlowHabitatCurves:
    """Class areas of every run of every regime, on one set of scope units and classes.

    Build with :meth:`from_runs` (flowhabitat) or :meth:`from_table` (a CURVES table); write with
    :meth:`table`. Ask with :meth:`percent_ladder` (values at the runs), :meth:`percent_at`
    (interpolated at any discharges, vectorised) and :meth:`percent_grid` (all units and classes).
    Discharges are in ML/d throughout (convert with core.units)."""

    def __init__(self, units, class_names, regimes: dict):
        self.units = list(units)
        self.class_names = [str(c) for c in class_names]
        self._regimes = dict(regimes)
        self._unit_lookup = {}
        for i, u in enumerate(self.units):
            self._unit_lookup.setdefault(_norm(u.key), i)
        self._class_lookup = {_norm(c): i for i, c in enumerate(self.class_names)}
        self._slopes = {}

    # ---- construction ------------------------------------------------------------------------
    @classmethod
    def from_runs(cls, runs, units, class_names, parameter: str = "SCENARIOS") -> FlowHabitatCurves:
        """From RunAreas of any number of regimes and discharges (any order)."""
        units = list(units)
        nu, nc = len(units), len(class_names)
        by_regime: dict[str, list[RunAreas]] = {}
        for r in runs:
            a = np.asarray(r.class_areas, dtype=float)
            w = np.asarray(r.wet_area, dtype=float).ravel()
            if a.shape != (nu, nc) or w.shape != (nu,):
                raise ValueError(f"run {r.regime} {r.q_mld:g} ML/d: class areas {a.shape} / wet {w.shape} "
                                 f"do not match {nu} units x {nc} classes")
            by_regime.setdefault(r.regime, []).append(r)
        if not by_regime:
            raise ChannelHabitatError("no runs to build flow-habitat curves from", parameter)
        regimes = {}
        for name, rs in by_regime.items():
            rs = sorted(rs, key=lambda r: r.q_mld)
            q = np.array([r.q_mld for r in rs], dtype=float)
            if np.any(~np.isfinite(q)) or np.any(q <= 0):
                raise ChannelHabitatError(f"regime {name}: discharges must be positive numbers", parameter)
            dup = np.flatnonzero(np.diff(q) <= 1e-6 * q[1:])
            if dup.size:
                raise ChannelHabitatError(f"regime {name} has two runs at {q[dup[0]]:g} ML/d; keep one run "
                                          "per discharge", parameter)
            q3 = np.array([r.q_m3s if r.q_m3s is not None else float(mld_to_m3s(r.q_mld)) for r in rs])
            regimes[name] = RegimeCurves(q, q3, np.stack([np.asarray(r.class_areas, float) for r in rs]),
                                         np.stack([np.asarray(r.wet_area, float).ravel() for r in rs]),
                                         [r.label for r in rs])
        return cls(units, class_names, regimes)

    @classmethod
    def from_table(cls, columns: dict, parameter: str = "CURVES") -> FlowHabitatCurves:
        """From a CURVES table: {column name: sequence} (as read from a layer or CSV; values may be
        text; NULL/None allowed for percent only). Every regime x discharge must have a row for
        every unit x class, exactly once."""
        cols = {str(k).strip().lower(): list(v) for k, v in columns.items()}
        need = [c for c in CURVE_COLUMNS if c not in cols and c not in ("q_m3s", "percent")]
        if need:
            raise ChannelHabitatError(f"the curves table has no column {', '.join(need)}: give flowhabitat's "
                                      "CURVES output", parameter)
        n = len(cols["regime"])
        if n == 0:
            raise ChannelHabitatError("the curves table is empty", parameter)

        def num(col, i, allow_blank=False):
            v = cols[col][i]
            try:
                x = float(v)
            except (TypeError, ValueError):
                x = math.nan
            if not math.isfinite(x) and not allow_blank:
                raise ChannelHabitatError(f"curves table row {i + 1}: {col} '{v}' is not a number", parameter)
            return x

        unit_index: dict = {}
        units: list[ScopeUnit] = []
        class_index: dict = {}
        classes: list[str] = []
        runs: dict = {}
        for i in range(n):
            regime = str(cols["regime"][i] or "").strip()
            scope = str(cols["scope"][i] or "").strip().lower()
            unit = str(cols["unit"][i] or "").strip()
            cname = str(cols["class"][i] or "").strip()
            if not regime or not cname or not unit:
                raise ChannelHabitatError(f"curves table row {i + 1}: regime, unit and class must not be "
                                          "empty", parameter)
            if scope not in SCOPES:
                raise ChannelHabitatError(f"curves table row {i + 1}: scope '{scope}' is not one of "
                                          f"{', '.join(SCOPES)}", parameter)
            if scope == "segment" and re.fullmatch(r"\d+(\.0+)?", unit):
                unit = str(int(float(unit)))
            q = num("q_mld", i)
            if q <= 0:
                raise ChannelHabitatError(f"curves table row {i + 1}: q_mld must be positive", parameter)
            area, wet = num("area_m2", i), num("wet_area_m2", i)
            if area < 0 or wet < 0:
                raise ChannelHabitatError(f"curves table row {i + 1}: negative area", parameter)
            ukey = (scope, unit)
            if ukey not in unit_index:
                unit_index[ukey] = len(units)
                units.append(ScopeUnit(scope, unit, num("chainage_from_m", i, True), num("chainage_to_m", i, True)))
            if cname not in class_index:
                class_index[cname] = len(classes)
                classes.append(cname)
            q3 = num("q_m3s", i, True) if "q_m3s" in cols else math.nan
            run = runs.setdefault(regime, {}).setdefault(q, {"q3": q3, "cells": {}})
            key = (unit_index[ukey], class_index[cname])
            if key in run["cells"]:
                raise ChannelHabitatError(
                    f"curves table row {i + 1}: regime {regime} at {q:g} ML/d has two rows for {scope} "
                    f"{unit}, class {cname}", parameter)
            run["cells"][key] = (area, wet)
        order = sorted(range(len(units)), key=lambda j: (SCOPES.index(units[j].scope), j))
        remap = {old: new for new, old in enumerate(order)}
        units = [units[j] for j in order]
        nu, nc = len(units), len(classes)
        regimes = {}
        for regime, by_q in runs.items():
            qs = sorted(by_q)
            areas = np.full((len(qs), nu, nc), np.nan)
            wet = np.full((len(qs), nu), np.nan)
            q3s = []
            for iq, q in enumerate(qs):
                cells = by_q[q]["cells"]
                if len(cells) != nu * nc:
                    have = {(remap[u], c) for u, c in cells}
                    miss = next((u, c) for u in range(nu) for c in range(nc) if (u, c) not in have)
                    raise ChannelHabitatError(
                        f"the curves table has no row for regime {regime} at {q:g} ML/d, {units[miss[0]].scope} "
                        f"{units[miss[0]].unit}, class {classes[miss[1]]}: every run needs every unit and "
                        "class", parameter)
                for (u, c), (a, w) in cells.items():
                    areas[iq, remap[u], c] = a
                    if math.isfinite(wet[iq, remap[u]]) and abs(wet[iq, remap[u]] - w) > 1e-6 * max(w, 1.0):
                        raise ChannelHabitatError(
                            f"the curves table gives two wet areas for regime {regime} at {q:g} ML/d, "
                            f"{units[remap[u]].scope} {units[remap[u]].unit}", parameter)
                    wet[iq, remap[u]] = w
                q3 = by_q[q]["q3"]
                q3s.append(q3 if math.isfinite(q3) else float(mld_to_m3s(q)))
            regimes[regime] = RegimeCurves(np.array(qs), np.array(q3s), areas, wet)
        return cls(units, classes, regimes)

    # ---- the long table ----------------------------------------------------------------------
    def table(self) -> dict:
        """The CURVES table as ordered columns (numpy arrays; text as str arrays)."""
        nu, nc = len(self.units), len(self.class_names)
        out = {c: [] for c in CURVE_COLUMNS}
        for regime, rc in self._regimes.items():
            pct = rc.percent()
            nq = rc.q_mld.size
            out["regime"] += [regime] * (nq * nu * nc)
            out["q_mld"].append(np.repeat(rc.q_mld, nu * nc))
            out["q_m3s"].append(np.repeat(rc.q_m3s, nu * nc))
            out["scope"] += [u.scope for u in self.units for _ in range(nc)] * nq
            out["unit"] += [u.unit for u in self.units for _ in range(nc)] * nq
            out["chainage_from_m"].append(np.tile(np.repeat([u.chainage_from_m for u in self.units], nc), nq))
            out["chainage_to_m"].append(np.tile(np.repeat([u.chainage_to_m for u in self.units], nc), nq))
            out["class"] += list(self.class_names) * (nq * nu)
            out["area_m2"].append(rc.areas.reshape(-1))
            out["wet_area_m2"].append(np.repeat(rc.wet.reshape(-1), nc))
            out["percent"].append(pct.reshape(-1))
        res = {}
        for c in CURVE_COLUMNS:
            v = out[c]
            if v and isinstance(v[0], np.ndarray):
                res[c] = np.concatenate(v).astype(np.float64)
            else:
                res[c] = np.array(v, dtype=str) if v else np.zeros(0, dtype=str)
        return res

    # ---- lookups -----------------------------------------------------------------------------
    @property
    def regimes(self) -> list[str]:
        return list(self._regimes)

    def regime(self, name: str) -> RegimeCurves:
        try:
            return self._regimes[name]
        except KeyError:
            raise ChannelHabitatError(f"no regime '{name}' in the curves (regimes: {', '.join(self._regimes)})",
                                      "REGIME") from None

    def ladder(self, regime: str) -> np.ndarray:
        """The regime's run discharges, ML/d, increasing."""
        return self.regime(regime).q_mld.copy()

    def unit_index(self, unit, parameter: str = "TARGET_STATEMENTS") -> int:
        """Index of a scope unit: an int, a ScopeUnit, or its key ('reach', zone name, 'segment N').
        An unknown name raises ChannelHabitatError naming ``parameter``."""
        if isinstance(unit, (int, np.integer)):
            return int(unit)
        if isinstance(unit, ScopeUnit):
            unit = unit.key
        i = self._unit_lookup.get(_norm(unit))
        if i is None:
            raise ChannelHabitatError(f"no unit '{unit}' in the curves (units: reach, zones "
                                      f"{', '.join(u.unit for u in self.units if u.scope == 'zone')}, "
                                      "or 'segment N')", parameter)
        return i

    def class_indices(self, classes, parameter: str = "TARGET_STATEMENTS") -> list[int]:
        """Indices of class names (a list, or one text joined by '+'; case and spaces/underscores
        ignored); None = all classes. An unknown name raises ChannelHabitatError naming ``parameter``."""
        if classes is None:
            return list(range(len(self.class_names)))
        if isinstance(classes, str):
            classes = [c for c in classes.split("+")]
        idx = []
        for c in classes:
            i = self._class_lookup.get(_norm(c))
            if i is None:
                raise ChannelHabitatError(f"no class '{c.strip()}' in the curves (classes: "
                                          f"{', '.join(self.class_names)})", parameter)
            idx.append(i)
        return idx

    # ---- values ------------------------------------------------------------------------------
    def percent_ladder(self, regime: str, unit, classes) -> tuple:
        """(q_mld, percent) at the regime's runs for one unit and a class set (areas summed)."""
        rc = self.regime(regime)
        u = self.unit_index(unit)
        idx = self.class_indices(classes)
        area = rc.areas[:, u, idx].sum(axis=-1)
        w = rc.wet[:, u]
        with np.errstate(invalid="ignore", divide="ignore"):
            pct = np.where(w > 0, 100.0 * area / w, np.nan)
        return rc.q_mld.copy(), pct

    def percent_at(self, regime: str, q_mld, unit, classes) -> np.ndarray:
        """Percentage of the unit's wet area in the class set at any discharges (ML/d; array of any
        shape; vectorised), PCHIP on ln q between the runs, NaN outside the runs (see
        :func:`inside_ladder` for the flag)."""
        q, pct = self.percent_ladder(regime, unit, classes)
        return pchip_log_q(q, pct, q_mld)

    def percent_grid(self, regime: str, q_mld) -> np.ndarray:
        """All units and classes at once: shape q.shape + (n_units, n_classes), NaN outside."""
        rc = self.regime(regime)
        key = regime
        if key not in self._slopes:
            self._slopes[key] = pchip_slopes(np.log(rc.q_mld), rc.percent())
        return pchip_log_q(rc.q_mld, rc.percent(), q_mld, slopes=self._slopes[key])


# ============================================================================================
# Targets
# ============================================================================================

OPS = (">=", "<=", ">", "<")
_OP_SPELLINGS = {">=": ">=", "<=": "<=", ">": ">", "<": "<", "\u2265": ">=", "\u2264": "<=", "=>": ">=", "=<": "<="}


@dataclass(frozen=True)
class Target:
    """``unit: classes op threshold%``. ``unit`` is the unit key ('reach', zone name, 'segment N');
    ``classes`` the canonical class names."""

    unit: str
    classes: tuple
    op: str
    threshold_pct: float

    @property
    def text(self) -> str:
        return f"{self.unit}: {'+'.join(self.classes)} {self.op} {self.threshold_pct:g}%"

    def met(self, pct) -> np.ndarray:
        """True where the percentage meets the target (NaN never does)."""
        p = np.asarray(pct, dtype=np.float64)
        t = self.threshold_pct
        with np.errstate(invalid="ignore"):
            if self.op == ">=":
                r = p >= t
            elif self.op == ">":
                r = p > t
            elif self.op == "<=":
                r = p <= t
            else:
                r = p < t
        return r & np.isfinite(p)


def parse_targets(text: str, zone_names, class_names, n_segments: int | None = None,
                  parameter: str = "TARGET_STATEMENTS") -> list[Target]:
    """Parse target statements (see the module docstring). Empty text gives no targets.

    Zone and class names match ignoring case, and spaces and underscores alike ('very_slow' is
    'very slow'). Zone names containing ':' cannot be used in targets."""
    text = text or ""
    zones = {_norm(z): str(z) for z in zone_names}
    classes = {_norm(c): str(c) for c in class_names}
    out = []
    for raw in re.split(r"[;\n\r]+", text):
        s = raw.strip()
        if not s or s.startswith("#"):
            continue
        if ":" not in s:
            raise ChannelHabitatError(
                f"target '{s}': start with the zone name, 'reach' or 'segment N' and a colon, e.g. "
                f"'{next(iter(zones.values()), 'lower')}: moderate+fast >= 50%'", parameter)
        unit_txt, rest = s.split(":", 1)
        unit_n = _norm(unit_txt)
        if unit_n in zones:
            unit = zones[unit_n]
        elif unit_n == "reach":
            unit = "reach"
        else:
            m = re.fullmatch(r"segment_?(\d+)", unit_n)
            if not m:
                raise ChannelHabitatError(
                    f"target '{s}': '{unit_txt.strip()}' is not a zone ({', '.join(zones.values()) or 'none'}), "
                    "'reach' or 'segment N'", parameter)
            k = int(m.group(1))
            if k < 1 or (n_segments is not None and k > n_segments):
                raise ChannelHabitatError(f"target '{s}': segment {k} does not exist (segments 1 to "
                                          f"{n_segments})", parameter)
            unit = f"segment {k}"
        m = re.fullmatch(r"\s*(.+?)\s*(>=|<=|=>|=<|\u2265|\u2264|>|<)\s*(\S+?)\s*(%?)\s*", rest)
        if not m:
            raise ChannelHabitatError(
                f"target '{s}': write classes, a comparison (>=, >, <=, <) and a percentage, e.g. "
                "'moderate+fast >= 50%'", parameter)
        cls_txt, op, num_txt, pct_sign = m.groups()
        op = _OP_SPELLINGS[op]
        names = []
        for c in cls_txt.split("+"):
            cn = _norm(c)
            if cn not in classes:
                raise ChannelHabitatError(f"target '{s}': '{c.strip()}' is not a class (classes: "
                                          f"{', '.join(classes.values())})", parameter)
            if classes[cn] in names:
                raise ChannelHabitatError(f"target '{s}': class '{classes[cn]}' is named twice", parameter)
            names.append(classes[cn])
        try:
            thr = float(num_txt)
        except ValueError:
            raise ChannelHabitatError(f"target '{s}': '{num_txt}' is not a number", parameter) from None
        if not pct_sign:
            raise ChannelHabitatError(f"target '{s}': give the threshold as a percentage of the wet area, "
                                      f"e.g. '{num_txt}%'", parameter)
        if not (0.0 <= thr <= 100.0):
            raise ChannelHabitatError(f"target '{s}': {thr:g}% is outside 0-100%", parameter)
        out.append(Target(unit, tuple(names), op, thr))
    return out


@dataclass
class TargetResult:
    """The smallest discharge meeting ``target`` for ``regime`` (NaN when not reached)."""

    regime: str
    target: Target
    status: str
    q_mld: float
    q_m3s: float
    pct_at_lowest: float
    pct_at_highest: float
    q_lowest_mld: float
    q_highest_mld: float
    met_at_highest: bool
    lost_above_q_mld: float = math.nan
    note: str = ""


def _crossing(x, q, pct, d, i, thr) -> tuple:
    """(t, q) where the PCHIP curve crosses ``thr`` between runs i-1 and i (monotone there)."""
    y0, y1, d0, d1 = pct[i - 1], pct[i], d[i - 1], d[i]
    h = x[i] - x[i - 1]
    if not all(math.isfinite(v) for v in (y0, y1, d0, d1)):
        return math.nan, math.nan
    f0, f1 = y0 - thr, y1 - thr
    if f1 == 0:
        return 1.0, q[i]
    if f0 == 0:
        return 0.0, q[i - 1]
    if f0 * f1 > 0:  # pragma: no cover - cannot happen for a monotone interval crossing thr
        return math.nan, math.nan
    t = brentq(lambda tt: _hermite(y0, y1, d0, d1, h, tt) - thr, 0.0, 1.0, xtol=1e-15, rtol=4 * np.finfo(float).eps)
    if t <= 0.0:
        return 0.0, q[i - 1]
    if t >= 1.0:
        return 1.0, q[i]
    return t, math.exp(x[i - 1] + t * h)


def required_discharge(curves: FlowHabitatCurves, targets, regimes=None) -> list[TargetResult]:
    """For every regime (default all) and target: the smallest discharge that meets it.

    The first crossing in increasing discharge: the runs are tested in order; between the last
    run that fails and the first that meets the target the PCHIP curve (monotone there) crosses
    the threshold exactly once, found by Brent's method to machine precision. A run that meets the
    target with equality gives exactly its discharge. If the target is met and lost again at a
    higher run, ``lost_above_q_mld`` is the discharge above which it is lost (same crossing rule)
    and the note says so."""
    results = []
    for regime in (regimes or curves.regimes):
        rc = curves.regime(regime)
        for tg in targets:
            q, pct = curves.percent_ladder(regime, tg.unit, tg.classes)
            met = tg.met(pct)
            x = np.log(q)
            d = pchip_slopes(x, pct) if q.size > 1 else np.zeros(1)
            res = TargetResult(regime, tg, NOT_REACHED, math.nan, math.nan, float(pct[0]), float(pct[-1]),
                               float(q[0]), float(q[-1]), bool(met[-1]))
            notes = []
            if np.isnan(pct).any():
                notes.append(f"{tg.unit} is dry in {int(np.isnan(pct).sum())} run(s): no percentage there")
            if not met.any():
                res.note = "; ".join(notes + [f"the target is not met at any run up to {q[-1]:g} ML/d"])
                results.append(res)
                continue
            i = int(np.argmax(met))
            if i == 0:
                res.status, res.q_mld, res.q_m3s = MET_AT_LOWEST, float(q[0]), float(rc.q_m3s[0])
                notes.append(f"met already at the lowest run ({q[0]:g} ML/d); the runs cannot show a lower "
                             "requirement")
            else:
                t, qq = _crossing(x, q, pct, d, i, tg.threshold_pct)
                if not math.isfinite(qq):
                    res.status, res.q_mld, res.q_m3s = MET_AT_RUN, float(q[i]), float(rc.q_m3s[i])
                    notes.append(f"no percentage at the run below ({q[i - 1]:g} ML/d): the discharge of the first "
                                 "run that meets the target is given")
                else:
                    res.status, res.q_mld = INTERPOLATED, float(qq)
                    res.q_m3s = float(rc.q_m3s[i]) if t == 1.0 else float(rc.q_m3s[i - 1]) if t == 0.0 \
                        else float(mld_to_m3s(qq))
            later = np.flatnonzero(~met[i + 1:])
            if later.size:
                j = i + 1 + int(later[0])
                _, qlost = _crossing(x, q, pct, d, j, tg.threshold_pct)
                res.lost_above_q_mld = float(qlost) if math.isfinite(qlost) else float(q[j - 1])
                regained = np.flatnonzero(met[j:])
                msg = (f"met from {res.q_mld:.6g} ML/d but lost again above {res.lost_above_q_mld:.6g} ML/d "
                       f"(not met at the run of {q[j]:g} ML/d)")
                if regained.size:
                    msg += f"; met again at the run of {q[j + int(regained[0])]:g} ML/d"
                notes.append(msg)
            if not met[-1]:
                notes.append(f"not met at the highest run ({q[-1]:g} ML/d)")
            res.note = "; ".join(notes)
            results.append(res)
    return results


def targets_table(results) -> dict:
    """The TARGETS table as ordered columns (one row per regime x target)."""
    out = {c: [] for c in TARGET_COLUMNS}
    for r in results:
        t = r.target
        out["regime"].append(r.regime)
        out["target"].append(t.text)
        out["unit"].append(t.unit)
        out["classes"].append("+".join(t.classes))
        out["op"].append(t.op)
        out["threshold_pct"].append(t.threshold_pct)
        out["status"].append(r.status)
        out["q_mld"].append(r.q_mld)
        out["q_m3s"].append(r.q_m3s)
        out["pct_at_lowest"].append(r.pct_at_lowest)
        out["pct_at_highest"].append(r.pct_at_highest)
        out["q_lowest_mld"].append(r.q_lowest_mld)
        out["q_highest_mld"].append(r.q_highest_mld)
        out["met_at_highest"].append(r.met_at_highest)
        out["lost_above_q_mld"].append(r.lost_above_q_mld)
        out["note"].append(r.note)
        out["method"].append(METHOD)
    res = {}
    for c, v in out.items():
        if c in ("regime", "target", "unit", "classes", "op", "status", "note", "method"):
            res[c] = np.array(v, dtype=str) if v else np.zeros(0, dtype=str)
        elif c == "met_at_highest":
            res[c] = np.array(v, dtype=bool)
        else:
            res[c] = np.array(v, dtype=np.float64)
    return res


def evaluate_targets(curves: FlowHabitatCurves, targets, regime: str, q_mld) -> dict:
    """Targets along a flow series (habitatseries): for discharges ``q_mld`` (ML/d, 1-D, e.g. one
    per day) returns {'pct': (n_targets, n_q) interpolated %, NaN outside the runs;
    'met': (n_targets, n_q) bool, False outside; 'inside': (n_q,) bool, q within the runs}."""
    q = np.asarray(q_mld, dtype=np.float64).ravel()
    ladder = curves.ladder(regime)
    inside = inside_ladder(ladder, q) & np.isfinite(q)
    pct = np.full((len(targets), q.size), np.nan)
    met = np.zeros((len(targets), q.size), dtype=bool)
    for k, tg in enumerate(targets):
        pct[k] = curves.percent_at(regime, q, tg.unit, tg.classes)
        met[k] = tg.met(pct[k]) & inside
    return {"pct": pct, "met": met, "inside": inside}

