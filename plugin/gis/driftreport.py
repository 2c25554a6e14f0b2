"""The driftresidence HTML report: what was run, fates, time in each class per run (and against
discharge for a scenario table), per zone, the 1D estimate beside the tracking, and a map of paths.

Built with the shared ``gis/report.py`` and the house chart style of ``gis/charts.py``.
"""

from __future__ import annotations

import math

import numpy as np

from ..core import drift
from ..core.stats import field_key
from . import charts
from .report import Report

REGIME_COLOURS = ("#1F4E8C", "#C8553D", "#3C8D7F", "#8E4A1C", "#B46AA8", "#6B8E3D", "#9C9C9C", "#E3B35F")


def _unit(summary: dict) -> tuple:
    """('h', 1) or ('d', 24): days when the longest median travel time exceeds two days."""
    t = np.asarray(summary.get("t_total_p50_h", []), dtype=float)
    t = t[np.isfinite(t)]
    return ("d", 24.0) if t.size and t.max() > 48.0 else ("h", 1.0)


def _reach_rows(summary: dict) -> np.ndarray:
    return np.flatnonzero(np.asarray(summary["scope"]) == "reach")


def class_time_chart(summary: dict, scheme, title: str = ""):
    """Median time in each class per run (bars, class colours) with p10-p90 whiskers."""
    rows = _reach_rows(summary)
    unit, div = _unit(summary)
    names = scheme.names
    runs = [summary["run"][i] for i in rows]
    n, k = len(rows), len(names)
    longest = max((len(str(r)) for r in runs), default=4)
    fig, ax = charts.new_figure(9.0, max(2.4, 0.8 + 0.55 * n + 0.6),
                                margins=(0.35 + 0.09 * longest, 0.3, 0.6, 0.55 if not title else 0.8))
    bar_h = 0.8 / k
    y0 = np.arange(n)[::-1].astype(float)
    for j, (name, colour) in enumerate(zip(names, scheme.colours)):
        key = field_key(name)
        p50 = np.asarray(summary[f"t_{key}_p50_h"], float)[rows] / div
        p10 = np.asarray(summary[f"t_{key}_p10_h"], float)[rows] / div
        p90 = np.asarray(summary[f"t_{key}_p90_h"], float)[rows] / div
        yy = y0 + 0.4 - (j + 0.5) * bar_h
        ax.barh(yy, np.nan_to_num(p50), height=bar_h * 0.92, color=colour, label=name, edgecolor="white",
                linewidth=0.4)
        err = np.vstack([np.nan_to_num(p50 - p10), np.nan_to_num(p90 - p50)])
        ax.errorbar(np.nan_to_num(p50), yy, xerr=np.maximum(err, 0), fmt="none", ecolor=charts.INK,
                    elinewidth=0.8, capsize=2)
    ax.set_yticks(y0)
    ax.set_yticklabels([str(r) for r in runs])
    ax.grid(True, axis="x", color=charts.GRID, linewidth=0.8)
    ax.grid(False, axis="y")
    ax.tick_params(axis="y", length=0)
    charts.style_axes(ax, f"time in the class ({'days' if unit == 'd' else 'hours'}): median, whiskers p10-p90",
                      None, None)
    ax.grid(False, axis="y")
    ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=min(k, 6), frameon=False, fontsize=8,
              columnspacing=2.5, handlelength=1.5)
    if title:
        fig.suptitle(title, x=0.01, y=0.99, ha="left", va="top", fontsize=10)
    return fig


def arrival_chart(profiles, estimates, zone_edges=None, zone_names=None):
    """Time since release against chainage: per run the median passage time (line) and p10-p90
    (band) over its particles, and the 1D estimate (dashed) where there is one.
    ``profiles``: [(label, chainage, p10, p50, p90)] in seconds; ``estimates``: [(label, chainage, t)]."""
    fig, ax = charts.new_figure(9.0, 3.8)
    tmax = 0.0
    for c, (label, ch, p10, p50, p90) in enumerate(profiles):
        colour = REGIME_COLOURS[c % len(REGIME_COLOURS)]
        ax.fill_between(ch / 1000.0, p10 / 86400.0, p90 / 86400.0, color=colour, alpha=0.15, linewidth=0)
        ax.plot(ch / 1000.0, p50 / 86400.0, color=colour, linewidth=1.6, label=f"{label} (particles)")
        if np.isfinite(p90).any():
            tmax = max(tmax, float(np.nanmax(p90)))
    colours = {p[0]: REGIME_COLOURS[c % len(REGIME_COLOURS)] for c, p in enumerate(profiles)}
    for label, ch, t in estimates:
        colour = colours.setdefault(label, REGIME_COLOURS[len(colours) % len(REGIME_COLOURS)])
        ax.plot(ch / 1000.0, t / 86400.0, color=colour, linewidth=1.0, linestyle=(0, (4, 2)),
                label=f"{label} (1D estimate)")
        if np.isfinite(t).any():
            tmax = max(tmax, float(np.nanmax(t[np.isfinite(t)])))
    if zone_edges is not None:
        charts.mark_zones(ax, zone_edges, zone_names or [])
    charts.style_axes(ax, "chainage (km)", "days since release", None)
    ax.set_ylim(bottom=0)
    ax.legend(frameon=False, fontsize=8, loc="upper left")
    return fig


def class_time_vs_discharge(summary: dict, scheme):
    """One panel per class: median time in it against discharge (log axis), one line per regime,
    p10-p90 shaded. Returns None when no regime has two discharges."""
    rows = _reach_rows(summary)
    regimes = []
    for i in rows:
        r = summary["regime"][i]
        if r not in regimes:
            regimes.append(r)
    q = np.asarray(summary["q_mld"], float)
    if not any(np.count_nonzero(np.isfinite(q[[i for i in rows if summary["regime"][i] == r]])) >= 2
               for r in regimes):
        return None
    unit, div = _unit(summary)
    k = len(scheme.names)
    ncols = 2 if k > 1 else 1
    nrows = math.ceil(k / ncols)
    fig, axes = charts.new_figure(9.0, 2.3 * nrows + 0.7, nrows=nrows, ncols=ncols, squeeze=False)
    for j, name in enumerate(scheme.names):
        ax = axes[j // ncols][j % ncols]
        key = field_key(name)
        for c, regime in enumerate(regimes):
            sel = np.array([i for i in rows if summary["regime"][i] == regime and np.isfinite(q[i])], dtype=int)
            if sel.size == 0:
                continue
            order = sel[np.argsort(q[sel])]
            colour = REGIME_COLOURS[c % len(REGIME_COLOURS)]
            x = q[order]
            p50 = np.asarray(summary[f"t_{key}_p50_h"], float)[order] / div
            p10 = np.asarray(summary[f"t_{key}_p10_h"], float)[order] / div
            p90 = np.asarray(summary[f"t_{key}_p90_h"], float)[order] / div
            ax.fill_between(x, p10, p90, color=colour, alpha=0.15, linewidth=0)
            ax.plot(x, p50, color=colour, marker="o", markersize=3, linewidth=1.4, label=regime)
        ax.set_xscale("log")
        _discharge_ticks(ax, q[rows])
        charts.style_axes(ax, "discharge (ML/d)" if j // ncols == nrows - 1 else None,
                          f"{'days' if unit == 'd' else 'hours'}", name)
        ax.set_ylim(bottom=0)
    for j in range(k, nrows * ncols):
        axes[j // ncols][j % ncols].set_visible(False)
    axes[0][0].legend(frameon=False, fontsize=8)
    return fig


def _discharge_ticks(ax, q):
    """Plain-number ticks on a log discharge axis: the discharges themselves when few, else 1-2-5."""
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter

    qs = np.unique(np.asarray(q, dtype=float)[np.isfinite(q)])
    if 0 < qs.size <= 8:
        ticks = qs
    else:
        lo, hi = (qs.min(), qs.max()) if qs.size else (1.0, 10.0)
        ticks = [m * 10.0 ** e for e in range(int(np.floor(np.log10(lo))), int(np.ceil(np.log10(hi))) + 1)
                 for m in (1, 2, 5) if lo <= m * 10.0 ** e <= hi]
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:,.0f}".replace(",", "\u2009")))
    ax.xaxis.set_minor_formatter(NullFormatter())


def paths_map(geoms, axis, title: str = "", max_paths: int = 400, stranded=None):
    """The particle paths of one run drawn on the reach, coloured by the time since release;
    ``stranded``: (x, y) of particles stopped at a bank, marked."""
    from matplotlib.collections import LineCollection

    fig, ax = charts.new_figure(9.0, 5.0)
    ax.plot(axis.x, axis.y, color=charts.MUTED, linewidth=0.8, linestyle=(0, (4, 3)), label="reach axis")
    step = max(1, len(geoms) // max_paths)
    segs, vals = [], []
    for x, y, m in geoms[::step]:
        if len(x) < 2:
            continue
        pts = np.column_stack([x, y])
        segs.append(np.stack([pts[:-1], pts[1:]], axis=1))
        vals.append(0.5 * (m[:-1] + m[1:]))
    if segs:
        seg = np.concatenate(segs)
        val = np.concatenate(vals) / 86400.0
        lc = LineCollection(seg, array=val, cmap="viridis", linewidths=0.6)
        ax.add_collection(lc)
        cb = fig.colorbar(lc, ax=ax, shrink=0.8)
        cb.set_label("days since release")
    if stranded is not None and len(stranded[0]):
        ax.scatter(stranded[0], stranded[1], s=14, color="#C8553D", marker="x", linewidths=1.0, zorder=5,
                   label="stranded")
        ax.legend(frameon=False, fontsize=8, loc="upper left")
    ax.set_aspect("equal", adjustable="datalim")
    ax.autoscale_view()
    ax.grid(False)
    charts.style_axes(ax, "x (m)", "y (m)", title or None)
    ax.grid(False)
    ax.ticklabel_format(useOffset=False, style="plain")
    ax.tick_params(axis="x", labelrotation=0)
    return fig


def build_report(summary: dict, estimate: dict, runs: list, scheme, settings: list, notes: list, axis=None,
                 path_geoms_by_run=None) -> Report:
    """The report. ``summary``/``estimate``: the RESIDENCE_SUMMARY and ESTIMATE columns; ``runs``:
    [(meta, DriftRun)]; ``settings``: (label, value[, unit]) items; ``path_geoms_by_run``: {run: [(x, y, m)]}
    for the map (first runs only)."""
    labels = [m["run"] for m, _ in runs]
    subtitle = labels[0] if len(labels) == 1 else f"{len(labels)} runs"
    rep = Report("Drift and residence time", algorithm="driftresidence", subtitle=subtitle)
    rep.summary(settings, heading="What was run")
    tracked = [r for _, r in runs if r.result is not None]
    rep.section("Method",
                "Particles move with the depth-averaged velocity (4th-order Runge-Kutta; " +
                (tracked[0].result.step.describe() if tracked else "no run had velocity vectors") +
                "). Rasters: bilinear interpolation over wet cells only; meshes: the value of the face that "
                "holds the particle. The time of each step is shared between the classes of the water at the "
                "four Runge-Kutta stage points (weights 1/6, 1/3, 1/3, 1/6), so class times add up to the "
                "travel time. Percentiles are over the particles of a run; particles stopped by the time limit "
                "give lower bounds.")
    if any(r.result is None for _, r in runs):
        rep.paragraph("Runs with speed only (no velocity vectors) give the 1D estimate: per segment, its length "
                      "over the mean speed of the centreline band. It is an estimate: it ignores the spread "
                      "between particles, eddies and slow water near the banks.")
    rep.html("<p>" + " ".join(f'<span class="swatch" style="background:{c.colour}"></span>{_esc(c.name)}: '
                              f"{_esc(c.describe())}." for c in scheme.classes) + "</p>")

    rows = _reach_rows(summary)
    rep.section("Fates", "What stopped the particles of each run (counts).")
    fate_cols = {"run": [summary["run"][i] for i in rows],
                 "method": [summary["method"][i] for i in rows],
                 "n_particles": np.asarray(summary["n_particles"])[rows]}
    for name in drift.FATES[:-1]:
        fate_cols[f"n_{name}"] = np.asarray(summary[f"n_{name}"])[rows]
    rep.table(fate_cols, caption="Fates per run", csv_name="fates")
    rep.bullets([f"{k}: {v}" for k, v in drift.FATE_TEXT.items()])

    profiles, estimates = [], []
    for meta, run in runs:
        if run.result is not None:
            ch, p10, p50, p90, _ = drift.arrival_profile(run.result)
            profiles.append((meta["run"], ch, p10, p50, p90))
        est = run.estimate
        if np.isfinite(est.total_s):
            a = np.linspace(est.release_m, est.end_m, 200)
            estimates.append((meta["run"], est.sign * a, est.time_at(a)))
    if profiles or estimates:
        rep.section("Travel time along the reach",
                    "When the particles pass each chainage: median (line) and p10-p90 (band) over the particles "
                    "of each run; dashed: the 1D estimate. A steeper line is slower water.")
        zone_edges = runs[0][1].estimate.zone_edges if runs else None
        rep.figure(arrival_chart(profiles[:8], estimates[:8] if len(runs) <= 4 else [],
                                 zone_edges, runs[0][1].estimate.zone_names if runs else None),
                   caption="Days since release against chainage" +
                   (" (first 8 runs)" if len(runs) > 8 else ""))
    rep.section("Time in each class", "Median time a particle spends in each class between release and end, "
                "with the spread between particles (p10-p90).")
    rep.figure(class_time_chart(summary, scheme), caption="Time in each class per run (median, p10-p90)")
    fig = class_time_vs_discharge(summary, scheme)
    if fig is not None:
        rep.figure(fig, caption="Median time in each class against discharge, per regime (shaded: p10-p90)")
    keep = ["run", "regime", "q_mld", "method", "t_total_p10_h", "t_total_p50_h", "t_total_p90_h",
            "t_total_p50_d", "t_estimate_h"]
    for name in scheme.names:
        key = field_key(name)
        keep += [f"t_{key}_p10_h", f"t_{key}_p50_h", f"t_{key}_p90_h", f"t_{key}_p50_d", f"pct_{key}"]
    rep.table({k: _pick(summary[k], rows) for k in keep if k in summary}, caption="Whole reach, per run",
              csv_name="reach_residence", units=_day_units(keep))
    zrows = np.flatnonzero(np.asarray(summary["scope"]) == "zone")
    if zrows.size:
        rep.section("Per zone", "Time spent in each reach zone, and in each class within it.")
        zkeep = ["run", "unit", "chainage_from_m", "chainage_to_m", "t_total_p10_h", "t_total_p50_h",
                 "t_total_p90_h", "t_estimate_h"] + [f"t_{field_key(n)}_p50_h" for n in scheme.names]
        rep.table({k: _pick(summary[k], zrows) for k in zkeep if k in summary}, caption="Per zone, per run",
                  labels={"unit": "zone"}, csv_name="zone_residence")
    if estimate:
        rep.section("1D estimate along the centreline",
                    "Per segment: wet width, the centreline band, its mean speed and the segment's travel time. "
                    "For runs with velocity vectors it is a cross-check of the particle tracking.")
        rep.table(estimate, caption="1D estimate per segment", csv_name="estimate", max_rows=400,
                  units=_day_units(estimate))
    if path_geoms_by_run and axis is not None:
        rep.section("Particle paths")
        stranded = {}
        for meta, run in runs:
            if run.result is not None:
                st = run.result.fate == drift.FATE_STRANDED
                stranded[meta["run"]] = (run.result.end_x[st], run.result.end_y[st])
        for label, geoms in list(path_geoms_by_run.items())[:4]:
            rep.figure(paths_map(geoms, axis, stranded=stranded.get(label)),
                       caption=f"{label}: particle paths coloured by days since release; x: stranded at a bank",
                       fmt="png")
    rep.notes(notes)
    return rep


def _day_units(names) -> dict:
    """Report units for columns in days (``_d``), which the shared unit table does not know."""
    return {k: "d" for k in names if k.endswith("_d")}


def _pick(values, idx):
    if isinstance(values, np.ndarray):
        return values[idx]
    return [values[i] for i in idx]


def _esc(text: str) -> str:
    import html

    return html.escape(str(text))
