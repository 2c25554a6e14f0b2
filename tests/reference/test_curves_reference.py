"""Flow-habitat interpolation against scipy (reference library).

Source: scipy.interpolate.PchipInterpolator (SciPy 1.10), the Fritsch-Carlson monotone cubic
interpolant with Fritsch-Butland slopes - the method core/curves.py states it implements - used on
ln(discharge); scipy.optimize.brentq for the crossing discharge.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import PchipInterpolator
from scipy.optimize import brentq

from plugin.core.curves import FlowHabitatCurves, RunAreas, ScopeUnit, parse_targets, pchip_log_q, required_discharge

LADDER = np.array([3000, 4000, 5000, 6000, 8000, 10000, 13000, 17000, 22000, 30000, 40000], dtype=float)


def test_pchip_on_log_q_matches_scipy():
    # Source: scipy.interpolate.PchipInterpolator on ln q (reference library).
    rng = np.random.default_rng(42)
    for trial in range(300):
        n = int(rng.integers(2, 14))
        q = np.unique(np.round(np.exp(rng.uniform(np.log(100), np.log(1e5), n))))
        if q.size < 2:
            continue
        y = rng.uniform(0, 100, (q.size, 3))
        if trial % 3 == 0:
            y = np.sort(y, axis=0)
        if trial % 5 == 0:
            y[rng.integers(0, q.size)] = y[rng.integers(0, q.size)]
        qq = np.exp(rng.uniform(np.log(q[0]), np.log(q[-1]), 400))
        ref = PchipInterpolator(np.log(q), y, axis=0, extrapolate=False)(np.log(qq))
        np.testing.assert_allclose(pchip_log_q(q, y, qq), ref, rtol=1e-12, atol=1e-10)


def test_required_discharge_matches_scipy_root():
    # Source: PchipInterpolator on ln q and scipy.optimize.brentq (reference library): the first
    # discharge where the interpolated percentage reaches the threshold.
    rng = np.random.default_rng(5)
    units = [ScopeUnit("reach", "reach", 0.0, 1.0)]
    for _ in range(40):
        pct = np.cumsum(rng.uniform(0, 10, LADDER.size))
        runs = [RunAreas("w", float(q), np.array([[p, 1000 - p]]), np.array([1000.0])) for q, p in zip(LADDER, pct)]
        curves = FlowHabitatCurves.from_runs(runs, units, ["a", "b"])
        thr = rng.uniform(pct[0] / 10 + 0.01, pct[-1] / 10 - 0.01)
        r = required_discharge(curves, parse_targets(f"reach: a >= {thr!r}%", [], ["a", "b"]))[0]
        f = PchipInterpolator(np.log(LADDER), pct / 10.0)
        k = int(np.argmax(pct / 10.0 >= thr))
        x = brentq(lambda v, f=f, thr=thr: f(v) - thr, np.log(LADDER[k - 1]), np.log(LADDER[k]), xtol=1e-14)
        assert r.q_mld == pytest.approx(np.exp(x), rel=1e-10)
