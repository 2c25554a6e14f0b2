"""gis/flowsvg.py: the flowhabitat report's charts written as SVG text (geometry checked against the data).

Every chart is parsed with xml.etree; drawn positions are mapped back through the axis rule (log10
discharge padded by (qmax/qmin)^0.03 on each side, as the matplotlib charts were; linear 0-100 % shares)
and compared with values computed here from the raw class areas, and with scipy's PCHIP for the lines.
"""

import math
import re
import xml.etree.ElementTree as ET
from types import SimpleNamespace

import numpy as np
import pytest
from scipy.interpolate import PchipInterpolator

from plugin.core import curves as cv
from plugin.core.classes import velocity_preset
from plugin.gis import flowsvg
from plugin.gis.chartstyle import INK, regime_style

S = "{http://www.w3.org/2000/svg}"
Q = np.array([300.0, 500.0, 800.0, 1300.0, 2000.0, 3500.0, 6000.0])
REGIMES = ("low", "high")
CLASSES = velocity_preset().names  # very slow, slow, moderate, fast
REACH = SimpleNamespace(zone_edges=[0.0, 2000.0, 5000.0], zone_names=["upper", "lower"],
                        segment_edges=[0.0, 1000.0, 2000.0, 3000.0, 4000.0, 5000.0])
DRY = {("low", 0, 4), ("low", 1, 4), ("high", 0, 3)}  # (regime, run, segment): no wet area


def _areas():
    """Class areas (n_q, n_units, 4) and wet areas per regime: fast water grows with discharge; every wet
    unit fully classified; some segments dry at the lowest runs."""
    units = cv.scope_units(REACH)
    nseg = len(REACH.segment_edges) - 1
    out = {}
    for r, regime in enumerate(REGIMES):
        seg = np.zeros((Q.size, nseg, 4))
        for iq, q in enumerate(Q):
            t = math.log(q / Q[0]) / math.log(Q[-1] / Q[0])  # 0 .. 1
            for s in range(nseg):
                share = np.array([0.4 * (1 - t), 0.3 + 0.05 * s, 0.2 + 0.1 * r, 0.1 + 0.6 * t + 0.02 * s])
                seg[iq, s] = 1000.0 * (1 + 0.3 * s + 0.2 * iq) * share / share.sum()
                if (regime, iq, s) in DRY:
                    seg[iq, s] = 0.0
        zone_of = np.array([0, 0, 1, 1, 1])
        zones = np.stack([seg[:, zone_of == z].sum(axis=1) for z in range(2)], axis=1)
        areas = np.concatenate([seg.sum(axis=1)[:, None], zones, seg], axis=1)
        out[regime] = (areas, areas.sum(axis=-1))
    runs = [cv.RunAreas(regime, q, out[regime][0][iq], out[regime][1][iq]) for regime in REGIMES
            for iq, q in enumerate(Q)]
    return cv.FlowHabitatCurves.from_runs(runs, units, CLASSES), out


CURVES, RAW = _areas()


def _root(svg):
    return ET.fromstring(svg)


def _boxes(root):
    """Plot boxes from the clip rectangles (2 pt taller than the box at both ends)."""
    out = []
    for cp in root.iter(f"{S}clipPath"):
        x, y, w, h = (float(cp[0].get(k)) for k in ("x", "y", "width", "height"))
        out.append((x, y + 2.0, w, h - 4.0))
    return out


def _q_of(x, box):
    """Invert the log discharge axis (padding rule of the charts: (qmax/qmin)^0.03 on each side)."""
    pad = (Q[-1] / Q[0]) ** 0.03
    lo, hi = math.log10(Q[0] / pad), math.log10(Q[-1] * pad)
    return 10.0 ** (lo + (np.asarray(x) - box[0]) / box[2] * (hi - lo))


def _pct_of(y, box):
    return (box[1] + box[3] - np.asarray(y)) / box[3] * 100.0


def _centres(d):
    return np.array([[float(a), float(b)] for a, b in re.findall(r"M(-?[\d.]+),(-?[\d.]+)m", d)])


def _poly(d):
    return [np.array([tuple(map(float, p.split(","))) for p in re.split(r"[LZ]", sub) if p.strip()])
            for sub in re.findall(r"M([^M]*)", d)]


def _in_box(pts, box, tol=0.02):
    return bool(np.all((pts[:, 0] >= box[0] - tol) & (pts[:, 0] <= box[0] + box[2] + tol)
                       & (pts[:, 1] >= box[1] - tol) & (pts[:, 1] <= box[1] + box[3] + tol)))


def _markers(root, colour, stroke="#ffffff"):
    return [p for p in root.iter(f"{S}path") if p.get("fill") == colour and p.get("stroke") == stroke]


def _lines(root, colour):
    return [p for p in root.iter(f"{S}path") if p.get("fill") == "none" and p.get("stroke") == colour
            and p.get("clip-path")]


def _raw_pct(regime, unit, classes):
    areas, wet = RAW[regime]
    with np.errstate(invalid="ignore", divide="ignore"):
        return 100.0 * areas[:, unit][:, classes].sum(axis=-1) / wet[:, unit]


def test_styles_tell_regimes_apart_and_dashes_scale_with_the_width():
    assert flowsvg.dash_array("-", 1.4) is None
    assert flowsvg.dash_array((0, (5, 2)), 1.4) == "7,2.8"
    kinds = {regime_style(i)["marker"] for i in range(8)}
    shapes = {flowsvg.marker_path(k, [0.0], [0.0]).split("m", 1)[1] for k in kinds}
    assert len(shapes) == 8  # eight different outlines


def test_cividis_matches_the_published_ramp():
    from matplotlib import colormaps  # reference: matplotlib's cividis (Nunez et al. 2018)

    pct = np.linspace(0, 100, 401)
    got = np.array([[int(h[k:k + 2], 16) for k in (1, 3, 5)] for h in flowsvg.cividis(pct)])
    ref = np.round(colormaps["cividis"](pct / 100.0)[:, :3] * 255)
    err = np.abs(got - ref)
    assert err.max() <= 8 and err.mean() < 1.0  # 21 samples, linear between them (the ramp bends at the top)
    assert flowsvg.cividis([-5, np.nan, 150]) == ["#00224e", flowsvg.DRY, "#fee838"]  # clamped; NaN is dry


def test_target_panels_markers_lines_threshold_and_answer():
    targets = cv.parse_targets("lower: moderate+fast >= 50%\nupper: fast >= 60%", ["upper", "lower"], CLASSES, 5)
    results = cv.required_discharge(CURVES, targets)
    svg = flowsvg.target_panels(CURVES, results, targets, list(REGIMES))
    root = _root(svg)
    boxes = _boxes(root)
    assert len(boxes) == 2
    for k, (tg, box) in enumerate(zip(targets, boxes)):
        unit = 1 + ["upper", "lower"].index(tg.unit)
        cls = [CLASSES.index(c) for c in tg.classes]
        for i, regime in enumerate(REGIMES):
            colour = regime_style(i)["color"]
            inside = [m for m in _markers(root, colour) if _in_box(_centres(m.get("d")), box)]
            assert len(inside) == 1  # the runs; the legend sample is below the panel
            c = _centres(inside[0].get("d"))
            want = _raw_pct(regime, unit, cls)
            np.testing.assert_allclose(_q_of(c[:, 0], box), Q, rtol=2e-4)
            np.testing.assert_allclose(_pct_of(c[:, 1], box), want, atol=0.01)
            # the line between the runs: PCHIP on ln q (scipy's monotone cubic as the reference)
            line = _poly(_lines(root, colour)[k].get("d"))[0]
            assert line.shape[0] > 50
            ref = PchipInterpolator(np.log(Q), want)(np.log(_q_of(line[:, 0], box)))
            np.testing.assert_allclose(_pct_of(line[:, 1], box), ref, atol=0.03)
            # the answer: a large marker edged in ink on the threshold at the required discharge
            res = next(r for r in results if r.regime == regime and r.target == tg)
            big = _markers(root, colour, INK)
            ans = [p for b in big for p in _centres(b.get("d")) if box[0] <= p[0] <= box[0] + box[2]]
            if res.status == cv.INTERPOLATED:
                assert len(ans) == 1
                assert _q_of(ans[0][0], box) == pytest.approx(res.q_mld, rel=2e-4)
                assert _pct_of(ans[0][1], box) == pytest.approx(tg.threshold_pct, abs=0.01)
            else:
                assert not ans
        dashed = [float(e.get("y1")) for e in root.iter(f"{S}line") if e.get("stroke-dasharray") == "4.5,2.7"]
        assert _pct_of(dashed[k], box) == pytest.approx(tg.threshold_pct, abs=0.01)
    assert "≥ 50%" in svg and "moderate+fast (% of lower)" in svg and "discharge (m³/s)" in svg
    assert "discharge (ML/d, log scale)" in svg and "low: " in svg
    # round ML/d ticks of the log axis between the ends of the ladder
    labels = {t.text for t in root.iter(f"{S}text")}
    assert {"300", "500", "1,000", "2,000", "3,000", "5,000"} <= labels


def test_class_share_panels_markers_are_the_percentages():
    svg = flowsvg.class_share_panels(CURVES, "reach", list(REGIMES))
    root = _root(svg)
    boxes = _boxes(root)
    assert len(boxes) == len(CLASSES)
    for i, regime in enumerate(REGIMES):
        marks = _markers(root, regime_style(i)["color"])
        assert len(marks) == len(CLASSES) + 1  # one per panel, plus the legend sample
        for k, box in enumerate(boxes):
            m = next(m for m in marks if _in_box(_centres(m.get("d")), box))
            c = _centres(m.get("d"))
            np.testing.assert_allclose(_q_of(c[:, 0], box), Q, rtol=2e-4)
            np.testing.assert_allclose(_pct_of(c[:, 1], box), _raw_pct(regime, 0, [k]), atol=0.01)
    for name in CLASSES:
        assert f">{name}<" in svg
    assert "% of wet area" in svg


def test_composition_grid_stacks_to_100_percent():
    s = velocity_preset()
    units = [u for u in CURVES.units if u.scope in ("reach", "zone")]
    root = _root(flowsvg.composition_grid(CURVES, units, list(REGIMES), s))
    boxes = _boxes(root)
    assert len(boxes) == len(units) * len(REGIMES)
    fills = [p for p in root.iter(f"{S}path") if p.get("fill") in s.colours and p.get("clip-path")]
    assert len(fills) == len(boxes) * 4  # every class has some area in every unit here
    for b, box in enumerate(boxes):
        unit, regime = divmod(b, len(REGIMES))
        areas, wet = RAW[REGIMES[regime]]
        cum = np.cumsum(areas[:, unit, :], axis=1) / wet[:, unit, None] * 100.0
        layers = fills[4 * b: 4 * b + 4]
        assert [p.get("fill") for p in layers] == list(s.colours)
        for j, p in enumerate(layers):
            pts = _poly(p.get("d"))[0]
            top = pts[: Q.size]
            np.testing.assert_allclose(_q_of(top[:, 0], box), Q, rtol=2e-4)
            np.testing.assert_allclose(_pct_of(top[:, 1], box), cum[:, j], atol=0.01)
        # the last layer reaches 100 % at every run (all wet area classified)
        np.testing.assert_allclose(_pct_of(_poly(layers[-1].get("d"))[0][: Q.size, 1], box), 100.0, atol=0.01)


def _y_ticks(root, box):
    """(value, y) of the y tick labels left of a panel."""
    out = []
    for t in root.iter(f"{S}text"):
        x = float(t.get("x"))
        if t.get("text-anchor") == "end" and box[0] - 8 < x < box[0] and not t.get("transform"):
            out.append((float(t.text), float(t.get("y")) - 0.35 * float(t.get("font-size"))))
    return out


def test_wet_area_panels_in_hectares():
    units = [u for u in CURVES.units if u.scope in ("reach", "zone")]
    root = _root(flowsvg.wet_area_panels(CURVES, units, list(REGIMES)))
    boxes = _boxes(root)
    assert len(boxes) == 3
    for k, box in enumerate(boxes):
        ticks = _y_ticks(root, box)
        assert ticks[0][0] == 0 and len(ticks) >= 3
        (v0, y0), (vt, yt) = ticks[0], ticks[-1]
        for i, regime in enumerate(REGIMES):
            m = next(m for m in _markers(root, regime_style(i)["color"]) if _in_box(_centres(m.get("d")), box))
            c = _centres(m.get("d"))
            ha = v0 + (c[:, 1] - y0) / (yt - y0) * (vt - v0)
            np.testing.assert_allclose(ha, RAW[regime][1][:, k] / 1e4, atol=vt * 1e-4)
            assert np.all(c[:, 1] >= box[1] - 0.01)  # inside the box
    assert "wet area (ha)" in ET.tostring(root, encoding="unicode")


def test_segment_share_maps_cells_and_dry_grey():
    svg = flowsvg.segment_share_maps(CURVES, ["moderate", "fast"], list(REGIMES))
    root = _root(svg)
    rects = list(root.iter(f"{S}rect"))
    frames = [r for r in rects if r.get("fill") == "none"]
    assert len(frames) == len(REGIMES)
    cells = [r for r in rects if r.get("stroke") is None and r.get("width") != "100%"
             and float(r.get("width")) > 8.0 and float(r.get("height")) > 5.0]
    nseg = 5
    assert len(cells) == len(REGIMES) * Q.size * nseg
    grey = [r for r in cells if r.get("fill") == flowsvg.DRY]
    assert len(grey) == len(DRY)
    edges = np.array(REACH.segment_edges)
    for f, regime in zip(frames, REGIMES):
        x0, y0, w, h = (float(f.get(k)) for k in ("x", "y", "width", "height"))
        mine = [r for r in cells if x0 - 0.01 <= float(r.get("x")) < x0 + w]
        assert len(mine) == Q.size * nseg
        areas, wet = RAW[regime]
        for r in mine:
            x, y = float(r.get("x")), float(r.get("y"))
            iq = int(round((x - x0) / (w / Q.size)))
            s = int(np.argmin(np.abs(y0 + (edges[:-1] - edges[0]) / (edges[-1] - edges[0]) * h - y)))
            assert y == pytest.approx(y0 + edges[s] / edges[-1] * h, abs=0.01)  # chainage order from the top
            if (regime, iq, s) in DRY:
                assert r.get("fill") == flowsvg.DRY
                continue
            pct = 100.0 * areas[iq, 3 + s, 2:].sum() / wet[iq, 3 + s]
            assert r.get("fill") == flowsvg.cividis([pct])[0]
    assert "moderate+fast (% of segment wet area)" in svg and ">dry<" in svg and "run (ML/d)" in svg
    assert flowsvg.segment_share_maps(cv.FlowHabitatCurves(CURVES.units[:3], CLASSES, {}), ["fast"], []) is None


def test_charts_are_read_by_qt(qgis_app):
    from qgis.PyQt.QtCore import QByteArray
    from qgis.PyQt.QtSvg import QSvgRenderer

    units = [u for u in CURVES.units if u.scope in ("reach", "zone")]
    for svg in (flowsvg.class_share_panels(CURVES, "reach", list(REGIMES)),
                flowsvg.composition_grid(CURVES, units, list(REGIMES), velocity_preset()),
                flowsvg.segment_share_maps(CURVES, ["fast"], list(REGIMES))):
        r = QSvgRenderer(QByteArray(svg.encode("utf-8")))
        assert r.isValid()
        assert r.viewBoxF().width() == pytest.approx(9.5 * 72)
