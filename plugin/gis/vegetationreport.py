"""The vegetationoverlay HTML report: communities by run, charts of wetted share and edge classes."""

from __future__ import annotations

import numpy as np

from ..core.stats import field_key
from . import charts
from .report import Report


def _runs(summary):
    """Run keys in table order: [(regime, q_mld, run label)]."""
    seen = []
    for r, q, lab in zip(summary["regime"], summary["q_mld"], summary["run"]):
        if (r, q, lab) not in seen:
            seen.append((r, q, lab))
    return seen


def wetted_chart(summary):
    """Wetted share of each community: grouped bars (one bar per run) when there are few runs, else
    one line per regime against discharge in small multiples."""
    comms = list(dict.fromkeys(summary["community"]))
    runs = _runs(summary)
    pct = {(c, lab): p for c, lab, p in zip(summary["community"], summary["run"], summary["wet_pct"])}
    regimes = list(dict.fromkeys(r for r, _, _ in runs))
    greys = ["#2B3A4A", "#5E7384", "#93A4B1", "#C3CDD4", "#6B5B4B", "#A48E78", "#D4C4B0", "#3F5F4F"]
    if len(runs) <= 8:
        fig, ax = charts.new_figure(9.0, 3.4)
        x = np.arange(len(comms))
        w = 0.8 / max(len(runs), 1)
        for k, (_, _, lab) in enumerate(runs):
            ax.bar(x - 0.4 + w * (k + 0.5), [pct.get((c, lab), np.nan) for c in comms], width=w * 0.92,
                   color=greys[k % len(greys)], label=lab)
        ax.set_xticks(x)
        ax.set_xticklabels([c or "(no community)" for c in comms])
        charts.style_axes(ax, None, "wetted share of the stands (%)")
        ax.legend(frameon=False, fontsize=8, ncol=1, loc="upper left", bbox_to_anchor=(1.01, 1.0))
        return fig
    n = min(len(comms), 6)
    fig, axes = charts.new_figure(9.0, 2.4 * ((n + 2) // 3), nrows=(n + 2) // 3, ncols=min(n, 3), squeeze=False)
    for ax, c in zip(axes.ravel(), comms[:n]):
        for k, reg in enumerate(regimes):
            qs = [q for r, q, _ in runs if r == reg]
            ys = [pct.get((c, lab), np.nan) for r, _, lab in runs if r == reg]
            order = np.argsort(qs)
            ax.plot(np.asarray(qs)[order], np.asarray(ys)[order], marker="o", ms=3, lw=1.4,
                    color=greys[k % len(greys)], label=reg)
        ax.set_xscale("log")
        charts.style_axes(ax, "discharge (ML/d)", "wetted (%)", c or "(no community)")
    for ax in axes.ravel()[n:]:
        ax.set_visible(False)
    axes.ravel()[0].legend(frameon=False, fontsize=7)
    return fig


def edge_chart(summary, scheme):
    """100 % stacked bars of the channel-facing edge by class, one bar per community and run."""
    units, rows = [], []
    for i in range(len(summary["community"])):
        e = summary["edge_m"][i]
        if not e > 0:
            continue
        units.append(f"{summary['community'][i] or '(none)'} · {summary['run'][i]}")
        rows.append([summary.get(f"edge_{field_key(n)}_m", np.zeros(len(summary['community'])))[i] / e
                     for n in scheme.names])
    if not units:
        return None
    fig = charts.class_share_bars(units, np.asarray(rows), scheme)
    fig.axes[0].set_xlabel("share of the channel-facing edge (%)")
    return fig


def headlines(table, scheme) -> list:
    """One sentence per run: wetted share of all the vegetation, stands wetted, and how many stands
    have each class as the main water beside them."""
    runs = list(dict.fromkeys(table["run"]))
    run_col = np.asarray(table["run"], dtype=object)
    area = np.asarray(table["area_m2"], dtype=float)
    wet = np.asarray(table["wet_area_m2"], dtype=float)
    main = np.asarray(table["edge_main_class"], dtype=object)
    out = []
    for r in runs:
        m = run_col == r
        n = int(m.sum())
        share = 100.0 * wet[m].sum() / area[m].sum() if area[m].sum() > 0 else float("nan")
        counts = [f"{name} {int(np.count_nonzero(main[m] == name))}" for name in scheme.names
                  if np.count_nonzero(main[m] == name)]
        none = int(np.count_nonzero(main[m] == ""))
        beside = ", ".join(counts + ([f"no water within the edge distance {none}"] if none else []))
        out.append(f"{r}: {share:.1f} % of the vegetation area wetted ({int(np.count_nonzero(wet[m] > 0))} of "
                   f"{n} stands); main water beside the stands: {beside}.")
    return out


def build_report(table, summary, scheme, distance_m, notes) -> Report:
    runs = _runs(summary)
    n_stands = len(set(np.asarray(table["stand_id"]).tolist()))
    rep = Report("Vegetation overlay", algorithm="vegetationoverlay",
                 subtitle=f"{n_stands} stands, {len(runs)} run(s)")
    rep.summary([("Stands", n_stands), ("Communities", len(set(summary["community"]))), ("Runs", len(runs)),
                 ("Edge distance", distance_m, "m"), ("Class scheme", scheme.name)], heading="Overlay")
    rep.section("In short")
    rep.bullets(headlines(table, scheme))
    rep.section("Wetted share of each community",
                "Wetted area of the stands (stand ∩ wet cells or faces, exact) as a share of their area.")
    rep.figure(wetted_chart(summary), caption="Wetted share of the stand area per community and run")
    fig = edge_chart(summary, scheme)
    if fig is not None:
        rep.section("Water beside the stands",
                    f"Channel-facing edge: the part of each stand's boundary within {distance_m:g} m of wet water, "
                    "split by the class of the nearest wet water.")
        rep.figure(fig, caption="Channel-facing edge by class of the water beside it", fmt="png")
    rep.section("Per community and run")
    rep.table(summary, caption="Community summary")
    rep.section("Per stand and run")
    keep = ["stand_id", "community", "run", "area_m2", "wet_area_m2", "wet_pct", "depth_mean_m", "depth_max_m",
            "edge_m", "edge_main_class"]
    rep.table({k: table[k] for k in keep if k in table}, caption="Stands", max_rows=300)
    rep.notes(notes)
    return rep
