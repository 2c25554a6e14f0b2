"""Charts for reports: matplotlib with the Agg backend (headless, no Qt), one house style.

The house style: a light figure with no top/right spines, a faint horizontal grid, 9 pt text, class
colours from the scheme (never a default colour cycle for classes), chainage in km increasing to the
right = upstream to downstream, and every chart says its units on the axes.

General helpers (for every algorithm's report):
    new_figure(width_in, height_in) -> (fig, ax)     a figure in the house style
    style_axes(ax, xlabel, ylabel, title)            axis labels, grid, spines
    mark_zones(ax, edges_m, names)                   zone boundaries and names along a km axis
    chainage_label(origin)                           'chainage (km from the upstream end) -> downstream'
    text_colour_for(hex)                             black or white text for a filled background
    to_svg(fig) / to_png(fig)                        render and close the figure
Habitat charts:
    speed_profile(profile, scheme, zones=...)        percentile bands of speed along chainage, class
                                                     thresholds marked
    class_share_bars(units, fractions, scheme)       100 % stacked bars of class shares per zone/unit
    class_share_profile(edges_m, fractions, scheme)  class shares per segment along the reach
"""

from __future__ import annotations

import io
import math
import uuid

import matplotlib

matplotlib.use("Agg", force=False)

import numpy as np  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from .chartstyle import (  # noqa: E402,F401 - the house style, shared with svgcharts
    BAND_INNER,
    BAND_OUTER,
    GRID,
    INK,
    MUTED,
    _speed_intervals,
    chainage_label,
    speed_thresholds,
    text_colour_for,
)

RC = {
    "font.size": 9, "axes.titlesize": 10, "axes.labelsize": 9, "xtick.labelsize": 8, "ytick.labelsize": 8,
    "legend.fontsize": 8, "axes.edgecolor": MUTED, "axes.labelcolor": INK, "xtick.color": MUTED,
    "ytick.color": MUTED, "text.color": INK, "svg.fonttype": "none",
}


def new_figure(width_in: float = 9.0, height_in: float = 3.6, nrows: int = 1, ncols: int = 1,
               margins=None, **kw):
    """(Figure, Axes or array of Axes) in the house style. Uses the Agg-backed Figure class directly,
    so nothing is registered with pyplot and figures are freed when dropped.

    ``margins`` = (left, right, bottom, top) in inches fixes the axes box (fast to draw); without it
    matplotlib's constrained layout places everything (convenient, about twice as slow to render)."""
    with matplotlib.rc_context(RC):
        if margins is None:
            fig = Figure(figsize=(width_in, height_in), dpi=100, layout="constrained")
        else:
            fig = Figure(figsize=(width_in, height_in), dpi=100)
            left, right, bottom, top = margins
            fig.subplots_adjust(left=left / width_in, right=1.0 - right / width_in, bottom=bottom / height_in,
                                top=1.0 - top / height_in, wspace=0.3, hspace=0.35)
        axes = fig.subplots(nrows, ncols, **kw)
    for ax in np.atleast_1d(axes).ravel():
        style_axes(ax)
    return fig, axes


def style_axes(ax, xlabel: str | None = None, ylabel: str | None = None, title: str | None = None):
    """House style on one Axes (and optional labels)."""
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(MUTED)
    ax.tick_params(colors=MUTED, labelsize=8)
    ax.grid(True, axis="y", color=GRID, linewidth=0.8)
    ax.set_axisbelow(True)
    if xlabel is not None:
        ax.set_xlabel(xlabel, color=INK, fontsize=9)
    if ylabel is not None:
        ax.set_ylabel(ylabel, color=INK, fontsize=9)
    if title is not None:
        ax.set_title(title, loc="left", fontsize=10, color=INK)
    return ax


def mark_zones(ax, edges_m, names, km: bool = True):
    """Dotted vertical lines at inner zone boundaries and zone names at the top of ``ax``."""
    if edges_m is None or len(edges_m) < 2:
        return
    f = 1000.0 if km else 1.0
    edges = np.asarray(edges_m, dtype=float) / f
    for e in edges[1:-1]:
        ax.axvline(e, color=MUTED, linewidth=0.9, linestyle=(0, (2, 2)), zorder=1)
    trans = ax.get_xaxis_transform()
    for a, b, name in zip(edges[:-1], edges[1:], names):
        ax.text((a + b) / 2.0, 1.0, str(name), transform=trans, ha="center", va="bottom", fontsize=8,
                color=MUTED, clip_on=False)


def to_svg(fig) -> str:
    """SVG text of ``fig`` (text kept as text; ids salted so several SVGs can share one page)."""
    buf = io.StringIO()
    with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": uuid.uuid4().hex}):
        fig.savefig(buf, format="svg", metadata={"Date": None})
    _close(fig)
    return buf.getvalue()


def to_png(fig, dpi: int = 150) -> bytes:
    """PNG bytes of ``fig``."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    _close(fig)
    return buf.getvalue()


def save(fig, path: str, dpi: int = 150) -> str:
    """Write ``fig`` to ``path`` (format from the extension) and close it."""
    fig.savefig(path, dpi=dpi)
    _close(fig)
    return path


def _close(fig):
    """Nothing to do: figures made with :func:`new_figure` are not registered with pyplot and are freed
    with their last reference (clearing a figure costs as much as drawing a small one)."""


# ----------------------------------------------------------------------------------------------
# Habitat charts
# ----------------------------------------------------------------------------------------------

def speed_profile(profile, scheme, zone_edges=None, zone_names=None, title: str = "",
                  width_in: float = 9.5, height_in: float = 3.8, origin: str = "upstream"):
    """Percentile bands of speed along the reach.

    ``profile``: dict with ``chainage_from_m``, ``chainage_to_m`` and ``v_p10_ms``, ``v_p25_ms``,
    ``v_p50_ms``, ``v_p75_ms``, ``v_p90_ms`` (and optionally ``v_max_ms``) per chainage bin (NaN where
    dry), as ``core.habitat.chainage_profile`` returns. For a speed-interval scheme the class bands are
    tinted behind the data in the class colours; every speed threshold is a labelled dashed line.
    """
    fig, ax = new_figure(width_in, height_in, margins=(0.75, 1.45, 0.8, 0.5 if title else 0.3))
    a = np.asarray(profile["chainage_from_m"], dtype=float) / 1000.0
    b = np.asarray(profile["chainage_to_m"], dtype=float) / 1000.0
    # Step-style bands: each bin drawn flat across its width.
    x = np.column_stack([a, b]).ravel()

    def st(key):
        v = np.asarray(profile[key], dtype=float)
        return np.repeat(v, 2)

    p10, p25, p50, p75, p90 = (st(k) for k in ("v_p10_ms", "v_p25_ms", "v_p50_ms", "v_p75_ms", "v_p90_ms"))
    finite_top = p90[np.isfinite(p90)]
    ymax = float(finite_top.max()) if finite_top.size else 1.0
    thresholds = speed_thresholds(scheme)
    if thresholds:
        ymax = max(ymax, max(thresholds) * 1.15)
    ymax = ymax * 1.08 if ymax > 0 else 1.0
    intervals = _speed_intervals(scheme)
    if intervals:
        for lo, hi, colour, _ in intervals:
            lo_ = max(lo, 0.0) if math.isfinite(lo) else 0.0
            hi_ = min(hi, ymax) if math.isfinite(hi) else ymax
            if hi_ > lo_:
                ax.axhspan(lo_, hi_, color=colour, alpha=0.16, linewidth=0, zorder=0)
    ax.fill_between(x, p10, p90, color=BAND_OUTER, alpha=0.55, linewidth=0, label="10th–90th percentile",
                    zorder=2)
    ax.fill_between(x, p25, p75, color=BAND_INNER, alpha=0.75, linewidth=0, label="25th–75th percentile",
                    zorder=3)
    ax.plot(x, p50, color=INK, linewidth=1.3, label="median", zorder=4)
    names = {}
    if intervals:
        names = {lo: name for lo, _, _, name in intervals}
    for t in thresholds:
        ax.axhline(t, color=INK, linewidth=0.8, linestyle=(0, (5, 3)), alpha=0.8, zorder=5)
        label = f"{names[t]} ≥ {t:g} m/s" if t in names else f"{t:g} m/s"
        ax.annotate(label, xy=(1.0, t), xycoords=("axes fraction", "data"), xytext=(3, 0),
                    textcoords="offset points", va="center", ha="left", fontsize=7.5, color=INK,
                    annotation_clip=False)
    ax.set_ylim(0, ymax)
    finite = np.isfinite(a) & np.isfinite(b)
    if finite.any():
        ax.set_xlim(float(a[finite].min()), float(b[finite].max()))
    mark_zones(ax, zone_edges, zone_names or [])
    style_axes(ax, chainage_label(origin), "depth-averaged speed (m/s)", None)
    if title:
        fig.suptitle(title, x=0.01, y=0.99, ha="left", va="top", fontsize=10)
    ax.legend(loc="lower left", frameon=False, ncol=3, bbox_to_anchor=(0.6 / width_in, 0.0),
              bbox_transform=fig.transFigure, fontsize=8)
    return fig


def class_share_bars(units, fractions, scheme, title: str = "", width_in: float = 9.0):
    """Horizontal 100 % stacked bars: one bar per unit (zone names, 'whole reach', ...), one colour per
    class. ``fractions``: (n_units, n_classes), rows summing to 1 (NaN rows drawn empty)."""
    fr = np.asarray(fractions, dtype=float)
    n = len(units)
    longest = max((len(str(u)) for u in units), default=4)
    top = 0.4 + (0.25 if title else 0.0)
    fig, ax = new_figure(width_in, 0.6 + top + 0.42 * max(n, 1), margins=(0.25 + 0.075 * longest, 0.3, 0.55, top))
    y = np.arange(n)[::-1]
    left = np.zeros(n)
    for j, cls in enumerate(scheme.classes):
        w = np.nan_to_num(fr[:, j]) * 100.0
        ax.barh(y, w, left=left, color=cls.colour, edgecolor="white", linewidth=0.6, height=0.68,
                label=cls.name)
        tc = text_colour_for(cls.colour)
        for yi, li, wi in zip(y, left, w):
            if wi >= 7.0:
                ax.text(li + wi / 2.0, yi, f"{wi:.0f}%", ha="center", va="center", fontsize=7.5, color=tc)
        left += w
    ax.set_yticks(y)
    ax.set_yticklabels([str(u) for u in units])
    ax.set_xlim(0, 100)
    ax.grid(True, axis="x", color=GRID, linewidth=0.8)
    ax.grid(False, axis="y")
    ax.spines["left"].set_visible(False)
    ax.tick_params(axis="y", length=0)
    style_axes(ax, "share of the wet area (%)", None, None)
    ax.grid(False, axis="y")
    ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=min(len(scheme.classes), 6), frameon=False,
              fontsize=8)
    if title:
        fig.suptitle(title, x=0.01, y=0.99, ha="left", va="top", fontsize=10)
    return fig


def class_share_profile(edges_m, fractions, scheme, zone_edges=None, zone_names=None, title: str = "",
                        width_in: float = 9.5, height_in: float = 3.2, origin: str = "upstream"):
    """Class shares per segment along the reach: stacked steps, one colour per class, 0-100 %."""
    edges = np.asarray(edges_m, dtype=float) / 1000.0
    fr = np.nan_to_num(np.asarray(fractions, dtype=float)) * 100.0
    fig, ax = new_figure(width_in, height_in, margins=(0.75, 0.3, 0.8, 0.5 if title else 0.3))
    x = np.column_stack([edges[:-1], edges[1:]]).ravel()
    base = np.zeros(len(x))
    for j, cls in enumerate(scheme.classes):
        top = base + np.repeat(fr[:, j], 2)
        ax.fill_between(x, base, top, color=cls.colour, linewidth=0, label=cls.name)
        base = top
    ax.set_ylim(0, 100)
    ax.set_xlim(edges[0], edges[-1])
    mark_zones(ax, zone_edges, zone_names or [])
    style_axes(ax, chainage_label(origin), "share of wet area (%)", None)
    ax.legend(loc="lower left", bbox_to_anchor=(0.6 / width_in, 0.0), bbox_transform=fig.transFigure,
              ncol=min(len(scheme.classes), 6), frameon=False, fontsize=8)
    if title:
        fig.suptitle(title, x=0.01, y=0.99, ha="left", va="top", fontsize=10)
    return fig
