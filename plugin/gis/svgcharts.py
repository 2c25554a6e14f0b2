"""Report charts written directly as SVG text: no plotting library, a few milliseconds per chart.

The same house style as ``gis/charts.py`` (``gis/chartstyle.py``: its colours, class colours from the
scheme, chainage in km increasing to the right, units on every axis, no top/right spines, a faint grid),
drawn with a small SVG writer of our own. The charts of one habitat run:

    speed_profile(profile, scheme, zone_edges, zone_names)   percentile bands of depth-averaged speed
                                                             along chainage, class thresholds marked
    class_share_bars(units, fractions, scheme)               100 % stacked bars of class shares per unit
    class_share_profile(edges_m, fractions, scheme, ...)     class shares per segment along the reach

Each returns SVG text for ``Report.figure``. Sizes are in points (72 per inch); text is real text
(searchable, scales with the page) in the report's sans-serif font. Layout uses a conservative estimate
of text widths (0.6 em per character), so labels never collide in the usual fonts.

``Canvas`` and ``nice_ticks`` are the building blocks for further charts.
"""

from __future__ import annotations

import html
import math
import uuid

import numpy as np

from .chartstyle import (
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

FONT = "'Segoe UI', Roboto, 'Helvetica Neue', Arial, 'DejaVu Sans', sans-serif"
EM = 0.6  # estimated advance of one character, in font sizes (generous for sans-serif fonts)


def _n(v: float) -> str:
    """A coordinate with at most two decimals (no trailing zeros)."""
    s = f"{v:.2f}".rstrip("0").rstrip(".")
    return "0" if s in ("-0", "") else s


def text_width(text: str, size: float) -> float:
    """Estimated width of ``text`` at font ``size`` (points)."""
    return EM * size * len(str(text))


def nice_ticks(lo: float, hi: float, max_ticks: int = 8) -> list:
    """Round tick values (1, 2, 2.5 or 5 times a power of ten) covering [lo, hi] inside the range."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return [lo] if math.isfinite(lo) else []
    raw = (hi - lo) / max(max_ticks - 1, 1)
    p = 10.0 ** math.floor(math.log10(raw))
    step = next(m * p for m in (1.0, 2.0, 2.5, 5.0, 10.0) if m * p >= raw * (1 - 1e-9))
    first = math.ceil(lo / step - 1e-9) * step
    n = int(math.floor((hi - first) / step + 1e-9)) + 1
    return [round(first + i * step, 10) for i in range(max(n, 0))]


def tick_label(v: float, step: float | None = None) -> str:
    """A tick value with as many decimals as the tick step needs (0.00, 0.25, 0.50 ...)."""
    if step is None or not step > 0:
        return f"{v:g}" if abs(v) >= 1e-12 else "0"
    decimals = 0
    while decimals < 6 and abs(round(step, decimals) - step) > 1e-9 * max(step, 1.0):
        decimals += 1
    return f"{v:.{decimals}f}"


def _step(ticks) -> float | None:
    return ticks[1] - ticks[0] if len(ticks) > 1 else None


class Canvas:
    """A minimal SVG writer: rectangles, lines, paths and text in point coordinates, y downwards."""

    def __init__(self, width: float, height: float, title: str = ""):
        self.width = float(width)
        self.height = float(height)
        self.title = title
        self.uid = uuid.uuid4().hex[:10]  # ids stay unique when several charts share one page
        self._parts = []
        self._clips = []

    def rect(self, x, y, w, h, fill, opacity: float | None = None, stroke: str | None = None,
             stroke_width: float = 0.6, clip: str | None = None):
        extra = f' fill-opacity="{opacity:g}"' if opacity is not None else ""
        if stroke:
            extra += f' stroke="{stroke}" stroke-width="{stroke_width:g}"'
        if clip:
            extra += f' clip-path="url(#{clip})"'
        self._parts.append(f'<rect x="{_n(x)}" y="{_n(y)}" width="{_n(max(w, 0.0))}" height="{_n(max(h, 0.0))}" '
                           f'fill="{fill}"{extra}/>')

    def line(self, x1, y1, x2, y2, stroke, width: float = 0.8, dash: str | None = None,
             opacity: float | None = None):
        extra = f' stroke-dasharray="{dash}"' if dash else ""
        if opacity is not None:
            extra += f' stroke-opacity="{opacity:g}"'
        self._parts.append(f'<line x1="{_n(x1)}" y1="{_n(y1)}" x2="{_n(x2)}" y2="{_n(y2)}" stroke="{stroke}" '
                           f'stroke-width="{width:g}"{extra}/>')

    def path(self, d: str, fill: str = "none", stroke: str | None = None, width: float = 1.0,
             opacity: float | None = None, clip: str | None = None, join: str = "miter", dash: str | None = None):
        if not d:
            return
        extra = f' fill-opacity="{opacity:g}"' if (opacity is not None and fill != "none") else ""
        if stroke:
            extra += f' stroke="{stroke}" stroke-width="{width:g}" stroke-linejoin="{join}"'
            if dash:
                extra += f' stroke-dasharray="{dash}"'
        if clip:
            extra += f' clip-path="url(#{clip})"'
        self._parts.append(f'<path d="{d}" fill="{fill}"{extra}/>')

    def text(self, x, y, text, size: float = 9.0, anchor: str = "start", colour: str = INK,
             middle: bool = False, rotate: float = 0.0, weight: str | None = None):
        """Text with its baseline at ``y`` (or centred on ``y`` when ``middle``)."""
        if middle:
            y = y + 0.35 * size
        extra = f' transform="rotate({rotate:g} {_n(x)} {_n(y)})"' if rotate else ""
        if weight:
            extra += f' font-weight="{weight}"'
        self._parts.append(f'<text x="{_n(x)}" y="{_n(y)}" font-size="{size:g}" text-anchor="{anchor}" '
                           f'fill="{colour}"{extra}>{html.escape(str(text))}</text>')

    def clip_rect(self, x, y, w, h) -> str:
        cid = f"clip{self.uid}{len(self._clips)}"
        self._clips.append(f'<clipPath id="{cid}"><rect x="{_n(x)}" y="{_n(y)}" width="{_n(w)}" '
                           f'height="{_n(h)}"/></clipPath>')
        return cid

    def svg(self) -> str:
        title = f"<title>{html.escape(self.title)}</title>" if self.title else ""
        defs = f"<defs>{''.join(self._clips)}</defs>" if self._clips else ""
        return (f'<svg xmlns="http://www.w3.org/2000/svg" width="{_n(self.width)}pt" height="{_n(self.height)}pt" '
                f'viewBox="0 0 {_n(self.width)} {_n(self.height)}" font-family="{FONT}">{title}{defs}'
                f'<rect width="100%" height="100%" fill="#ffffff"/>{"".join(self._parts)}</svg>')


class _Plot:
    """A plot box on a canvas with linear x and y scales (data -> points)."""

    def __init__(self, canvas: Canvas, left, top, right, bottom, xlim, ylim):
        self.c = canvas
        self.x0, self.y0 = left, top
        self.x1, self.y1 = canvas.width - right, canvas.height - bottom
        self.xlim = (float(xlim[0]), float(xlim[1]) if xlim[1] > xlim[0] else float(xlim[0]) + 1.0)
        self.ylim = (float(ylim[0]), float(ylim[1]) if ylim[1] > ylim[0] else float(ylim[0]) + 1.0)

    def X(self, v):  # noqa: N802 - data x -> points
        a, b = self.xlim
        return self.x0 + (np.asarray(v, dtype=float) - a) * (self.x1 - self.x0) / (b - a)

    def Y(self, v):  # noqa: N802 - data y -> points
        a, b = self.ylim
        return self.y1 - (np.asarray(v, dtype=float) - a) * (self.y1 - self.y0) / (b - a)

    def clip(self) -> str:
        return self.c.clip_rect(self.x0, self.y0, self.x1 - self.x0, self.y1 - self.y0)

    def grid_y(self, ticks):
        for t in ticks:
            y = float(self.Y(t))
            self.c.line(self.x0, y, self.x1, y, GRID, 0.8)

    def grid_x(self, ticks):
        for t in ticks:
            x = float(self.X(t))
            self.c.line(x, self.y0, x, self.y1, GRID, 0.8)

    def axis_x(self, ticks, label: str, spine: bool = True):
        c = self.c
        if spine:
            c.line(self.x0, self.y1, self.x1, self.y1, MUTED, 0.8)
        for t in ticks:
            x = float(self.X(t))
            c.line(x, self.y1, x, self.y1 + 3.5, MUTED, 0.8)
            c.text(x, self.y1 + 13.0, tick_label(t, _step(ticks)), 8.0, "middle", MUTED)
        if label:
            c.text((self.x0 + self.x1) / 2.0, self.y1 + 26.0, label, 9.0, "middle", INK)

    def axis_y(self, ticks, label="", tick_labels: bool = True):
        """The y axis: spine, ticks, optional tick labels, and a rotated label of one line (a string)
        or several (a sequence, the first outermost)."""
        c = self.c
        c.line(self.x0, self.y0, self.x0, self.y1, MUTED, 0.8)
        width = 0.0
        for t in ticks:
            y = float(self.Y(t))
            c.line(self.x0 - 3.5, y, self.x0, y, MUTED, 0.8)
            if tick_labels:
                s = tick_label(t, _step(ticks))
                width = max(width, text_width(s, 8.0))
                c.text(self.x0 - 5.5, y, s, 8.0, "end", MUTED, middle=True)
        lines = [s for s in ([label] if isinstance(label, str) else label) if s]
        for k, s in enumerate(reversed(lines)):
            x = self.x0 - 5.5 - width - 8.0 - 11.0 * k
            c.text(x, (self.y0 + self.y1) / 2.0, s, 9.0, "middle", INK, rotate=-90)

    def zones(self, edges_m, names):
        """Dotted lines at inner zone boundaries; zone names centred above the plot."""
        if edges_m is None or len(edges_m) < 2:
            return
        e = np.asarray(edges_m, dtype=float) / 1000.0
        for v in e[1:-1]:
            x = float(self.X(v))
            if self.x0 < x < self.x1:
                self.c.line(x, self.y0, x, self.y1, MUTED, 0.9, dash="2,2")
        for a, b, name in zip(e[:-1], e[1:], names or []):
            xa, xb = float(np.clip(self.X(a), self.x0, self.x1)), float(np.clip(self.X(b), self.x0, self.x1))
            if xb - xa >= text_width(name, 8.0) * 0.6:
                self.c.text((xa + xb) / 2.0, self.y0 - 4.0, str(name), 8.0, "middle", MUTED)


def _legend(c: Canvas, x, y, items, max_x):
    """One row (wrapping when needed) of legend entries (label, kind, colour[, opacity]) from (x, y): kind
    'box' (a filled swatch) or 'line'. Returns the y below the legend."""
    x_start = x
    for item in items:
        label, kind, colour = item[:3]
        opacity = item[3] if len(item) > 3 else None
        w = 16.0 + 5.0 + text_width(label, 8.0)
        if x + w > max_x and x > x_start:
            x = x_start
            y += 14.0
        if kind == "line":
            c.line(x, y, x + 16.0, y, colour, 1.3)
        else:
            c.rect(x, y - 4.0, 16.0, 8.0, colour, opacity)
        c.text(x + 21.0, y, label, 8.0, "start", INK, middle=True)
        x += w + 14.0
    return y + 10.0


def _runs(ok: np.ndarray):
    """(start, stop) of every run of True values."""
    d = np.diff(np.r_[0, ok.astype(np.int8), 0])
    return list(zip(np.flatnonzero(d == 1), np.flatnonzero(d == -1)))


def _step_path(xa, xb, top, bottom) -> str:
    """A closed path: the step line of ``top`` over bins [xa, xb) forward and ``bottom`` back."""
    xs = np.column_stack([xa, xb]).ravel()
    up = np.repeat(top, 2)
    down = np.repeat(bottom, 2)[::-1]
    pts = [f"{_n(x)},{_n(y)}" for x, y in zip(xs, up)] + [f"{_n(x)},{_n(y)}" for x, y in zip(xs[::-1], down)]
    return "M" + "L".join(pts) + "Z"


def _step_line(xa, xb, v) -> str:
    xs = np.column_stack([xa, xb]).ravel()
    return "M" + "L".join(f"{_n(x)},{_n(y)}" for x, y in zip(xs, np.repeat(v, 2)))


def _title(c: Canvas, title: str):
    if title:
        c.text(6.0, 15.0, title, 10.0, "start", INK)


# ----------------------------------------------------------------------------------------------
# Habitat charts
# ----------------------------------------------------------------------------------------------

def speed_profile(profile, scheme, zone_edges=None, zone_names=None, title: str = "", width_in: float = 9.5,
                  height_in: float = 3.8, origin: str = "upstream") -> str:
    """Percentile bands of depth-averaged speed along the reach (SVG text).

    ``profile``: ``chainage_from_m``, ``chainage_to_m``, ``v_p10_ms`` ... ``v_p90_ms`` per chainage bin
    (NaN where dry; drawn as gaps). The light band is the 10th-90th percentile, the dark band the
    25th-75th, the line the median; every speed threshold of the scheme is a labelled dashed line, and for
    a speed-interval scheme the class ranges are tinted behind the data in the class colours.
    """
    a = np.asarray(profile["chainage_from_m"], dtype=float) / 1000.0
    b = np.asarray(profile["chainage_to_m"], dtype=float) / 1000.0
    p10, p25, p50, p75, p90 = (np.asarray(profile[k], dtype=float)
                               for k in ("v_p10_ms", "v_p25_ms", "v_p50_ms", "v_p75_ms", "v_p90_ms"))
    thresholds = speed_thresholds(scheme)
    intervals = _speed_intervals(scheme)
    names = {lo: name for lo, _, _, name in intervals} if intervals else {}
    labels = [f"{names[t]} ≥ {t:g} m/s" if t in names else f"{t:g} m/s" for t in thresholds]
    finite_top = p90[np.isfinite(p90)]
    ymax = float(finite_top.max()) if finite_top.size else 1.0
    if thresholds:
        ymax = max(ymax, max(thresholds) * 1.15)
    ymax = ymax * 1.08 if ymax > 0 else 1.0
    yt = nice_ticks(0.0, ymax, 8)

    c = Canvas(72.0 * width_in, 72.0 * height_in, title or "Depth-averaged speed along the reach")
    _title(c, title)
    right = 12.0 + max((text_width(s, 7.5) for s in labels), default=0.0)
    left = 26.0 + max((text_width(tick_label(t, _step(yt)), 8.0) for t in yt), default=10.0)
    top = (22.0 if title else 6.0) + (14.0 if zone_names else 4.0)
    finite = np.isfinite(a) & np.isfinite(b)
    xlim = (float(a[finite].min()), float(b[finite].max())) if finite.any() else (0.0, 1.0)
    pl = _Plot(c, left, top, right, 52.0, xlim, (0.0, ymax))
    clip = pl.clip()
    if intervals:
        for lo, hi, colour, _ in intervals:
            lo_ = max(lo, 0.0) if math.isfinite(lo) else 0.0
            hi_ = min(hi, ymax) if math.isfinite(hi) else ymax
            if hi_ > lo_:
                y_hi, y_lo = float(pl.Y(hi_)), float(pl.Y(lo_))
                c.rect(pl.x0, y_hi, pl.x1 - pl.x0, y_lo - y_hi, colour, 0.16)
    pl.grid_y(yt)
    xa, xb = pl.X(a), pl.X(b)
    for lo_k, hi_k, colour, alpha in ((p10, p90, BAND_OUTER, 0.55), (p25, p75, BAND_INNER, 0.75)):
        ok = np.isfinite(lo_k) & np.isfinite(hi_k) & finite
        d = "".join(_step_path(xa[i:j], xb[i:j], pl.Y(hi_k[i:j]), pl.Y(lo_k[i:j])) for i, j in _runs(ok))
        c.path(d, fill=colour, opacity=alpha, clip=clip)
    ok = np.isfinite(p50) & finite
    c.path("".join(_step_line(xa[i:j], xb[i:j], pl.Y(p50[i:j])) for i, j in _runs(ok)), stroke=INK, width=1.3,
           clip=clip)
    for t, label in zip(thresholds, labels):
        y = float(pl.Y(t))
        c.line(pl.x0, y, pl.x1, y, INK, 0.8, dash="5,3", opacity=0.8)
        c.text(pl.x1 + 4.0, y, label, 7.5, "start", INK, middle=True)
    pl.zones(zone_edges, zone_names)
    pl.axis_x(nice_ticks(*pl.xlim, 10), chainage_label(origin))
    pl.axis_y(yt, "depth-averaged speed (m/s)")
    _legend(c, pl.x0, c.height - 9.0, [("10th–90th percentile", "box", BAND_OUTER, 0.55),
                                       ("25th–75th percentile", "box", BAND_INNER, 0.75), ("median", "line", INK)],
            c.width - 6.0)
    return c.svg()


def class_share_bars(units, fractions, scheme, title: str = "", width_in: float = 9.0) -> str:
    """Horizontal 100 % stacked bars (SVG text): one bar per unit (zone names, 'whole reach', ...), one
    colour per class, the share written inside segments of at least 7 %. ``fractions``: (n_units,
    n_classes), rows summing to 1 (NaN rows drawn empty)."""
    fr = np.nan_to_num(np.asarray(fractions, dtype=float)) * 100.0
    n = len(units)
    classes = scheme.classes
    width = 72.0 * width_in
    left = 14.0 + max((text_width(u, 8.0) for u in units), default=20.0)
    # legend rows (wrapping) above the bars
    x, rows = left, 1
    for cls in classes:
        w = 21.0 + text_width(cls.name, 8.0) + 14.0
        if x + w > width - 6.0 and x > left:
            x, rows = left, rows + 1
        x += w
    top = (22.0 if title else 6.0) + 14.0 * rows + 6.0
    row_h = 30.0
    height = top + row_h * max(n, 1) + 40.0
    c = Canvas(width, height, title or "Class shares")
    _title(c, title)
    _legend(c, left, (22.0 if title else 6.0) + 7.0, [(cls.name, "box", cls.colour) for cls in classes], width - 6.0)
    pl = _Plot(c, left, top, 22.0, 40.0, (0.0, 100.0), (0.0, float(max(n, 1))))
    xt = [0, 20, 40, 60, 80, 100]
    pl.grid_x(xt)
    bar = 0.68 * row_h
    for i, unit in enumerate(units):
        yc = top + (i + 0.5) * row_h
        c.text(left - 8.0, yc, str(unit), 8.0, "end", MUTED, middle=True)
        acc = 0.0
        for j, cls in enumerate(classes):
            w = float(fr[i, j]) if j < fr.shape[1] else 0.0
            if w <= 0:
                continue
            xa, xb = float(pl.X(acc)), float(pl.X(acc + w))
            c.rect(xa, yc - bar / 2.0, xb - xa, bar, cls.colour, stroke="#ffffff", stroke_width=0.6)
            label = f"{w:.0f}%"
            if w >= 7.0 and xb - xa >= text_width(label, 7.5) + 4.0:
                c.text((xa + xb) / 2.0, yc, label, 7.5, "middle", text_colour_for(cls.colour), middle=True)
            acc += w
    pl.axis_x(xt, "share of the wet area (%)")
    return c.svg()


def class_share_profile(edges_m, fractions, scheme, zone_edges=None, zone_names=None, title: str = "",
                        width_in: float = 9.5, height_in: float = 3.2, origin: str = "upstream") -> str:
    """Class shares per segment along the reach (SVG text): stacked steps, one colour per class, 0-100 %."""
    e = np.asarray(edges_m, dtype=float) / 1000.0
    fr = np.nan_to_num(np.asarray(fractions, dtype=float)) * 100.0
    c = Canvas(72.0 * width_in, 72.0 * height_in, title or "Class shares along the reach")
    _title(c, title)
    top = (22.0 if title else 6.0) + (14.0 if zone_names else 4.0)
    yt = [0, 20, 40, 60, 80, 100]
    left = 26.0 + text_width("100", 8.0)
    pl = _Plot(c, left, top, 22.0, 52.0, (float(e[0]), float(e[-1])), (0.0, 100.0))
    xa, xb = pl.X(e[:-1]), pl.X(e[1:])
    base = np.zeros(len(e) - 1)
    for j, cls in enumerate(scheme.classes):
        topv = base + (fr[:, j] if j < fr.shape[1] else 0.0)
        if np.any(topv > base):
            c.path(_step_path(xa, xb, pl.Y(topv), pl.Y(base)), fill=cls.colour)
        base = topv
    pl.zones(zone_edges, zone_names)
    pl.axis_x(nice_ticks(*pl.xlim, 10), chainage_label(origin))
    pl.axis_y(yt, "share of wet area (%)")
    _legend(c, pl.x0, c.height - 9.0, [(cls.name, "box", cls.colour) for cls in scheme.classes], c.width - 6.0)
    return c.svg()
