"""The habitatseries HTML report: hydrographs, class shares through time, options side by side.

Built with the shared :class:`gis.report.Report` and the house chart style of ``gis.charts``.
Takes a ``core.series.SeriesResult``; computes nothing new (every number shown is one of the
DAILY / SPELLS / OPTIONS values).
"""

from __future__ import annotations

import numpy as np

from ..core.classes import FALLBACK_COLOURS, velocity_preset
from ..core.series import iso
from . import charts
from .report import Report

# Okabe & Ito (2008) colour-blind safe qualitative palette for options; the base series is ink.
OPTION_COLOURS = ("#E69F00", "#0072B2", "#009E73", "#CC79A7", "#D55E00", "#56B4E9", "#F0E442")
BASE_COLOUR = charts.INK
MET_COLOUR = "#3C8D7F"
UNKNOWN_COLOUR = "#c9ced4"


def class_colours(classes) -> dict:
    """Class name -> colour: the velocity preset's colours for its class names, else the fallback cycle."""
    preset = {c.name: c.colour for c in velocity_preset().classes}
    out = {}
    for i, c in enumerate(classes):
        out[c] = preset.get(c, FALLBACK_COLOURS[i % len(FALLBACK_COLOURS)])
    return out


def option_colours(options) -> dict:
    out = {}
    k = 0
    for o in options:
        if o.pattern == "base":
            out[o.name] = BASE_COLOUR
        else:
            out[o.name] = OPTION_COLOURS[k % len(OPTION_COLOURS)]
            k += 1
    return out


def _dates(res):
    return res.series.dates.astype("datetime64[D]").astype(object)


def _date_axis(ax):
    import matplotlib.dates as mdates

    loc = mdates.AutoDateLocator(minticks=4, maxticks=10)
    ax.xaxis.set_major_locator(loc)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(loc))


def _runs(mask):
    """(start, stop) index pairs of runs of True (stop exclusive)."""
    m = np.concatenate([[0], np.asarray(mask, dtype=np.int8), [0]])
    d = np.diff(m)
    return list(zip(np.nonzero(d == 1)[0], np.nonzero(d == -1)[0]))


def hydrograph(res):
    """Discharge of the base series and every option (log axis) with the ladder's range shaded,
    and the added flow of each option below."""
    fig, (ax, ax2) = charts.new_figure(9.5, 5.4, nrows=2, sharex=True, gridspec_kw={"height_ratios": [3, 1.3]})
    t = _dates(res)
    cols = option_colours(res.options)
    lo, hi = float(res.ladder_mld.min()), float(res.ladder_mld.max())
    ax.axhspan(lo, hi, color="#dfe7ef", alpha=0.7, linewidth=0, zorder=0,
               label=f"discharge ladder ({lo:,.0f}–{hi:,.0f} ML/d)")
    for q in res.ladder_mld:
        ax.axhline(q, color="#b8c4d0", linewidth=0.5, zorder=0.5)
    for o in res.options[::-1]:
        lw = 1.6 if o.pattern == "base" else 1.1
        ax.plot(t, o.q_mld, color=cols[o.name], linewidth=lw, label=o.name, zorder=3 if o.pattern == "base" else 2)
    ax.set_yscale("log")
    from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

    ax.yaxis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 3.0, 5.0)))
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:,.0f}"))
    ax.yaxis.set_minor_formatter(NullFormatter())
    charts.style_axes(ax, None, "discharge (ML/d, log scale)", "Hydrographs")
    h, lab = ax.get_legend_handles_labels()
    ax.legend(h[::-1], lab[::-1], loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False, fontsize=8)
    for o in res.options[1:]:
        ax2.plot(t, o.added_mld, color=cols[o.name], linewidth=1.1, label=o.name, drawstyle="steps-mid")
    ax2.axhline(0, color=charts.MUTED, linewidth=0.6)
    charts.style_axes(ax2, None, "added (ML/d)", None)
    _date_axis(ax2)
    return fig


def class_shares(res, unit):
    """Class shares through time in one unit: one stacked panel per option; days outside the
    ladder hatched grey (no shares shown)."""
    n = len(res.options)
    ncols = min(n, 3)
    nrows = int(np.ceil(n / ncols))
    fig, axes = charts.new_figure(9.5, 1.0 + 2.0 * nrows, nrows=nrows, ncols=ncols, sharex=True, sharey=True,
                                  squeeze=False)
    t = _dates(res)
    colours = class_colours(res.classes)
    for k, o in enumerate(res.options):
        ax = axes[k // ncols][k % ncols]
        base = np.zeros(len(t))
        for c in res.classes:
            v = o.pct[(unit, c)]
            top = base + np.nan_to_num(v)
            ok = np.isfinite(v)
            ax.fill_between(t, base, top, where=ok, color=colours[c], linewidth=0, label=c, step="mid")
            base = top
        for a, b in _runs(~o.in_ladder):
            ax.axvspan(t[a], t[b - 1], color=UNKNOWN_COLOUR, alpha=0.8, linewidth=0, hatch="///", zorder=0)
        ax.set_ylim(0, 100)
        charts.style_axes(ax, None, "share (%)" if k % ncols == 0 else None, o.name)
        _date_axis(ax)
    for k in range(n, nrows * ncols):
        axes[k // ncols][k % ncols].set_visible(False)
    h, lab = axes[0][0].get_legend_handles_labels()
    axes[0][ncols - 1].legend(h[::-1], lab[::-1], loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False,
                              fontsize=8)
    fig.suptitle(f"Class shares through time — {unit}", x=0.01, ha="left", fontsize=10)
    return fig


def criteria_timeline(res):
    """One row per criterion and option: days meeting it (targets) or bloom-risk spells (bloom),
    with days outside the ladder grey."""
    rows = []
    for crit in res.criteria:
        for o in res.options:
            rows.append((crit, o))
    fig, ax = charts.new_figure(9.5, 1.2 + 0.22 * len(rows))
    t = res.series.dates.astype("datetime64[D]")
    x0 = t.astype("datetime64[D]").astype(object)
    import matplotlib.dates as mdates

    num = mdates.date2num(x0)
    colours = class_colours(res.classes)
    labels = []
    for i, (crit, o) in enumerate(rows):
        y = len(rows) - 1 - i
        if crit.kind == "target":
            spans = [(a, b + 1) for a, b in zip(o.spells[crit.key].start, o.spells[crit.key].end)]
            colour = MET_COLOUR
        else:
            q = o.qualifying(crit)
            spans = [(a, b + 1) for a, b in zip(q.start, q.end)]
            colour = colours.get(crit.classes[0], "#8E4A1C")
        unknown = _runs(~o.known[crit.key])
        ax.broken_barh([(num[a] - 0.5, b - a) for a, b in unknown], (y - 0.35, 0.7), facecolors=UNKNOWN_COLOUR)
        ax.broken_barh([(num[a] - 0.5, b - a) for a, b in spans], (y - 0.35, 0.7), facecolors=colour)
        labels.append(f"{crit.key} · {o.name}")
    ax.set_yticks(range(len(rows)))
    ax.set_yticklabels(labels[::-1], fontsize=7.5)
    ax.set_ylim(-0.7, len(rows) - 0.3)
    ax.set_xlim(num[0] - 0.5, num[-1] + 0.5)
    ax.grid(False, axis="y")
    charts.style_axes(ax, None, None, "Days meeting each target (green) and bloom-risk spells (brown); grey: "
                      "outside the discharge ladder")
    ax.grid(False, axis="y")
    _date_axis(ax)
    return fig


def side_by_side(res) -> dict:
    """The OPTIONS table transposed: one row per measure, one column per option."""
    table = res.table
    skip = {"option"}
    measures = [k for k in table if k not in skip]
    cols = {"measure": measures}
    for i, name in enumerate(table["option"]):
        vals = []
        for k in measures:
            v = table[k][i]
            vals.append(v.item() if isinstance(v, np.generic) else v)
        cols[name] = vals
    return cols


def build_report(res, inputs: list, title_suffix: str = "") -> Report:
    """The whole report for a SeriesResult; ``inputs`` are (label, value[, unit]) summary rows."""
    s = res.series
    rep = Report("Habitat through time", algorithm="habitatseries",
                 subtitle=f"regime {res.regime}, {iso(s.start)} to {iso(s.end)}{title_suffix}")
    rep.summary(inputs, heading="Inputs")
    rep.section("Targets and bloom-risk conditions",
                "Each criterion is evaluated on every day from the flow–habitat curves (monotone "
                "interpolation on log discharge between the runs, never extrapolated).")
    rep.table({"criterion": [c.key for c in res.criteria], "kind": [c.kind for c in res.criteria],
               "condition": [c.text for c in res.criteria]}, caption="Criteria")
    rep.section("Options side by side",
                "Volume used, days each target is met, the longest spell, and bloom-risk spells per "
                "option; the base row is the flow series without any delivery. Field names are those of "
                "the OPTIONS layer.")
    rep.table(side_by_side(res), caption="Options side by side", csv_name="options_side_by_side.csv",
              units={"measure": ""})
    rep.section("Hydrographs")
    rep.figure(hydrograph(res), caption="Discharge of the base series and each option; the shaded band is the "
               "range of the discharge ladder (thin lines: the runs). Lower panel: the added flow.")
    rep.figure(criteria_timeline(res), caption="Spells through time, per criterion and option.")
    rep.section("Class shares through time",
                "Share of each class in the unit's wet area on each day, interpolated between the runs. "
                "Hatched grey: days outside the discharge ladder (not evaluated). Each class is interpolated on its "
                "own, so between runs the shares may add up to slightly more or less than 100 %.")
    for u in res.units:
        rep.figure(class_shares(res, u), caption=f"Class shares through time, {u}", fmt="png")
    rep.section("Spells", "Every spell meeting a target, and every bloom-risk spell (censored spells shorter "
                "than the minimum are listed with qualifies = no). A spell touching the start or end of the "
                "record, or a day outside the ladder, is censored: it may be longer than shown.")
    rep.table(res.spells, caption="Spells", csv_name="spells.csv", max_rows=300)
    rep.notes(res.notes)
    return rep
