"""core/panels.py: page windows, frames, scales, km posts and caption numbers.

Sources: numpy/shapely (reference libraries) for geometry; hand calculations stated beside each
check; 1 ML/d = 1000 m3 / 86 400 s (SI definitions of litre and day).
"""

import math

import numpy as np
import pytest
import shapely
import shapely.ops

from plugin.core.errors import ChannelHabitatError
from plugin.core.panels import (
    atlas_windows,
    channel_direction,
    discharge_text,
    fit_frame,
    format_number,
    km_posts,
    nice_scale,
    page_table,
    plan_pages,
    zone_windows,
)
from plugin.core.reach import Reach, ReachAxis, parse_zone_breaks

FRAME = (207.0, 150.0)  # mm


def meander_reach(start=0.0):
    t = np.linspace(0, 1, 500)
    x = 9000 * t + 600 * np.sin(2 * np.pi * 3 * t)
    y = -4000 * t + 500 * np.cos(2 * np.pi * 2.5 * t)
    axis = ReachAxis(x, y, datum_m=start)
    e, n = parse_zone_breaks("", axis.start_m, axis.end_m)
    return Reach(axis, zone_edges=e, zone_names=n), x, y


@pytest.mark.parametrize("value, expected", [
    (4321, 5000), (10000, 10000), (10001, 12500), (0.3, 0.3), (1.26, 1.5), (7600, 10000), (61000, 75000),
    (199.9, 200)])
def test_nice_scale(value, expected):
    # hand: the next value of the series 1, 1.25, 1.5, 2, 2.5, 3, 4, 5, 6, 7.5 x 10^k
    assert nice_scale(value) == pytest.approx(expected)


def test_channel_direction_of_straight_lines():
    # hand: a straight axis from (0, 0) towards angle a has direction a (downstream)
    for a in (0.3, 2.0, -2.5, math.pi / 2):
        ax = ReachAxis([0, 1000 * math.cos(a)], [0, 1000 * math.sin(a)])
        d = channel_direction(ax, 0, 1000)
        assert math.cos(d - a) == pytest.approx(1.0, abs=1e-9)


def test_frames_contain_their_window_and_keep_north_up():
    reach, x, y = meander_reach()
    windows, frames = plan_pages(reach, "atlas", FRAME, page_length_m=1500)
    line = shapely.LineString(np.column_stack([x, y]))
    for w, f in zip(windows, frames):
        rect = shapely.Polygon(f.corners())
        piece = shapely.ops.substring(line, w.chainage_from_m, w.chainage_to_m)
        assert rect.contains(piece)  # reference: shapely
        assert -90.0 < f.rotation_deg <= 90.0
        assert f.width_m / f.height_m == pytest.approx(FRAME[0] / FRAME[1])
        assert f.width_m == pytest.approx(FRAME[0] / 1000 * f.scale)  # exactly the paper frame at scale
    # atlas pages share one scale
    assert len({f.scale for f in frames}) == 1


def test_atlas_windows_cover_the_reach_in_equal_pieces():
    reach, x, y = meander_reach(start=250.0)
    w = atlas_windows(reach, 2000.0)
    length = shapely.LineString(np.column_stack([x, y])).length  # reference: shapely
    assert len(w) == math.ceil(length / 2000.0)
    assert w[0].chainage_from_m == pytest.approx(250.0)
    assert w[-1].chainage_to_m == pytest.approx(250.0 + length)
    lengths = [p.chainage_to_m - p.chainage_from_m for p in w]
    assert max(lengths) <= 2000.0 and np.ptp(lengths) < 1e-6
    assert all(a.chainage_to_m == b.chainage_from_m for a, b in zip(w, w[1:]))


def test_zone_pages_each_fit_their_zone():
    reach, x, y = meander_reach()
    windows, frames = plan_pages(reach, "zones", FRAME)
    assert [w.zone for w in windows] == ["upper", "middle", "lower"]
    assert windows == zone_windows(reach)
    for f in frames:
        assert f.scale == nice_scale(f.scale)


def test_westward_river_is_not_upside_down():
    # a river flowing west: rotating it to flow left-to-right would put north at the bottom, so the
    # map stays unrotated and the flow runs right to left (hand reasoning)
    ax = ReachAxis([5000, 0], [0, 0])
    reach = Reach(ax, zone_edges=[0, ax.end_m], zone_names=["all"])
    _, frames = plan_pages(reach, "zones", FRAME)
    assert frames[0].rotation_deg == pytest.approx(0.0, abs=1e-9)
    assert not frames[0].flow_left_to_right
    # flowing north: rotated 90 degrees, flow left to right
    ax = ReachAxis([0, 0], [0, 5000])
    reach = Reach(ax, zone_edges=[0, ax.end_m], zone_names=["all"])
    _, frames = plan_pages(reach, "zones", FRAME)
    assert frames[0].rotation_deg == pytest.approx(90.0)
    assert frames[0].flow_left_to_right


def test_downstream_origin_flow_direction():
    # chainage from the downstream end: vertices run upstream, from x = 5000 to x = 0, so the water
    # flows east (hand reasoning): unrotated, flow left to right
    ax = ReachAxis([5000, 0], [0, 0], origin="downstream")
    reach = Reach(ax, zone_edges=[0, ax.end_m], zone_names=["all"])
    _, frames = plan_pages(reach, "zones", FRAME)
    assert frames[0].rotation_deg == pytest.approx(0.0, abs=1e-9)
    assert frames[0].flow_left_to_right
    _, frames = plan_pages(reach, "zones", FRAME, rotate=False)
    assert frames[0].flow_left_to_right


def test_without_rotation_frames_are_north_up():
    reach, _, _ = meander_reach()
    _, frames = plan_pages(reach, "zones", FRAME, rotate=False)
    assert all(f.rotation_deg == 0 for f in frames)


def test_given_scale_is_used_or_refused():
    reach, _, _ = meander_reach()
    _, frames = plan_pages(reach, "atlas", FRAME, page_length_m=1000, scale=20000)
    assert all(f.scale == 20000 for f in frames)
    with pytest.raises(ChannelHabitatError) as err:
        plan_pages(reach, "zones", FRAME, scale=2000)
    assert err.value.parameter == "SCALE"
    with pytest.raises(ChannelHabitatError) as err:
        atlas_windows(reach, 5.0)
    assert err.value.parameter == "PAGE_LENGTH"


def test_fit_frame_margin():
    # hand: a 1000 m straight east-flowing axis with a 100 m margin needs 1200 m across the frame
    ax = ReachAxis([0, 1000], [0, 0])
    reach = Reach(ax, zone_edges=[0, 1000], zone_names=["z"])
    f = fit_frame(ax, zone_windows(reach)[0], FRAME, margin_m=100.0)
    assert f.width_m == pytest.approx(1200.0)
    assert f.scale == pytest.approx(1200.0 / 0.207)
    assert (f.cx, f.cy) == pytest.approx((500.0, 0.0))


def test_km_posts_on_the_axis():
    reach, x, y = meander_reach(start=1500.0)
    ch, px, py, labels = km_posts(reach.axis, 1000.0)
    assert ch[0] == 2000.0 and labels[0] == "km 2" and labels[1] == "km 3"
    line = shapely.LineString(np.column_stack([x, y]))
    pts = shapely.points(px, py)
    assert np.all(shapely.distance(line, pts) < 1e-6)
    np.testing.assert_allclose(shapely.line_locate_point(line, pts), ch - 1500.0, atol=1e-6)
    assert km_posts(reach.axis, 500.0)[3][:2] == ["km 1.5", "km 2"]


def test_caption_numbers():
    # 3000 ML/d x 1000 m3/ML / 86400 s = 34.722 m3/s; 100 m3/s x 86400 / 1000 = 8640 ML/d
    assert discharge_text(3000, "ML/d") == "3\u2009000 ML/d (34.7 m³/s)"
    assert discharge_text(100, "m3/s") == "8\u2009640 ML/d (100 m³/s)"
    assert format_number(40000 * 1000 / 86400) == "463"
    assert format_number(12.5) == "12.5"


def test_page_table_fields():
    reach, _, _ = meander_reach()
    windows, frames = plan_pages(reach, "zones", FRAME)
    cols, rings = page_table(windows, frames)
    assert list(cols["page"]) == [1, 2, 3]
    assert cols["label"] == ["Upper zone", "Middle zone", "Lower zone"]
    assert cols["km_text"][0].startswith("chainage km 0.0–")
    for r, f in zip(rings, frames):
        assert shapely.Polygon(r).area == pytest.approx(f.width_m * f.height_m)
