"""Statistics and class rules checked against outside sources; each check names its source."""

import numpy as np
import pytest
import scipy.stats

from plugin.core import stats
from plugin.core.classes import froude_preset, velocity_preset

RNG = np.random.default_rng(7)


def test_area_weighted_percentiles_equal_numpy_on_replicated_samples():
    # Source: numpy.percentile (method 'linear', Hyndman & Fan 1996 definition 7) applied to the
    # sample with each value repeated by its integer weight -- the frequency-weight definition.
    values = RNG.lognormal(-1.5, 0.6, 400)
    weights = RNG.integers(1, 9, 400)
    q = [0, 10, 25, 50, 75, 90, 100]
    np.testing.assert_allclose(stats.weighted_percentiles(values, weights.astype(float), q),
                               np.percentile(np.repeat(values, weights), q), rtol=0, atol=1e-12)


def test_weighted_median_hand_example():
    # Hand calculation, common practice: values 1, 2, 3 with weights 1, 1, 2 -> sample 1, 2, 3, 3;
    # numpy linear median = (2 + 3) / 2 = 2.5; 25th percentile at position 0.75 -> 1 + 0.75 = 1.75.
    got = stats.weighted_percentiles([3.0, 1.0, 2.0], [2.0, 1.0, 1.0], [25, 50])
    assert got.tolist() == [1.75, 2.5]


@pytest.mark.parametrize("p", [[1.0], [0.5, 0.5], [0.1, 0.2, 0.3, 0.4], [0.7, 0.0, 0.3]])
def test_shannon_equals_scipy_entropy(p):
    # Source: scipy.stats.entropy (natural log) -- Shannon 1948 H = -sum p ln p.
    assert stats.shannon(np.array(p)) == pytest.approx(scipy.stats.entropy(p), abs=1e-15)


def test_shannon_of_random_class_areas_equals_scipy_entropy():
    # Source: scipy.stats.entropy normalises the areas itself; summarise's fractions must agree.
    areas = RNG.uniform(0, 100, (20, 5))
    frac = areas / areas.sum(axis=1, keepdims=True)
    np.testing.assert_allclose(stats.shannon(frac), scipy.stats.entropy(areas, axis=1), rtol=1e-12)


def test_simpson_hand_values():
    # Source: Simpson 1949 (Nature 163:688), diversity as 1 - sum p^2 (Gini-Simpson), hand calculation:
    # p = (0.5, 0.25, 0.25) -> 1 - (0.25 + 0.0625 + 0.0625) = 0.625.
    assert stats.simpson(np.array([0.5, 0.25, 0.25])) == pytest.approx(0.625, abs=1e-15)


def test_weighted_cv_against_numpy_cov():
    # Source: numpy.cov with aweights and ddof=0 (population weighted variance).
    x = RNG.gamma(2.0, 0.2, 500)
    a = RNG.uniform(1, 10, 500)
    mean, cv = stats.grouped_mean_cv(x, a, np.zeros(500, int), 1)
    assert cv[0] == pytest.approx(np.sqrt(np.cov(x, aweights=a, ddof=0)) / np.average(x, weights=a), rel=1e-10)


# Jowett, I.G. 1993. A method for objectively identifying pool, run, and riffle habitats from physical
# measurements. New Zealand Journal of Marine and Freshwater Research 27:241-248: pool Fr < 0.18 and
# V/D < 1.24 s^-1; riffle Fr > 0.41 and V/D > 3.20 s^-1; run otherwise. Fr = V / sqrt(g D),
# g = 9.80665 m/s^2. The Froude numbers below were computed by hand (calculator) and are written out.
JOWETT_CASES = [
    # V m/s, D m, hand Fr, V/D, class
    (0.20, 2.00, 0.0452, 0.10, "pool"),     # slow deep water
    (1.00, 0.25, 0.6387, 4.00, "riffle"),   # fast shallow water
    (0.60, 0.50, 0.2710, 1.20, "run"),      # Fr between the bounds
    (0.15, 0.10, 0.1515, 1.50, "run"),      # Fr < 0.18 but V/D >= 1.24: not a pool
    (1.50, 1.00, 0.4790, 1.50, "run"),      # Fr > 0.41 but V/D <= 3.20: not a riffle
    (0.30, 1.50, 0.0782, 0.20, "pool"),
    (0.90, 0.20, 0.6426, 4.50, "riffle"),
]


@pytest.mark.parametrize("v,d,fr,vd,expected", JOWETT_CASES)
def test_froude_mesohabitat_classes_jowett_1993(v, d, fr, vd, expected):
    assert v / np.sqrt(9.80665 * d) == pytest.approx(fr, abs=5e-5)  # the hand value is right
    s = froude_preset()
    code = s.classify(np.array([d]), np.array([v]))[0]
    assert s.names[code - 1] == expected


def test_froude_bound_at_exact_vd_threshold_is_upper_exclusive():
    # Jowett 1993 pool: V/D < 1.24 (strict). V = 0.155, D = 0.125: V/D = 1.24 exactly (binary-exact
    # division by 0.125) and Fr = 0.14 (hand) -> not a pool, a run. Just below -> pool.
    s = froude_preset()
    codes = s.classify(np.array([0.125, 0.125]), np.array([0.155, 0.1549]))
    assert [s.names[c - 1] for c in codes] == ["run", "pool"]


def test_velocity_preset_thresholds_design_section_4():
    # DESIGN.md section 4 (Mitrovic et al. 2003; Koehn & Nicol 2014; common practice): very slow < 0.05
    # <= slow < 0.20 <= moderate < 0.30 <= fast, lower-inclusive.
    s = velocity_preset()
    codes = s.classify(np.ones(4), np.array([0.05, 0.20, 0.30, 0.0499]))
    assert [s.names[c - 1] for c in codes] == ["slow", "moderate", "fast", "very slow"]
