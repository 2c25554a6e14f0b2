"""The flowhabitat report: targets, class shares against discharge per unit with the regimes side by
side, class make-up per zone and regime, shares along the reach, the runs and the tables."""

from __future__ import annotations

import numpy as np

from ..core import curves as cv
from ..core.stats import field_key
from . import flowsvg
from .habitatreport import class_legend
from .report import Report


def runs_table(table) -> dict:
    """One row per run (table order): regime, q_mld, q_m3s, unit as written, wet elements, wet area
    inside the reach, area beyond the axis ends, unclassified area. ``table.results[i]`` is
    (RunAreas, (n_elements, outside_m2, unclassified_m2))."""
    cols = {k: [] for k in ("regime", "q_mld", "q_m3s", "unit_as_written", "n_elements", "wet_area_m2",
                            "outside_area_m2", "unclassified_area_m2")}
    for row, (areas, (n, outside, uncl)) in zip(table.rows, table.results):
        cols["regime"].append(row.regime)
        cols["q_mld"].append(row.q_mld)
        cols["q_m3s"].append(row.q_m3s)
        cols["unit_as_written"].append(row.unit)
        cols["n_elements"].append(int(n))
        cols["wet_area_m2"].append(float(areas.wet_area[0]))
        cols["outside_area_m2"].append(float(outside))
        cols["unclassified_area_m2"].append(float(uncl))
    out = {k: np.asarray(v) for k, v in cols.items()}
    out["n_elements"] = out["n_elements"].astype(np.int64)
    return out


def unit_rows(curves, scopes=("reach", "zone")) -> dict:
    """Per regime, run and unit of ``scopes``: wet area and the % of every class (a wide table)."""
    names = curves.class_names
    cols = {"regime": [], "q_mld": [], "q_m3s": [], "unit": [], "wet_area_m2": []}
    pct_cols = {f"pct_{field_key(n)}": [] for n in names}
    units = [i for i, u in enumerate(curves.units) if u.scope in scopes]
    for regime in curves.regimes:
        rc = curves.regime(regime)
        pct = rc.percent()
        for iq in range(rc.q_mld.size):
            for u in units:
                cols["regime"].append(regime)
                cols["q_mld"].append(rc.q_mld[iq])
                cols["q_m3s"].append(rc.q_m3s[iq])
                cols["unit"].append(curves.units[u].key)
                cols["wet_area_m2"].append(rc.wet[iq, u])
                for k, n in enumerate(names):
                    pct_cols[f"pct_{field_key(n)}"].append(pct[iq, u, k])
    out = {k: np.asarray(v) for k, v in cols.items()}
    out.update({k: np.asarray(v, dtype=float) for k, v in pct_cols.items()})
    return out


def regime_rows(curves) -> list:
    """Summary rows for the regimes: one row when every regime has the same ladder, else one each."""
    ladders = {r: curves.ladder(r) for r in curves.regimes}
    first = next(iter(ladders.values()))
    if all(q.size == first.size and np.allclose(q, first, rtol=1e-9) for q in ladders.values()):
        return [("Regimes", ", ".join(curves.regimes)),
                ("Discharges", f"{first.size} per regime, {first[0]:,.0f}–{first[-1]:,.0f} ML/d")]
    return [(f"Regime {r}", f"1 run, {q[0]:,.0f} ML/d" if q.size == 1 else
             f"{q.size} runs, {q[0]:,.0f}–{q[-1]:,.0f} ML/d") for r, q in ladders.items()]


def grid_rows(table) -> list:
    """Summary rows for the grids/meshes and how long chainage took on each."""
    rows = []
    for k, g in enumerate(table.grids):
        label = "Grid" if len(table.grids) == 1 else f"Grid {k + 1}"
        rows.append((label, f"{g.text} ({g.runs} runs)"))
        if g.locate_seconds:
            text = f"computed once: {g.first_s:.2f} s for the first run"
            if len(g.locate_seconds) > 1:
                text += f", then {g.later_mean_s:.3f} s per run from the cache"
            rows.append(("Chainage" if len(table.grids) == 1 else f"Chainage, grid {k + 1}", text))
    return rows


def _regime_summary(curves) -> str:
    parts = []
    for regime in curves.regimes:
        q = curves.ladder(regime)
        parts.append(f"{regime} ({q.size} runs, {q[0]:,.0f}–{q[-1]:,.0f} ML/d)")
    return "; ".join(parts)


def build_report(curves, results, table, scheme, wet_depth_m: float, table_desc: str, runs: dict,
                 title: str = "Flow-habitat curves and target discharges") -> Report:
    reach = table.reach
    regimes = curves.regimes
    rep = Report(title, algorithm="flowhabitat", subtitle=_regime_summary(curves))
    ax = reach.axis
    t = table.timings
    summary = [("Scenario table", table_desc), ("Runs", f"{table.n} ({len(regimes)} regime(s))")]
    summary += regime_rows(curves)
    summary += grid_rows(table)
    summary += [
        ("CRS", _crs_name(table.crs_wkt)),
        ("Reach", f"chainage {ax.start_m:,.0f} to {ax.end_m:,.0f} m ({ax.length_m / 1000:.2f} km), {ax.method}"),
        ("Segments", f"{reach.n_segments} (length {reach.segment_edges[1] - reach.segment_edges[0]:g} m)"),
        ("Zones", ", ".join(f"{n} {a:,.0f}–{b:,.0f} m" for n, a, b in
                            zip(reach.zone_names, reach.zone_edges[:-1], reach.zone_edges[1:]))),
        ("Class scheme", f"{scheme.name}: {', '.join(scheme.names)}"),
        ("Wet-depth threshold", wet_depth_m, "m"),
        ("Interpolation between runs", "PCHIP on ln(discharge); not extrapolated (see Targets)"),
        ("Time for the runs", f"{t['wall_s']:.1f} s, {t['workers']} at a time"),
        ("Summed over the runs", f"reading {t['read_s']:.1f} s, chainage {t['locate_s']:.1f} s, classes and areas "
                                 f"{t['work_s']:.1f} s"),
    ]
    rep.summary(summary, heading="Runs")
    rep.section("Classes", f"Scheme '{scheme.name}'. Bounds are lower-inclusive and upper-exclusive. Source: "
                           f"{(scheme.source or 'user table').rstrip('.')}.")
    rep.table(class_legend(scheme), caption="Classes", csv_name="classes")

    targets = []
    for r in results:
        if r.target not in targets:
            targets.append(r.target)
    if targets:
        rep.section("Targets: the smallest discharge that meets each",
                    "For each regime, the first discharge, going up the runs, at which the class set's share of "
                    "the unit's wet area meets the target. Between two runs the share is interpolated by "
                    f"{cv.METHOD}; the answer is exactly a run's discharge when that run meets the target with "
                    "equality. 'met at the lowest run': the runs cannot show a lower requirement. 'not reached "
                    "within the runs': nothing is extrapolated beyond the highest run.")
        tcols = cv.targets_table(results)
        rep.table(tcols, caption="Targets", csv_name="targets",
                  hide=("unit", "classes", "op", "threshold_pct", "method", "q_lowest_mld", "q_highest_mld"))
        rep.figure(flowsvg.target_panels(curves, results, targets, regimes),
                   caption="Share of each target's classes against discharge, one line per regime (the interpolant "
                           "used for the answer; markers at the runs), the threshold dashed and the answer marked "
                           "with a drop line.")
    rep.section("Class shares against discharge",
                "Percentage of the wet area of the whole reach and of every zone in each class, against discharge; "
                "one line per regime, side by side in every panel. Markers are the runs; lines between them are the "
                "interpolant the targets use.")
    for unit in [u for u in curves.units if u.scope in ("reach", "zone")]:
        rep.section(unit.key if unit.scope == "zone" else "whole reach", level=3)
        rep.figure(flowsvg.class_share_panels(curves, unit, regimes),
                   caption=f"{unit.key}: % of the wet area in each class against discharge "
                           f"(chainage {unit.chainage_from_m:,.0f}–{unit.chainage_to_m:,.0f} m).")
    zones = [u for u in curves.units if u.scope in ("reach", "zone")]
    rep.section("Class make-up per zone and regime",
                "Rows are the whole reach and the zones, columns the regimes: the class shares stacked to 100 % of "
                "the wet area against discharge (straight between the runs).")
    rep.figure(flowsvg.composition_grid(curves, zones, regimes, scheme),
               caption="Class make-up against discharge; rows: units, columns: regimes.")
    rep.figure(flowsvg.wet_area_panels(curves, zones, regimes),
               caption="Wet area (hectares) of the whole reach and of each zone against discharge.")
    set_classes = list(targets[0].classes) if targets else [curves.class_names[-1]]
    fig = flowsvg.segment_share_maps(curves, set_classes, regimes, origin=ax.origin)
    if fig is not None:
        rep.section("Along the reach",
                    f"Share of {'+'.join(set_classes)} in the wet area of every segment (rows, in chainage order from "
                    "the top) at every run (columns), per regime. Grey: the segment is dry in that run. "
                    + ("The classes are those of the first target." if targets else "The last class of the scheme."))
        rep.figure(fig, caption=f"{'+'.join(set_classes)} per segment and run.")
    rep.section("Tables", "The whole reach and the zones at every run; the CURVES output holds every segment too.")
    rep.table(unit_rows(curves), caption="Class shares of the reach and zones at every run", csv_name="zone_curves")
    rep.table(runs, caption="Runs", csv_name="runs")
    rep.notes(table.notes)
    out = runs["outside_area_m2"] > 0
    if out.any():
        rep.note(f"{int(out.sum())} of {table.n} runs have wet area beyond the ends of the reach axis (up to "
                 f"{runs['outside_area_m2'].max():,.0f} m2); it is left out of every statistic (runs table: "
                 "outside_area_m2).")
    uncl = runs["unclassified_area_m2"] > 0
    if uncl.any():
        rep.note(f"{int(uncl.sum())} runs have wet area that matches no class of the scheme (runs table: "
                 "unclassified_area_m2); class shares add up to less than 100 % there.")
    return rep


def _crs_name(wkt: str) -> str:
    from ..core.habitat import crs_name

    return crs_name(wkt)
