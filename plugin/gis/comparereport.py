"""The compareregimes report: what the alternative run changes against the base run.

``build_report(cmp, aligned, inputs, notes, base_name, alt_name)`` returns a ``gis/report.Report``:
summary of the two runs and the method, the biggest changes in words, class areas per zone, wet/dry
change, the transition matrices (whole reach and every zone), the class balance, charts (change of
every class along chainage, class-area change per zone, median speed along the reach in both runs),
the zone and segment change tables, the method notes and the caution.
"""

from __future__ import annotations

import numpy as np

from ..core import stats
from ..core.compare import WET_DRY_KEYS, WET_DRY_NAMES, Comparison, class_balance
from . import charts
from .report import Report

PP = "pp"  # percentage points
HA = 10_000.0


# ----------------------------------------------------------------------------------------------
# Charts
# ----------------------------------------------------------------------------------------------

def class_change_profile(edges_m, chg_pct, scheme, zone_edges=None, zone_names=None, title: str = ""):
    """Small multiples, one row per class: change of the class's share of the wet area (percentage points,
    alternative minus base) in every segment along the reach, as steps filled from zero."""
    edges = np.asarray(edges_m, dtype=float) / 1000.0
    d = np.asarray(chg_pct, dtype=float)
    n = len(scheme.classes)
    fig, axes = charts.new_figure(9.5, 1.0 + 1.25 * n, nrows=n, ncols=1, sharex=True)
    axes = np.atleast_1d(axes)
    lim = np.nanmax(np.abs(d)) if np.isfinite(d).any() else 1.0
    lim = max(5.0, float(np.ceil(lim / 5.0) * 5.0))
    x = np.column_stack([edges[:-1], edges[1:]]).ravel()
    for j, (ax, cls) in enumerate(zip(axes, scheme.classes)):
        y = np.repeat(np.nan_to_num(d[:, j]), 2)
        ax.fill_between(x, 0, y, color=cls.colour, linewidth=0, step=None)
        ax.plot(x, y, color=charts.INK, linewidth=0.6)
        ax.axhline(0, color=charts.MUTED, linewidth=0.8)
        ax.set_ylim(-lim, lim)
        ax.set_xlim(edges[0], edges[-1])
        charts.style_axes(ax, None, f"{cls.name}\n({PP})")
        if j == 0:
            charts.mark_zones(ax, zone_edges, zone_names or [])
        elif zone_edges is not None:
            for e in np.asarray(zone_edges[1:-1], dtype=float) / 1000.0:
                ax.axvline(e, color=charts.MUTED, linewidth=0.9, linestyle=(0, (2, 2)))
    charts.style_axes(axes[-1], "chainage (km from the upstream end)  →  downstream", None)
    if title:
        fig.suptitle(title, x=0.01, ha="left", fontsize=10)
    return fig


def class_area_change_bars(units, chg_area_m2, scheme, title: str = ""):
    """Grouped horizontal bars: change of every class's area (ha) in every unit (zones, whole reach)."""
    a = np.asarray(chg_area_m2, dtype=float) / HA
    n_u, n_c = a.shape
    fig, ax = charts.new_figure(9.0, 1.0 + 0.32 * n_u * n_c + 0.3 * n_u)
    h = 0.8 / n_c
    y0 = np.arange(n_u)[::-1]
    for j, cls in enumerate(scheme.classes):
        y = y0 + 0.4 - h * (j + 0.5)
        ax.barh(y, a[:, j], height=h * 0.92, color=cls.colour, label=cls.name, edgecolor="white", linewidth=0.4)
        for yi, v in zip(y, a[:, j]):
            if np.isfinite(v) and v != 0:
                ax.text(v, yi, f" {v:+.1f} " if abs(v) < 100 else f" {v:+.0f} ", va="center",
                        ha="left" if v > 0 else "right", fontsize=7, color=charts.INK)
    ax.axvline(0, color=charts.MUTED, linewidth=0.9)
    ax.set_yticks(y0)
    ax.set_yticklabels([str(u) for u in units])
    ax.grid(True, axis="x", color=charts.GRID, linewidth=0.8)
    ax.grid(False, axis="y")
    lim = np.nanmax(np.abs(a)) if np.isfinite(a).any() else 1.0
    ax.set_xlim(-1.25 * lim - 1e-9, 1.25 * lim + 1e-9)
    charts.style_axes(ax, "change in area (ha), alternative minus base", None)
    ax.grid(False, axis="y")
    ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=min(n_c, 6), frameon=False, fontsize=8)
    if title:
        fig.suptitle(title, x=0.01, ha="left", fontsize=10)
    return fig


def median_speed_profiles(base_profile, alt_profile, scheme, base_name, alt_name, zone_edges=None,
                          zone_names=None, title: str = ""):
    """Median speed along the reach in both runs (step lines) with the 10th-90th percentile band of each."""
    fig, ax = charts.new_figure(9.5, 3.6)
    styles = ((base_profile, base_name, "#5b6470", (0, (4, 2))), (alt_profile, alt_name, "#1f2328", "solid"))
    top = 0.0
    for prof, name, colour, ls in styles:
        if prof is None:
            continue
        a = np.asarray(prof["chainage_from_m"], dtype=float) / 1000.0
        b = np.asarray(prof["chainage_to_m"], dtype=float) / 1000.0
        x = np.column_stack([a, b]).ravel()
        p50 = np.repeat(np.asarray(prof["v_p50_ms"], dtype=float), 2)
        p10 = np.repeat(np.asarray(prof["v_p10_ms"], dtype=float), 2)
        p90 = np.repeat(np.asarray(prof["v_p90_ms"], dtype=float), 2)
        ax.fill_between(x, p10, p90, color=colour, alpha=0.14, linewidth=0)
        ax.plot(x, p50, color=colour, linestyle=ls, linewidth=1.3, label=f"{name}: median (band: 10th–90th pct)")
        if np.isfinite(p90).any():
            top = max(top, float(np.nanmax(p90)))
    for t in charts.speed_thresholds(scheme):
        ax.axhline(t, color=charts.MUTED, linewidth=0.7, linestyle=(0, (5, 3)))
        ax.annotate(f"{t:g} m/s", xy=(1.0, t), xycoords=("axes fraction", "data"), xytext=(3, 0),
                    textcoords="offset points", va="center", fontsize=7.5, color=charts.MUTED, annotation_clip=False)
        top = max(top, t * 1.15)
    ax.set_ylim(0, top * 1.08 if top > 0 else 1.0)
    if zone_edges is not None and len(zone_edges) >= 2:
        ax.set_xlim(float(zone_edges[0]) / 1000.0, float(zone_edges[-1]) / 1000.0)
    charts.mark_zones(ax, zone_edges, zone_names or [])
    charts.style_axes(ax, "chainage (km from the upstream end)  →  downstream", "depth-averaged speed (m/s)")
    ax.legend(loc="upper left", bbox_to_anchor=(0.0, -0.2), ncol=2, frameon=False, fontsize=8)
    if title:
        fig.suptitle(title, x=0.01, ha="left", fontsize=10)
    return fig


# ----------------------------------------------------------------------------------------------
# Tables
# ----------------------------------------------------------------------------------------------

def matrix_columns(cmp: Comparison, matrix) -> dict:
    """A transition matrix as report columns: 'from \\ to', one column per state, total."""
    cols = {"from \\ to": list(cmp.states)}
    for j, k in enumerate(cmp.state_keys):
        cols[f"to_{k}_m2"] = matrix[:, j]
    cols["total_m2"] = matrix.sum(axis=1)
    labels = {f"to_{k}_m2": s for k, s in zip(cmp.state_keys, cmp.states)}
    labels["total_m2"] = "total (base)"
    return cols, labels


def class_area_rows(cmp: Comparison) -> dict:
    """Long table: per unit (whole reach, zones) and class: each run's area and share, and the change."""
    names = cmp.scheme.names
    units = [("whole reach", cmp.base.reach_stats, cmp.alt.reach_stats, 0)]
    units += [(z, cmp.base.zone_stats, cmp.alt.zone_stats, i) for i, z in enumerate(cmp.reach.zone_names)]
    cols = {"unit": [], "class": [], "base_area_m2": [], "alt_area_m2": [], "chg_area_m2": [], "base_pct": [],
            "alt_pct": [], "chg_pct": []}
    for unit, b, a, i in units:
        for n in names:
            k = stats.field_key(n)
            cols["unit"].append(unit)
            cols["class"].append(n)
            cols["base_area_m2"].append(float(b[f"area_{k}_m2"][i]))
            cols["alt_area_m2"].append(float(a[f"area_{k}_m2"][i]))
            cols["chg_area_m2"].append(float(a[f"area_{k}_m2"][i]) - float(b[f"area_{k}_m2"][i]))
            cols["base_pct"].append(float(b[f"pct_{k}"][i]))
            cols["alt_pct"].append(float(a[f"pct_{k}"][i]))
            cols["chg_pct"].append(float(a[f"pct_{k}"][i]) - float(b[f"pct_{k}"][i]))
    return {k: (np.asarray(v, dtype=float) if k not in ("unit", "class") else v) for k, v in cols.items()}


def headlines(cmp: Comparison, base_name: str, alt_name: str) -> list:
    """Plain sentences: the wet area, the change of every class's area (and share, in percentage points) and the
    median speed, in the whole reach and each zone."""
    out = []
    names = cmp.scheme.names
    units = [("Whole reach", cmp.reach_change, 0)] + [(f"Zone '{z}'", cmp.zone_change, i)
                                                      for i, z in enumerate(cmp.zone_change["zone"])]
    for label, t, i in units:
        bw, aw = float(t["base_wet_area_m2"][i]), float(t["alt_wet_area_m2"][i])
        rel = f" ({_signed(100.0 * (aw - bw) / bw, '.1f')} %)" if bw > 0 else ""
        parts = [f"{label}: wet area {bw / HA:,.1f} ha under {base_name}, {aw / HA:,.1f} ha under {alt_name}{rel}"]
        ch = [(float(t[f"chg_area_{stats.field_key(n)}_m2"][i]), n) for n in names]
        absent = {n for n in names if not (float(t[f"base_pct_{stats.field_key(n)}"][i]) > 0 or
                                           float(t[f"alt_pct_{stats.field_key(n)}"][i]) > 0)}
        ch = [c for c in ch if np.isfinite(c[0]) and c[1] not in absent]  # classes in neither run: left out
        if len(ch) > 6:  # long schemes: the four largest changes, in scheme order
            keep = {n for _, n in sorted(ch, key=lambda c: -abs(c[0]))[:4]}
            ch = [c for c in ch if c[1] in keep]
        cls = []
        for v, n in ch:
            pp = float(t[f"chg_pct_{stats.field_key(n)}"][i])
            pp_text = f" ({_signed(pp, '.1f')} {PP})" if np.isfinite(pp) else ""
            cls.append(f"{n} {_signed(v / HA, ',.1f')} ha{pp_text}")
        if cls:
            parts.append("class areas: " + ", ".join(cls))
        med = float(t["chg_v_p50_ms"][i])
        if np.isfinite(med):
            parts.append(f"median speed {float(t['base_v_p50_ms'][i]):.2f} → {float(t['alt_v_p50_ms'][i]):.2f} m/s")
        out.append("; ".join(parts) + ".")
    return out


def _signed(v: float, fmt: str) -> str:
    """'+1.2' or '−1.2' (a true minus sign)."""
    return ("+" if v >= 0 else "\u2212") + format(abs(v), fmt)


ZONE_SHOWN = ("zone", "base_wet_area_m2", "alt_wet_area_m2", "chg_wet_area_m2", "base_v_p50_ms", "alt_v_p50_ms",
              "chg_v_p50_ms", "base_v_p90_ms", "alt_v_p90_ms", "chg_v_p90_ms", "pct_changed", "base_shannon",
              "alt_shannon", "chg_shannon")


def _units_for(columns) -> dict:
    u = {}
    for k in columns:
        if k.startswith("chg_pct_"):
            u[k] = PP
        elif k in ("base_shannon", "alt_shannon", "chg_shannon", "base_simpson", "alt_simpson", "chg_simpson"):
            u[k] = ""
    return u


# ----------------------------------------------------------------------------------------------
# The report
# ----------------------------------------------------------------------------------------------

def build_report(cmp: Comparison, aligned, inputs, notes=(), base_name: str = "base", alt_name: str = "alternative",
                 transitions_count: int | None = None) -> Report:
    scheme, reach = cmp.scheme, cmp.reach
    rep = Report("What the alternative regime changes", algorithm="compareregimes",
                 subtitle=f"{alt_name} against {base_name}")
    rep.summary(inputs, heading="Runs and method")
    rep.section("In short", f"Changes are {alt_name} minus {base_name}, for the wet area inside the reach.")
    rep.bullets(headlines(cmp, base_name, alt_name))

    rep.section("Class areas", "Area and share of the wet area of every class in each run (each run's own grid or "
                               f"mesh), and the change; shares change in percentage points ({PP}).")
    rep.table(class_area_rows(cmp), caption="Class areas per zone and the whole reach", csv_name="class_areas",
              units={"base_pct": "%", "alt_pct": "%", "chg_pct": PP})
    zf = np.vstack([np.column_stack([cmp.zone_change[f"chg_area_{stats.field_key(n)}_m2"] for n in scheme.names]),
                    np.column_stack([cmp.reach_change[f"chg_area_{stats.field_key(n)}_m2"] for n in scheme.names])])
    rep.figure(class_area_change_bars(list(cmp.zone_change["zone"]) + ["whole reach"], zf, scheme,
                                      title=f"Change in class areas: {alt_name} minus {base_name}"),
               caption="Change of every class's area (ha) in each zone and the whole reach.")

    rep.section("Wet and dry", "Union of the wet areas of both runs, split by where each run is wet; 'changed' is "
                               "the area whose state (class, or dry) differs between the runs. Element by element "
                               "(on the common grid when the runs were resampled).")
    wd = {"unit": ["whole reach"] + list(cmp.zone_change["zone"])}
    for key in ("union_wet_m2",) + tuple(WET_DRY_KEYS.values()) + ("changed_m2", "pct_changed"):
        wd[key] = np.r_[cmp.reach_change[key], cmp.zone_change[key]]
    labels = {WET_DRY_KEYS[k]: WET_DRY_NAMES[k] for k in WET_DRY_KEYS}
    rep.table(wd, caption="Wet/dry change", csv_name="wet_dry", labels=labels, units={"pct_changed": "%"})

    rep.section("Class transitions", "Area (m²) going from each state in the base run (rows) to each state in the "
                                     "alternative run (columns). 'dry' is a state, so the matrix sums to the union "
                                     "of the wet areas; the diagonal is unchanged water.")
    cols, labs = matrix_columns(cmp, cmp.matrix_reach)
    rep.table(cols, caption="Transition matrix, whole reach", csv_name="transitions_reach", labels=labs)
    bal = class_balance(cmp)
    rep.table(bal, caption="Class balance, whole reach (from the matrix)", csv_name="class_balance")
    for z, name in enumerate(reach.zone_names):
        cols, labs = matrix_columns(cmp, cmp.matrix_zone[z])
        rep.section(f"Zone '{name}'", level=3)
        rep.table(cols, caption=f"Transition matrix, zone {name}", csv_name=f"transitions_{stats.field_key(name)}",
                  labels=labs)

    rep.section("Along the reach", f"Change of each class's share of the wet area in every segment "
                                   f"({PP}, {alt_name} minus {base_name}), and the speed in both runs.")
    d = np.column_stack([cmp.segment_change[f"chg_pct_{stats.field_key(n)}"] for n in scheme.names])
    rep.figure(class_change_profile(reach.segment_edges, d, scheme, reach.zone_edges, reach.zone_names,
                                    title=f"Change in class shares per segment: {alt_name} minus {base_name}"),
               caption=f"Change in each class's share of the segment's wet area ({PP}) along chainage; zones marked.")
    if cmp.base.profile is not None and cmp.alt.profile is not None:
        rep.figure(median_speed_profiles(cmp.base.profile, cmp.alt.profile, scheme, base_name, alt_name,
                                         reach.zone_edges, reach.zone_names,
                                         title="Depth-averaged speed along the reach"),
                   caption="Median speed per chainage bin in both runs, with the 10th–90th percentile band; "
                           "dashed lines are the class thresholds.")

    rep.section("Zones", "Statistics of each run per zone and the change (the CSV holds every column).")
    zc = {"zone": list(cmp.zone_change["zone"]) + ["whole reach"]}
    for k in cmp.zone_change:
        if k != "zone":
            zc[k] = np.r_[np.asarray(cmp.zone_change[k]), np.asarray(cmp.reach_change[k])]
    rep.table(zc, caption="Zone change", csv_name="zone_change", units=_units_for(zc),
              hide=tuple(k for k in zc if k not in ZONE_SHOWN))
    seg = cmp.segment_change
    shown = ("segment", "chainage_from_m", "chainage_to_m", "zone", "chg_wet_area_m2", "chg_v_p50_ms", "chg_v_p90_ms",
             "pct_changed", "chg_shannon") + tuple(f"chg_pct_{stats.field_key(n)}" for n in scheme.names)
    rep.section("Segments", "Change per segment (the CSV holds every column: each run's values and the change).")
    rep.table(seg, caption="Segment change", csv_name="segment_change", units=_units_for(seg),
              hide=tuple(k for k in seg if k not in shown))

    rep.section("Method")
    rep.bullets([
        aligned.method_text,
        f"Sign: every change is {alt_name} minus {base_name}. An element dry in one run counts there as 0 m deep "
        "and still (0 m/s); elements dry in both runs are nodata.",
        "Statistics per segment and zone (class shares, percentiles, diversity) are area-weighted, as maphabitat "
        "computes them for each run; transitions, wet/dry areas and the change maps are element by element.",
        "TRANSITIONS: the elements of each transition dissolved into one multipolygon per segment (4-connected "
        "polygonizing on grids; coverage union of faces on meshes), so their areas add up to the matrix.",
        f"Class scheme '{scheme.name}' for both runs: "
        f"{'; '.join(f'{c.name}: {c.describe()}' for c in scheme.classes)}.",
    ])
    if transitions_count is not None:
        rep.note(f"TRANSITIONS holds {transitions_count} features: one multipolygon per transition and segment.")
    rep.notes(notes)
    return rep
