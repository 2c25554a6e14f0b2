"""Stage-discharge rating fit against exact data and against scipy.optimize.curve_fit.

Sources: exact synthetic data from known parameters (the fit must return them; common practice,
no source); scipy.optimize.curve_fit (SciPy 1.10, reference library: nonlinear least squares with
the covariance s^2 (J^T J)^-1, absolute_sigma=False) on noisy data; scipy.stats.t for the 95 %
intervals. No textbook worked example is used.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.optimize import curve_fit

from plugin.core.rating import fit_rating, levels, records_from_values


def _log_model(h, lnc, b, h0):
    return lnc + b * np.log(h - h0)


def _lin_model(h, c, b, h0):
    return c * (h - h0) ** b


@pytest.mark.parametrize("c, b, h0, lo, hi, unit", [
    (850.0, 1.9, 40.4, 41.0, 46.5, "ML/d"),
    (12.5, 2.4, 99.2, 99.5, 104.0, "m3/s"),
    (3000.0, 1.45, 0.0, 0.3, 6.0, "ML/d"),
    (0.8, 3.1, -2.5, -2.2, 1.0, "m3/s"),
])
@pytest.mark.parametrize("space", ["log", "linear", "stage"])
def test_recovers_known_parameters_from_exact_data(c, b, h0, lo, hi, unit, space):
    # Source: exact data from the model itself (common practice, no source).
    h = np.linspace(lo, hi, 30)
    q = c * (h - h0) ** b
    fit = fit_rating(records_from_values(h, q, unit), fit_space=space)
    assert fit.c == pytest.approx(c, rel=1e-8)
    assert fit.b == pytest.approx(b, rel=1e-9)
    assert fit.h0 == pytest.approx(h0, abs=1e-8 * (hi - lo))
    assert fit.stats["rmse_stage_m"][0] < 1e-8
    np.testing.assert_allclose(fit.stage_at(q), h, atol=1e-8)
    given = fit_rating(records_from_values(h, q, unit), h0=h0, fit_space=space)
    assert given.c == pytest.approx(c, rel=1e-10) and given.b == pytest.approx(b, rel=1e-10)
    assert not given.h0_estimated and np.isnan(given.se["h0"])


def _noisy(seed=11, n=45):
    rng = np.random.default_rng(seed)
    h = np.sort(rng.uniform(41.0, 47.0, n))
    q = 850.0 * (h - 40.4) ** 1.9 * np.exp(rng.normal(0.0, 0.05, n))
    return h, q


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_log_space_fit_agrees_with_curve_fit(seed):
    # Source: scipy.optimize.curve_fit on ln Q = ln C + b ln(h - h0) (reference library).
    h, q = _noisy(seed)
    fit = fit_rating(records_from_values(h, q, "ML/d"), fit_space="log")
    p, pcov = curve_fit(_log_model, h, np.log(q), p0=[np.log(800.0), 2.0, 40.0])
    se = np.sqrt(np.diag(pcov))
    assert np.log(fit.c) == pytest.approx(p[0], rel=1e-6)
    assert fit.b == pytest.approx(p[1], rel=1e-6)
    assert fit.h0 == pytest.approx(p[2], abs=1e-6)
    assert fit.se["C"] == pytest.approx(fit.c * se[0], rel=1e-4)
    assert fit.se["b"] == pytest.approx(se[1], rel=1e-4)
    assert fit.se["h0"] == pytest.approx(se[2], rel=1e-4)
    t = stats.t.ppf(0.975, h.size - 3)
    assert fit.ci95["b"][0] == pytest.approx(p[1] - t * se[1], rel=1e-5)
    assert fit.ci95["C"][1] == pytest.approx(np.exp(p[0] + t * se[0]), rel=1e-5)
    # statistics recomputed with numpy from curve_fit's parameters
    qf = np.exp(_log_model(h, *p))
    r = np.log(q) - _log_model(h, *p)
    assert fit.stats["residual_se"][0] == pytest.approx(np.sqrt(r @ r / (h.size - 3)), rel=1e-6)
    assert fit.stats["rmse_q"][0] == pytest.approx(np.sqrt(np.mean((q - qf) ** 2)), rel=1e-5)
    assert fit.stats["r2"][0] == pytest.approx(1 - (r @ r) / np.sum((np.log(q) - np.log(q).mean()) ** 2), rel=1e-8)
    hf = p[2] + (q / np.exp(p[0])) ** (1 / p[1])
    assert fit.stats["rmse_stage_m"][0] == pytest.approx(np.sqrt(np.mean((h - hf) ** 2)), rel=1e-5)


@pytest.mark.parametrize("seed", [11, 12])
def test_linear_space_fit_agrees_with_curve_fit(seed):
    # Source: scipy.optimize.curve_fit on Q = C (h - h0)^b (reference library).
    h, q = _noisy(seed)
    fit = fit_rating(records_from_values(h, q, "ML/d"), fit_space="linear")
    p, pcov = curve_fit(_lin_model, h, q, p0=[800.0, 2.0, 40.0], maxfev=20000)
    se = np.sqrt(np.diag(pcov))
    assert fit.c == pytest.approx(p[0], rel=1e-5)
    assert fit.b == pytest.approx(p[1], rel=1e-6)
    assert fit.h0 == pytest.approx(p[2], abs=1e-6)
    assert fit.se["C"] == pytest.approx(se[0], rel=1e-3)
    assert fit.se["b"] == pytest.approx(se[1], rel=1e-3)
    assert fit.se["h0"] == pytest.approx(se[2], rel=1e-3)


@pytest.mark.parametrize("seed", [11, 14])
def test_stage_space_fit_agrees_with_curve_fit(seed):
    # Source: scipy.optimize.curve_fit on h = h0 + (Q / C)^(1/b) (reference library).
    rng = np.random.default_rng(seed)
    q = np.exp(rng.uniform(np.log(1200.0), np.log(50000.0), 60))
    h = 40.2 + (q / 1210.0) ** (1 / 2.1) + rng.normal(0.0, 0.06, q.size)  # scatter in stage
    fit = fit_rating(records_from_values(h, q, "ML/d"), fit_space="stage")
    p, pcov = curve_fit(lambda qq, a, b, h0: h0 + np.exp((np.log(qq) - a) / b), q, h, p0=[7.0, 2.0, 40.0])
    se = np.sqrt(np.diag(pcov))
    assert np.log(fit.c) == pytest.approx(p[0], rel=1e-6)
    assert fit.b == pytest.approx(p[1], rel=1e-6)
    assert fit.h0 == pytest.approx(p[2], abs=1e-6)
    assert fit.se["C"] == pytest.approx(fit.c * se[0], rel=1e-4)
    assert fit.se["b"] == pytest.approx(se[1], rel=1e-4)
    assert fit.se["h0"] == pytest.approx(se[2], rel=1e-4)
    r = h - (p[2] + np.exp((np.log(q) - p[0]) / p[1]))
    assert fit.stats["residual_se"][0] == pytest.approx(np.sqrt(r @ r / (q.size - 3)), rel=1e-6)
    assert fit.stats["rmse_stage_m"][0] == pytest.approx(np.sqrt(np.mean(r ** 2)), rel=1e-6)


def test_given_h0_agrees_with_curve_fit():
    # Source: scipy.optimize.curve_fit with h0 fixed (reference library).
    h, q = _noisy(21)
    fit = fit_rating(records_from_values(h, q, "m3/s"), h0=40.0)
    p, pcov = curve_fit(lambda hh, a, b: a + b * np.log(hh - 40.0), h, np.log(q), p0=[6.0, 2.0])
    assert np.log(fit.c) == pytest.approx(p[0], rel=1e-9) and fit.b == pytest.approx(p[1], rel=1e-9)
    assert fit.se["b"] == pytest.approx(np.sqrt(pcov[1, 1]), rel=1e-6)
    assert fit.dof == h.size - 2


def test_levels_and_their_standard_error():
    # Source: curve_fit parameters and covariance (reference library); the level's standard error
    # recomputed by the delta method with a central-difference gradient.
    h, q = _noisy(31)
    fit = fit_rating(records_from_values(h, q, "ML/d"))
    p, pcov = curve_fit(_log_model, h, np.log(q), p0=[np.log(800.0), 2.0, 40.0])
    ladder = np.array([3000.0, 10000.0, 40000.0])

    def stage(theta, qq):
        return theta[2] + (qq / np.exp(theta[0])) ** (1.0 / theta[1])

    lev = levels(fit, ladder, "ML/d")
    np.testing.assert_allclose(lev["stage_m"], stage(p, ladder), atol=1e-6)
    grad = np.zeros((ladder.size, 3))
    for k in range(3):
        dp = np.zeros(3)
        dp[k] = 1e-6 * max(abs(p[k]), 1.0)
        grad[:, k] = (stage(p + dp, ladder) - stage(p - dp, ladder)) / (2 * dp[k])
    se = np.sqrt(np.einsum("ij,jk,ik->i", grad, pcov, grad))
    np.testing.assert_allclose(lev["stage_se_m"], se, rtol=1e-3)
    assert lev["within_records"].tolist() == [bool(q.min() <= v <= q.max()) for v in ladder]
    # the same ladder in m3/s gives the same levels
    lev2 = levels(fit, ladder * 1000 / 86400, "m3/s")
    np.testing.assert_allclose(lev2["stage_m"], lev["stage_m"], rtol=1e-13)
    np.testing.assert_allclose(lev2["q_mld"], ladder, rtol=1e-14)
