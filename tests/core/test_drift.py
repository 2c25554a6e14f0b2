"""Drift and residence time (core/drift.py): fields, stopping rules, accounting, seeds, 1D estimate.

Reference checks against analytic solutions and scipy live in tests/reference/test_drift_reference.py;
the helpers here build small hand-made grids and meshes for both.
"""

from __future__ import annotations

import numpy as np
import pytest

from plugin.core import drift as D
from plugin.core.classes import froude_preset, scheme_from_rows, velocity_preset
from plugin.core.errors import Cancelled, ChannelHabitatError, Progress
from plugin.core.field import GridSupport, HydraulicField, MeshSupport
from plugin.core.reach import Reach, ReachAxis

# ------------------------------------------------------------------------------------------------
# helpers (also used by the reference tests)
# ------------------------------------------------------------------------------------------------


def grid_field(nx, ny, dx, u_fn, v_fn, wet_fn=None, depth_fn=None, x0=0.0, ytop=None):
    """A HydraulicField on an nx x ny north-up grid with cell size dx; functions of cell centres."""
    ytop = ny * dx / 2.0 if ytop is None else ytop
    gt = (x0, dx, 0.0, ytop, 0.0, -dx)
    idx = np.arange(nx * ny)
    r, c = np.divmod(idx, nx)
    x = x0 + (c + 0.5) * dx
    y = ytop - (r + 0.5) * dx
    wet = np.ones(idx.size, bool) if wet_fn is None else np.asarray(wet_fn(x, y), bool)
    idx, x, y = idx[wet], x[wet], y[wet]
    u = np.broadcast_to(np.asarray(u_fn(x, y), dtype=np.float64), x.shape).astype(np.float32)
    v = np.broadcast_to(np.asarray(v_fn(x, y), dtype=np.float64), x.shape).astype(np.float32)
    d = np.ones(x.size, np.float32) if depth_fn is None else np.asarray(depth_fn(x, y), np.float32)
    return HydraulicField(x=x, y=y, area=np.full(x.size, dx * dx), depth=d, speed=np.hypot(u, v),
                          support=GridSupport(gt, (ny, nx), idx), u=u, v=v, crs_wkt="")


def tri_mesh(nx, ny, dx, x0=0.0, y0=0.0, quads_every=0):
    """Nodes on a regular lattice; each square split into two triangles (or kept as a quad every
    ``quads_every``-th square). Returns node_x, node_y, face_nodes (-1 padded)."""
    jx, jy = np.meshgrid(np.arange(nx + 1), np.arange(ny + 1))
    node_x = (x0 + jx * dx).ravel().astype(float)
    node_y = (y0 + jy * dx).ravel().astype(float)

    def nid(i, j):
        return j * (nx + 1) + i

    faces = []
    k = 0
    for j in range(ny):
        for i in range(nx):
            a, b, c, d = nid(i, j), nid(i + 1, j), nid(i + 1, j + 1), nid(i, j + 1)
            if quads_every and k % quads_every == 0:
                faces.append([a, b, c, d])
            else:
                faces.append([a, b, c, -1])
                faces.append([a, c, d, -1])
            k += 1
    return node_x, node_y, np.array(faces, dtype=np.int64)


def mesh_field(node_x, node_y, fn, u_fn, v_fn, wet_fn=None, depth_fn=None):
    from plugin.gis.runs import face_geometry

    fx, fy, fa = face_geometry(node_x, node_y, fn)
    wet = np.ones(len(fn), bool) if wet_fn is None else np.asarray(wet_fn(fx, fy), bool)
    idx = np.flatnonzero(wet)
    x, y = fx[idx], fy[idx]
    u = np.broadcast_to(np.asarray(u_fn(x, y), dtype=np.float64), x.shape).astype(np.float32)
    v = np.broadcast_to(np.asarray(v_fn(x, y), dtype=np.float64), x.shape).astype(np.float32)
    d = np.ones(x.size, np.float32) if depth_fn is None else np.asarray(depth_fn(x, y), np.float32)
    return HydraulicField(x=x, y=y, area=fa[idx], depth=d, speed=np.hypot(u, v),
                          support=MeshSupport(node_x, node_y, fn, idx), u=u, v=v)


def straight_reach(length, y=0.0, zones=None):
    axis = ReachAxis(np.array([0.0, length]), np.array([y, y]))
    if zones is None:
        return Reach(axis, np.arange(0.0, length + 1e-9, 100.0), [0.0, length], ["reach"])
    edges, names = zones
    return Reach(axis, np.arange(0.0, length + 1e-9, 100.0), edges, names)


def x_chainage(x, y):
    return np.asarray(x, dtype=np.float64)


VEL = velocity_preset()


# ------------------------------------------------------------------------------------------------
# velocity at a point
# ------------------------------------------------------------------------------------------------

def test_grid_bilinear_reproduces_a_linear_field_exactly():
    # bilinear interpolation is exact for fields linear in x and y (hand calculation)
    fld = grid_field(40, 20, 2.0, lambda x, y: 0.1 + 0.01 * x - 0.02 * y, lambda x, y: 0.3 * y + 0.002 * x)
    flow = D.flow_from_field(fld, fld.x)
    rng = np.random.default_rng(1)
    px = rng.uniform(1.0, 79.0, 500)  # between the outermost cell centres
    py = rng.uniform(-19.0, 19.0, 500)
    s = flow.sample(px, py)
    assert np.allclose(s.u, 0.1 + 0.01 * px - 0.02 * py, atol=1e-6)
    assert np.allclose(s.v, 0.3 * py + 0.002 * px, atol=1e-6)
    assert np.allclose(s.chainage, px, atol=1e-9)
    assert s.wet.all()


def test_grid_interpolation_uses_wet_cells_only_and_flags_dry_cells():
    # left half wet with u = 1, right half dry: next to the dry half the value stays 1 (not
    # pulled towards 0), and a point inside a dry cell is not wet.
    fld = grid_field(10, 4, 1.0, lambda x, y: 1.0 + 0 * x, lambda x, y: 0 * x, wet_fn=lambda x, y: x < 5)
    flow = D.flow_from_field(fld, fld.x)
    s = flow.sample(np.array([4.9, 5.2, 8.0, -30.0]), np.array([0.0, 0.0, 0.0, 0.0]))
    assert s.u[0] == pytest.approx(1.0)
    assert s.u[1] == pytest.approx(1.0)  # dry cell with a wet neighbour: extrapolated from the wet side
    assert list(s.wet) == [True, False, False, False]
    assert s.u[2] == 0.0 and s.u[3] == 0.0  # no wet cell near: zero


def test_mesh_point_location_matches_shapely():
    shapely = pytest.importorskip("shapely")
    from shapely.geometry import Point, Polygon

    nx_, ny_, fn = tri_mesh(12, 6, 5.0, quads_every=3)
    fld = mesh_field(nx_, ny_, fn, lambda x, y: 1.0 + 0 * x, lambda x, y: 0 * x)
    flow = D.flow_from_field(fld, fld.x)
    rng = np.random.default_rng(7)
    px = rng.uniform(-5, 65, 400)
    py = rng.uniform(-5, 35, 400)
    found = flow.locate(px, py)
    polys = [Polygon([(nx_[k], ny_[k]) for k in f if k >= 0]) for f in fn]
    for i in range(px.size):
        p = Point(px[i], py[i])
        if found[i] >= 0:
            assert polys[found[i]].covers(p)
        else:
            assert not any(poly.contains(p) for poly in polys)
    # walking from a hint gives the same faces
    again = flow.locate(px, py, hint=np.roll(found, 1))
    assert np.array_equal(again, found)
    assert shapely.__version__


def test_class_coder_equals_scheme_classify():
    rng = np.random.default_rng(3)
    sp = np.concatenate([rng.uniform(0, 0.6, 2000), [0.05, 0.2, 0.3, 0.0, np.nan, 0.04999999]])
    d = np.ones(sp.size)
    for scheme in (VEL, froude_preset(), scheme_from_rows([["a", "", "0.1"], ["b", "0.15", ""]])):
        d2 = rng.uniform(0.1, 3, sp.size)
        got = D.class_coder(scheme)(d2 if scheme is not VEL else d, sp)
        ref = scheme.classify(d2 if scheme is not VEL else d, sp).astype(np.int64)
        assert np.array_equal(got, ref)


# ------------------------------------------------------------------------------------------------
# tracking: stopping rules and accounting
# ------------------------------------------------------------------------------------------------

def _track_grid(fld, sx, sy, **kw):
    flow = D.flow_from_field(fld, fld.x)
    kw.setdefault("end_m", 200.0)
    return D.track(flow, np.asarray(sx, float), np.asarray(sy, float), kw.pop("scheme", VEL),
                   exact_chainage=x_chainage, **kw)


def test_mesh_uniform_flow_travel_time():
    nx_, ny_, fn = tri_mesh(40, 8, 5.0, y0=-20.0, quads_every=4)
    U = 0.25
    fld = mesh_field(nx_, ny_, fn, lambda x, y: U + 0 * x, lambda x, y: 0 * x)
    flow = D.flow_from_field(fld, fld.x)
    sx = np.array([1.0, 3.3, 7.0])
    res = D.track(flow, sx, np.array([-12.0, 0.1, 17.0]), VEL, end_m=150.0, exact_chainage=x_chainage)
    assert list(res.fate) == [D.FATE_DOWNSTREAM] * 3
    assert np.allclose(res.travel_s, (150.0 - sx) / U, rtol=1e-12)
    assert np.allclose(res.class_time_s[:, VEL.code_of("moderate")], res.travel_s, rtol=1e-12)  # 0.25 m/s
    assert np.allclose(res.class_time_s.sum(axis=1), res.travel_s, rtol=1e-12)


def test_fates_stranded_upstream_outside_time_limit_and_dry_release():
    # a 100 x 20 m wet strip inside a 120 x 40 m raster; flow across it towards y > 0 (the bank)
    wet = lambda x, y: (np.abs(y) < 10) & (x > 10)  # noqa: E731
    fld = grid_field(60, 20, 2.0, lambda x, y: 0.0 * x + 0.1, lambda x, y: 0.0 * x + 0.2, wet_fn=wet)
    res = _track_grid(fld, [50.0, 30.0], [0.0, -5.0], end_m=110.0, bank="strand")
    assert list(res.fate) == [D.FATE_STRANDED, D.FATE_STRANDED]
    # the exit lies on the wet edge (y = 10 m), reached after (10 - y0) / 0.2 s
    assert np.allclose(res.end_y, 10.0, atol=2e-3)
    assert np.allclose(res.travel_s, (10.0 - np.array([0.0, -5.0])) / 0.2, rtol=2e-4)
    assert list(res.bank_contacts) == [1, 1]
    # sliding (the default) the particles follow the bank at u = 0.1 m/s to the end (x = 110 m):
    # (10 - y0) / 0.2 s to reach it, then the rest of the way at 0.1 m/s
    res = _track_grid(fld, [50.0, 30.0], [0.0, -5.0], end_m=110.0)
    assert list(res.fate) == [D.FATE_DOWNSTREAM, D.FATE_DOWNSTREAM]
    x_bank = np.array([50.0, 30.0]) + 0.1 * (10.0 - np.array([0.0, -5.0])) / 0.2
    expected = (10.0 - np.array([0.0, -5.0])) / 0.2 + (110.0 - x_bank) / 0.1
    assert np.allclose(res.travel_s, expected, rtol=1e-3)
    assert (res.bank_contacts > 10).all()
    for _, py, _ in res.paths:
        assert np.all(py <= 10.0)
    # a particle pushed straight into the bank cannot slide: stranded after a few contacts
    fld = grid_field(60, 20, 2.0, lambda x, y: 0.0 * x, lambda x, y: 0.0 * x + 0.2, wet_fn=wet)
    res = _track_grid(fld, [50.0], [0.0], end_m=110.0)
    assert res.fate[0] == D.FATE_STRANDED and res.bank_contacts[0] == D.STUCK_LIMIT
    assert res.end_y[0] == pytest.approx(10.0, abs=2e-3)
    # flowing upstream (-x) past the release chainage: 'upstream'
    fld = grid_field(60, 20, 2.0, lambda x, y: -0.3 + 0 * x, lambda x, y: 0 * x, wet_fn=wet)
    res = _track_grid(fld, [50.0], [0.0], end_m=110.0)
    assert res.fate[0] == D.FATE_UPSTREAM
    assert res.end_x[0] == pytest.approx(10.0, abs=2e-3)
    # leaving the raster extent sideways where the water reaches its edge: 'outside'
    fld = grid_field(60, 20, 2.0, lambda x, y: 0 * x, lambda x, y: -0.4 + 0 * x)
    res = _track_grid(fld, [50.0], [0.0], end_m=110.0)
    assert res.fate[0] == D.FATE_OUTSIDE
    assert res.end_y[0] == pytest.approx(-20.0, abs=2e-3)
    assert res.travel_s[0] == pytest.approx(20.0 / 0.4, rel=2e-4)
    # still water: the time limit; and a seed on a dry cell is not tracked
    fld = grid_field(60, 20, 2.0, lambda x, y: 0 * x, lambda x, y: 0 * x, wet_fn=wet)
    res = _track_grid(fld, [50.0, 5.0], [0.0, 0.0], end_m=110.0, t_max_s=86400.0)
    assert list(res.fate) == [D.FATE_TIME_LIMIT, D.FATE_DRY_RELEASE]
    assert res.travel_s[0] == pytest.approx(86400.0)
    assert res.class_time_s[0, VEL.code_of("very slow")] == pytest.approx(86400.0)
    assert res.n_steps[0] == 86400 / 600  # dt_max caps the step in still water
    assert res.class_time_s[1].sum() == 0.0


def test_a_field_ending_before_the_axis_end_is_followed_to_five_elements_inside_its_end():
    # the wet field ends at x = 100 m but the reach axis runs to 110 m
    fld = grid_field(50, 10, 2.0, lambda x, y: 0.5 + 0 * x, lambda x, y: 0 * x)
    run = D.drift_run(fld, straight_reach(110.0), VEL, D.DriftOptions(n_particles=4))
    assert run.field_end_m == pytest.approx(100.0) and run.requested_end_m == pytest.approx(110.0)
    assert run.end_m == pytest.approx(100.0 - 5 * 2.0)
    assert any("wet field ends at chainage 100 m" in n for n in run.notes)
    assert (run.result.fate == D.FATE_DOWNSTREAM).all()
    np.testing.assert_allclose(run.result.travel_s, (90.0 - 2.0) / 0.5, rtol=1e-9)
    assert run.estimate.total_s == pytest.approx((90.0 - 2.0) / 0.5, rel=1e-9)


def test_class_and_zone_times_sum_to_the_travel_time():
    # speed rises along x through all four classes; zones split the reach in three
    fld = grid_field(150, 10, 2.0, lambda x, y: 0.02 + 0.002 * x, lambda x, y: 0.001 * np.sin(x / 30.0))
    flow = D.flow_from_field(fld, fld.x)
    res = D.track(flow, np.full(7, 2.0), np.linspace(-8, 8, 7), VEL, end_m=290.0, exact_chainage=x_chainage,
                  zone_edges=[0.0, 50.0, 120.0, 300.0], zone_names=["upper", "middle", "lower"])
    assert (res.fate == D.FATE_DOWNSTREAM).all()
    assert np.allclose(res.class_time_s.sum(axis=1), res.travel_s, rtol=1e-12)
    assert np.allclose(res.zone_time_s.sum(axis=1), res.travel_s, rtol=1e-12)
    assert (res.class_time_s[:, 1:] > 0).all()  # every class visited
    assert (res.zone_time_s > 0).all()
    cols = D.particle_columns(res)
    per_class = sum(cols[f"t_{k}_h"] for k in ("very_slow", "slow", "moderate", "fast"))
    assert np.allclose(per_class, cols["t_total_h"], rtol=1e-12)
    per_zone = sum(cols[f"t_zone_{z}_h"] for z in ("upper", "middle", "lower"))
    assert np.allclose(per_zone, cols["t_total_h"], rtol=1e-12)
    assert np.allclose(cols["t_total_d"] * 24.0, cols["t_total_h"])
    pct = sum(cols[f"pct_{k}"] for k in ("very_slow", "slow", "moderate", "fast"))
    assert np.allclose(pct, 100.0)


def test_froude_scheme_uses_depth_at_the_stage_points():
    # deep slow water upstream (pool), shallow fast water downstream (riffle)
    depth = lambda x, y: np.where(x < 100, 2.0, 0.1)  # noqa: E731
    speed = lambda x, y: np.where(x < 100, 0.1, 1.5)  # noqa: E731
    fld = grid_field(100, 6, 2.0, speed, lambda x, y: 0 * x, depth_fn=depth)
    flow = D.flow_from_field(fld, fld.x)
    fr = froude_preset()
    res = D.track(flow, [1.0], [0.0], fr, end_m=199.0, exact_chainage=x_chainage)
    ct = res.class_time_s[0]
    # ~99 m at 0.1 m/s in pool water, ~99 m at 1.5 m/s in riffle water (+ one cell of transition)
    assert ct[fr.code_of("pool")] == pytest.approx(99.0 / 0.1, rel=0.03)
    assert ct[fr.code_of("riffle")] == pytest.approx(99.0 / 1.5, rel=0.05)
    assert ct.sum() == pytest.approx(res.travel_s[0], rel=1e-12)


def test_paths_are_measured_in_seconds_and_end_at_the_travel_time():
    fld = grid_field(100, 10, 2.0, lambda x, y: 0.2 + 0 * x, lambda x, y: 0.02 * np.sin(x / 20.0))
    flow = D.flow_from_field(fld, fld.x)
    res = D.track(flow, np.array([1.0, 1.0]), np.array([-3.0, 3.0]), VEL, end_m=190.0,
                  exact_chainage=x_chainage, path_spacing_m=10.0)
    for (px, py, pt), tt, ex in zip(res.paths, res.travel_s, res.end_x):
        assert pt[0] == 0.0 and pt[-1] == pytest.approx(tt)
        assert np.all(np.diff(pt) > 0)
        assert px[-1] == pytest.approx(ex) and px[-1] == pytest.approx(190.0)
        step = np.hypot(np.diff(px), np.diff(py))
        assert step[:-1].min() >= 10.0 - 1e-9 and step.max() < 10.0 + 2.0 * 2.0 + 1e-9
    every = D.track(flow, np.array([1.0]), np.array([0.0]), VEL, end_m=190.0, exact_chainage=x_chainage,
                    path_spacing_m=0)
    assert len(every.paths[0][0]) == every.n_steps[0] + 1


def test_step_rule_and_iteration_count():
    rule = D.StepRule(courant=1.0, dt_min_s=0.1, dt_max_s=600.0)
    dt = rule.dt(2.0, np.array([0.0, 1e-4, 0.01, 2.0, 100.0]))
    assert list(dt) == [600.0, 600.0, 200.0, 1.0, 0.1]
    with pytest.raises(ChannelHabitatError) as err:
        D.StepRule(courant=0.0)
    assert err.value.parameter == "COURANT"
    # a moving particle needs about path length / (C h) steps whatever its speed
    for U in (0.01, 1.0):
        fld = grid_field(100, 4, 2.0, lambda x, y, U=U: U + 0 * x, lambda x, y: 0 * x)
        res = _track_grid(fld, [0.5], [0.0], end_m=180.5)
        assert res.n_steps[0] == 90


def test_progress_and_cancel():
    fld = grid_field(100, 4, 2.0, lambda x, y: 0.5 + 0 * x, lambda x, y: 0 * x)
    seen = []
    _track_grid(fld, [0.5, 1.0], [0.0, 0.0], end_m=190.0, progress=Progress(lambda f, m: seen.append(f)))
    assert seen[-1] == 1.0 and all(0 <= f <= 1 for f in seen)
    with pytest.raises(Cancelled):
        _track_grid(fld, [0.5], [0.0], end_m=190.0, progress=Progress(None, lambda: True))


# ------------------------------------------------------------------------------------------------
# seeds, summaries, whole runs
# ------------------------------------------------------------------------------------------------

def test_cross_section_seeds_spread_evenly_over_the_wet_width():
    # wet width from y = -13 to +7 m (cells of 1 m), straight axis along y = 0
    fld = grid_field(50, 40, 1.0, lambda x, y: 0.3 + 0 * x, lambda x, y: 0 * x,
                     wet_fn=lambda x, y: (y > -13) & (y < 7))
    flow = D.flow_from_field(fld, fld.x)
    axis = ReachAxis(np.array([0.0, 50.0]), np.array([0.0, 0.0]))
    x, y, off = D.cross_section_seeds(flow, axis, 10.0, 10, 25.0)
    assert np.allclose(x, 10.0)
    expected = -13.0 + (np.arange(10) + 0.5) * 2.0  # centres of ten equal shares of 20 m
    assert np.allclose(y, expected, atol=0.25)
    assert np.allclose(off, y)
    assert flow.sample(x, y).wet.all()
    # an island splits the section: seeds skip the dry part and share the wet width
    fld = grid_field(50, 40, 1.0, lambda x, y: 0.3 + 0 * x, lambda x, y: 0 * x,
                     wet_fn=lambda x, y: (np.abs(y) < 10) & ~((y > -2) & (y < 2)))
    flow = D.flow_from_field(fld, fld.x)
    x, y, off = D.cross_section_seeds(flow, axis, 10.0, 8, 25.0)
    assert flow.sample(x, y).wet.all()
    assert np.count_nonzero(y < 0) == 4 and np.count_nonzero(y > 0) == 4


def test_summary_rows_match_numpy_percentiles():
    fld = grid_field(150, 10, 2.0, lambda x, y: 0.02 + 0.002 * x, lambda x, y: 0 * x,
                     wet_fn=lambda x, y: np.abs(y) < 9)
    flow = D.flow_from_field(fld, fld.x)
    res = D.track(flow, np.full(9, 2.0), np.linspace(-7, 7, 9), VEL, end_m=290.0, exact_chainage=x_chainage,
                  zone_edges=[0.0, 100.0, 300.0], zone_names=["upper", "lower"])
    rows = D.summary_rows(res)
    assert [r["unit"] for r in rows] == ["reach", "upper", "lower"]
    cols = D.particle_columns(res)
    reach = rows[0]
    for q in (10, 50, 90):
        assert reach[f"t_total_p{q}_h"] == pytest.approx(np.percentile(cols["t_total_h"], q))
        assert reach[f"t_slow_p{q}_d"] == pytest.approx(np.percentile(cols["t_slow_h"], q) / 24.0)
        assert rows[2][f"t_total_p{q}_h"] == pytest.approx(np.percentile(cols["t_zone_lower_h"], q))
        assert rows[1][f"t_very_slow_p{q}_h"] == pytest.approx(np.percentile(cols["t_zone_upper_very_slow_h"], q))
    assert sum(reach[f"pct_{k}"] for k in ("very_slow", "slow", "moderate", "fast")) == pytest.approx(100.0)
    assert reach["n_downstream"] == 9 and reach["n_tracked"] == 9


def test_drift_run_on_a_grid_with_default_release_and_end():
    fld = grid_field(200, 12, 2.0, lambda x, y: 0.375 + 0 * x, lambda x, y: 0 * x,
                     wet_fn=lambda x, y: np.abs(y) < 10)
    reach = straight_reach(400.0, zones=([0.0, 200.0, 400.0], ["upper", "lower"]))
    run = D.drift_run(fld, reach, VEL, D.DriftOptions(n_particles=25))
    assert run.method == D.METHOD_TRACKING
    res = run.result
    assert run.release_m == pytest.approx(2.0)  # axis start + one cell
    assert (res.fate == D.FATE_DOWNSTREAM).all()
    assert np.allclose(res.travel_s, (400.0 - 2.0) / 0.375, rtol=1e-9)
    assert np.allclose(res.zone_time_s, [198.0 / 0.375, 200.0 / 0.375], rtol=1e-9)
    assert np.allclose(np.sort(run.seed_offset), -10 + (np.arange(25) + 0.5) * 0.8, atol=0.3)
    # the 1D estimate agrees for uniform flow
    assert run.estimate.total_s == pytest.approx(398.0 / 0.375, rel=1e-9)


def test_drift_run_speed_only_gives_the_labelled_estimate():
    fld = grid_field(200, 12, 2.0, lambda x, y: 0.375 + 0 * x, lambda x, y: 0 * x)
    fld.u = fld.v = None
    run = D.drift_run(fld, straight_reach(400.0), VEL, D.DriftOptions(n_particles=5))
    assert run.result is None and run.method == D.METHOD_ESTIMATE
    assert any("1D estimate" in n for n in run.notes)
    rows = D.estimate_summary_rows(run.estimate)
    assert rows[0]["t_total_p50_h"] == pytest.approx(398.0 / 0.375 / 3600.0)
    assert rows[0]["pct_fast"] == pytest.approx(100.0)


def test_release_and_end_chainages_are_checked():
    fld = grid_field(50, 6, 2.0, lambda x, y: 0.4 + 0 * x, lambda x, y: 0 * x)
    reach = straight_reach(100.0)
    for opts, param in ((D.DriftOptions(release_m=150.0), "RELEASE_CHAINAGE"),
                        (D.DriftOptions(end_m=120.0), "END_CHAINAGE"),
                        (D.DriftOptions(release_m=60.0, end_m=40.0), "END_CHAINAGE")):
        with pytest.raises(ChannelHabitatError) as err:
            D.drift_run(fld, reach, VEL, opts)
        assert err.value.parameter == param


# ------------------------------------------------------------------------------------------------
# the 1D estimate
# ------------------------------------------------------------------------------------------------

def test_estimate_uses_the_centreline_band_mean_speed():
    # segments of 100 m; the central band |y| <= 0.5 * W / 2 = 5 m has speed s(segment), the
    # banks a very different speed that must not enter the estimate
    seg_speed = np.array([0.5, 0.25, 0.1, 0.04])
    def speed(x, y):
        s = seg_speed[np.minimum((x // 100).astype(int), 3)]
        return np.where(np.abs(y) <= 5, s, 0.01)
    fld = grid_field(200, 10, 2.0, speed, lambda x, y: 0 * x)
    chain, off = fld.x.astype(float), fld.y.astype(float)
    est = D.travel_time_estimate(chain, off, fld.speed, fld.depth, fld.area, np.arange(0, 401.0, 100.0), VEL,
                                 release_m=0.0, end_m=400.0, zone_edges=[0.0, 150.0, 400.0],
                                 zone_names=["upper", "lower"], band_fraction=0.5)
    assert est.total_s == pytest.approx(np.sum(100.0 / seg_speed), rel=1e-6)
    assert np.allclose(est.segments["v_band_mean_ms"], seg_speed, rtol=1e-6)
    assert np.allclose(est.segments["wet_width_m"], 20.0)
    assert est.segments["class"] == ["fast", "moderate", "slow", "very slow"]
    # zone split at 150 m: upper = 100/0.5 + 50/0.25
    assert est.time_s[0].sum() == pytest.approx(200.0 + 200.0, rel=1e-6)
    assert est.time_s.sum() == pytest.approx(est.total_s)
    assert est.time_at(np.array([100.0]))[0] == pytest.approx(200.0, rel=1e-6)
    # clipping to release / end chainages
    est2 = D.travel_time_estimate(chain, off, fld.speed, fld.depth, fld.area, np.arange(0, 401.0, 100.0), VEL,
                                  release_m=50.0, end_m=250.0)
    assert est2.total_s == pytest.approx(50 / 0.5 + 100 / 0.25 + 50 / 0.1, rel=1e-6)
    assert list(est2.segments["length_m"]) == pytest.approx([50.0, 100.0, 50.0])


def test_estimate_with_a_dry_segment_is_infinite_and_noted():
    fld = grid_field(200, 10, 2.0, lambda x, y: 0.3 + 0 * x, lambda x, y: 0 * x,
                     wet_fn=lambda x, y: (x < 100) | (x > 200))
    est = D.travel_time_estimate(fld.x.astype(float), fld.y.astype(float), fld.speed, fld.depth, fld.area,
                                 np.arange(0, 401.0, 100.0), VEL, release_m=0.0, end_m=400.0)
    assert est.total_s == np.inf
    assert any("segment(s) 2" in n for n in est.notes)


def test_axis_against_the_flow_is_refused():
    fld = grid_field(100, 10, 2.0, lambda x, y: 0.3 + 0 * x, lambda x, y: 0 * x)
    axis = ReachAxis(np.array([200.0, 0.0]), np.array([0.0, 0.0]))  # digitised downstream -> upstream
    reach = Reach(axis, np.arange(0.0, 200.1, 100.0), [0.0, 200.0], ["reach"])
    with pytest.raises(ChannelHabitatError) as err:
        D.drift_run(fld, reach, VEL, D.DriftOptions(n_particles=3))
    assert err.value.parameter == "CENTRELINE" and "against the reach axis" in str(err.value)


def test_axis_with_chainage_growing_upstream_gives_the_same_drift():
    fld = grid_field(200, 12, 2.0, lambda x, y: 0.02 + 0.001 * x, lambda x, y: 0 * x,
                     wet_fn=lambda x, y: np.abs(y) < 10)
    down = straight_reach(400.0, zones=([0.0, 150.0, 400.0], ["upper", "lower"]))
    # the same line digitised from the downstream end, chainage growing upstream (origin downstream)
    axis = ReachAxis(np.array([400.0, 0.0]), np.array([0.0, 0.0]), origin="downstream")
    up = Reach(axis, 400.0 - np.arange(0.0, 400.1, 100.0)[::-1], [0.0, 250.0, 400.0], ["lower", "upper"])
    opts = D.DriftOptions(n_particles=6)
    a = D.drift_run(fld, down, VEL, opts)
    b = D.drift_run(fld, up, VEL, opts)
    np.testing.assert_allclose(b.result.travel_s, a.result.travel_s, rtol=1e-9)
    np.testing.assert_allclose(b.result.class_time_s, a.result.class_time_s, rtol=1e-9, atol=1e-9)
    assert b.result.zone_names == ["upper", "lower"]
    np.testing.assert_allclose(b.result.zone_time_s, a.result.zone_time_s, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(b.result.release_chainage, 400.0 - a.result.release_chainage)
    np.testing.assert_allclose(b.seed_offset, a.seed_offset, atol=1e-9)
    assert b.release_m == pytest.approx(400.0 - a.release_m) and b.end_m == pytest.approx(0.0)
    assert b.estimate.total_s == pytest.approx(a.estimate.total_s, rel=1e-9)
    assert list(b.estimate.segments["segment"]) == [4, 3, 2, 1]
    np.testing.assert_allclose(b.estimate.segments["chainage_from_m"], 400.0 - a.estimate.segments["chainage_from_m"])
    ra, rb = D.summary_rows(a.result), D.summary_rows(b.result)
    assert [r["unit"] for r in rb] == ["reach", "upper", "lower"]
    assert rb[1]["chainage_from_m"] == pytest.approx(400.0) and rb[1]["chainage_to_m"] == pytest.approx(250.0)
    assert rb[0]["t_total_p50_h"] == pytest.approx(ra[0]["t_total_p50_h"])


def test_particles_slide_along_a_mesh_bank():
    # wet faces |y| < 10 of a triangle mesh; the current pushes towards +y at 0.2 m/s while flowing
    # down the reach at 0.1 m/s: the particles meet the bank at y = 10 and follow it
    nx_, ny_, fn = tri_mesh(60, 20, 2.0, y0=-20.0, quads_every=3)
    fld = mesh_field(nx_, ny_, fn, lambda x, y: 0.1 + 0 * x, lambda x, y: 0.2 + 0 * x,
                     wet_fn=lambda x, y: np.abs(y) < 10)
    flow = D.flow_from_field(fld, fld.x)
    y0 = np.array([0.0, -5.0])
    res = D.track(flow, np.array([50.0, 30.0]), y0, VEL, end_m=110.0, exact_chainage=x_chainage)
    assert list(res.fate) == [D.FATE_DOWNSTREAM, D.FATE_DOWNSTREAM]
    x_bank = np.array([50.0, 30.0]) + 0.1 * (10.0 - y0) / 0.2
    expected = (10.0 - y0) / 0.2 + (110.0 - x_bank) / 0.1
    assert np.allclose(res.travel_s, expected, rtol=2e-3)
    for _, py, _ in res.paths:
        assert np.all(py <= 10.0 + 1e-9) and py[-1] > 9.9
    strand = D.track(flow, np.array([50.0]), np.array([0.0]), VEL, end_m=110.0, exact_chainage=x_chainage,
                     bank="strand")
    assert strand.fate[0] == D.FATE_STRANDED and strand.end_y[0] == pytest.approx(10.0, abs=1e-3)


def test_arrival_profile_in_uniform_flow():
    fld = grid_field(200, 12, 2.0, lambda x, y: 0.25 + 0 * x, lambda x, y: 0 * x,
                     wet_fn=lambda x, y: np.abs(y) < 10)
    run = D.drift_run(fld, straight_reach(400.0), VEL, D.DriftOptions(n_particles=8, path_spacing_m=7.0))
    ch, p10, p50, p90, count = D.arrival_profile(run.result, n_levels=50)
    assert ch[0] == pytest.approx(2.0) and ch[-1] == pytest.approx(400.0)
    expected = (ch - 2.0) / 0.25  # every particle passes chainage c at (c - release) / U
    np.testing.assert_allclose(p50, expected, rtol=1e-9, atol=1e-6)
    np.testing.assert_allclose(p10, expected, rtol=1e-9, atol=1e-6)
    assert (count == 8).all()
