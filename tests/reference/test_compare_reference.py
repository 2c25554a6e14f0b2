"""compareregimes against geometry: two wet discs on different grids (and a mesh), compared on a common grid.

Sources:
* the area of the lens where two circles overlap, from the circular-segment area r^2 acos(x/r) - x sqrt(r^2 - x^2)
  (standard plane geometry; value from memory), cross-checked with shapely (reference library);
* the areas of each class transition: shapely intersections of the class regions (reference library).
Resampling error bound: a cell cut by a boundary is wrong by at most its whole area, so a set's area on a grid
of cell h is within (boundary length) x h of the true area (common practice, no source; the observed errors are
far smaller because cut cells gained and lost cancel).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely

from plugin.core import compare
from plugin.core.classes import velocity_preset
from plugin.core.field import GridSupport, HydraulicField, MeshSupport
from plugin.core.reach import Reach, ReachAxis, segment_edges
from plugin.gis import resample

WKT = 'PROJCS["WGS 84 / UTM zone 55S",GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563]],' \
      'PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433]],PROJECTION["Transverse_Mercator"],' \
      'PARAMETER["latitude_of_origin",0],PARAMETER["central_meridian",147],PARAMETER["scale_factor",0.9996],' \
      'PARAMETER["false_easting",500000],PARAMETER["false_northing",10000000],UNIT["metre",1],' \
      'AUTHORITY["EPSG","32755"]]'
X0, Y0 = 500000.0, 6000000.0
R1, R2, D = 40.0, 35.0, 25.0  # base disc radius, alternative disc radius, distance between centres (m)
R_INNER = 20.0  # the base is slow (0.1 m/s) within 20 m of its centre, fast (0.4 m/s) beyond
ALT_SPEED = 0.25  # the alternative is moderate everywhere


def lens_area(r1, r2, d):
    """Area where two circles overlap (circular segments on each side of the common chord)."""
    x1 = (d * d + r1 * r1 - r2 * r2) / (2 * d)  # distance from centre 1 to the chord
    x2 = d - x1
    seg = [r * r * math.acos(x / r) - x * math.sqrt(r * r - x * x) for r, x in ((r1, x1), (r2, x2))]
    return sum(seg)


def grid_run(cell, centre, radius, speed_of, origin=(0.0, 0.0)):
    """Cells whose centre lies in the disc are wet (1 m deep)."""
    cx, cy = centre
    x0 = X0 - 100.0 + origin[0]
    y_top = Y0 + 100.0 + origin[1]
    n = int(round(200.0 / cell))
    r, c = np.divmod(np.arange(n * n), n)
    x = x0 + (c + 0.5) * cell
    y = y_top - (r + 0.5) * cell
    dist = np.hypot(x - cx, y - cy)
    wet = dist < radius
    idx = np.flatnonzero(wet)
    return HydraulicField(x=x[idx], y=y[idx], area=np.full(idx.size, cell * cell), depth=np.ones(idx.size, np.float32),
                          speed=speed_of(dist[idx]).astype(np.float32), crs_wkt=WKT,
                          support=GridSupport((x0, cell, 0.0, y_top, 0.0, -cell), (n, n), idx))


def mesh_run(size, centre, radius, speed):
    """A mesh of square faces of ``size`` m (offset from the grids); faces whose centroid is in the disc are wet."""
    n = int(round(200.0 / size))
    gx, gy = np.meshgrid(X0 - 100.0 + 0.7 + np.arange(n + 1) * size, Y0 - 100.0 + 0.3 + np.arange(n + 1) * size)
    node_x, node_y = gx.ravel(), gy.ravel()
    i, j = np.meshgrid(np.arange(n), np.arange(n))
    n0 = (j * (n + 1) + i).ravel()
    fn = np.column_stack([n0, n0 + 1, n0 + n + 2, n0 + n + 1])
    fx, fy = node_x[fn].mean(axis=1), node_y[fn].mean(axis=1)
    wet = np.flatnonzero(np.hypot(fx - centre[0], fy - centre[1]) < radius)
    return HydraulicField(x=fx[wet], y=fy[wet], area=np.full(wet.size, size * size),
                          depth=np.ones(wet.size, np.float32), speed=np.full(wet.size, speed, np.float32), crs_wkt=WKT,
                          support=MeshSupport(node_x, node_y, fn, wet))


def reach():
    axis = ReachAxis([X0 - 100.0, X0 + 100.0], [Y0, Y0], WKT)
    return Reach(axis, segment_edges(0.0, 200.0, 50.0))


def base_speed(dist):
    return np.where(dist < R_INNER, 0.1, 0.4)


@pytest.fixture(scope="module")
def shapes():
    q = 512
    b = shapely.Point(X0, Y0).buffer(R1, quad_segs=q)
    inner = shapely.Point(X0, Y0).buffer(R_INNER, quad_segs=q)
    a = shapely.Point(X0 + D, Y0).buffer(R2, quad_segs=q)
    return {"base": b, "inner": inner, "ring": b.difference(inner), "alt": a}


@pytest.mark.parametrize("alt_kind, cell_b, cell_a", [("grid", 1.0, 2.5), ("grid", 2.5, 1.0), ("mesh", 1.0, 2.5)])
def test_two_discs_on_different_supports(shapes, alt_kind, cell_b, cell_a):
    base = grid_run(cell_b, (X0, Y0), R1, base_speed)
    if alt_kind == "grid":
        alt = grid_run(cell_a, (X0 + D, Y0), R2, lambda d: np.full(d.shape, ALT_SPEED), origin=(0.3, 0.6))
    else:
        alt = mesh_run(cell_a, (X0 + D, Y0), R2, ALT_SPEED)
    aligned = resample.align_runs(base, alt)
    assert aligned.method == "common grid" and aligned.cell_m == min(cell_b, cell_a)
    c = compare.compare_runs(aligned.base, aligned.alt, reach(), velocity_preset(), aligned.base_stats,
                             aligned.alt_stats)
    m = c.matrix_reach
    lens = lens_area(R1, R2, D)
    s = shapes
    assert shapely.intersection(s["base"], s["alt"]).area == pytest.approx(lens, rel=1e-4)  # formula vs shapely
    h = max(cell_b, cell_a)
    per_b, per_a, per_i = 2 * math.pi * R1, 2 * math.pi * R2, 2 * math.pi * R_INNER
    # wet/dry change (circle areas: pi r^2)
    rc = c.reach_change
    assert rc["wet_both_m2"][0] == pytest.approx(lens, abs=(per_b + per_a) * h)
    assert rc["wet_base_only_m2"][0] == pytest.approx(math.pi * R1 ** 2 - lens, abs=(per_b + per_a) * h)
    assert rc["wet_alt_only_m2"][0] == pytest.approx(math.pi * R2 ** 2 - lens, abs=(per_b + per_a) * h)
    assert m.sum() == pytest.approx(shapely.union(s["base"], s["alt"]).area, abs=(per_b + per_a) * h)
    # transitions: slow (inner) / fast (ring) -> moderate (alt) or dry; dry -> moderate
    slow, fast, moderate, dry = 2, 4, 3, 0
    expect = {
        (slow, moderate): shapely.intersection(s["inner"], s["alt"]).area,
        (fast, moderate): shapely.intersection(s["ring"], s["alt"]).area,
        (slow, dry): shapely.difference(s["inner"], s["alt"]).area,
        (fast, dry): shapely.difference(s["ring"], s["alt"]).area,
        (dry, moderate): shapely.difference(s["alt"], s["base"]).area,
    }
    bound = (per_b + per_a + per_i) * h
    for (f, t), area in expect.items():
        assert m[f, t] == pytest.approx(area, abs=bound), (f, t)
    assert m.sum() - sum(m[k] for k in expect) == 0  # nothing else happens
    # the observed error is far below the bound (cut cells gained and lost cancel)
    assert abs(m.sum() - shapely.union(s["base"], s["alt"]).area) < 0.2 * (per_b + per_a) * h
    # each run's own statistics (its own support): the wet areas of the discs as sampled there
    assert rc["base_wet_area_m2"][0] == pytest.approx(base.wet_area_m2)
    assert rc["alt_wet_area_m2"][0] == pytest.approx(alt.wet_area_m2)
