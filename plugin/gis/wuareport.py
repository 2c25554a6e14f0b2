"""The usablearea report: the suitability curves, weighted usable area per reach, zone and segment,
and WUA against discharge per regime and zone when a scenario table was given."""

from __future__ import annotations

import numpy as np

from ..core import usable
from . import charts, flowcharts
from .report import Report

SOURCE_NOTE = ("Composite suitability: product = the composite probability-of-use of Hyra 1978 (Instream Flow "
               "Information Paper No. 6); geometric mean and minimum are the other composites of the instream flow "
               "incremental methodology (Bovee 1982, Instream Flow Information Paper No. 12, from memory).")


def curve_points(curve_set) -> dict:
    cols = {"variable": [], "value": [], "unit": [], "suitability": []}
    for var in curve_set.variables:
        c = curve_set.curves[var]
        for v, s in zip(c.values, c.suitability):
            cols["variable"].append(var)
            cols["value"].append(float(v))
            cols["unit"].append("m" if var == "depth" else "m/s")
            cols["suitability"].append(float(s))
    return {k: np.asarray(v) for k, v in cols.items()}


def _rows(table, scopes=("reach", "zone")) -> dict:
    keep = np.isin(np.asarray(table["scope"]), scopes)
    return {k: np.asarray(v)[keep] for k, v in table.items()}


def segment_chart(table, reach, title: str):
    """WUA and wet area per segment along the reach (one run)."""
    seg = np.asarray(table["scope"]) == "segment"
    a = np.asarray(table["chainage_from_m"], dtype=float)[seg] / 1e3
    b = np.asarray(table["chainage_to_m"], dtype=float)[seg] / 1e3
    wet = np.asarray(table["wet_area_m2"], dtype=float)[seg] / 1e4
    wua = np.asarray(table["wua_m2"], dtype=float)[seg] / 1e4
    fig, ax = charts.new_figure(9.5, 3.2)
    ax.bar(a, wet, width=b - a, align="edge", color="#c9d3dc", edgecolor="white", linewidth=0.5, label="wet area")
    ax.bar(a, wua, width=b - a, align="edge", color="#0072B2", edgecolor="white", linewidth=0.5,
           label="weighted usable area")
    ax.set_xlim(a.min() if a.size else 0, b.max() if b.size else 1)
    charts.mark_zones(ax, reach.zone_edges, reach.zone_names)
    charts.style_axes(ax, "chainage (km from the upstream end)  →  downstream", "area (ha)", None)
    ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.22), ncol=2, frameon=False, fontsize=8)
    if title:
        fig.suptitle(title, x=0.01, ha="left", fontsize=10)
    return fig


def histogram_chart(hist):
    fig, ax = charts.new_figure(6.5, 2.8)
    lo, hi = hist["suitability_from"], hist["suitability_to"]
    ax.bar(lo, hist["area_m2"] / 1e4, width=hi - lo, align="edge", color="#0072B2", edgecolor="white", linewidth=0.6)
    ax.set_xlim(0, 1)
    charts.style_axes(ax, "composite suitability", "wet area (ha)", None)
    return fig


def build_report(curve_set, method: str, sources_text: str, table: dict, reach, inputs, notes=(),
                 hist=None, scenario: bool = False) -> Report:
    rep = Report("Weighted usable area", algorithm="usablearea",
                 subtitle=f"{curve_set.label} — {method}")
    rep.summary(inputs, heading="Inputs")
    rep.section("Suitability curves",
                "Piecewise linear between the points; beyond the first and last point the end value holds (dashed). "
                f"Depth in m, velocity as depth-averaged speed in m/s. Curve source(s): {sources_text}.")
    rep.figure(flowcharts.suitability_curves(curve_set), caption=f"Suitability curves of '{curve_set.label}'.")
    rep.table(curve_points(curve_set), caption="Curve points (SI units)", csv_name="suitability_points")
    rep.paragraph(f"Composite suitability per element: {method}. Weighted usable area (WUA) of a unit = sum of "
                  "element area × composite suitability over its wet elements; wua_fraction = WUA / wet area, the "
                  "area-weighted mean composite suitability. " + SOURCE_NOTE)
    units = [u for u in dict.fromkeys(
        np.where(np.asarray(table["scope"]) == "zone", np.asarray(table["unit"]), "")) if u]
    keys = ["reach"] + list(units)
    if scenario:
        regimes = list(dict.fromkeys(np.asarray(table["regime"])))
        rep.section("Weighted usable area against discharge",
                    "One panel per unit (the whole reach and each zone), one line per regime; markers are the runs, "
                    "lines between them PCHIP on ln(discharge) as habitatseries interpolates.")
        panels = [(k if k != "reach" else "whole reach", usable.wua_by_regime(table, k)) for k in keys]
        panels = [(t, {r: (q, v / 1e4) for r, (q, v) in d.items()}) for t, d in panels]
        rep.figure(flowcharts.value_panels(panels, regimes, "WUA (ha)"),
                   caption="Weighted usable area (hectares) against discharge.")
        fpanels = [(k if k != "reach" else "whole reach", usable.wua_by_regime(table, k, "wua_fraction")) for k in keys]
        rep.figure(flowcharts.value_panels(fpanels, regimes, "WUA / wet area", ylim=(0, 1)),
                   caption="WUA as a fraction of the wet area (area-weighted mean composite suitability).")
        mx = usable.maximum_table(table, keys)
        rep.section("Largest WUA within the runs",
                    "The run with the largest WUA per regime and unit. When it is the lowest or highest run "
                    "(at_end_of_runs), the maximum may lie outside the runs.")
        rep.table(mx, caption="Largest WUA per regime and unit", csv_name="wua_maximum")
        rep.section("Tables", "The whole reach and the zones at every run; WUA_TABLE (and the CSV link) hold every "
                              "segment too.")
        rep.table(_rows(table), caption="WUA of the reach and zones", csv_name="wua_zones",
                  hide=("curve_set", "combination"))
    else:
        rep.section("Weighted usable area", "The whole reach, each zone and each segment.")
        rep.table(_rows(table), caption="WUA of the reach and zones", csv_name="wua_zones",
                  hide=("curve_set", "combination", "q_mld", "q_m3s") if not np.isfinite(
                      np.asarray(table["q_mld"], dtype=float)).any() else ("curve_set", "combination"))
        rep.figure(segment_chart(table, reach, "Wet area and weighted usable area per segment"),
                   caption="Wet area (grey) and weighted usable area (blue) of every segment, hectares.")
        if hist is not None:
            rep.figure(histogram_chart(hist), caption="Wet area by composite suitability (classes of 0.1).")
            if hist["no_value_area_m2"] > 0:
                rep.note(f"{hist['no_value_area_m2']:,.0f} m2 of wet area has no suitability value and counts as 0.")
        rep.table(_rows(table, ("segment",)), caption="WUA per segment", csv_name="wua_segments",
                  hide=("regime", "q_mld", "q_m3s", "run", "curve_set", "combination", "scope"))
    rep.notes(notes)
    return rep
