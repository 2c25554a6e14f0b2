"""gis/patches.py: polygons per class and segment from rasters and meshes, sieving, face merging."""

import numpy as np
import pytest
import shapely

from plugin.core import habitat
from plugin.core.classes import scheme_from_rows, velocity_preset
from plugin.core.field import GridSupport, HydraulicField, MeshSupport
from plugin.core.reach import Reach, ReachAxis
from plugin.gis import patches

UTM = "EPSG:32755"


def _wkt():
    from pyproj import CRS

    return CRS.from_epsg(32755).to_wkt()


def grid_run(codes_grid, cell=1.0, seg_len=None):
    """A raster run whose speeds put each cell in the class given by ``codes_grid`` (0 = dry); a straight
    axis along +x through the middle row, segments ``seg_len`` long."""
    rows, cols = codes_grid.shape
    speed_of_code = {1: 0.01, 2: 0.1, 3: 0.25, 4: 0.5}
    idx = np.flatnonzero(codes_grid.ravel() > 0)
    rr, cc = np.divmod(idx, cols)
    gt = (0.0, cell, 0.0, rows * cell, 0.0, -cell)
    x = (cc + 0.5) * cell
    y = rows * cell - (rr + 0.5) * cell
    speed = np.array([speed_of_code[c] for c in codes_grid.ravel()[idx]], dtype=np.float32)
    fld = HydraulicField(x, y, np.full(idx.size, cell * cell), np.ones(idx.size, np.float32), speed,
                         crs_wkt=_wkt(), support=GridSupport(gt, (rows, cols), idx))
    axis = ReachAxis([-1e-3, cols * cell + 1e-3], [rows * cell / 2] * 2, _wkt())
    edges = [axis.start_m, axis.end_m] if seg_len is None else \
        list(np.arange(axis.start_m, axis.end_m, seg_len)) + [axis.end_m]
    reach = Reach(axis, edges, [axis.start_m, axis.end_m], ["all"])
    return habitat.analyse_run(fld, reach, velocity_preset())


def test_raster_patches_dissolve_per_class_and_segment_and_stay_valid():
    g = np.array([[1, 2, 1, 2],
                  [2, 1, 2, 1],  # a checkerboard: parts of one class touch only at corners
                  [1, 1, 0, 4],
                  [3, 3, 4, 4]])
    ra = grid_run(g, seg_len=2.0)
    p = patches.raster_patches(ra)
    assert all(shapely.is_valid(m) for m in p.geometries)
    assert len({(s, c) for s, c in zip(p.columns["segment"], p.columns["class"])}) == len(p)
    for seg, code, area, n, mp in zip(p.columns["segment"], p.columns["class_code"], p.columns["area_m2"],
                                      p.columns["n_parts"], p.geometries):
        cols = slice(2 * (seg - 1), 2 * seg)
        assert area == (g[:, cols] == code).sum()
        assert mp.area == pytest.approx(area)
        assert n == len(shapely.get_parts(mp))
    # class 1 in segment 1: three cells, one 4-connected pair and one cell touching it at a corner
    i = [k for k in range(len(p)) if p.columns["segment"][k] == 1 and p.columns["class_code"][k] == 1][0]
    assert p.columns["n_parts"][i] == 2
    assert shapely.union_all(p.geometries).area == pytest.approx((g > 0).sum())


def test_raster_sieve_merges_small_patches_into_the_largest_neighbour():
    g = np.full((6, 6), 2)
    g[2, 2] = 4  # one fast cell inside slow water
    g[0:3, 4:6] = 3  # a 6-cell moderate patch: kept
    ra = grid_run(g)
    p = patches.raster_patches(ra, min_area_m2=4.0)
    got = dict(zip(p.columns["class"], p.columns["area_m2"]))
    assert "fast" not in got and got["slow"] == 30 and got["moderate"] == 6
    assert any("merged" in n for n in p.notes)
    # statistics keep the unsieved classes
    assert ra.reach_stats["area_fast_m2"][0] == 1.0


def quad_mesh(nx, ny, h=1.0):
    gx, gy = np.meshgrid(np.arange(nx + 1) * h, np.arange(ny + 1) * h)
    i, j = np.meshgrid(np.arange(nx), np.arange(ny))
    n0 = (j * (nx + 1) + i).ravel()
    fn = np.column_stack([n0, n0 + 1, n0 + nx + 2, n0 + nx + 1])
    return gx.ravel().astype(float), gy.ravel().astype(float), fn


def test_face_polygons_adjacency_and_mesh_sieve():
    nx_, ny_ = 3, 3
    node_x, node_y, fn = quad_mesh(nx_, ny_)
    sup = MeshSupport(node_x, node_y, fn, np.arange(len(fn)))
    polys = patches.face_polygons(sup)
    assert shapely.area(polys).tolist() == [1.0] * 9
    fa, fb, length = patches.face_adjacency(sup)
    assert len(fa) == 12 and np.all(length == 1.0)  # a 3 x 3 grid has 12 inner edges
    codes = np.full(9, 2, dtype=np.uint8)
    codes[4] = 3  # the middle face differs
    area = np.ones(9)
    np.testing.assert_array_equal(patches.sieve_mesh(codes, area, sup, 1.5), np.full(9, 2))
    np.testing.assert_array_equal(patches.sieve_mesh(codes, area, sup, 0.5), codes)
    # a small patch takes the class it shares the longest boundary with
    codes = np.array([1, 1, 1,
                      1, 3, 1,
                      2, 2, 2], dtype=np.uint8)  # face 4 borders class 1 on 3 edges, class 2 on 1
    got = patches.sieve_mesh(codes, area, sup, 1.5)
    assert got[4] == 1


def test_merge_faces_with_hanging_nodes():
    # a 2 m square beside two 1 m squares: the big face's edge holds no node at y = 1 (a hanging node)
    node_x = np.array([0.0, 2.0, 2.0, 0.0, 3.0, 3.0, 2.0, 3.0])
    node_y = np.array([0.0, 0.0, 2.0, 2.0, 0.0, 1.0, 1.0, 2.0])
    fn = np.array([[0, 1, 2, 3], [1, 4, 5, 6], [6, 5, 7, 2]])
    sup = MeshSupport(node_x, node_y, fn, np.arange(3))
    polys = patches.face_polygons(sup)
    merged = patches.merge_faces(polys, shapely.area(polys))
    assert shapely.is_valid(merged) and merged.area == pytest.approx(6.0)
    assert shapely.get_num_geometries(merged) == 1


def test_mesh_patches_and_footprints():
    node_x, node_y, fn = quad_mesh(4, 2, h=5.0)
    fx = node_x[fn].mean(axis=1)
    fy = node_y[fn].mean(axis=1)
    speed = np.where(fx < 10, 0.5, 0.1).astype(np.float32)
    fld = HydraulicField(fx, fy, np.full(len(fn), 25.0), np.ones(len(fn), np.float32), speed, crs_wkt=_wkt(),
                         support=MeshSupport(node_x, node_y, fn, np.arange(len(fn))))
    axis = ReachAxis([-0.001, 20.001], [5.0, 5.0], _wkt())
    reach = Reach(axis, [axis.start_m, 10.0, axis.end_m], [axis.start_m, 15.0, axis.end_m], ["a", "b"])
    ra = habitat.analyse_run(fld, reach, velocity_preset())
    p = patches.mesh_patches(ra)
    assert sorted(zip(p.columns["segment"], p.columns["class"])) == [(1, "fast"), (2, "slow")]
    assert all(g.area == pytest.approx(100.0) for g in p.geometries)
    seg_geoms, zone_geoms = patches.wet_footprints(ra)
    assert [g.area for g in seg_geoms] == pytest.approx([100.0, 100.0])
    assert [g.area for g in zone_geoms] == pytest.approx([150.0, 50.0])


def test_custom_scheme_gaps_leave_no_patch():
    s = scheme_from_rows([["slow", "", "0.2"]])
    g = np.array([[2, 4], [2, 2]])
    ra = grid_run(g)
    ra2 = habitat.analyse_run(ra.field, ra.reach, s)
    p = patches.raster_patches(ra2)
    assert p.columns["class"] == ["slow"] and p.columns["area_m2"].tolist() == [3.0]
    assert any("match no class" in n for n in ra2.notes)
