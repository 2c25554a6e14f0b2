"""The maphabitat report: one run's summary, class legend, zone and segment tables and charts.

``build_report(analysis, inputs, notes)`` returns a ``gis/report.Report`` (write it with
``.write(path)``). ``zone_rows(analysis)`` and ``class_legend(scheme, ...)`` are reusable pieces for
other habitat reports (compare, flow-habitat). Its charts are written as SVG directly
(``gis/svgcharts.py``, a few milliseconds each).
"""

from __future__ import annotations

import numpy as np

from ..core import stats
from . import svgcharts
from .report import Report

KEY_COLUMNS = ("wet_area_m2", "v_p10_ms", "v_p25_ms", "v_p50_ms", "v_p75_ms", "v_p90_ms", "v_mean_ms", "v_cv",
               "d_p50_m", "d_p90_m", "fr_mean")


def class_legend(scheme, areas=None, wet_area=None) -> dict:
    """Columns code, class, rule, colour (+ area_m2 and pct_wet when ``areas`` are given)."""
    cols = {"code": np.arange(1, len(scheme.classes) + 1), "class": scheme.names,
            "rule": [c.describe() for c in scheme.classes], "colour": scheme.colours}
    if areas is not None:
        cols["area_m2"] = np.asarray(areas, dtype=float)
        if wet_area:
            cols["pct_wet"] = 100.0 * cols["area_m2"] / float(wet_area)
    return cols


def zone_rows(analysis) -> dict:
    """The whole reach and every zone as rows of the key statistics, class shares and diversity."""
    names = analysis.scheme.names
    z, r = analysis.zone_stats, analysis.reach_stats
    cols = {"unit": ["whole reach"] + list(z["zone"]),
            "chainage_from_m": np.r_[r["chainage_from_m"], z["chainage_from_m"]],
            "chainage_to_m": np.r_[r["chainage_to_m"], z["chainage_to_m"]]}
    for k in KEY_COLUMNS:
        if k in z:
            cols[k] = np.r_[r[k], z[k]]
    for n in names:
        k = f"pct_{stats.field_key(n)}"
        cols[k] = np.r_[r[k], z[k]]
    for k in ("shannon", "simpson"):
        cols[k] = np.r_[r[k], z[k]]
    return cols


def build_report(analysis, inputs, notes=(), title: str = "Habitat map of one run", subtitle: str = "",
                 patch_count: int | None = None) -> Report:
    """The maphabitat REPORT. ``inputs``: (label, value[, unit]) rows describing the run."""
    scheme = analysis.scheme
    reach = analysis.reach
    rep = Report(title, algorithm="maphabitat", subtitle=subtitle)
    origin = getattr(reach.axis, "origin", "upstream")
    rep.summary(inputs, heading="Run")
    r = analysis.reach_stats
    wet = float(r["wet_area_m2"][0])
    areas = [r[f"area_{stats.field_key(n)}_m2"][0] for n in scheme.names]
    source = (scheme.source or "user table").rstrip(".")
    rep.section("Classes", f"Scheme '{scheme.name}'. Bounds are lower-inclusive and upper-exclusive; an element "
                           f"takes the first class whose bounds all hold. Source: {source}.")
    rep.table(class_legend(scheme, areas, wet), caption="Classes over the whole reach", csv_name="classes")
    rep.section("Whole reach and zones",
                "Area-weighted statistics of depth-averaged speed (m/s) and depth (m); class shares in % of "
                "the wet area; Shannon (natural log) and Simpson diversity of the class shares.")
    rep.table(zone_rows(analysis), caption="Whole reach and zones", csv_name="zones")
    zf = analysis.class_fractions("zone")
    rf = analysis.class_fractions("reach")
    fig = svgcharts.class_share_bars(list(analysis.zone_stats["zone"]) + ["whole reach"], np.vstack([zf, rf]),
                                  scheme, title="Class shares per zone")
    rep.figure(fig, caption="Share of each class in the wet area of every zone and the whole reach.")
    if analysis.profile is not None:
        p = analysis.profile
        width = float(p["chainage_to_m"][0] - p["chainage_from_m"][0]) if len(p["chainage_from_m"]) else 0.0
        rep.section("Along the reach", f"Speed percentiles in {width:g} m chainage bins (area-weighted). The "
                                       "dark band holds the middle half of the wet area, the light band 80 %; "
                                       "dashed lines are the class thresholds.")
        rep.figure(svgcharts.speed_profile(p, scheme, reach.zone_edges, reach.zone_names,
                                        title="Depth-averaged speed along the reach", origin=origin),
                   caption=f"Speed percentile bands along chainage (km from the {origin} end), zones marked.")
    sf = analysis.class_fractions("segment")
    rep.figure(svgcharts.class_share_profile(reach.segment_edges, sf, scheme, reach.zone_edges, reach.zone_names,
                                          title="Class shares per segment", origin=origin),
               caption="Share of each class in the wet area of every segment along the reach.")
    seg = analysis.segment_stats
    shown = ["segment", "chainage_from_m", "chainage_to_m", "zone", "wet_area_m2", "v_p10_ms", "v_p50_ms",
             "v_p90_ms", "v_cv", "d_p50_m", "fr_mean"] + [f"pct_{stats.field_key(n)}" for n in scheme.names] + \
        ["shannon"]
    rep.section("Segments", "Every statistic per segment (the CSV link holds every column: all percentiles of "
                            "speed and depth, class areas, Simpson diversity).")
    rep.table(seg, caption="Segment statistics", csv_name="segments", hide=tuple(k for k in seg if k not in shown))
    if patch_count is not None:
        rep.note(f"PATCHES holds {patch_count} features: one multipolygon per class and segment.")
    rep.notes(notes)
    return rep
