"""Vegetation overlay and map-panel numbers against closed-form geometry and published standards.

Each check names its source beside it.
"""

import math

import numpy as np
import pytest
import shapely

from plugin.core.field import GridSupport, HydraulicField
from plugin.core.panels import PAPERS_MM, discharge_text
from plugin.core.vegetation import VegetationOverlay, make_stands

NAMES = ["very slow", "slow", "moderate", "fast"]


def half_plane_run(dx=0.5, x0=-60.0, x1=60.0, y0=-30.0, y1=60.0):
    """Water (depth 1 m) wherever y < 0, on cells aligned with y = 0; speed 0.01 m/s (very slow)
    for x < 0 and 0.5 m/s (fast) for x >= 0."""
    cols, rows = int((x1 - x0) / dx), int((y1 - y0) / dx)
    idx = np.arange(rows * cols)
    r, c = np.divmod(idx, cols)
    xc, yc = x0 + (c + 0.5) * dx, y1 - (r + 0.5) * dx
    wet = yc < 0
    idx, xc, yc = idx[wet], xc[wet], yc[wet]
    speed = np.where(xc < 0, 0.01, 0.5).astype(np.float32)
    fld = HydraulicField(x=xc, y=yc, area=np.full(idx.size, dx * dx), depth=np.ones(idx.size, np.float32),
                         speed=speed, support=GridSupport((x0, dx, 0.0, y1, 0.0, -dx), (rows, cols), idx))
    codes = np.where(xc < 0, 1, 4).astype(np.uint8)
    return fld, codes


def circle(cx, cy, r):
    return shapely.Point(cx, cy).buffer(r, quad_segs=512)  # polygon within 1e-5 relative of the circle


def test_wetted_area_is_the_circular_segment():
    # Circular segment cut off by a chord at distance d from the centre of a circle of radius R:
    # A = R^2 acos(d/R) - d sqrt(R^2 - d^2) (standard plane geometry; value from memory)
    R, h = 20.0, 8.0  # centre 8 m above the water's edge y = 0
    fld, codes = half_plane_run()
    res = VegetationOverlay(make_stands([circle(0.0, h, R)]), 5.0).run(fld, codes, NAMES)
    segment = R * R * math.acos(h / R) - h * math.sqrt(R * R - h * h)
    assert res.columns["wet_area_m2"][0] == pytest.approx(segment, rel=1e-4)
    assert res.columns["area_m2"][0] == pytest.approx(math.pi * R * R, rel=1e-4)  # pi R^2
    # the water is split at x = 0 through the centre: half the segment under each class (symmetry)
    assert res.columns["wet_very_slow_m2"][0] == pytest.approx(segment / 2, rel=1e-4)
    assert res.columns["wet_fast_m2"][0] == pytest.approx(segment / 2, rel=1e-4)


def test_channel_facing_edge_is_the_arc_within_d():
    # Boundary points (x, y) = (R cos t, h + R sin t) lie within D of the half-plane y < 0 where
    # y <= D, i.e. sin t <= (D - h)/R: an arc of length 2 R acos((h - D)/R) (plane geometry),
    # symmetric about x = 0, so half of it beside each class.
    R, h, D = 20.0, 28.0, 12.0  # the circle is dry (h > R) but comes within D of the water
    fld, codes = half_plane_run()
    step = 0.05
    res = VegetationOverlay(make_stands([circle(0.0, h, R)]), D, step_m=step).run(fld, codes, NAMES)
    arc = 2 * R * math.acos((h - D) / R)
    assert res.columns["wet_area_m2"][0] == 0
    assert res.columns["edge_m"][0] == pytest.approx(arc, abs=2 * step + 1e-3 * arc)
    assert res.columns["edge_very_slow_m"][0] == pytest.approx(arc / 2, abs=2 * step + 1e-3 * arc)
    assert res.columns["edge_fast_m"][0] == pytest.approx(arc / 2, abs=2 * step + 1e-3 * arc)


def test_paper_sizes_iso_216():
    # ISO 216:2007, A series: A4 210 x 297 mm, A3 297 x 420 mm (landscape: width first)
    assert PAPERS_MM["A4"] == (297.0, 210.0)
    assert PAPERS_MM["A3"] == (420.0, 297.0)


def test_caption_discharge_si():
    # 1 ML = 1000 m3 (SI litre: 1 L = 1 dm3) and 1 d = 86 400 s: 6000 ML/d = 69.44 m3/s
    assert discharge_text(6000, "ML/d") == "6\u2009000 ML/d (69.4 m³/s)"
