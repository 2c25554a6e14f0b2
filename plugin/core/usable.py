"""Weighted usable area of runs, per reach, zone and segment (the science behind ``usablearea``).

Per element (raster cell or mesh face) the suitability of each variable comes from the curve set
(``core.suitability``: piecewise linear, clamped at the ends) and the composite from the chosen
combination (product, geometric mean or minimum). Per scope unit (the whole reach, each zone, each
chainage segment: ``core.curves.scope_units`` order)::

    wua_m2       = sum over the unit's wet elements of area x composite suitability
    wet_area_m2  = sum of their areas
    wua_fraction = wua_m2 / wet_area_m2   (the area-weighted mean composite suitability, 0-1)

Elements beyond the ends of the reach axis belong to no unit (as in every habitat statistic). An
element whose composite is not finite (a variable missing) adds its area to the wet area and nothing
to the WUA. Sums are float64 (``np.bincount``).
"""

from __future__ import annotations

import numpy as np

from .suitability import combine, weighted_usable_area

WUA_COLUMNS = ("regime", "q_mld", "q_m3s", "run", "curve_set", "combination", "scope", "unit", "chainage_from_m",
               "chainage_to_m", "wet_area_m2", "wua_m2", "wua_fraction")


def element_suitability(depth, speed, curve_set, method: str) -> tuple:
    """(composite, {variable: suitability}) per element; depth in m, speed (depth-averaged) in m/s."""
    parts = curve_set.suitabilities(depth=depth, velocity=speed)
    return combine(list(parts.values()), method), parts


def wua_per_unit(csi, area, segment, zone, n_segments: int, n_zones: int) -> dict:
    """WUA, wet area and fraction per scope unit, in the order reach, zones, segments.
    ``segment``/``zone``: 0-based per element, -1 outside the reach."""
    seg = np.asarray(segment)
    zone = np.asarray(zone)
    reach = weighted_usable_area(csi, area, np.where(seg >= 0, 0, -1), 1)
    zones = weighted_usable_area(csi, area, zone, n_zones)
    segs = weighted_usable_area(csi, area, seg, n_segments)
    return {k: np.concatenate([reach[k], zones[k], segs[k]]) for k in ("wua_m2", "wet_area_m2", "wua_fraction")}


def outside_notes(segment, area) -> list:
    """A note when elements lie beyond the ends of the reach axis (segment -1), else none."""
    out = np.asarray(segment) < 0
    if not out.any():
        return []
    a = float(np.asarray(area, dtype=np.float64)[out].sum())
    total = float(np.sum(area, dtype=np.float64))
    return [f"{int(out.sum())} wet elements ({a:,.0f} m2, {100 * a / total:.1f}% of the wet area) lie beyond the "
            "ends of the reach axis and belong to no unit."]


def face_table(fld, segment, zone, chainage, zone_names, csi, parts) -> dict:
    """Per-element columns of a mesh run's face layer: face (0-based number in the mesh), segment
    (1-based, 0 outside the reach), zone (name, '' outside), chainage_m, depth_m, speed_ms,
    suit_<variable> per curve of the set, suitability (composite), area_m2, wua_m2."""
    names = np.array(list(zone_names) + [""], dtype=object)
    z = np.asarray(zone)
    cols = {"face": np.asarray(fld.support.index, dtype=np.int64),
            "segment": (np.asarray(segment) + 1).astype(np.int64),
            "zone": names[np.where(z >= 0, z, len(names) - 1)], "chainage_m": np.asarray(chainage, dtype=np.float64),
            "depth_m": fld.depth.astype(np.float64), "speed_ms": fld.speed.astype(np.float64)}
    for var, s in parts.items():
        cols[f"suit_{var}"] = np.asarray(s, dtype=np.float64)
    cols["suitability"] = np.asarray(csi, dtype=np.float64)
    cols["area_m2"] = fld.area.astype(np.float64)
    cols["wua_m2"] = cols["area_m2"] * np.where(np.isfinite(cols["suitability"]), cols["suitability"], 0.0)
    return cols


def wua_table(units, runs, curve_set_label: str, method: str) -> dict:
    """The WUA table: one row per run and scope unit. ``runs``: [(regime, q_mld, q_m3s, run label,
    wua_per_unit dict)] (q may be NaN for a run without a stated discharge)."""
    cols = {c: [] for c in WUA_COLUMNS}
    for regime, q_mld, q_m3s, label, w in runs:
        for j, u in enumerate(units):
            cols["regime"].append(regime)
            cols["q_mld"].append(q_mld)
            cols["q_m3s"].append(q_m3s)
            cols["run"].append(label)
            cols["curve_set"].append(curve_set_label)
            cols["combination"].append(method)
            cols["scope"].append(u.scope)
            cols["unit"].append(u.unit)
            cols["chainage_from_m"].append(u.chainage_from_m)
            cols["chainage_to_m"].append(u.chainage_to_m)
            cols["wet_area_m2"].append(w["wet_area_m2"][j])
            cols["wua_m2"].append(w["wua_m2"][j])
            cols["wua_fraction"].append(w["wua_fraction"][j])
    text = ("regime", "run", "curve_set", "combination", "scope", "unit")
    return {c: (np.array(v, dtype=str) if c in text else np.array(v, dtype=np.float64)) if v else
            np.zeros(0, dtype=str if c in text else np.float64) for c, v in cols.items()}


def wua_by_regime(table: dict, unit_key: str, value: str = "wua_m2") -> dict:
    """{regime: (q_mld increasing, values)} of one unit ('reach', a zone name, 'segment N') from a
    WUA table, for charts and the maximum table. Rows without a discharge are left out."""
    out: dict = {}
    scope = np.asarray(table["scope"])
    unit = np.asarray(table["unit"])
    keys = np.where(scope == "segment", np.char.add("segment ", unit.astype(str)), unit.astype(str))
    sel = (keys == unit_key) & np.isfinite(np.asarray(table["q_mld"], dtype=float))
    for regime in dict.fromkeys(np.asarray(table["regime"])[sel]):
        m = sel & (np.asarray(table["regime"]) == regime)
        q = np.asarray(table["q_mld"], dtype=float)[m]
        v = np.asarray(table[value], dtype=float)[m]
        order = np.argsort(q)
        out[str(regime)] = (q[order], v[order])
    return out


def maximum_table(table: dict, unit_keys) -> dict:
    """Per regime and unit: the run with the largest WUA (ties: the lowest discharge), its WUA and
    fraction, and whether it is the lowest or highest run (the maximum may lie outside the runs)."""
    cols = {c: [] for c in ("regime", "unit", "q_mld_at_max", "wua_max_m2", "wua_fraction_at_max", "runs",
                            "at_end_of_runs")}
    for key in unit_keys:
        frac = wua_by_regime(table, key, "wua_fraction")
        for regime, (q, w) in wua_by_regime(table, key).items():
            if not q.size or not np.isfinite(w).any():
                continue
            i = int(np.nanargmax(w))
            cols["regime"].append(regime)
            cols["unit"].append(key)
            cols["q_mld_at_max"].append(float(q[i]))
            cols["wua_max_m2"].append(float(w[i]))
            cols["wua_fraction_at_max"].append(float(frac[regime][1][i]))
            cols["runs"].append(int(q.size))
            cols["at_end_of_runs"].append(bool(q.size > 1 and (i == 0 or i == q.size - 1)))
    out = {}
    for c, v in cols.items():
        if c in ("regime", "unit"):
            out[c] = np.array(v, dtype=str)
        elif c == "runs":
            out[c] = np.array(v, dtype=np.int64)
        elif c == "at_end_of_runs":
            out[c] = np.array(v, dtype=bool)
        else:
            out[c] = np.array(v, dtype=np.float64)
    return out


def suitability_histogram(csi, area, bins: int = 10) -> dict:
    """Wet area (m2) per composite suitability class [0, 0.1), ..., [0.9, 1.0]; NaN counted apart."""
    csi = np.asarray(csi, dtype=np.float64)
    area = np.asarray(area, dtype=np.float64)
    ok = np.isfinite(csi)
    k = np.clip(np.floor(csi[ok] * bins).astype(np.int64), 0, bins - 1)
    a = np.bincount(k, weights=area[ok], minlength=bins)
    edges = np.linspace(0.0, 1.0, bins + 1)
    return {"suitability_from": edges[:-1], "suitability_to": edges[1:], "area_m2": a,
            "no_value_area_m2": float(area[~ok].sum()) if (~ok).any() else 0.0}

