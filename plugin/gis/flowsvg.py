"""The flowhabitat report's charts written directly as SVG text (no plotting library; milliseconds each).

Built on ``gis/svgcharts.py`` (Canvas, _Plot, nice_ticks, _legend) in the house style of
``gis/chartstyle.py``. Discharge axes are logarithmic (the ladders are roughly geometric) with round ML/d
ticks (``chartstyle.nice_q_ticks``); regimes are told apart by colour *and* dash pattern *and* marker
(``chartstyle.regime_style``: Okabe & Ito 2008 palette); lines between the runs are the interpolant the
targets use (PCHIP on ln q, ``core.curves``), markers are the runs.

    target_panels(curves, results, targets, regimes)     one panel per target: curve, threshold, answer
    class_share_panels(curves, unit, regimes)            one panel per class, regimes overlaid
    composition_grid(curves, units, regimes, scheme)     rows = units, columns = regimes, stacked shares
    wet_area_panels(curves, units, regimes)              wet area (ha) against discharge per unit
    segment_share_maps(curves, classes, regimes)         share of a class set per segment x run (cividis)

Each returns SVG text for ``Report.figure``; sizes in points (72 per inch).
"""

from __future__ import annotations

import math

import numpy as np

from ..core.units import M3S_PER_MLD
from .chartstyle import INK, MUTED, Q_LABEL, dense_q, fmt_q, nice_q_ticks, regime_style
from .svgcharts import Canvas, _legend, _n, _Plot, _runs, nice_ticks, text_width, tick_label

WIDTH_PT = 9.5 * 72.0
DRY = "#e9ecef"  # cells of a dry segment in the share maps
# Cividis (Nuñez, Anderton & Renslow 2018, PLoS ONE 13(7) e0199239) sampled at 0, 5 ... 100 %, linear
# between the samples: readable in the common colour-vision deficiencies and in grey.
CIVIDIS = ("#00224e", "#002b62", "#083370", "#243c6e", "#35456c", "#434e6c", "#4f576c", "#5b606e", "#666970",
           "#727274", "#7d7c78", "#888578", "#948e77", "#a19975", "#aea371", "#bcae6c", "#c8b866", "#d6c35d",
           "#e5cf52", "#f3db42", "#fee838")
_OP_TEXT = {">=": "≥", "<=": "≤", ">": ">", "<": "<"}


# ----------------------------------------------------------------------------------------------
# Building blocks
# ----------------------------------------------------------------------------------------------

def dash_array(linestyle, width: float) -> str | None:
    """An SVG stroke-dasharray from a matplotlib-style pattern ``(offset, (on, off, ...))`` in line widths
    (None for a solid line)."""
    if linestyle in (None, "-", "solid"):
        return None
    return ",".join(_n(v * width) for v in linestyle[1])


# Marker outlines on a unit radius (y downwards), drawn at ~2.2 pt radius.
_SHAPES = {
    "s": [(-0.85, -0.85), (0.85, -0.85), (0.85, 0.85), (-0.85, 0.85)],
    "^": [(0.0, -1.2), (1.1, 0.75), (-1.1, 0.75)],
    "v": [(0.0, 1.2), (1.1, -0.75), (-1.1, -0.75)],
    "D": [(0.0, -1.25), (1.0, 0.0), (0.0, 1.25), (-1.0, 0.0)],
    "P": [(-0.38, -1.0), (0.38, -1.0), (0.38, -0.38), (1.0, -0.38), (1.0, 0.38), (0.38, 0.38), (0.38, 1.0),
          (-0.38, 1.0), (-0.38, 0.38), (-1.0, 0.38), (-1.0, -0.38), (-0.38, -0.38)],
    "h": [(math.cos(a), math.sin(a)) for a in np.radians(np.arange(-90, 270, 60))],
}
_c45 = math.sqrt(0.5)
_SHAPES["X"] = [((x - y) * _c45 * 1.1, (x + y) * _c45 * 1.1) for x, y in _SHAPES["P"]]


def marker_path(kind: str, xs, ys, r: float = 2.2) -> str:
    """One path of markers: every marker is the subpath 'M cx,cy m ...' (absolute centre, relative outline)."""
    parts = []
    if kind == "o":
        shape = f"m{_n(-r)},0a{_n(r)},{_n(r)} 0 1,0 {_n(2 * r)},0a{_n(r)},{_n(r)} 0 1,0 {_n(-2 * r)},0z"
    else:
        pts = [(x * r, y * r) for x, y in _SHAPES.get(kind, _SHAPES["s"])]
        rel = [f"m{_n(pts[0][0])},{_n(pts[0][1])}"]
        rel += [f"l{_n(b[0] - a[0])},{_n(b[1] - a[1])}" for a, b in zip(pts[:-1], pts[1:])]
        shape = "".join(rel) + "z"
    for x, y in zip(np.asarray(xs, float), np.asarray(ys, float)):
        if math.isfinite(x) and math.isfinite(y):
            parts.append(f"M{_n(x)},{_n(y)}{shape}")
    return "".join(parts)


def polyline(xs, ys) -> str:
    """'M x,y L ...' through the finite points; a gap wherever a value is NaN."""
    xs, ys = np.asarray(xs, float), np.asarray(ys, float)
    ok = np.isfinite(xs) & np.isfinite(ys)
    out = []
    for i, j in _runs(ok):
        out.append("M" + "L".join(f"{_n(x)},{_n(y)}" for x, y in zip(xs[i:j], ys[i:j])))
    return "".join(out)


def cividis(pct) -> list:
    """Hex colours of shares 0-100 % on the cividis ramp (linear between the samples; clamped to the
    ends); NaN (a dry unit) is the grey ``DRY``."""
    anchors = np.array([[int(h[k:k + 2], 16) for k in (1, 3, 5)] for h in CIVIDIS], dtype=float)
    p = np.asarray(pct, dtype=float).ravel()
    t = np.clip(np.nan_to_num(p), 0.0, 100.0) / 100.0 * (len(CIVIDIS) - 1)
    rgb = np.column_stack([np.interp(t, np.arange(len(CIVIDIS)), anchors[:, k]) for k in range(3)])
    return [DRY if not math.isfinite(v) else "#" + "".join(f"{int(round(c)):02x}" for c in row)
            for v, row in zip(p, rgb)]


class QPlot(_Plot):
    """A plot box with a logarithmic discharge (ML/d) x axis, padded as the matplotlib charts are."""

    def __init__(self, canvas: Canvas, box, qmin: float, qmax: float, ylim, sparse: bool = False):
        if qmax <= qmin:
            qmin, qmax = qmin / 1.2, qmax * 1.2
        pad = (qmax / qmin) ** 0.03
        x0, y0, x1, y1 = box
        super().__init__(canvas, x0, y0, canvas.width - x1, canvas.height - y1,
                         (math.log10(qmin / pad), math.log10(qmax * pad)), ylim)
        self.qmin, self.qmax = qmin, qmax
        self.q_ticks = nice_q_ticks(qmin, qmax, sparse)

    def X(self, v):  # noqa: N802 - discharge (ML/d) -> points
        return super().X(np.log10(np.asarray(v, dtype=float)))

    def clip(self) -> str:
        """The plot box, 2 pt taller at both ends so lines at 0 or 100 % show their full width."""
        return self.c.clip_rect(self.x0, self.y0 - 2.0, self.x1 - self.x0, self.y1 - self.y0 + 4.0)

    def _tick_labels(self, ticks, y, size=8.0):
        """Tick labels centred on their ticks, skipping any that would touch the previous one."""
        last = -1e9
        for t in ticks:
            x = float(self.X(t))
            s = fmt_q(t)
            half = text_width(s, size) / 2.0
            if x - half >= last + 3.0:
                self.c.text(x, y, s, size, "middle", MUTED)
                last = x + half

    def axis_q(self, label: bool = True, tick_labels: bool = True, grid: bool = True):
        c = self.c
        if grid:
            self.grid_x(self.q_ticks)
        c.line(self.x0, self.y1, self.x1, self.y1, MUTED, 0.8)
        for t in self.q_ticks:
            x = float(self.X(t))
            c.line(x, self.y1, x, self.y1 + 3.5, MUTED, 0.8)
        if tick_labels:
            self._tick_labels(self.q_ticks, self.y1 + 13.0)
        if label:
            c.text((self.x0 + self.x1) / 2.0, self.y1 + 26.0, Q_LABEL, 9.0, "middle", INK)

    def axis_m3s(self):
        """A discharge axis in m³/s along the top of the box (same positions: q_m3s = q_mld x 1000/86400)."""
        c = self.c
        lo, hi = self.qmin * M3S_PER_MLD, self.qmax * M3S_PER_MLD
        ticks = nice_q_ticks(lo, hi, False)
        c.line(self.x0, self.y0, self.x1, self.y0, MUTED, 0.8)
        last = -1e9
        for t in ticks:
            x = float(self.X(t / M3S_PER_MLD))
            c.line(x, self.y0, x, self.y0 - 3.0, MUTED, 0.8)
            s = fmt_q(t)
            half = text_width(s, 7.0) / 2.0
            if x - half >= last + 3.0:
                c.text(x, self.y0 - 5.0, s, 7.0, "middle", MUTED)
                last = x + half
        c.text(self.x1, self.y0 - 15.0, "discharge (m³/s)", 7.5, "end", MUTED)


def _q_range(curves, regimes):
    qs = np.concatenate([curves.ladder(r) for r in regimes])
    return float(qs.min()), float(qs.max())


def _draw_series(c: Canvas, pl: QPlot, i: int, q_line, y_line, q_runs, y_runs, clip: str, width: float = 1.4):
    """One regime: its line (dash pattern) and markers at the runs (white edge)."""
    st = regime_style(i)
    c.path(polyline(pl.X(q_line), pl.Y(y_line)), stroke=st["color"], width=width, clip=clip, join="round",
           dash=dash_array(st["linestyle"], width))
    c.path(marker_path(st["marker"], pl.X(q_runs), pl.Y(y_runs)), fill=st["color"], stroke="#ffffff", width=0.5)


def _regime_sample(c: Canvas, x: float, y: float, i: int):
    """A legend sample of regime i: 22 pt of its line with its marker in the middle."""
    st = regime_style(i)
    c.path(f"M{_n(x)},{_n(y)}L{_n(x + 22.0)},{_n(y)}", stroke=st["color"], width=1.4,
           dash=dash_array(st["linestyle"], 1.4))
    c.path(marker_path(st["marker"], [x + 11.0], [y]), fill=st["color"], stroke="#ffffff", width=0.5)


def _regime_legend_rows(labels, x0: float, max_x: float) -> list:
    """Positions (x, row) of legend entries laid out in wrapping rows."""
    pos, x, row = [], x0, 0
    for label in labels:
        w = 22.0 + 5.0 + text_width(label, 8.0)
        if x + w > max_x and x > x0:
            x, row = x0, row + 1
        pos.append((x, row))
        x += w + 16.0
    return pos


def _regime_legend(c: Canvas, labels, x0: float, y0: float, max_x: float) -> float:
    """Regime legend entries (sample + label) in wrapping rows from (x0, y0); returns the y below."""
    pos = _regime_legend_rows(labels, x0, max_x)
    for i, (label, (x, row)) in enumerate(zip(labels, pos)):
        y = y0 + 14.0 * row
        _regime_sample(c, x, y, i)
        c.text(x + 27.0, y, label, 8.0, "start", INK, middle=True)
    return y0 + 14.0 * ((pos[-1][1] + 1) if pos else 0)


def _boxes(nrows: int, ncols: int, left: float, top: float, panel_h: float, wgap: float, hgap: float,
           right: float = 10.0, width: float = WIDTH_PT) -> list:
    """Panel boxes (x0, y0, x1, y1) row by row."""
    panel_w = (width - left - right - (ncols - 1) * wgap) / ncols
    return [(left + c * (panel_w + wgap), top + r * (panel_h + hgap), left + c * (panel_w + wgap) + panel_w,
             top + r * (panel_h + hgap) + panel_h) for r in range(nrows) for c in range(ncols)]


def _grid(n: int, max_cols: int):
    ncols = min(max_cols, max(n, 1))
    return int(math.ceil(n / ncols)), ncols


def _title(c: Canvas, title: str) -> float:
    if title:
        c.text(6.0, 15.0, title, 10.0, "start", INK)
        return 24.0
    return 6.0


PCT_TICKS = [0, 20, 40, 60, 80, 100]


# ----------------------------------------------------------------------------------------------
# The charts
# ----------------------------------------------------------------------------------------------

def answer_label(regime: str, res) -> str:
    """The legend text of a regime in a target panel: its answer."""
    from ..core.curves import INTERPOLATED, MET_AT_LOWEST, MET_AT_RUN

    if res is None:
        return regime
    if res.status in (INTERPOLATED, MET_AT_RUN):
        return f"{regime}: {res.q_mld:,.0f} ML/d"
    if res.status == MET_AT_LOWEST:
        return f"{regime}: met at the lowest run ({res.q_mld:,.0f} ML/d)"
    return f"{regime}: not reached up to {res.q_highest_mld:,.0f} ML/d"


def target_panels(curves, results, targets, regimes, max_cols: int = 2, title: str = "") -> str:
    """One panel per target: the class set's % of the unit against discharge per regime (the interpolant
    of the answer; markers at the runs), the threshold dashed, and the smallest discharge meeting it marked
    by a dotted drop line and a large marker; a legend under each panel gives every regime's answer."""
    nrows, ncols = _grid(len(targets), max_cols)
    by = {(r.regime, r.target): r for r in results}
    c = Canvas(WIDTH_PT, 100.0, title or "Targets against discharge")
    top = _title(c, title) + 42.0
    legend_h = 14.0 * len(regimes) + 6.0
    panel_h = 150.0
    hgap = 40.0 + legend_h + 50.0
    left, wgap = 62.0, 80.0
    boxes = _boxes(nrows, ncols, left, top, panel_h, wgap, hgap)
    c.height = top + nrows * panel_h + (nrows - 1) * hgap + 40.0 + legend_h
    qmin, qmax = _q_range(curves, regimes)
    for k, tg in enumerate(targets):
        box = boxes[k]
        pl = QPlot(c, box, qmin, qmax, (0.0, 100.0))
        clip = pl.clip()
        pl.grid_y(PCT_TICKS)
        pl.axis_q()
        pl.axis_m3s()
        ylabel = f"{'+'.join(tg.classes)} (% of {tg.unit})"
        if text_width(ylabel, 9.0) > panel_h:  # two lines: the class set, then the unit
            ylabel = ("+".join(tg.classes), f"(% of {tg.unit})")
        pl.axis_y(PCT_TICKS, ylabel)
        c.text(box[0] - left + 8.0, box[1] - 30.0, tg.text, 9.5, "start", INK, weight="600")
        y_thr = float(pl.Y(tg.threshold_pct))
        c.line(pl.x0, y_thr, pl.x1, y_thr, INK, 0.9, dash="4.5,2.7")
        y_lab = y_thr - 3.0 if tg.threshold_pct <= 85.0 else y_thr + 9.5  # below the line near the top
        c.text(pl.x1 - 2.0, y_lab, f"{_OP_TEXT.get(tg.op, tg.op)} {tg.threshold_pct:g}%", 7.5, "end", INK)
        labels = []
        for i, regime in enumerate(regimes):
            q, pct = curves.percent_ladder(regime, tg.unit, tg.classes)
            qd = dense_q(q)
            yd = curves.percent_at(regime, qd, tg.unit, tg.classes) if q.size > 1 else pct
            _draw_series(c, pl, i, qd, yd, q, pct, clip)
            res = by.get((regime, tg))
            labels.append(answer_label(regime, res))
        for i, regime in enumerate(regimes):  # answers on top of every line
            res = by.get((regime, tg))
            if res is not None and math.isfinite(res.q_mld):
                st = regime_style(i)
                yq = float(curves.percent_at(regime, np.array([res.q_mld]), tg.unit, tg.classes)[0])
                xq = float(pl.X(res.q_mld))
                c.line(xq, pl.y1, xq, float(pl.Y(yq)), st["color"], 1.0, dash="1,1.5")
                c.path(marker_path(st["marker"], [xq], [float(pl.Y(yq))], r=4.0), fill=st["color"], stroke=INK,
                       width=0.8)
        for i, label in enumerate(labels):
            y = pl.y1 + 42.0 + 14.0 * i
            _regime_sample(c, pl.x0, y, i)
            c.text(pl.x0 + 27.0, y, label, 8.0, "start", INK, middle=True)
    return c.svg()


def _panel_page(n_panels: int, max_cols: int, title: str, default_title: str, regimes, left: float,
                panel_h: float, wgap: float, hgap: float = 52.0):
    """A canvas of small multiples under a title and the regime legend: (canvas, panel boxes, columns)."""
    nrows, ncols = _grid(n_panels, max_cols)
    c = Canvas(WIDTH_PT, 100.0, title or default_title)
    y = _title(c, title) + 7.0
    y = _regime_legend(c, list(regimes), left, y, WIDTH_PT - 6.0)
    top = y + 14.0
    boxes = _boxes(nrows, ncols, left, top, panel_h, wgap, hgap)
    c.height = top + nrows * panel_h + (nrows - 1) * hgap + 34.0
    return c, boxes, ncols


def class_share_panels(curves, unit, regimes, title: str = "", max_cols: int = 4) -> str:
    """One panel per class: % of the unit's wet area against discharge, one line per regime (the PCHIP
    interpolant on ln q that targets use), markers at the runs; the regime legend across the top."""
    u = curves.unit_index(unit)
    names = curves.class_names
    c, boxes, ncols = _panel_page(len(names), max_cols, title, f"Class shares against discharge: {curves.units[u].key}",
                           regimes, 50.0, 120.0, 32.0)
    qmin, qmax = _q_range(curves, regimes)
    grids = {}
    for regime in regimes:
        rc = curves.regime(regime)
        qd = dense_q(rc.q_mld)
        grids[regime] = (rc, qd, curves.percent_grid(regime, qd)[:, u, :] if rc.q_mld.size > 1 else None)
    for k, name in enumerate(names):
        pl = QPlot(c, boxes[k], qmin, qmax, (0.0, 100.0), sparse=ncols >= 3)
        clip = pl.clip()
        pl.grid_y(PCT_TICKS)
        pl.axis_q(label=k >= len(names) - ncols)
        pl.axis_y(PCT_TICKS, "% of wet area" if k % ncols == 0 else ())
        c.text(pl.x0, pl.y0 - 6.0, name, 9.0, "start", INK, weight="600")
        for i, regime in enumerate(regimes):
            rc, qd, yd = grids[regime]
            pct = rc.percent()[:, u, k]
            _draw_series(c, pl, i, qd, yd[:, k] if yd is not None else pct, rc.q_mld, pct, clip)
    return c.svg()


def composition_grid(curves, units, regimes, scheme, title: str = "") -> str:
    """Rows = units (reach, zones), columns = regimes: the class shares stacked to 100 % of the wet area
    against discharge, in the class colours, straight between the runs (so the layers add up everywhere)."""
    nrows, ncols = len(units), len(regimes)
    names = curves.class_names
    colours = scheme.colours if len(scheme.colours) == len(names) else [regime_style(j)["color"]
                                                                          for j in range(len(names))]
    c = Canvas(WIDTH_PT, 100.0, title or "Class make-up against discharge")
    y = _title(c, title) + 7.0
    legend = [(n, "box", col) for n, col in zip(names, colours)]
    y = _legend(c, 72.0, y, legend, WIDTH_PT - 6.0) + 2.0
    top = y + 16.0
    panel_h, hgap = 92.0, 12.0
    boxes = _boxes(nrows, ncols, 72.0, top, panel_h, 14.0, hgap)
    c.height = top + nrows * panel_h + (nrows - 1) * hgap + 34.0
    qmin, qmax = _q_range(curves, regimes)
    for r, unit in enumerate(units):
        u = curves.unit_index(unit)
        for col, regime in enumerate(regimes):
            pl = QPlot(c, boxes[r * ncols + col], qmin, qmax, (0.0, 100.0), sparse=ncols >= 3)
            clip = pl.clip()
            rc = curves.regime(regime)
            pct = np.nan_to_num(rc.percent()[:, u, :])
            x = pl.X(rc.q_mld)
            if x.size == 1:  # one run: a narrow column
                x = np.array([x[0] - 3.0, x[0] + 3.0])
                pct = np.repeat(pct, 2, axis=0)
            base = np.zeros(x.size)
            for j in range(len(names)):
                top_v = base + pct[:, j]
                if np.any(top_v > base):
                    pts = [f"{_n(a)},{_n(b)}" for a, b in zip(x, pl.Y(top_v))]
                    pts += [f"{_n(a)},{_n(b)}" for a, b in zip(x[::-1], pl.Y(base)[::-1])]
                    c.path("M" + "L".join(pts) + "Z", fill=colours[j], clip=clip)
                base = top_v
            pl.axis_q(label=r == nrows - 1, tick_labels=r == nrows - 1, grid=False)
            pl.axis_y(PCT_TICKS, (curves.units[u].key, "% of wet area") if col == 0 else (),
                          tick_labels=col == 0)
            if r == 0:
                c.text(pl.x0, pl.y0 - 5.0, regime, 9.0, "start", INK, weight="600")
    return c.svg()


def wet_area_panels(curves, units, regimes, max_cols: int = 4, title: str = "") -> str:
    """Wet area (ha) against discharge: one panel per unit (its own scale from 0), one line per regime,
    straight between the runs."""
    c, boxes, ncols = _panel_page(len(units), max_cols, title, "Wet area against discharge", regimes, 54.0, 115.0, 44.0)
    qmin, qmax = _q_range(curves, regimes)
    for k, unit in enumerate(units):
        u = curves.unit_index(unit)
        ha = {r: curves.regime(r).wet[:, u] / 1e4 for r in regimes}
        vmax = max((float(np.nanmax(v)) for v in ha.values() if np.isfinite(v).any()), default=0.0)
        yt = nice_ticks(0.0, vmax * 1.05 if vmax > 0 else 1.0, 5)
        ytop = max(yt[-1], vmax * 1.05) if vmax > 0 else 1.0
        if yt[-1] < ytop:  # the top tick just above the data
            yt.append(round(yt[-1] + (yt[1] - yt[0]), 10))
            ytop = yt[-1]
        pl = QPlot(c, boxes[k], qmin, qmax, (0.0, ytop), sparse=ncols >= 3)
        clip = pl.clip()
        pl.grid_y(yt)
        pl.axis_q(label=k >= len(units) - ncols)
        pl.axis_y(yt, "wet area (ha)" if k % ncols == 0 else ())
        c.text(pl.x0, pl.y0 - 6.0, curves.units[u].key, 9.0, "start", INK, weight="600")
        for i, regime in enumerate(regimes):
            q = curves.regime(regime).q_mld
            _draw_series(c, pl, i, q, ha[regime], q, ha[regime], clip, width=1.3)
    return c.svg()


def segment_share_maps(curves, classes, regimes, origin: str = "upstream", title: str = "") -> str | None:
    """Per regime: the share of a class set (% of the segment's wet area) in every segment (rows, in
    chainage order from the top) at every run (columns), coloured on the cividis ramp; grey where the
    segment is dry in that run. None when the curves have no segments."""
    seg = [i for i, u in enumerate(curves.units) if u.scope == "segment"]
    if not seg:
        return None
    idx = curves.class_indices(classes)
    set_name = "+".join(curves.class_names[i] for i in idx)
    ncols = len(regimes)
    c = Canvas(WIDTH_PT, 100.0, title or f"{set_name} per segment and run")
    top = _title(c, title) + 16.0
    panel_h = max(108.0, 9.4 * len(seg))
    left = 62.0
    runs_max = max(curves.regime(r).q_mld.size for r in regimes)
    label_w = max(text_width(fmt_q(q), 7.0) for r in regimes for q in curves.regime(r).q_mld)
    bottom = 8.0 + label_w + 22.0
    boxes = _boxes(1, ncols, left, top, panel_h, 12.0, 0.0, right=96.0)
    c.height = top + panel_h + bottom
    edges_km = np.array([curves.units[seg[0]].chainage_from_m] + [curves.units[i].chainage_to_m for i in seg]) / 1e3
    towards = "downstream" if origin != "downstream" else "upstream"
    for col, regime in enumerate(regimes):
        rc = curves.regime(regime)
        nq = rc.q_mld.size
        x0, y0, x1, y1 = boxes[col]
        pl = _Plot(c, x0, y0, c.width - x1, c.height - y1, (-0.5, max(nq, runs_max) - 0.5),
                   (-edges_km[-1], -edges_km[0]))  # chainage increasing downwards
        area = rc.areas[:, seg, :][:, :, idx].sum(axis=-1)
        wet = rc.wet[:, seg]
        with np.errstate(invalid="ignore", divide="ignore"):
            pct = np.where(wet > 0, 100.0 * area / wet, np.nan)
        xa, xb = pl.X(np.arange(nq) - 0.5), pl.X(np.arange(nq) + 0.5)
        ya, yb = pl.Y(-edges_km[:-1]), pl.Y(-edges_km[1:])
        for iq in range(nq):
            fills = cividis(pct[iq])
            for s in range(len(seg)):
                fill = fills[s]
                # 0.3 pt overlap: no anti-aliased seams between neighbouring cells
                c.rect(float(xa[iq]), float(ya[s]), float(xb[iq] - xa[iq]) + 0.3, float(yb[s] - ya[s]) + 0.3, fill)
        c.rect(pl.x0, pl.y0, pl.x1 - pl.x0, pl.y1 - pl.y0, "none", stroke=MUTED, stroke_width=0.6)
        for iq, q in enumerate(rc.q_mld):
            x = float((xa[iq] + xb[iq]) / 2.0)
            c.line(x, pl.y1, x, pl.y1 + 3.0, MUTED, 0.8)
            c.text(x, pl.y1 + 6.0, fmt_q(q), 7.0, "end", MUTED, middle=False, rotate=-90)
        c.text((pl.x0 + pl.x1) / 2.0, c.height - 8.0, "run (ML/d)", 9.0, "middle", INK)
        c.text(pl.x0, pl.y0 - 5.0, regime, 9.0, "start", INK, weight="600")
        kt = nice_ticks(float(edges_km[0]), float(edges_km[-1]), 8)
        for t in kt:
            y = float(pl.Y(-t))
            c.line(pl.x0 - 3.5, y, pl.x0, y, MUTED, 0.8)
            if col == 0:
                c.text(pl.x0 - 5.5, y, tick_label(t, kt[1] - kt[0] if len(kt) > 1 else None), 8.0, "end", MUTED,
                       middle=True)
        if col == 0:
            label = f"chainage (km from the {origin} end)  ↓ {towards}"
            if text_width(label, 9.0) > pl.y1 - pl.y0:
                label = f"chainage (km)  ↓ {towards}"
            c.text(14.0, (pl.y0 + pl.y1) / 2.0, label, 9.0, "middle", INK, rotate=-90)
    # colour bar with the dry swatch below it
    x_bar = boxes[-1][2] + 12.0
    y0, y1 = boxes[-1][1], boxes[-1][3]
    n = 50
    h = (y1 - y0) / n
    for k, col in enumerate(cividis((np.arange(n) + 0.5) * 100.0 / n)):
        c.rect(x_bar, y1 - (k + 1) * h, 10.0, h + 0.3, col)
    for t in PCT_TICKS:
        y = y1 - t / 100.0 * (y1 - y0)
        c.line(x_bar + 10.0, y, x_bar + 13.0, y, MUTED, 0.8)
        c.text(x_bar + 15.0, y, f"{t}", 7.5, "start", MUTED, middle=True)
    c.rect(x_bar, y1 + 8.0, 10.0, 8.0, DRY, stroke=MUTED, stroke_width=0.4)
    c.text(x_bar + 15.0, y1 + 12.0, "dry", 7.5, "start", MUTED, middle=True)
    c.text(x_bar + 44.0, (y0 + y1) / 2.0, f"{set_name} (% of segment wet area)", 8.0, "middle", INK, rotate=-90)
    return c.svg()
