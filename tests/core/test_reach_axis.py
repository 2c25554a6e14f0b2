"""core/reach.py: building, orienting and measuring the reach axis; zones and segments; the
locate cache. Values are checked against hand calculations and independent numpy/pyproj code."""

import math

import numpy as np
import pytest
from pyproj import CRS, Geod

from plugin.core import reach as R
from plugin.core.errors import ChannelHabitatError
from plugin.core.field import GridSupport, HydraulicField, MeshSupport
from plugin.core.reach import (
    Reach,
    ReachAxis,
    axis_features,
    build_axis,
    join_parts,
    locate_field,
    parse_zone_breaks,
    segment_edges,
)

UTM = CRS.from_epsg(32755).to_wkt()
WGS84 = CRS.from_epsg(4326).to_wkt()


# ------------------------------------------------------------------------------------------------
# orientation, origin, datum
# ------------------------------------------------------------------------------------------------

def test_line_digitised_downstream_to_upstream_gets_zero_at_the_upstream_end():
    # the river flows east (+x); the line was drawn from the east (downstream) end westwards
    parts = [(np.array([3000.0, 2000.0, 1000.0, 0.0]), np.array([0.0, 50.0, -50.0, 0.0]))]
    axis, _ = build_axis(parts, UTM, direction="reversed")
    assert axis.x[0] == 0.0 and axis.start_m == 0.0
    loc = axis.locate(np.array([0.0, 3000.0]), np.array([0.0, 0.0]))
    seg = math.hypot(1000, 50) * 2 + math.hypot(1000, 100)
    np.testing.assert_allclose(loc.chainage, [0.0, seg], atol=1e-9)
    # a point north of the first stretch is on the left looking downstream (east)
    assert axis.locate(np.array([500.0]), np.array([100.0])).offset[0] > 0


def test_direction_inferred_from_velocity():
    x = np.linspace(3000.0, 0.0, 31)  # drawn from downstream to upstream
    y = 20.0 * np.sin(x / 300.0)
    gx, gy = np.meshgrid(np.arange(0, 3000, 10.0), np.arange(-60, 60, 10.0))
    u = np.full(gx.size, 0.4)  # water flows east
    v = np.zeros(gx.size)
    axis, notes = build_axis([(x, y)], UTM, direction="infer", velocity=(gx.ravel(), gy.ravel(), u, v, None))
    assert axis.x[0] < axis.x[-1]  # vertices now run east, with the flow
    assert "reversed" in axis.direction and "inferred from velocity" in axis.direction
    # and a field that agrees with the drawing keeps it
    axis2, _ = build_axis([(x[::-1], y[::-1])], UTM, direction="infer",
                          velocity=(gx.ravel(), gy.ravel(), u, v, None))
    assert axis2.x[0] < axis2.x[-1] and "as digitised" in axis2.direction
    # still water cannot tell
    with pytest.raises(ChannelHabitatError, match="DIRECTION|still water"):
        build_axis([(x, y)], UTM, direction="infer", velocity=(gx.ravel(), gy.ravel(), 0 * u, v, None))
    # a field flowing across the channel does not tell either
    with pytest.raises(ChannelHabitatError, match="do not show which way"):
        build_axis([(x, y)], UTM, direction="infer", velocity=(gx.ravel(), gy.ravel(), v, u, None))


def test_downstream_origin_and_datum():
    x = np.array([0.0, 1000.0, 2500.0])  # flows east
    y = np.zeros(3)
    up, _ = build_axis([(x, y)], UTM, datum_m=250.0)
    down, _ = build_axis([(x, y)], UTM, datum_m=250.0, origin="downstream")
    p = (np.array([2000.0, 100.0]), np.array([30.0, -30.0]))
    lu, ld = up.locate(*p), down.locate(*p)
    np.testing.assert_allclose(lu.chainage, [2250.0, 350.0])
    np.testing.assert_allclose(ld.chainage, [250.0 + 500.0, 250.0 + 2400.0])  # from the east end
    # offsets keep their meaning: + is the left bank looking downstream (north here)
    np.testing.assert_allclose(lu.offset, [30.0, -30.0])
    np.testing.assert_allclose(ld.offset, [30.0, -30.0])
    assert up.upstream_m == 250.0 and down.upstream_m == 2750.0
    # beyond the ends: flow sense, whichever the origin
    q = (np.array([-10.0, 2600.0]), np.array([0.0, 0.0]))
    for ax in (up, down):
        loc = ax.locate(*q)
        assert loc.clamped_upstream == 1 and loc.clamped_downstream == 1
        assert list(loc.end) == [-1, 1]
        assert list(loc.outside) == [True, True]
    # thirds are named in the direction of flow
    e, names = parse_zone_breaks("", down.start_m, down.end_m, down.origin)
    assert names == ["lower", "middle", "upper"]
    r = Reach(down)
    assert r.zone_names == ["lower", "middle", "upper"]
    assert r.zone_of(ld.chainage).tolist() == [0, 2]


def test_point_at_and_reprojection():
    axis = ReachAxis([0.0, 300.0, 300.0], [0.0, 0.0, 400.0], UTM)
    x, y, a = axis.point_at([0.0, 150.0, 500.0, 9999.0])
    np.testing.assert_allclose(x, [0.0, 150.0, 300.0, 300.0])
    np.testing.assert_allclose(y, [0.0, 0.0, 200.0, 400.0])
    np.testing.assert_allclose(a, [0.0, 0.0, math.pi / 2, math.pi / 2])
    geo = axis.reprojected(WGS84)
    assert geo.is_geographic and np.allclose(geo.chainage, axis.chainage)
    back = geo.reprojected(UTM)
    np.testing.assert_allclose(back.x, axis.x, atol=1e-6)


# ------------------------------------------------------------------------------------------------
# joining parts and bad input
# ------------------------------------------------------------------------------------------------

def test_parts_in_any_order_and_direction_are_joined():
    a = (np.array([0.0, 100.0]), np.array([0.0, 0.0]))
    b = (np.array([200.0, 100.0]), np.array([50.0, 0.4]))  # reversed, 0.4 m gap to a's end
    c = (np.array([200.0, 300.0]), np.array([50.0, 50.0]))
    x, y, notes = join_parts([c, a, b], tolerance_m=1.0)
    assert (x[0], x[-1]) in ((0.0, 300.0), (300.0, 0.0))
    if x[0] == 300.0:
        x, y = x[::-1], y[::-1]
    np.testing.assert_allclose(x, [0, 100, 100, 200, 300])
    np.testing.assert_allclose(y, [0, 0, 0.4, 50, 50])
    assert "bridged" in notes[0]


def test_gap_is_named_with_its_size_and_place():
    a = (np.array([0.0, 100.0]), np.array([0.0, 0.0]))
    b = (np.array([112.0, 200.0]), np.array([0.0, 0.0]))
    with pytest.raises(ChannelHabitatError) as err:
        join_parts([a, b], tolerance_m=1.0)
    msg = str(err.value)
    assert "gap of 12.00 m" in msg and "(100.0, 0.0)" in msg and "(112.0, 0.0)" in msg
    assert err.value.parameter == "CENTRELINE"
    x, _, _ = join_parts([a, b], tolerance_m=15.0)
    assert len(x) == 4


def test_branching_parts_are_refused():
    a = (np.array([0.0, 100.0]), np.array([0.0, 0.0]))
    b = (np.array([100.0, 200.0]), np.array([0.0, 0.0]))
    c = (np.array([100.0, 100.0]), np.array([0.0, 100.0]))
    with pytest.raises(ChannelHabitatError, match="branches"):
        join_parts([a, b, c])


@pytest.mark.parametrize("parts, match", [
    ([], "no line"),
    ([(np.array([5.0, 5.0, 5.0]), np.array([1.0, 1.0, 1.0]))], "zero length"),
    ([(np.array([0.0, 100.0, 100.0, 50.0, 50.0]), np.array([0.0, 0.0, 50.0, 50.0, -20.0]))], "crosses"),
    ([(np.array([0.0, 100.0, 0.0]), np.array([0.0, 0.0, 0.0]))], "crosses"),
    # a vertex touching another segment, a partial fold-back, a closed loop
    ([(np.array([0.0, 100.0, 100.0, 50.0]), np.array([0.0, 0.0, 50.0, 0.0]))], "crosses or touches"),
    ([(np.array([0.0, 100.0, 60.0]), np.array([0.0, 0.0, 0.0]))], "crosses or touches"),
    ([(np.array([0.0, 100.0, 100.0, 0.0, 0.0]), np.array([0.0, 0.0, 50.0, 50.0, 0.0]))], "crosses or touches"),
])
def test_bad_centrelines(parts, match):
    with pytest.raises(ChannelHabitatError, match=match) as err:
        build_axis(parts, UTM)
    assert err.value.parameter == "CENTRELINE"


def test_simple_lines_pass_the_check():
    from plugin.core.reach import check_simple

    t = np.linspace(0.0, 6.0 * np.pi, 4000)  # a tight meander that never touches itself
    check_simple(t * 100.0, 140.0 * np.sin(t))
    check_simple(np.array([0.0, 100.0, 100.0, 0.0]), np.array([0.0, 0.0, 50.0, 50.0]))  # a U, ends apart


def test_crossing_is_located():
    x = np.array([0.0, 100.0, 100.0, 50.0, 50.0])
    y = np.array([0.0, 0.0, 50.0, 50.0, -20.0])
    with pytest.raises(ChannelHabitatError, match=r"\(50\.0, 0\.0\)"):
        build_axis([(x, y)], UTM)


def test_m_values_must_increase():
    with pytest.raises(ChannelHabitatError, match="increase"):
        ReachAxis([0, 1, 2], [0, 0, 0], UTM, chainage=[0.0, 5.0, 5.0])
    ax = ReachAxis([0, 10, 20], [0, 0, 0], UTM, chainage=[100.0, 130.0, 200.0])
    assert ax.method == "from M values" and ax.start_m == 100.0 and ax.length_m == 100.0
    # inside a segment the M values are interpolated
    np.testing.assert_allclose(ax.locate(np.array([5.0, 15.0]), np.array([1.0, 1.0])).chainage, [115.0, 165.0])


def test_geographic_centreline_is_geodesic_and_warned():
    geod = Geod(ellps="WGS84")
    lon, lat, _ = geod.fwd([145.0] * 5, [-37.0] * 5, [10.0, 60.0, 100.0, 30.0, 80.0], [0, 0, 0, 0, 0])
    # a wandering line of five legs, each 2 km along a given azimuth
    xs, ys = [145.0], [-37.0]
    for az in (10.0, 60.0, 100.0, 30.0, 80.0):
        lo, la, _ = geod.fwd(xs[-1], ys[-1], az, 2000.0)
        xs.append(lo)
        ys.append(la)
    axis, notes = build_axis([(np.array(xs), np.array(ys))], WGS84)
    assert axis.method == "geodesic" and axis.is_geographic
    assert any("projected CRS in metres is preferred" in n for n in notes)
    np.testing.assert_allclose(axis.chainage, np.arange(6) * 2000.0, atol=1e-6)
    # a point on the third leg, 700 m along it (pyproj forward problem), and 30 m to its left
    lo, la, _ = geod.fwd(xs[2], ys[2], 100.0, 700.0)
    lo2, la2, _ = geod.fwd(lo, la, 100.0 - 90.0, 30.0)
    loc = axis.locate(np.array([lo, lo2]), np.array([la, la2]))
    np.testing.assert_allclose(loc.chainage, [4700.0, 4700.0], atol=0.05)
    np.testing.assert_allclose(loc.offset, [0.0, 30.0], atol=0.05)
    # point_at follows the geodesic
    px, py, _ = axis.point_at([4700.0])
    assert geod.inv(px[0], py[0], lo, la)[2] < 1e-3


# ------------------------------------------------------------------------------------------------
# zones and segments
# ------------------------------------------------------------------------------------------------

def test_zone_breaks():
    e, n = parse_zone_breaks("0 upper, 12000 middle; 25000 lower", 0.0, 37000.0)
    np.testing.assert_allclose(e, [0, 12000, 25000, 37000])
    assert n == ["upper", "middle", "lower"]
    # breaks before the reach start: the zone holding the start begins there
    e, n = parse_zone_breaks("0 a, 500 b, 5000 c", 800.0, 9000.0)
    np.testing.assert_allclose(e, [800, 5000, 9000])
    assert n == ["b", "c"]
    for bad, match in [("12000 middle, 500 upper", "increase"), ("0 a, 100 a", "differ"),
                       ("x upper", "chainage"), ("0 a, 40000 b", "beyond"), ("100 a, 500 b", "after the reach")]:
        with pytest.raises(ChannelHabitatError, match=match):
            parse_zone_breaks(bad, 0.0, 37000.0)


def test_segments_last_one_shorter():
    e = segment_edges(250.0, 3700.0, 1000.0)
    np.testing.assert_allclose(e, [250, 1250, 2250, 3250, 3700])
    r = Reach(ReachAxis([0, 3450], [0, 0], UTM, datum_m=250.0), e)
    assert r.segment_of([250.0, 1249.9, 1250.0, 3700.0, 3700.1, np.nan]).tolist() == [0, 0, 1, 3, -1, -1]
    with pytest.raises(ChannelHabitatError):
        segment_edges(0, 10, 0.0)


# ------------------------------------------------------------------------------------------------
# necks and bends reported on the axis
# ------------------------------------------------------------------------------------------------

def test_neck_and_tight_bend_are_reported():
    from tests.core.channels import Channel

    # an omega loop: the arms of the two 80 m arcs come within 69.4 m of each other
    ch = Channel([("line", 300), ("arc", 80, -145), ("arc", 120, 290), ("arc", 80, -145), ("line", 300),
                  ("arc", 30, 90), ("line", 300)])
    x, y, _ = ch.polyline(2.0)
    axis = ReachAxis(x, y, UTM)
    feats = axis_features(axis, 45.0)
    necks = [f for f in feats if f.kind == "neck"]
    bends = [f for f in feats if f.kind == "bend"]
    assert len(necks) == 1
    # independent: the closest approach of the two arms, from a 0.5 m resampling of the curve
    s = np.arange(0, ch.length, 0.5)
    px, py = ch.point(s)
    a = s < 700
    b = (s > 900) & (s < 1500)
    d = np.hypot(px[a][:, None] - px[b][None, :], py[a][:, None] - py[b][None, :])
    i, j = np.unravel_index(np.argmin(d), d.shape)
    assert necks[0].size_m == pytest.approx(d[i, j], abs=1.5)
    assert necks[0].chainage_m == pytest.approx(s[a][i], abs=15)
    assert necks[0].other_chainage_m == pytest.approx(s[b][j], abs=15)
    # the 30 m bend (radius below 45 m) is found near its middle
    mid_bend = 300 + 80 * math.radians(145) * 2 + 120 * math.radians(290) + 300 + 30 * math.pi / 4
    assert any(abs(f.chainage_m - mid_bend) < 30 and f.size_m < 45 for f in bends)


# ------------------------------------------------------------------------------------------------
# locate_field and its cache
# ------------------------------------------------------------------------------------------------

def grid_field(mask, cell=2.0, x0=-50.0, y0=60.0):
    rows, cols = mask.shape
    idx = np.flatnonzero(mask.ravel())
    r, c = np.divmod(idx, cols)
    n = idx.size
    return HydraulicField(x0 + (c + 0.5) * cell, y0 - (r + 0.5) * cell, np.full(n, cell * cell),
                          np.ones(n, np.float32), np.ones(n, np.float32), crs_wkt=UTM,
                          support=GridSupport((x0, cell, 0.0, y0, 0.0, -cell), (rows, cols), idx))


def test_locate_field_reuses_cells_located_before(monkeypatch):
    R.clear_locate_cache()
    axis = ReachAxis(np.linspace(0, 600, 13), 10 * np.sin(np.linspace(0, 6, 13)), UTM)
    reach = Reach(axis)
    rng = np.random.default_rng(0)
    m1 = rng.random((60, 350)) < 0.5
    m2 = m1.copy()
    m2[:, 100:] = rng.random((60, 250)) < 0.5
    f1, f2 = grid_field(m1), grid_field(m2)
    calls = []
    real = ReachAxis.locate

    def spy(self, x, y, *a, **k):
        calls.append(len(x))
        return real(self, x, y, *a, **k)

    monkeypatch.setattr(ReachAxis, "locate", spy)
    l1 = locate_field(reach, f1)
    l2 = locate_field(reach, f2)
    l3 = locate_field(reach, f2)
    new = np.count_nonzero(m2 & ~m1)
    assert calls == [np.count_nonzero(m1), new]  # second run: only its new cells; third: none
    direct = real(axis, f2.x, f2.y)
    np.testing.assert_array_equal(l2.chainage, direct.chainage)
    np.testing.assert_array_equal(l3.offset, direct.offset)
    np.testing.assert_array_equal(l2.ambiguity, direct.ambiguity)
    assert l1.n == f1.n
    # a different axis is a different cache entry
    other = Reach(ReachAxis(axis.x, axis.y + 1.0, UTM))
    locate_field(other, f2)
    assert calls[-1] == f2.n


def test_locate_field_cache_is_bounded(monkeypatch):
    R.clear_locate_cache()
    monkeypatch.setattr(R, "CACHE_MAX_ELEMENTS", 30000)
    axis = ReachAxis([0.0, 600.0], [0.0, 0.0], UTM)
    for shift in range(5):
        m = np.ones((50, 300), dtype=bool)
        locate_field(axis, grid_field(m, x0=-50.0 + shift))
    total = sum(len(e.index) for e in R._LOCATE_CACHE.values())
    assert total <= 30000 and len(R._LOCATE_CACHE) == 2


def test_locate_field_mesh_and_checks():
    R.clear_locate_cache()
    axis = ReachAxis([0.0, 100.0], [0.0, 0.0], UTM)
    nodes_x = np.array([0.0, 10.0, 10.0, 0.0, 20.0, 20.0])
    nodes_y = np.array([0.0, 0.0, 10.0, 10.0, 0.0, 10.0])
    fn = np.array([[0, 1, 2, 3], [1, 4, 5, 2]])
    sup = MeshSupport(nodes_x, nodes_y, fn, np.array([0, 1]))
    fld = HydraulicField(np.array([5.0, 15.0]), np.array([5.0, 5.0]), np.array([100.0, 100.0]),
                         np.ones(2, np.float32), np.ones(2, np.float32), crs_wkt=UTM, support=sup)
    loc = locate_field(axis, fld)
    np.testing.assert_allclose(loc.chainage, [5.0, 15.0])
    np.testing.assert_allclose(loc.offset, [5.0, 5.0])
    # a run in another CRS must be transformed first
    fld.crs_wkt = WGS84
    with pytest.raises(ChannelHabitatError, match="transform the axis"):
        locate_field(axis, fld)
    # a run that lies wholly beyond the ends does not overlap the reach
    far = HydraulicField(np.array([500.0, 600.0]), np.array([0.0, 1.0]), np.ones(2), np.ones(2, np.float32),
                         np.ones(2, np.float32), crs_wkt=UTM)
    with pytest.raises(ChannelHabitatError, match="do not overlap"):
        locate_field(axis, far)
