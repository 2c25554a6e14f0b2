"""Particle tracking (core/drift.py) checked against analytic solutions and scipy.

Each check names its source beside it.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from plugin.core import drift as D
from plugin.core.classes import velocity_preset
from tests.core.test_drift import grid_field, mesh_field, tri_mesh, x_chainage

VEL = velocity_preset()


# --- uniform flow -------------------------------------------------------------------------------
# Source: analytic - in a uniform current U a particle covers L in t = L / U.

@pytest.mark.parametrize("U", [0.03125, 0.375, 1.5])
def test_uniform_flow_travel_time_is_length_over_speed_on_a_grid(U):
    fld = grid_field(250, 10, 2.0, lambda x, y: U + 0 * x, lambda x, y: 0 * x)  # U exact in float32
    flow = D.flow_from_field(fld, fld.x)
    sx = np.array([0.7, 3.0, 10.25, 101.0])
    res = D.track(flow, sx, np.array([-9.0, -2.5, 4.0, 8.9]), VEL, end_m=500.0, exact_chainage=x_chainage,
                  t_max_s=1e9)
    assert (res.fate == D.FATE_DOWNSTREAM).all()
    np.testing.assert_allclose(res.travel_s, (500.0 - sx) / U, rtol=1e-12)
    np.testing.assert_allclose(res.end_x, 500.0, rtol=1e-14)


def test_uniform_flow_travel_time_is_length_over_speed_on_a_mesh():
    nx_, ny_, fn = tri_mesh(50, 6, 4.0, y0=-12.0, quads_every=5)
    U = 0.625
    fld = mesh_field(nx_, ny_, fn, lambda x, y: U + 0 * x, lambda x, y: 0 * x)
    flow = D.flow_from_field(fld, fld.x)
    sx = np.array([0.5, 2.0, 33.3])
    res = D.track(flow, sx, np.array([-11.0, 0.0, 7.7]), VEL, end_m=199.0, exact_chainage=x_chainage)
    np.testing.assert_allclose(res.travel_s, (199.0 - sx) / U, rtol=1e-12)


# --- solid-body rotation ------------------------------------------------------------------------
# Source: analytic - u = -w y, v = w x moves every point on a circle of constant radius, period
# 2 pi / w. The classical RK4 step multiplies the complex position by R(i w dt) with
# R(z) = 1 + z + z^2/2 + z^3/6 + z^4/24, the stability function of RK4 (Hairer, Norsett & Wanner
# 1993, Solving Ordinary Differential Equations I, section II.1; value from memory).

def test_solid_body_rotation_keeps_the_radius():
    period = 1000.0
    w = 2 * np.pi / period
    flow = D.AnalyticFlow(lambda x, y: (-w * y, w * x), size_m=1.0, chainage=lambda x, y: np.zeros_like(x))
    r0 = np.array([5.0, 50.0, 500.0])
    res = D.track(flow, r0, np.zeros(3), VEL, end_m=1e12, t_max_s=period,
                  step=D.StepRule(fixed_dt_s=period / 100), path_spacing_m=0)
    assert (res.fate == D.FATE_TIME_LIMIT).all() and (res.n_steps == 100).all()
    radius = np.hypot(res.end_x, res.end_y)
    assert np.all(np.abs(radius / r0 - 1.0) < 1e-6)  # the bound
    z = 1j * w * period / 100
    amp = abs(1 + z + z ** 2 / 2 + z ** 3 / 6 + z ** 4 / 24) ** 100
    np.testing.assert_allclose(radius / r0, amp, rtol=1e-12)
    # and every recorded vertex lies on the circle to the same accuracy
    for (px, py, _), r in zip(res.paths, r0):
        assert np.max(np.abs(np.hypot(px, py) / r - 1.0)) < 1e-6


# --- a curved field against scipy's solve_ivp ---------------------------------------------------
# Source: reference library - scipy.integrate.solve_ivp (DOP853, rtol 1e-11) on the same field.

def _curved(x, y):
    return 0.3 * (1.0 + 0.4 * np.sin(y / 15.0)), 0.12 * np.cos(x / 40.0) * (1.0 - (y / 60.0) ** 2)


def _reference_time_to(x_end, x0, y0):
    def rhs(t, p):
        u, v = _curved(p[0], p[1])
        return [u, v]

    def hit(t, p):
        return p[0] - x_end

    hit.terminal = True
    sol = solve_ivp(rhs, (0, 1e6), [x0, y0], method="DOP853", rtol=1e-11, atol=1e-10, events=hit,
                    dense_output=True)
    return sol.t_events[0][0], sol


def test_curved_analytic_field_matches_solve_ivp():
    flow = D.AnalyticFlow(_curved, size_m=1.0)
    y0 = np.array([-20.0, -5.0, 0.0, 12.0, 25.0])
    res = D.track(flow, np.zeros(5), y0, VEL, end_m=400.0, path_spacing_m=0)
    for i in range(5):
        t_ref, sol = _reference_time_to(400.0, 0.0, y0[i])
        assert res.travel_s[i] == pytest.approx(t_ref, rel=1e-8)
        px, py, pt = res.paths[i]
        ref = sol.sol(pt[:-1])
        assert np.max(np.hypot(px[:-1] - ref[0], py[:-1] - ref[1])) < 1e-5  # metres


def test_curved_field_on_a_grid_matches_solve_ivp_within_interpolation_error():
    # the same field sampled at 1 m cell centres and interpolated bilinearly; the interpolation
    # error is O(h^2 |second derivative|) ~ 1e-4 relative here
    fld = grid_field(420, 140, 1.0, lambda x, y: _curved(x, y)[0], lambda x, y: _curved(x, y)[1])
    flow = D.flow_from_field(fld, fld.x)
    y0 = np.array([-20.0, 0.0, 25.0])
    res = D.track(flow, np.full(3, 1.0), y0, VEL, end_m=400.0, exact_chainage=x_chainage)
    for i in range(3):
        t_ref, _ = _reference_time_to(400.0, 1.0, y0[i])
        assert res.travel_s[i] == pytest.approx(t_ref, rel=1e-3)


def test_curved_field_on_a_mesh_matches_solve_ivp_within_face_constant_error():
    nx_, ny_, fn = tri_mesh(210, 70, 2.0, y0=-70.0, quads_every=7)
    fld = mesh_field(nx_, ny_, fn, lambda x, y: _curved(x, y)[0], lambda x, y: _curved(x, y)[1])
    flow = D.flow_from_field(fld, fld.x)
    y0 = np.array([-20.0, 0.0, 25.0])
    res = D.track(flow, np.full(3, 1.0), y0, VEL, end_m=400.0, exact_chainage=x_chainage)
    for i in range(3):
        t_ref, _ = _reference_time_to(400.0, 1.0, y0[i])
        assert res.travel_s[i] == pytest.approx(t_ref, rel=1e-2)


# --- time in classes ----------------------------------------------------------------------------
# Source: analytic - along dx/dt = a + b x the time between speeds s1 and s2 is ln(s2 / s1) / b
# (separate the variables). Class bounds 0.05 / 0.20 / 0.30 m/s are the velocity preset.

def test_time_in_each_class_in_a_linear_field():
    a, b = 0.02, 0.0005  # speed 0.02 m/s at x = 0 rising to 0.52 m/s at x = 1000 m
    fld = grid_field(500, 6, 2.0, lambda x, y: a + b * x, lambda x, y: 0 * x)  # bilinear is exact here
    flow = D.flow_from_field(fld, fld.x)
    x0, x1 = 1.0, 999.0
    res = D.track(flow, np.array([x0]), np.array([0.0]), VEL, end_m=x1, exact_chainage=x_chainage,
                  step=D.StepRule(courant=0.2))
    s0, s1 = a + b * x0, a + b * x1
    bounds = [s0, 0.05, 0.20, 0.30, s1]
    expected = [np.log(hi / lo) / b for lo, hi in zip(bounds[:-1], bounds[1:])]
    got = res.class_time_s[0, 1:]
    assert res.travel_s[0] == pytest.approx(np.log(s1 / s0) / b, rel=1e-6)
    # each class time within a fraction of one step of the analytic value
    step_at_bound = 0.2 * 2.0 / np.array([0.05, 0.05, 0.2, 0.3])
    assert np.all(np.abs(got - expected) <= 0.5 * step_at_bound)
    # time in classes sums to the travel time (definition; common practice, no source)
    assert got.sum() + res.class_time_s[0, 0] == pytest.approx(res.travel_s[0], rel=1e-12)


def test_default_step_on_an_interpolated_grid_field_matches_solve_ivp_on_the_same_field():
    # Source: reference library - scipy.integrate.solve_ivp (DOP853) integrating the very same
    # bilinear (wet-only) grid field, so only the step rule is tested: a meandering channel whose
    # banks are streamlines, 2 m cells, the default Courant number 1.
    A, k, half, U0 = 15.0, 2 * np.pi / 800, 30.0, 0.3

    def eta(x, y):
        return (y - A * np.sin(k * x)) / half

    def u_fn(x, y):
        return 1.5 * U0 * (1 - eta(x, y) ** 2)

    def v_fn(x, y):
        return u_fn(x, y) * A * k * np.cos(k * x)

    fld = grid_field(450, 50, 2.0, u_fn, v_fn, wet_fn=lambda x, y: np.abs(eta(x, y)) < 1)
    flow = D.flow_from_field(fld, fld.x)
    y0 = np.array([-20.0, 0.0, 20.0])
    res = D.track(flow, np.full(3, 2.0), y0, VEL, end_m=800.0, exact_chainage=x_chainage)

    def rhs(t, p):
        s = flow.sample(np.array([p[0]]), np.array([p[1]]))
        return [s.u[0], s.v[0]]

    def hit(t, p):
        return p[0] - 800.0

    hit.terminal = True
    for i in range(3):
        sol = solve_ivp(rhs, (0, 1e6), [2.0, y0[i]], method="DOP853", rtol=1e-10, atol=1e-8, events=hit,
                        max_step=5.0)
        assert res.travel_s[i] == pytest.approx(sol.t_events[0][0], rel=2e-5)
