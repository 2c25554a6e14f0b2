"""Charts of flow-habitat curves and of weighted usable area against discharge (matplotlib, Agg).

House style from gis/charts.py. Discharge axes are logarithmic (the ladders are roughly geometric),
labelled in ML/d with m3/s on the top axis where there is room. Regimes are told apart by colour
*and* line style *and* marker (Okabe & Ito 2008 "Color Universal Design" palette, so the colours stay
distinct for the common forms of colour-vision deficiency, and the styles for any print).

    regime_style(i)                                  colour, line style, marker of the i-th regime
    log_q_axis(ax, qmin, qmax, top=True)             log discharge axis with round ML/d ticks
    dense_q(q_runs)                                  a dense log-spaced discharge grid between runs
    class_share_panels(curves, unit, regimes, ...)   one panel per class, regimes overlaid
    target_panels(curves, results, targets, ...)     one panel per target: curve, threshold, answer
    composition_grid(curves, units, regimes, ...)    rows = units, columns = regimes, stacked shares
    wet_area_panels(curves, units, regimes)          wet area (ha) against discharge per unit
    segment_share_maps(curves, classes, regimes)     share of a class set per segment x run
    value_panels(panels, regimes, ylabel)            any value against discharge (WUA)
    suitability_curves(curve_set)                    piecewise-linear suitability curves
"""

from __future__ import annotations

import math

import matplotlib
import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator

from ..core.curves import pchip_log_q
from ..core.units import M3S_PER_MLD
from .charts import GRID, INK, MUTED, RC, style_axes

# Okabe & Ito (2008): blue, vermillion, bluish green, reddish purple, orange, sky blue, black, yellow.
REGIME_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#B8A200")
REGIME_DASHES = ("-", (0, (5, 2)), (0, (1.2, 1.6)), (0, (6, 2, 1.2, 2)), (0, (3, 1.5)), (0, (8, 2, 1.2, 2, 1.2, 2)))
REGIME_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "h")
Q_LABEL = "discharge (ML/d, log scale)"


def regime_style(i: int) -> dict:
    return {"color": REGIME_COLOURS[i % len(REGIME_COLOURS)], "linestyle": REGIME_DASHES[i % len(REGIME_DASHES)],
            "marker": REGIME_MARKERS[i % len(REGIME_MARKERS)]}


def _nice_ticks(qmin: float, qmax: float, sparse: bool = False) -> list:
    ticks = []
    mantissas = (1, 3) if sparse else (1, 2, 3, 5)
    lo = math.floor(math.log10(qmin)) - 1
    hi = math.ceil(math.log10(qmax)) + 1
    for k in range(lo, hi + 1):
        for m in mantissas:
            v = m * 10.0 ** k
            if qmin * 0.999 <= v <= qmax * 1.001:
                ticks.append(v)
    if len(ticks) < 3:
        ticks = sorted(set(ticks) | {qmin, qmax})
    return ticks


def _fmt_q(v, _pos=None) -> str:
    if v >= 100:
        return f"{v:,.0f}"
    return f"{v:.3g}"


def log_q_axis(ax, qmin: float, qmax: float, top: bool = False, label: bool = True, sparse: bool = False):
    """Log discharge axis over [qmin, qmax] (ML/d) with round ticks; optional m3/s axis on top."""
    if not (qmin > 0 and qmax > 0):
        return
    if qmax <= qmin:
        qmin, qmax = qmin / 1.2, qmax * 1.2
    pad = (qmax / qmin) ** 0.03
    ax.set_xscale("log")
    ax.set_xlim(qmin / pad, qmax * pad)
    ax.xaxis.set_major_locator(FixedLocator(_nice_ticks(qmin, qmax, sparse)))
    ax.xaxis.set_major_formatter(FuncFormatter(_fmt_q))
    ax.xaxis.set_minor_locator(NullLocator())
    ax.grid(True, axis="x", color=GRID, linewidth=0.6)
    if label:
        ax.set_xlabel(Q_LABEL, color=INK, fontsize=9)
    if top:
        sec = ax.secondary_xaxis("top", functions=(lambda q: q * M3S_PER_MLD, lambda s: s / M3S_PER_MLD))
        lo, hi = qmin * M3S_PER_MLD, qmax * M3S_PER_MLD
        sec.xaxis.set_major_locator(FixedLocator(_nice_ticks(lo, hi, sparse)))
        sec.xaxis.set_major_formatter(FuncFormatter(_fmt_q))
        sec.xaxis.set_minor_locator(NullLocator())
        sec.tick_params(colors=MUTED, labelsize=7)
        sec.set_xlabel("m³/s", color=MUTED, fontsize=8)
        for side in ("top",):
            sec.spines[side].set_color(MUTED)


def dense_q(q_runs, n: int = 80) -> np.ndarray:
    q = np.asarray(q_runs, dtype=float)
    if q.size < 2:
        return q.copy()
    return np.exp(np.linspace(np.log(q[0]), np.log(q[-1]), n))


def _grid(n_panels: int, max_cols: int = 4):
    ncols = min(max_cols, max(n_panels, 1))
    nrows = int(math.ceil(n_panels / ncols))
    return nrows, ncols


def _q_range(curves, regimes):
    qs = np.concatenate([curves.ladder(r) for r in regimes])
    return float(qs.min()), float(qs.max())


def _panels(nrows: int, ncols: int, width_in: float = 9.5, panel_h_in: float = 1.9, top_in: float = 0.6,
           bottom_in: float = 0.55, left_in: float = 0.75, right_in: float = 0.2, hgap_in: float = 0.8,
           wgap_in: float = 0.35, **kw):
    """(Figure, axes[nrows, ncols]) in the house style with margins fixed in inches (no layout engine:
    laying out many small panels by constraints costs more than drawing them)."""
    height = top_in + bottom_in + nrows * panel_h_in + (nrows - 1) * hgap_in
    panel_w = (width_in - left_in - right_in - (ncols - 1) * wgap_in) / ncols
    with matplotlib.rc_context(RC):
        fig = Figure(figsize=(width_in, height), dpi=100)
        axes = fig.subplots(nrows, ncols, squeeze=False, **kw)
    fig.subplots_adjust(left=left_in / width_in, right=1 - right_in / width_in, bottom=bottom_in / height,
                        top=1 - top_in / height, hspace=hgap_in / panel_h_in, wspace=wgap_in / panel_w)
    for ax in axes.ravel():
        style_axes(ax)
    return fig, axes


def _legend_top(fig, handles, labels, ncol=None):
    """A figure legend across the top margin."""
    if not handles:
        return
    fig.legend(handles, labels, loc="upper left", bbox_to_anchor=(0.01, 0.998), ncol=ncol or min(len(labels), 6),
               frameon=False, fontsize=8, handlelength=3.2, borderaxespad=0.2)


def _hide_extra(axes, used: int):
    for ax in axes.ravel()[used:]:
        ax.set_visible(False)


# ----------------------------------------------------------------------------------------------
# Flow-habitat curves
# ----------------------------------------------------------------------------------------------

def class_share_panels(curves, unit, regimes, title: str = "", max_cols: int = 4, width_in: float = 9.5):
    """One panel per class: % of the unit's wet area against discharge, one line per regime (the PCHIP
    interpolant on ln q that targets use), markers at the runs."""
    u = curves.unit_index(unit)
    names = curves.class_names
    nrows, ncols = _grid(len(names), max_cols)
    fig, axes = _panels(nrows, ncols, width_in, 1.9, top_in=0.6, sharey=True)
    qmin, qmax = _q_range(curves, regimes)
    handles, labels = [], []
    for k, name in enumerate(names):
        ax = axes.ravel()[k]
        for i, regime in enumerate(regimes):
            st = regime_style(i)
            rc = curves.regime(regime)
            q = rc.q_mld
            pct = rc.percent()[:, u, k]
            qd = dense_q(q)
            yd = curves.percent_grid(regime, qd)[:, u, k] if q.size > 1 else pct
            line, = ax.plot(qd, yd, color=st["color"], linestyle=st["linestyle"], linewidth=1.4)
            ax.plot(q, pct, linestyle="none", marker=st["marker"], markersize=3.6, color=st["color"],
                    markeredgecolor="white", markeredgewidth=0.4)
            if k == 0:
                handles.append(line)
                labels.append(regime)
        ax.set_ylim(0, 100)
        log_q_axis(ax, qmin, qmax, label=k >= len(names) - ncols, sparse=ncols >= 3)
        style_axes(ax, None, "% of wet area" if k % ncols == 0 else None, name)
    _hide_extra(axes, len(names))
    _legend_top(fig, handles, labels)
    if title:
        fig.suptitle(title, x=0.01, ha="left", fontsize=10)
    return fig


def _answer_label(regime: str, res) -> str:
    from ..core.curves import INTERPOLATED, MET_AT_LOWEST, MET_AT_RUN

    if res is None:
        return regime
    if res.status == INTERPOLATED or res.status == MET_AT_RUN:
        return f"{regime}: {res.q_mld:,.0f} ML/d"
    if res.status == MET_AT_LOWEST:
        return f"{regime}: met at the lowest run ({res.q_mld:,.0f})"
    return f"{regime}: not reached up to {res.q_highest_mld:,.0f}"


def target_panels(curves, results, targets, regimes, max_cols: int = 2, width_in: float = 9.5):
    """One panel per target: the class set's % of the unit against discharge per regime, the threshold
    (dashed) and the smallest discharge that meets it (dotted drop line and a filled marker)."""
    nrows, ncols = _grid(len(targets), max_cols)
    fig, axes = _panels(nrows, ncols, width_in, 2.3, top_in=0.75, hgap_in=1.3, wgap_in=0.75)
    qmin, qmax = _q_range(curves, regimes)
    by = {(r.regime, r.target): r for r in results}
    for k, tg in enumerate(targets):
        ax = axes.ravel()[k]
        handles, labels = [], []
        for i, regime in enumerate(regimes):
            st = regime_style(i)
            q, pct = curves.percent_ladder(regime, tg.unit, tg.classes)
            qd = dense_q(q)
            yd = curves.percent_at(regime, qd, tg.unit, tg.classes) if q.size > 1 else pct
            line, = ax.plot(qd, yd, color=st["color"], linestyle=st["linestyle"], linewidth=1.4)
            ax.plot(q, pct, linestyle="none", marker=st["marker"], markersize=3.6, color=st["color"],
                    markeredgecolor="white", markeredgewidth=0.4)
            res = by.get((regime, tg))
            if res is not None and math.isfinite(res.q_mld):
                yq = float(curves.percent_at(regime, np.array([res.q_mld]), tg.unit, tg.classes)[0])
                ax.plot([res.q_mld, res.q_mld], [0, yq], color=st["color"], linestyle=(0, (1, 1.5)), linewidth=1.0)
                ax.plot([res.q_mld], [yq], marker=st["marker"], markersize=7, color=st["color"],
                        markeredgecolor=INK, markeredgewidth=0.8, zorder=5)
            handles.append(line)
            labels.append(_answer_label(regime, res))
        ax.axhline(tg.threshold_pct, color=INK, linestyle=(0, (5, 3)), linewidth=0.9)
        ax.annotate(f"{tg.op} {tg.threshold_pct:g}%", xy=(1.0, tg.threshold_pct), xycoords=("axes fraction", "data"),
                    xytext=(2, 2), textcoords="offset points", fontsize=7.5, color=INK, ha="right", va="bottom")
        ax.set_ylim(0, 100)
        log_q_axis(ax, qmin, qmax, top=True)
        style_axes(ax, None, f"{'+'.join(tg.classes)} (% of {tg.unit})", None)
        ax.set_title(tg.text, loc="left", fontsize=9.5, color=INK, pad=22)
        ax.legend(handles, labels, loc="best", frameon=True, framealpha=0.85, edgecolor=GRID, fontsize=7.5)
    _hide_extra(axes, len(targets))
    return fig


def composition_grid(curves, units, regimes, scheme, width_in: float = 9.5):
    """Rows = units (reach, zones), columns = regimes: 100 % stacked class shares against discharge, in
    the class colours; straight between the runs (so the layers add up to 100 % everywhere)."""
    nrows, ncols = len(units), len(regimes)
    fig, axes = _panels(nrows, ncols, width_in, 1.35, top_in=0.65, hgap_in=0.2, left_in=1.0, wgap_in=0.2,
                       sharey=True)
    qmin, qmax = _q_range(curves, regimes)
    colours = scheme.colours if len(scheme.colours) == len(curves.class_names) else None
    for r, unit in enumerate(units):
        u = curves.unit_index(unit)
        for c, regime in enumerate(regimes):
            ax = axes[r, c]
            rc = curves.regime(regime)
            pct = np.nan_to_num(rc.percent()[:, u, :])
            ax.stackplot(rc.q_mld, pct.T, colors=colours, linewidth=0.0, labels=curves.class_names)
            ax.set_ylim(0, 100)
            log_q_axis(ax, qmin, qmax, label=r == nrows - 1, sparse=ncols >= 3)
            style_axes(ax, None, f"{curves.units[u].key}\n% of wet area" if c == 0 else None,
                       regime if r == 0 else None)
            ax.grid(False, axis="x")
            if r != nrows - 1:
                ax.tick_params(labelbottom=False)
    handles, labels = axes[0, 0].get_legend_handles_labels()
    _legend_top(fig, handles, labels, ncol=min(len(labels), 6))
    return fig


def wet_area_panels(curves, units, regimes, max_cols: int = 4, width_in: float = 9.5):
    """Wet area (ha) against discharge: one panel per unit, one line per regime."""
    nrows, ncols = _grid(len(units), max_cols)
    fig, axes = _panels(nrows, ncols, width_in, 1.8, top_in=0.6, wgap_in=0.55)
    qmin, qmax = _q_range(curves, regimes)
    handles, labels = [], []
    for k, unit in enumerate(units):
        ax = axes.ravel()[k]
        u = curves.unit_index(unit)
        for i, regime in enumerate(regimes):
            st = regime_style(i)
            rc = curves.regime(regime)
            line, = ax.plot(rc.q_mld, rc.wet[:, u] / 1e4, color=st["color"], linestyle=st["linestyle"],
                            marker=st["marker"], markersize=3.4, linewidth=1.3)
            if k == 0:
                handles.append(line)
                labels.append(regime)
        ax.set_ylim(bottom=0)
        log_q_axis(ax, qmin, qmax, label=k >= len(units) - ncols, sparse=ncols >= 3)
        style_axes(ax, None, "wet area (ha)" if k % ncols == 0 else None, curves.units[u].key)
    _hide_extra(axes, len(units))
    _legend_top(fig, handles, labels)
    return fig


def segment_share_maps(curves, classes, regimes, width_in: float = 9.5):
    """Per regime: the share of a class set (%) in every segment (rows, upstream at the top) at every
    run (columns), as a colour map (cividis: readable in colour-vision deficiency and in grey)."""
    seg = [i for i, u in enumerate(curves.units) if u.scope == "segment"]
    if not seg:
        return None
    idx = curves.class_indices(classes)
    ncols = len(regimes)
    fig, axes = _panels(1, ncols, width_in, max(1.5, 0.13 * len(seg)), top_in=0.3, bottom_in=0.95, right_in=1.05,
                       wgap_in=0.2, sharey=True)
    edges_km = np.array([curves.units[seg[0]].chainage_from_m] + [curves.units[i].chainage_to_m for i in seg]) / 1e3
    mesh = None
    for c, regime in enumerate(regimes):
        ax = axes[0, c]
        rc = curves.regime(regime)
        area = rc.areas[:, seg, :][:, :, idx].sum(axis=-1)
        wet = rc.wet[:, seg]
        with np.errstate(invalid="ignore", divide="ignore"):
            pct = np.where(wet > 0, 100.0 * area / wet, np.nan)
        x = np.arange(rc.q_mld.size + 1) - 0.5
        mesh = ax.pcolormesh(x, edges_km, pct.T, cmap="cividis", vmin=0, vmax=100, shading="flat")
        ax.set_facecolor("#e9ecef")
        ax.set_xticks(np.arange(rc.q_mld.size))
        ax.set_xticklabels([_fmt_q(q) for q in rc.q_mld], rotation=90, fontsize=7)
        ax.set_ylim(edges_km[-1], edges_km[0])
        style_axes(ax, "run (ML/d)", "chainage (km)  ↓ downstream" if c == 0 else None, regime)
        ax.grid(False)
    box = axes[0, -1].get_position()
    cax = fig.add_axes([box.x1 + 0.15 / width_in, box.y0, 0.14 / width_in, box.height])
    cb = fig.colorbar(mesh, cax=cax)
    cb.set_label(f"{'+'.join(curves.class_names[i] for i in idx)} (% of segment wet area)", fontsize=8)
    cb.ax.tick_params(labelsize=7)
    return fig


# ----------------------------------------------------------------------------------------------
# Weighted usable area
# ----------------------------------------------------------------------------------------------

def value_panels(panels, regimes, ylabel: str, max_cols: int = 4, width_in: float = 9.5, ylim=None):
    """Any value against discharge: ``panels`` is [(title, {regime: (q_mld array, value array)})]; one
    panel each, one line per regime (PCHIP on ln q between runs, as habitatseries interpolates)."""
    nrows, ncols = _grid(len(panels), max_cols)
    fig, axes = _panels(nrows, ncols, width_in, 1.9, top_in=0.6, wgap_in=0.55)
    qs = [q for _, d in panels for q, _ in d.values() if len(q)]
    qmin = min(float(np.min(q)) for q in qs)
    qmax = max(float(np.max(q)) for q in qs)
    handles, labels = {}, []
    for k, (title, data) in enumerate(panels):
        ax = axes.ravel()[k]
        for i, regime in enumerate(regimes):
            if regime not in data:
                continue
            q, y = (np.asarray(a, dtype=float) for a in data[regime])
            order = np.argsort(q)
            q, y = q[order], y[order]
            st = regime_style(i)
            qd = dense_q(q)
            yd = pchip_log_q(q, y, qd) if q.size > 1 else y
            line, = ax.plot(qd, yd, color=st["color"], linestyle=st["linestyle"], linewidth=1.4)
            ax.plot(q, y, linestyle="none", marker=st["marker"], markersize=3.6, color=st["color"],
                    markeredgecolor="white", markeredgewidth=0.4)
            if regime not in handles:
                handles[regime] = line
                labels.append(regime)
        if ylim is not None:
            ax.set_ylim(*ylim)
        else:
            ax.set_ylim(bottom=0)
        log_q_axis(ax, qmin, qmax, label=k >= len(panels) - ncols, sparse=ncols >= 3)
        style_axes(ax, None, ylabel if k % ncols == 0 else None, title)
    _hide_extra(axes, len(panels))
    _legend_top(fig, [handles[r] for r in labels], labels)
    return fig


def suitability_curves(curve_set, width_in: float = 9.5):
    """The set's suitability curves: piecewise linear through the points (markers), clamped beyond the
    first and last point (the flat continuation drawn dashed)."""
    variables = curve_set.variables
    fig, axes = _panels(1, max(len(variables), 1), width_in, 2.2, top_in=0.3, bottom_in=0.5, wgap_in=0.5)
    units = {"depth": "depth (m)", "velocity": "depth-averaged speed (m/s)"}
    for k, var in enumerate(variables):
        ax = axes[0, k]
        c = curve_set.curves[var]
        x, s = c.values, c.suitability
        span = float(x[-1] - x[0]) if x.size > 1 else max(float(x[0]), 1.0)
        lo = max(0.0, float(x[0]) - 0.1 * span)
        hi = float(x[-1]) + 0.15 * span
        ax.plot(x, s, color="#0072B2", linewidth=1.6, marker="o", markersize=3.5)
        ax.plot([lo, x[0]], [s[0], s[0]], color="#0072B2", linewidth=1.2, linestyle=(0, (4, 2)))
        ax.plot([x[-1], hi], [s[-1], s[-1]], color="#0072B2", linewidth=1.2, linestyle=(0, (4, 2)))
        ax.set_xlim(lo, hi)
        ax.set_ylim(-0.02, 1.05)
        style_axes(ax, units[var], "suitability (0–1)" if k == 0 else None, var)
    return fig
