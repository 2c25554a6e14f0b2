"""core/regrid: common grids, exact re-indexing, face-constant sampling at cell centres (checked against
shapely's point-in-polygon), fields on a grid."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from scipy.spatial import Delaunay

from plugin.core import regrid
from plugin.core.errors import ChannelHabitatError
from plugin.core.field import GridSupport, HydraulicField, MeshSupport


def _spec(x0=0.0, y0=100.0, cell=1.0, rows=100, cols=100):
    return regrid.GridSpec((x0, cell, 0.0, y0, 0.0, -cell), (rows, cols))


def _shapely_owner(node_x, node_y, face_nodes, px, py):
    """Independent reference: for every point, the faces (shapely polygons) that contain it or touch it."""
    polys = [shapely.Polygon(np.column_stack([node_x[f[f >= 0]], node_y[f[f >= 0]]])) for f in face_nodes]
    tree = shapely.STRtree(polys)
    pts = shapely.points(px, py)
    inside = {}
    for kind in ("contains", "touches"):
        q = tree.query(pts, predicate="intersects")
        for p, f in zip(*q):
            rel = "contains" if polys[f].contains(pts[p]) else "touches"
            if rel == kind:
                inside.setdefault(int(p), []).append((kind, int(f)))
    return polys, inside


def test_sample_faces_matches_shapely_on_a_triangle_mesh():
    rng = np.random.default_rng(7)
    pts = rng.uniform(3.0, 97.0, size=(300, 2))
    tri = Delaunay(pts)
    fn = tri.simplices.astype(np.int64)
    spec = _spec(cell=1.3, rows=80, cols=80)
    cells, pos = regrid.sample_faces(pts[:, 0], pts[:, 1], fn, spec)
    allc = np.arange(spec.n_cells)
    cx, cy = spec.centres(allc)
    polys, owner = _shapely_owner(pts[:, 0], pts[:, 1], fn, cx, cy)
    got = dict(zip(cells.tolist(), pos.tolist()))
    for c in allc:
        rel = owner.get(int(c), [])
        strictly = [f for k, f in rel if k == "contains"]
        if strictly:  # a centre strictly inside a face belongs to that face
            assert got.get(int(c)) == strictly[0], c
        elif rel:  # on an edge or vertex: one of the touching faces (or none on the hull)
            assert got.get(int(c), -1) in [f for _, f in rel] + [-1]
        else:
            assert int(c) not in got
    hull = shapely.MultiPolygon(polys).buffer(0)
    # every centre strictly inside the hull is assigned exactly once (np.unique in cells = no duplicates)
    assert len(np.unique(cells)) == len(cells)
    inside_hull = shapely.contains_xy(hull, cx, cy)
    assert set(np.flatnonzero(inside_hull)) <= set(cells.tolist())


def test_centres_on_shared_edges_go_to_exactly_one_face():
    # 2 m squares with edges at even coordinates, sampled on a 1 m grid offset so centres fall on edges
    n = 10
    gx, gy = np.meshgrid(np.arange(n + 1) * 2.0, np.arange(n + 1) * 2.0)
    nx_, ny_ = gx.ravel(), gy.ravel()
    i, j = np.meshgrid(np.arange(n), np.arange(n))
    n0 = (j * (n + 1) + i).ravel()
    fn = np.column_stack([n0, n0 + 1, n0 + n + 2, n0 + n + 1])
    spec = regrid.GridSpec((-0.5, 1.0, 0.0, 20.5, 0.0, -1.0), (21, 21))  # centres at 0, 1, 2, ... 20
    cells, pos = regrid.sample_faces(nx_, ny_, fn, spec)
    cx, cy = spec.centres(cells)
    assert len(np.unique(cells)) == len(cells)
    # centres strictly inside the 20 x 20 m square (0 < x < 20, 0 < y < 20) are all assigned
    inner = {int(c) for c in np.arange(spec.n_cells)
             if 0 < spec.centres(c)[0] < 20 and 0 < spec.centres(c)[1] < 20}
    assert inner <= set(cells.tolist())
    # each assigned centre lies in (or on the boundary of) its face, checked with shapely
    for x, y, f in zip(cx, cy, pos):
        poly = shapely.Polygon(np.column_stack([nx_[fn[f]], ny_[fn[f]]]))
        assert poly.intersects(shapely.Point(x, y))


def test_non_convex_and_padded_faces():
    # an L-shaped hexagon and a triangle padded with -1 in a 6-column face table
    node_x = np.array([0, 4, 4, 2, 2, 0, 5, 8, 5], dtype=float)
    node_y = np.array([0, 0, 2, 2, 4, 4, 0, 0, 3], dtype=float)
    fn = np.array([[0, 1, 2, 3, 4, 5], [6, 7, 8, -1, -1, -1]])
    spec = regrid.GridSpec((0.0, 0.25, 0.0, 4.0, 0.0, -0.25), (16, 32))
    cells, pos = regrid.sample_faces(node_x, node_y, fn, spec)
    cx, cy = spec.centres(np.arange(spec.n_cells))
    ell = shapely.Polygon(np.column_stack([node_x[:6], node_y[:6]]))
    tri = shapely.Polygon(np.column_stack([node_x[6:], node_y[6:]]))
    expect_l = set(np.flatnonzero(shapely.contains_xy(ell, cx, cy)).tolist())
    expect_t = set(np.flatnonzero(shapely.contains_xy(tri, cx, cy)).tolist())
    got_l = set(cells[pos == 0].tolist())
    got_t = set(cells[pos == 1].tolist())
    assert got_l == expect_l  # no centre lies on these edges (quarter-metre centres at .125, .375, ...)
    assert got_t == expect_t
    assert len(expect_l) * 0.0625 == pytest.approx(ell.area, rel=0.05)


def test_sample_faces_only_given_faces_and_chunking():
    node_x = np.array([0, 10, 10, 0, 20, 20], dtype=float)
    node_y = np.array([0, 0, 10, 10, 0, 10], dtype=float)
    fn = np.array([[0, 1, 2, 3], [1, 4, 5, 2]])
    spec = regrid.GridSpec((0.0, 1.0, 0.0, 10.0, 0.0, -1.0), (10, 20))
    cells, pos = regrid.sample_faces(node_x, node_y, fn, spec, faces=np.array([1]))
    x, _ = spec.centres(cells)
    assert len(cells) == 100 and np.all(x > 10) and np.all(pos == 0)
    c_all, p_all = regrid.sample_faces(node_x, node_y, fn, spec)
    c_small, p_small = regrid.sample_faces(node_x, node_y, fn, spec, max_pairs=7)  # many chunks
    np.testing.assert_array_equal(c_all, c_small)
    np.testing.assert_array_equal(p_all, p_small)
    assert len(c_all) == 200


def test_snap_grid_covers_and_aligns():
    spec = regrid.snap_grid((3.2, -7.9, 41.1, 12.0), 2.5, origin=(0.5, 0.5))
    xmin, ymin, xmax, ymax = spec.bounds
    assert xmin <= 3.2 and ymin <= -7.9 and xmax >= 41.1 and ymax >= 12.0
    assert xmin > 3.2 - 2.5 and xmax < 41.1 + 2.5 and ymin > -7.9 - 2.5 and ymax < 12.0 + 2.5
    for v in (xmin, ymin, xmax, ymax):
        assert ((v - 0.5) / 2.5) == pytest.approx(round((v - 0.5) / 2.5))
    assert spec.transform[1] == 2.5 and spec.transform[5] == -2.5
    with pytest.raises(ChannelHabitatError, match="too many"):
        regrid.snap_grid((0, 0, 1e6, 1e6), 0.01)
    with pytest.raises(ChannelHabitatError):
        regrid.snap_grid((0, 0, 1, 1), 0.0)


def test_reindex_on_aligned_grids():
    src = regrid.GridSpec((10.0, 2.0, 0.0, 50.0, 0.0, -2.0), (5, 7))
    dst = regrid.GridSpec((4.0, 2.0, 0.0, 54.0, 0.0, -2.0), (10, 6))  # x from 4 to 16
    idx = np.arange(src.n_cells)
    out = regrid.reindex(idx, src, dst)
    sx, sy = src.centres(idx)
    ok = out >= 0
    dx_, dy_ = dst.centres(out[ok])
    np.testing.assert_allclose(dx_, sx[ok])
    np.testing.assert_allclose(dy_, sy[ok])
    # cells beyond the destination's right edge (x centre > 16) are -1, the others are all kept
    np.testing.assert_array_equal(~ok, sx > 16.0)
    assert (~ok).sum() == 4 * 5
    assert regrid.aligned_offset(src, regrid.GridSpec((5.0, 2.0, 0.0, 54.0, 0.0, -2.0), (10, 10))) is None
    assert regrid.aligned_offset(src, regrid.GridSpec((4.0, 1.0, 0.0, 54.0, 0.0, -1.0), (10, 10))) is None


def test_field_on_grid_keeps_wet_cells_sorted():
    spec = _spec(rows=4, cols=5)
    cells = np.array([7, 3, 12, 0])
    f = regrid.field_on_grid(spec, cells, [1.0, 0.01, 2.0, np.nan], [0.1, 0.2, 0.3, 0.4], "", 0.05)
    np.testing.assert_array_equal(f.support.index, [7, 12])
    np.testing.assert_allclose(f.depth, [1.0, 2.0])
    np.testing.assert_allclose(f.x, [2.5, 2.5])  # cells 7 and 12: column 2 -> x = 2.5
    np.testing.assert_allclose(f.y, [98.5, 97.5])
    assert f.area.tolist() == [1.0, 1.0]


def test_element_size_and_wet_bounds():
    g = HydraulicField(np.zeros(2), np.zeros(2), np.full(2, 4.0), np.ones(2, np.float32), np.ones(2, np.float32),
                       support=GridSupport((100.0, 2.0, 0.0, 200.0, 0.0, -2.0), (10, 10), np.array([11, 38])))
    assert regrid.element_size_m(g) == 2.0
    assert regrid.wet_bounds(g) == (102.0, 192.0, 118.0, 198.0)  # cols 1..8, rows 1..3 (edges: rows 1 to 4)
    node_x = np.array([0, 3, 3, 0, 9], dtype=float)
    node_y = np.array([0, 0, 3, 3, 0], dtype=float)
    fn = np.array([[0, 1, 2, 3], [1, 4, 2, -1]])
    m = HydraulicField(np.zeros(2), np.zeros(2), np.array([9.0, 9.0]), np.ones(2, np.float32), np.ones(2, np.float32),
                       support=MeshSupport(node_x, node_y, fn, np.array([0, 1])))
    assert regrid.element_size_m(m) == 3.0
    assert regrid.wet_bounds(m) == (0.0, 0.0, 9.0, 3.0)
    np.testing.assert_allclose(regrid.mesh_face_areas(node_x, node_y, fn, [0, 1]), [9.0, 9.0])
