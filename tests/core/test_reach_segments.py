"""core/segments.py: segment and zone polygons partition the channel extent (no gaps, no
overlaps), are bounded by cross-sections, agree with the chainage of the points inside them, and
split a neck along the line equidistant from both arms."""

import numpy as np
import pytest
import shapely
from pyproj import CRS

from plugin.core.errors import ChannelHabitatError
from plugin.core.reach import Reach, ReachAxis, segment_edges
from plugin.core.segments import (
    area_m2,
    buffer_extent,
    chainage_polygons,
    interval_table,
    label_decimals,
    post_chainages,
    post_label,
)
from tests.core.channels import meander_with_neck_and_tight_bend

UTM = CRS.from_epsg(32755).to_wkt()
WGS84 = CRS.from_epsg(4326).to_wkt()


def assert_partition(polys, extent, rel=1e-9):
    total = sum(p.area for p in polys)
    assert total == pytest.approx(extent.area, rel=rel)
    assert shapely.union_all(polys).area == pytest.approx(extent.area, rel=rel)
    tree = shapely.STRtree(polys)
    i, j = tree.query(polys, predicate="intersects")
    over = sum(shapely.intersection(polys[a], polys[b]).area for a, b in zip(i, j) if a < b)
    assert over <= 1e-9 * extent.area


@pytest.fixture(scope="module")
def meander():
    ch = meander_with_neck_and_tight_bend()
    x, y, _ = ch.polyline(5.0)
    axis = ReachAxis(x, y, UTM)
    return ch, axis, buffer_extent(axis, 40.0)


@pytest.mark.parametrize("length", [1000.0, 100.0])
def test_polygons_partition_the_extent(meander, length):
    _, axis, ext = meander
    edges = segment_edges(axis.start_m, axis.end_m, length)
    polys = chainage_polygons(axis, edges, ext)
    assert len(polys) == len(edges) - 1
    assert_partition(polys, ext)
    assert all(not p.is_empty for p in polys)


def test_polygons_hold_the_points_of_their_chainage(meander):
    _, axis, ext = meander
    edges = segment_edges(axis.start_m, axis.end_m, 250.0)
    polys = chainage_polygons(axis, edges, ext)
    reach = Reach(axis, edges)
    rng = np.random.default_rng(0)
    x0, y0, x1, y1 = ext.bounds
    px = rng.uniform(x0, x1, 300000)
    py = rng.uniform(y0, y1, 300000)
    shapely.prepare(ext)
    inside = shapely.contains_xy(ext, px, py)
    px, py = px[inside], py[inside]
    seg = reach.segment_of(axis.locate(px, py).chainage)
    which = np.full(len(px), -1)
    for k, p in enumerate(polys):
        shapely.prepare(p)
        which[shapely.contains_xy(p, px, py)] = k
    agree = np.mean(which == seg)
    # disagreement only within a sample spacing of a boundary inside bends
    assert agree > 0.9995, agree


def test_cuts_are_cross_sections_on_straights():
    axis = ReachAxis([0.0, 2500.0, 2500.0], [0.0, 0.0, 1500.0], UTM)  # east, then north
    ext = shapely.box(-20, -60, 2560, 1500)
    edges = segment_edges(axis.start_m, axis.end_m, 1000.0)
    polys = chainage_polygons(axis, edges, ext)
    assert_partition(polys, ext)
    # the first two segments lie on the straight along x: cut by the perpendiculars x = 1000, 2000
    b0 = polys[0].bounds
    b1 = polys[1].bounds
    assert b0[2] == pytest.approx(1000.0, abs=1e-6) and b0[0] == pytest.approx(-20.0)
    assert b1[0] == pytest.approx(1000.0, abs=1e-6) and b1[2] == pytest.approx(2000.0, abs=1e-6)
    # the cut between segments 3 and 4 (chainage 3000, on the northward straight) is y = 500
    shared = shapely.intersection(polys[2].boundary, polys[3].boundary)
    ys = shapely.get_coordinates(shared)[:, 1]
    assert np.allclose(ys, 500.0, atol=1e-6)


def test_neck_is_split_between_the_arms(meander):
    ch, axis, ext = meander
    edges = segment_edges(axis.start_m, axis.end_m, 100.0)
    polys = chainage_polygons(axis, edges, ext)
    # every polygon of this channel is one piece: no cut reaches across into the other arm
    assert all(p.geom_type == "Polygon" for p in polys)
    # points in the overlap of the two arms' channels go to the nearer arm's polygon
    reach = Reach(axis, edges)
    gx, gy = np.meshgrid(np.arange(2600.0, 2850.0, 1.0), np.arange(900.0, 1100.0, 1.0))
    px, py = gx.ravel(), gy.ravel()
    inside = shapely.contains_xy(ext, px, py)
    px, py = px[inside], py[inside]
    s, d, second = ch.exact(px, py)
    # not within 1 m of the line equidistant from both arms, nor within 2 m (the polyline's
    # departure from the arcs) of a segment boundary
    clear = (second > d + 2.0) & (np.min(np.abs(s[:, None] - edges[None, :]), axis=1) > 2.0)
    seg = reach.segment_of(s[clear])
    for k in np.unique(seg):
        m = seg == k
        assert np.mean(shapely.contains_xy(polys[k], px[clear][m], py[clear][m])) > 0.995


def test_extent_must_overlap_the_centreline():
    axis = ReachAxis([0.0, 1000.0], [0.0, 0.0], UTM)
    with pytest.raises(ChannelHabitatError, match="does not overlap") as err:
        chainage_polygons(axis, [0.0, 1000.0], shapely.box(0, 500, 1000, 600))
    assert err.value.parameter == "EXTENT"
    with pytest.raises(ChannelHabitatError, match="empty"):
        chainage_polygons(axis, [0.0, 1000.0], shapely.Polygon())


def test_extent_beyond_the_ends_goes_to_the_end_segments():
    axis = ReachAxis([0.0, 1000.0], [0.0, 0.0], UTM)
    ext = shapely.box(-200, -50, 1300, 50)
    polys = chainage_polygons(axis, [0.0, 500.0, 1000.0], ext)
    assert polys[0].bounds[0] == pytest.approx(-200.0) and polys[1].bounds[2] == pytest.approx(1300.0)
    assert_partition(polys, ext)


def test_geographic_axis_polygons():
    from pyproj import Geod

    geod = Geod(ellps="WGS84")
    xs, ys = [145.0], [-37.0]
    for az in (80.0, 120.0, 60.0, 90.0):
        lo, la, _ = geod.fwd(xs[-1], ys[-1], az, 1500.0)
        xs.append(lo)
        ys.append(la)
    axis = ReachAxis(xs, ys, WGS84)
    ext = buffer_extent(axis, 50.0)
    polys = chainage_polygons(axis, segment_edges(axis.start_m, axis.end_m, 1000.0), ext)
    assert len(polys) == 6
    total = sum(area_m2(axis, p) for p in polys)
    assert total == pytest.approx(area_m2(axis, ext), rel=1e-6)
    # a 100 m wide band 6 km long, less what the joins' round buffer takes or adds: about 600 000 m2
    assert total == pytest.approx(6000 * 100, rel=0.01)


def test_tables_and_posts():
    t = interval_table([0.0, 1000.0, 2000.0, 2350.0], 1000.0)
    assert t["partial"].tolist() == [False, False, True]
    np.testing.assert_allclose(t["length_m"], [1000, 1000, 350])
    axis = ReachAxis([0.0, 2350.0], [0.0, 0.0], UTM, datum_m=12000.0)
    np.testing.assert_allclose(post_chainages(axis, 1000.0), [12000, 13000, 14000, 14350])
    assert [post_label(c) for c in (12000.0, 12500.0, 14350.0, 0.0)] == ["km 12", "km 12.5", "km 14.35", "km 0"]
    assert [post_label(c, label_decimals(1000.0)) for c in (13000.0, 34999.35)] == ["km 13", "km 35.0"]
    assert [post_label(c, label_decimals(250.0)) for c in (250.0, 1500.0, 2000.0)] == ["km 0.25", "km 1.50", "km 2"]
