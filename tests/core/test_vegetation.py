"""core/vegetation.py against independent shapely constructions and hand calculations.

Sources: shapely/GEOS (reference library) for areas, unions, buffers and lengths; hand
calculations for the edge-class split (stated beside each check).
"""

import numpy as np
import pytest
import shapely
from shapely.geometry import MultiPolygon, Polygon, box

from plugin.core.errors import ChannelHabitatError
from plugin.core.field import GridSupport, HydraulicField, MeshSupport
from plugin.core.vegetation import (
    UNCLASSIFIED,
    GridElements,
    VegetationOverlay,
    boundary_pieces,
    community_summary,
    make_stands,
    stand_table,
)

# --------------------------------------------------------------------------------------------
# helpers: synthetic runs built without the module under test
# --------------------------------------------------------------------------------------------


def grid_field(depth_grid, x0=0.0, y0=None, dx=2.0, speed_grid=None):
    """A HydraulicField from a full 2-D depth grid (NaN = dry); north-up, row 0 at the top."""
    rows, cols = depth_grid.shape
    y0 = rows * dx if y0 is None else y0
    gt = (x0, dx, 0.0, y0, 0.0, -dx)
    flat = depth_grid.ravel()
    idx = np.flatnonzero(np.isfinite(flat) & (flat >= 0.05))
    r, c = np.divmod(idx, cols)
    speed = np.full(idx.size, 0.1, np.float32) if speed_grid is None else speed_grid.ravel()[idx].astype(np.float32)
    return HydraulicField(x=x0 + (c + 0.5) * dx, y=y0 - (r + 0.5) * dx, area=np.full(idx.size, dx * dx),
                          depth=flat[idx].astype(np.float32), speed=speed,
                          support=GridSupport(gt, (rows, cols), idx))


def wet_boxes(fld):
    """The wet cells as shapely boxes, built directly from the geotransform (independent route)."""
    x0, dx, _, y0, _, dy = fld.support.transform
    r, c = np.divmod(fld.support.index, fld.support.shape[1])
    return shapely.box(x0 + c * dx, y0 + (r + 1) * dy, x0 + (c + 1) * dx, y0 + r * dy)


def codes_by_speed(fld, bounds=(0.05, 0.2, 0.3)):
    return (np.searchsorted(np.asarray(bounds), fld.speed, side="right") + 1).astype(np.uint8)


NAMES = ["very slow", "slow", "moderate", "fast"]


@pytest.fixture(scope="module")
def random_run():
    rng = np.random.default_rng(7)
    rows, cols = 60, 90
    yy, xx = np.mgrid[0:rows, 0:cols]
    bed = 0.04 * xx + 0.3 * np.sin(yy / 5.0)  # a bank rising to the east
    depth = 2.0 - bed + rng.normal(0, 0.05, bed.shape)
    depth[depth < 0.05] = np.nan
    speed = rng.uniform(0.0, 0.45, bed.shape)
    return grid_field(depth, dx=2.0, speed_grid=speed)


@pytest.fixture(scope="module")
def stands():
    hole = Polygon([(60, 40), (140, 30), (150, 90), (70, 100)], [[(90, 55), (110, 55), (105, 70)]])
    rot = shapely.affinity.rotate(box(20, 10, 60, 25), 33, origin="center")
    multi = MultiPolygon([box(100.3, 2.2, 119.9, 18.7), Polygon([(150, 20), (175, 25), (160, 50)])])
    far = box(500, 500, 510, 510)  # outside the grid
    return make_stands([hole, rot, multi, far], [11, 12, 13, 14], ["reeds", "sedge", "reeds", "trees"])


# --------------------------------------------------------------------------------------------
# wetted area and depth
# --------------------------------------------------------------------------------------------


def test_grid_overlap_matches_brute_force_intersection():
    # reference: shapely intersection of every cell of the window (no quadtree)
    el = GridElements((3.0, 1.5, 0, 200.0, 0, -1.5), (100, 120))
    poly = Polygon([(10, 60), (150, 40), (170, 170), (40, 190), (70, 120)]).buffer(3.3)
    ids, area = el.overlap(poly)
    allids = np.arange(100 * 120)
    ref = shapely.area(shapely.intersection(el.polygons(allids), poly))
    assert set(ids.tolist()) == set(np.flatnonzero(ref > 0).tolist())
    np.testing.assert_allclose(area, ref[ids], rtol=1e-9, atol=1e-9)


def test_wetted_area_equals_intersection_with_union_of_wet_cells(random_run, stands):
    ov = VegetationOverlay(stands, edge_distance_m=6.0)
    res = ov.run(random_run, codes_by_speed(random_run), NAMES)
    water = shapely.union_all(wet_boxes(random_run))
    for i, g in enumerate(stands.geometries):
        # reference: shapely (GEOS) area of stand ∩ union of wet cells
        ref = shapely.area(shapely.intersection(g, water))
        assert res.columns["wet_area_m2"][i] == pytest.approx(ref, rel=1e-9, abs=1e-6)
        assert res.columns["area_m2"][i] == pytest.approx(g.area)
        pct = 100 * ref / g.area
        assert res.columns["wet_pct"][i] == pytest.approx(pct, rel=1e-9, abs=1e-9)
    assert res.columns["wet_area_m2"][3] == 0 and np.isnan(res.columns["depth_mean_m"][3])


def test_depth_mean_and_max_area_weighted(random_run, stands):
    ov = VegetationOverlay(stands)
    res = ov.run(random_run, codes_by_speed(random_run), NAMES)
    cells = wet_boxes(random_run)
    d = random_run.depth.astype(float)
    for i, g in enumerate(stands.geometries[:3]):
        # reference: per-cell shapely intersection areas as weights (numpy average)
        a = shapely.area(shapely.intersection(cells, g))
        assert res.columns["depth_mean_m"][i] == pytest.approx(np.average(d, weights=a), rel=1e-6)
        assert res.columns["depth_max_m"][i] == pytest.approx(d[a > 0].max(), rel=1e-6)


def test_class_areas_sum_and_match_per_class_unions(random_run, stands):
    ov = VegetationOverlay(stands)
    codes = codes_by_speed(random_run)
    res = ov.run(random_run, codes, NAMES)
    cells = wet_boxes(random_run)
    for j, nm in enumerate(NAMES):
        water = shapely.union_all(cells[codes == j + 1])
        key = f"wet_{nm.replace(' ', '_')}_m2"
        for i, g in enumerate(stands.geometries[:3]):
            ref = shapely.area(shapely.intersection(g, water))  # reference: shapely
            assert res.columns[key][i] == pytest.approx(ref, rel=1e-9, abs=1e-6)


def test_mesh_wetted_area_against_shapely():
    # a perturbed triangular mesh; reference: shapely area of stand ∩ union of wet triangles
    rng = np.random.default_rng(3)
    nx, ny = 30, 20
    gx, gy = np.meshgrid(np.arange(nx + 1) * 5.0, np.arange(ny + 1) * 5.0)
    gx = gx + rng.uniform(-1.2, 1.2, gx.shape) * (gx > 0) * (gx < nx * 5)
    gy = gy + rng.uniform(-1.2, 1.2, gy.shape) * (gy > 0) * (gy < ny * 5)
    node_x, node_y = gx.ravel(), gy.ravel()
    n = lambda i, j: j * (nx + 1) + i  # noqa: E731
    tris = []
    for j in range(ny):
        for i in range(nx):
            tris += [[n(i, j), n(i + 1, j), n(i + 1, j + 1)], [n(i, j), n(i + 1, j + 1), n(i, j + 1)]]
    fn = np.array(tris)
    # a few quads too (padding -1) to check mixed faces
    fn = np.hstack([fn, np.full((len(fn), 1), -1)])
    polys = shapely.polygons(np.stack([node_x[fn[:, :3]], node_y[fn[:, :3]]], axis=-1))
    cx, cy = shapely.get_coordinates(shapely.centroid(polys)).T
    depth = 1.5 - 0.012 * cx + rng.normal(0, 0.05, cx.size)
    wet = depth >= 0.05
    idx = np.flatnonzero(wet)
    fld = HydraulicField(x=cx[idx], y=cy[idx], area=shapely.area(polys[idx]), depth=depth[idx].astype(np.float32),
                         speed=np.full(idx.size, 0.25, np.float32),
                         support=MeshSupport(node_x, node_y, fn, idx))
    st = make_stands([Polygon([(40, 10), (130, 20), (120, 80), (60, 70)]), box(0, 0, 20, 20)])
    res = VegetationOverlay(st, 5.0).run(fld, np.full(idx.size, 3, np.uint8), NAMES)
    water = shapely.union_all(polys[idx])
    for i, g in enumerate(st.geometries):
        ref = shapely.area(shapely.intersection(g, water))
        assert res.columns["wet_area_m2"][i] == pytest.approx(ref, rel=1e-9)
        a = shapely.area(shapely.intersection(polys[idx], g))
        assert res.columns["depth_mean_m"][i] == pytest.approx(np.average(depth[idx], weights=a), rel=1e-6)


# --------------------------------------------------------------------------------------------
# channel-facing edge
# --------------------------------------------------------------------------------------------


def test_edge_split_by_class_hand_calculation():
    # Water occupies y in [-20, 0); class 1 (very slow) for x < 50, class 4 (fast) for x >= 50.
    # Stand: rectangle x 0..100, y 10..30; D = 15 m.
    # Hand calculation: the bottom side (distance 10) is within D over its whole 100 m, nearest
    # water below each point, so 50 m beside each class; each vertical side is within D from
    # y = 10 to y = 15 (distance to the water's top y = 0 is y): 5 m, beside class 1 on the left
    # (x = 0) and class 4 on the right (x = 100). Total 110 m: 55 m very slow, 55 m fast.
    dx = 1.0
    cols, rows = 160, 60  # x -30..130, y -20..40
    depth = np.full((rows, cols), np.nan)
    yc = 40 - (np.arange(rows) + 0.5) * dx
    depth[yc < 0, :] = 1.0
    speed = np.zeros((rows, cols))
    xc = -30 + (np.arange(cols) + 0.5) * dx
    speed[:, xc >= 50] = 0.5
    fld = grid_field(depth, x0=-30.0, y0=40.0, dx=dx, speed_grid=speed)
    st = make_stands([box(0, 10, 100, 30)])
    res = VegetationOverlay(st, edge_distance_m=15.0, step_m=0.25).run(fld, codes_by_speed(fld), NAMES)
    tol = 2 * 0.25
    assert res.columns["edge_m"][0] == pytest.approx(110.0, abs=2 * tol)
    assert res.columns["edge_very_slow_m"][0] == pytest.approx(55.0, abs=tol)
    assert res.columns["edge_fast_m"][0] == pytest.approx(55.0, abs=tol)
    assert res.columns["edge_slow_m"][0] == 0
    assert res.columns["perimeter_m"][0] == pytest.approx(240.0)  # 2 * (100 + 20), hand
    assert res.columns["wet_area_m2"][0] == 0
    assert res.columns["edge_main_class"][0] in ("very slow", "fast")
    # the edge lines: together as long as the edge, each within D of the water
    lines = [e["geometry"] for e in res.edges]
    assert sum(g.length for g in lines) == pytest.approx(res.columns["edge_m"][0], rel=1e-9)
    water = box(-30, -20, 130, 0)
    assert max(shapely.hausdorff_distance(g, shapely.intersection(g, water.buffer(15.6))) for g in lines) < 1e-6


def test_edge_total_against_buffer_intersection(random_run, stands):
    # reference: shapely length of boundary ∩ buffer(union of wet cells, D); the sampled edge is
    # exact to within `step` at each end of each stretch.
    D, step = 6.0, 0.2
    res = VegetationOverlay(stands, edge_distance_m=D, step_m=step).run(random_run, codes_by_speed(random_run), NAMES)
    water = shapely.union_all(wet_boxes(random_run))
    zone = shapely.buffer(water, D, quad_segs=64)
    for i, g in enumerate(stands.geometries):
        ref_geom = shapely.intersection(g.boundary, zone)
        ref = ref_geom.length
        n_ends = 2 * max(len(shapely.get_parts(shapely.line_merge(ref_geom))), 1)
        assert res.columns["edge_m"][i] == pytest.approx(ref, abs=n_ends * step + 1e-3 * ref + 1e-9)
    # class columns add up to the total
    tot = sum(res.columns[f"edge_{n.replace(' ', '_')}_m"] for n in NAMES)
    np.testing.assert_allclose(tot, res.columns["edge_m"], rtol=1e-12)


def test_boundary_through_water_counts_and_unclassified_class():
    depth = np.full((20, 20), 1.0)  # all wet, cells 1 m
    fld = grid_field(depth, x0=0.0, y0=20.0, dx=1.0)
    codes = np.zeros(fld.n, np.uint8)  # no class row matched anywhere
    st = make_stands([box(5, 5, 15, 12)])
    res = VegetationOverlay(st, 2.0).run(fld, codes, NAMES)
    assert UNCLASSIFIED in res.class_names
    assert res.columns["edge_unclassified_m"][0] == pytest.approx(34.0)  # whole perimeter, hand: 2*(10+7)
    assert res.columns["wet_pct"][0] == pytest.approx(100.0)
    assert res.columns["wet_unclassified_m2"][0] == pytest.approx(70.0)


def test_pieces_cover_rings_exactly():
    g = Polygon([(0, 0), (10, 0), (10, 7), (0, 7)], [[(2, 2), (4, 2), (4, 4)]])
    p = boundary_pieces([g], 0.3)
    assert p.length.sum() == pytest.approx(g.boundary.length)  # reference: shapely length
    assert p.length.max() <= 0.3 + 1e-12


# --------------------------------------------------------------------------------------------
# behaviour
# --------------------------------------------------------------------------------------------


def test_wetted_fraction_grows_with_water_level():
    # plausibility (common practice, no source): a higher pool wets more of a bank stand
    yy, xx = np.mgrid[0:50, 0:80]
    bed = 0.05 * xx  # bank rising to the east, 1 m cells
    st = make_stands([box(20, 5, 60, 45)])
    ov = VegetationOverlay(st)
    pct = []
    for level in (1.0, 1.5, 2.0, 2.5):
        d = level - bed
        d[d < 0.05] = np.nan
        fld = grid_field(d, x0=0.0, y0=50.0, dx=1.0)
        pct.append(ov.run(fld, codes_by_speed(fld), NAMES).columns["wet_pct"][0])
    assert all(b > a for a, b in zip(pct, pct[1:]))
    # hand: wet where 0.05 x_cell_centre <= level - 0.05 -> cells with centre x <= 20 (level - 0.05)
    assert pct[1] == pytest.approx(100 * (29 - 20) / 40)  # level 1.5: centres 20.5..28.5 wet


def test_table_and_community_summary(random_run, stands):
    ov = VegetationOverlay(stands, 6.0)
    res_a = ov.run(random_run, codes_by_speed(random_run), NAMES)
    shallow = random_run.subset(random_run.depth > 1.0)
    res_b = ov.run(shallow, codes_by_speed(shallow), NAMES)
    table = stand_table(stands, [({"regime": "a", "q_mld": 100.0}, res_a), ({"regime": "b", "q_mld": 100.0}, res_b)])
    assert len(table["stand_id"]) == 8
    assert list(table["stand_id"][:4]) == [11, 12, 13, 14]
    summ = community_summary(table, ["regime", "q_mld"])
    i = [k for k in range(len(summ["community"])) if summ["community"][k] == "reeds" and summ["regime"][k] == "a"][0]
    # reference: shapely areas of the two reed stands and their wetted parts
    water = shapely.union_all(wet_boxes(random_run))
    reeds = [stands.geometries[0], stands.geometries[2]]
    a = sum(g.area for g in reeds)
    w = sum(shapely.intersection(g, water).area for g in reeds)
    assert summ["n_stands"][i] == 2
    assert summ["area_m2"][i] == pytest.approx(a)
    assert summ["wet_area_m2"][i] == pytest.approx(w, rel=1e-9)
    assert summ["wet_pct"][i] == pytest.approx(100 * w / a, rel=1e-9)
    e = res_a.columns["edge_m"][0] + res_a.columns["edge_m"][2]
    assert summ["edge_m"][i] == pytest.approx(e)
    pcts = sum(summ[f"edge_{n.replace(' ', '_')}_pct"][i] for n in NAMES)
    assert pcts == pytest.approx(100.0)


def test_bad_inputs():
    with pytest.raises(ChannelHabitatError) as err:
        make_stands([shapely.Point(0, 0)])
    assert err.value.parameter == "VEGETATION"
    with pytest.raises(ChannelHabitatError):
        make_stands([])
    bow = Polygon([(0, 0), (10, 10), (10, 0), (0, 10)])  # self-intersecting
    st = make_stands([bow])
    assert st.notes and st.geometries[0].is_valid
    assert st.geometries[0].area == pytest.approx(50.0)  # two triangles of 25 m2, hand
    with pytest.raises(ChannelHabitatError) as err:
        VegetationOverlay(st, edge_distance_m=0)
    assert err.value.parameter == "EDGE_DISTANCE"
