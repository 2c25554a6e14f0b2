"""Charts of weighted usable area against discharge and of suitability curves (matplotlib, Agg).

House style from gis/charts.py. Discharge axes are logarithmic (the ladders are roughly geometric),
labelled in ML/d with m3/s on the top axis where there is room. Regimes are told apart by colour
*and* line style *and* marker (Okabe & Ito 2008 "Color Universal Design" palette, so the colours stay
distinct for the common forms of colour-vision deficiency, and the styles for any print).

    regime_style(i)                                  colour, line style, marker of the i-th regime
    log_q_axis(ax, qmin, qmax, top=True)             log discharge axis with round ML/d ticks
    dense_q(q_runs)                                  a dense log-spaced discharge grid between runs
    value_panels(panels, regimes, ylabel)            any value against discharge (WUA)
    suitability_curves(curve_set)                    piecewise-linear suitability curves

The flowhabitat report's charts are written directly as SVG (gis/flowsvg.py); the pure helpers (regime
styles, discharge ticks) live in gis/chartstyle.py and serve both.
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
from .chartstyle import (  # noqa: F401 - re-exported for the reports that use them
    Q_LABEL,
    REGIME_COLOURS,
    REGIME_DASHES,
    REGIME_MARKERS,
    dense_q,
    fmt_q,
    nice_q_ticks,
    regime_style,
)

_nice_ticks = nice_q_ticks
_fmt_q = fmt_q


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


def _grid(n_panels: int, max_cols: int = 4):
    ncols = min(max_cols, max(n_panels, 1))
    nrows = int(math.ceil(n_panels / ncols))
    return nrows, ncols


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
