"""gis/svgcharts.py: the report charts written as SVG text (geometry checked against the data)."""

import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from plugin.core.classes import froude_preset, velocity_preset
from plugin.gis import svgcharts

NS = {"s": "http://www.w3.org/2000/svg"}


def _parse(svg: str):
    return ET.fromstring(svg)


def _clip_box(root):
    r = root.find(".//s:clipPath/s:rect", NS)
    return tuple(float(r.get(k)) for k in ("x", "y", "width", "height"))


def _points(d: str):
    """Subpaths of an SVG path 'M x,y L x,y ... [Z]' as (n, 2) arrays."""
    out = []
    for sub in re.findall(r"M([^M]*)", d):
        pts = [tuple(map(float, p.split(","))) for p in re.split(r"[LZ]", sub) if p.strip()]
        out.append(np.array(pts))
    return out


def _profile(n=20, gap=None):
    e = np.arange(n + 1) * 500.0
    p50 = 0.25 + 0.1 * np.sin(np.arange(n) / 3.0)
    prof = {"chainage_from_m": e[:-1], "chainage_to_m": e[1:], "v_p10_ms": p50 - 0.12, "v_p25_ms": p50 - 0.05,
            "v_p50_ms": p50, "v_p75_ms": p50 + 0.06, "v_p90_ms": p50 + 0.15}
    if gap is not None:
        for k in ("v_p10_ms", "v_p25_ms", "v_p50_ms", "v_p75_ms", "v_p90_ms"):
            prof[k] = prof[k].copy()
            prof[k][gap] = np.nan
    return prof


def test_nice_ticks_are_round_and_inside_the_range():
    assert svgcharts.nice_ticks(0.0, 1.65, 8) == [0.0, 0.25, 0.5, 0.75, 1.0, 1.25, 1.5]  # steps 1-2-2.5-5 x 10^k
    assert svgcharts.nice_ticks(0.0, 39.9, 10) == [0, 5, 10, 15, 20, 25, 30, 35]
    assert svgcharts.nice_ticks(2.0, 3.0, 3) == [2.0, 2.5, 3.0]
    assert svgcharts.tick_label(0.5, 0.25) == "0.50" and svgcharts.tick_label(10, 5) == "10"


def test_speed_profile_bands_follow_the_percentiles_and_thresholds_are_labelled():
    prof = _profile()
    svg = svgcharts.speed_profile(prof, velocity_preset(), [0, 4000, 10000], ["upper", "lower"], title="t")
    root = _parse(svg)
    x0, y0, w, h = _clip_box(root)
    # y scale: 0 .. ymax with ymax = max(p90, 1.15 x the highest threshold) x 1.08 (the chart's rule)
    ymax = max(np.nanmax(prof["v_p90_ms"]), 0.30 * 1.15) * 1.08
    paths = [p for p in root.iter("{http://www.w3.org/2000/svg}path") if p.get("clip-path")]
    outer, inner, median = paths[0], paths[1], paths[2]
    up = _points(outer.get("d"))[0]
    n = len(prof["v_p90_ms"])
    np.testing.assert_allclose(up[: 2 * n, 1], np.round(y0 + h - np.repeat(prof["v_p90_ms"], 2) / ymax * h, 2),
                               atol=0.011)
    bin_edges = np.column_stack([np.arange(n), np.arange(1, n + 1)]).ravel()  # equal bins over the x range
    np.testing.assert_allclose(up[: 2 * n, 0], np.round(x0 + bin_edges * w / n, 2), atol=0.011)
    med = _points(median.get("d"))[0]
    np.testing.assert_allclose(med[:, 1], np.round(y0 + h - np.repeat(prof["v_p50_ms"], 2) / ymax * h, 2),
                               atol=0.011)
    lo = _points(inner.get("d"))[0][2 * n:]  # the lower edge runs backwards
    np.testing.assert_allclose(lo[::-1, 1], np.round(y0 + h - np.repeat(prof["v_p25_ms"], 2) / ymax * h, 2),
                               atol=0.011)
    for label in ("slow ≥ 0.05 m/s", "moderate ≥ 0.2 m/s", "fast ≥ 0.3 m/s", "upper", "lower",
                  "depth-averaged speed (m/s)", "chainage (km from the upstream end)"):
        assert label in svg
    # threshold lines at their speed
    dashed = [float(e.get("y1")) for e in root.iter("{http://www.w3.org/2000/svg}line")
              if e.get("stroke-dasharray") == "5,3"]
    np.testing.assert_allclose(sorted(dashed, reverse=True), [y0 + h - t / ymax * h for t in (0.05, 0.2, 0.3)],
                               atol=0.011)


def test_speed_profile_leaves_gaps_for_dry_bins_and_marks_nothing_for_froude():
    svg = svgcharts.speed_profile(_profile(gap=slice(5, 8)), froude_preset(), origin="downstream")
    root = _parse(svg)
    paths = [p for p in root.iter("{http://www.w3.org/2000/svg}path") if p.get("clip-path")]
    assert [len(_points(p.get("d"))) for p in paths] == [2, 2, 2]  # two runs of wet bins each
    assert "≥" not in svg and "m/s" in svg and "from the downstream end" in svg


def test_class_share_bars_widths_are_the_shares():
    fr = np.array([[0.1, 0.2, 0.3, 0.4], [1.0, 0.0, 0.0, 0.0], [np.nan] * 4])
    s = velocity_preset()
    svg = svgcharts.class_share_bars(["upper", "lower", "dry"], fr, s, title="shares")
    root = _parse(svg)
    colours = {c.colour for c in s.classes}
    bars = [r for r in root.iter("{http://www.w3.org/2000/svg}rect") if r.get("fill") in colours
            and r.get("stroke") == "#ffffff"]
    assert len(bars) == 5  # four shares in the first row, one in the second, none for the empty row
    full = float(bars[4].get("width"))
    got = [float(b.get("width")) / full for b in bars[:4]]
    np.testing.assert_allclose(got, fr[0], atol=2e-4)
    assert [b.get("fill") for b in bars[:4]] == list(s.colours)
    assert "40%" in svg and "100%" in svg and "10%" in svg  # shares >= 7 % are written in the bar
    assert svg.count(">upper<") == 1 and ">dry<" in svg


def test_class_share_profile_stacks_to_the_shares():
    s = velocity_preset()
    edges = np.array([0.0, 1000.0, 2000.0, 2500.0])
    fr = np.array([[0.1, 0.2, 0.3, 0.4], [0.0, 0.5, 0.5, 0.0], [0.25, 0.25, 0.25, 0.25]])
    root = _parse(svgcharts.class_share_profile(edges, fr, s, [0, 2500], ["all"]))
    x0, y0, w, h = svgcharts_plot_box(root)
    fills = [p for p in root.iter("{http://www.w3.org/2000/svg}path") if p.get("fill") in s.colours]
    assert [p.get("fill") for p in fills] == list(s.colours)
    cum = np.cumsum(fr, axis=1)
    for j, p in enumerate(fills):
        pts = _points(p.get("d"))[0]
        top = pts[: 2 * len(fr), 1]
        np.testing.assert_allclose(top, np.round(y0 + h - np.repeat(cum[:, j], 2) * h, 2), atol=0.011)
        np.testing.assert_allclose(pts[: 2 * len(fr), 0],
                                   np.round(x0 + np.repeat(edges, 2)[1:-1] / 2500.0 * w, 2), atol=0.011)


def svgcharts_plot_box(root):
    """The plot box of a chart without a clip path: from the y axis line and the x axis line."""
    lines = [(float(e.get("x1")), float(e.get("y1")), float(e.get("x2")), float(e.get("y2")))
             for e in root.iter("{http://www.w3.org/2000/svg}line") if e.get("stroke-width") == "0.8"]
    yaxis = [ln for ln in lines if ln[0] == ln[2] and abs(ln[3] - ln[1]) > 50][-1]
    xaxis = [ln for ln in lines if ln[1] == ln[3] and abs(ln[2] - ln[0]) > 50][0]
    return yaxis[0], yaxis[1], xaxis[2] - xaxis[0], yaxis[3] - yaxis[1]


def test_svg_is_read_by_qt(qgis_app):
    from qgis.PyQt.QtCore import QByteArray
    from qgis.PyQt.QtSvg import QSvgRenderer

    svg = svgcharts.speed_profile(_profile(), velocity_preset(), [0, 10000], ["all"])
    r = QSvgRenderer(QByteArray(svg.encode("utf-8")))
    assert r.isValid()
    assert r.viewBoxF().width() == pytest.approx(9.5 * 72)  # 9.5 in, in points
