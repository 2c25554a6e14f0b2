"""core/stats.py: area-weighted percentiles, moments, class areas and the summary table."""

import numpy as np
import pytest

from plugin.core import stats

RNG = np.random.default_rng(20240601)


def _repeat_reference(values, weights, groups, n_groups, q):
    """Independent reference: numpy's linear percentile of the sample with each value repeated."""
    out = np.full((n_groups, len(q)), np.nan)
    for g in range(n_groups):
        m = (groups == g) & np.isfinite(values) & (weights > 0)
        if m.any():
            out[g] = np.percentile(np.repeat(values[m].astype(np.float64), weights[m].astype(int)), q)
    return out


@pytest.mark.parametrize("n", [1, 2, 7, 1000])
def test_weighted_percentiles_equal_numpy_on_replicated_samples(n):
    values = RNG.gamma(2.0, 0.15, n)
    weights = RNG.integers(1, 6, n)
    q = np.array([0, 5, 10, 25, 33.3, 50, 75, 90, 99, 100])
    got = stats.weighted_percentiles(values, weights.astype(float), q)
    ref = np.percentile(np.repeat(values, weights), q)
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12)


def test_grouped_weighted_percentiles_with_ties_nan_and_outside_groups():
    n = 5000
    values = np.round(RNG.gamma(2.0, 0.15, n), 2)  # many ties
    values[::97] = np.nan  # ignored
    weights = RNG.integers(0, 4, n).astype(float)  # zero weights ignored
    groups = RNG.integers(-1, 9, n)  # -1 and 8 are outside the 8 groups
    q = np.array(stats.PERCENTILES)
    got = stats.grouped_weighted_percentiles(values, weights, groups, 8, q)
    ref = _repeat_reference(values, weights, groups, 8, q)
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12)
    # the value sort shared between groupings gives the same answer
    vo = stats.value_order(values)
    got2 = stats.grouped_weighted_percentiles(values, weights, groups, 8, q, vorder=vo)
    np.testing.assert_array_equal(got, got2)


def test_empty_group_gives_nan():
    got = stats.grouped_weighted_percentiles(np.array([1.0, 2.0]), np.ones(2), np.array([0, 0]), 3, [50])
    assert got[0, 0] == 1.5 and np.isnan(got[1, 0]) and np.isnan(got[2, 0])


def test_unweighted_grouped_percentiles_equal_numpy():
    values = RNG.normal(0.3, 0.1, 20000).astype(np.float32)
    groups = RNG.integers(0, 12, values.size)
    got = stats.grouped_percentiles(values, groups, 12, stats.PERCENTILES)
    for g in range(12):
        np.testing.assert_allclose(got[g], np.percentile(values[groups == g].astype(np.float64), stats.PERCENTILES),
                                   rtol=0, atol=1e-12)


def test_percentiles_reject_out_of_range_q():
    with pytest.raises(ValueError):
        stats.weighted_percentiles([1.0, 2.0], [1.0, 1.0], [101])


def test_grouped_mean_cv_against_numpy_weighted_average_and_cov():
    x = RNG.gamma(3.0, 0.1, 3000)
    a = RNG.uniform(0.5, 20.0, x.size)
    g = RNG.integers(0, 4, x.size)
    mean, cv = stats.grouped_mean_cv(x, a, g, 4)
    for k in range(4):
        m = g == k
        ref_mean = np.average(x[m], weights=a[m])
        ref_std = np.sqrt(np.cov(x[m], aweights=a[m], ddof=0))
        assert mean[k] == pytest.approx(ref_mean, rel=1e-12)
        assert cv[k] == pytest.approx(ref_std / ref_mean, rel=1e-10)


def _random_case(n=40000, weights="unequal"):
    speed = RNG.gamma(2.0, 0.12, n).astype(np.float32)
    depth = RNG.uniform(0.05, 5.0, n).astype(np.float32)
    area = RNG.integers(1, 5, n).astype(float) * 2.0 if weights == "unequal" else np.full(n, 4.0)
    codes = RNG.integers(0, 5, n).astype(np.uint8)  # 0 = no class
    seg = RNG.integers(-1, 10, n).astype(np.int32)
    zone = np.where(seg < 0, -1, seg // 4).astype(np.int32)
    return speed, depth, area, codes, seg, zone


@pytest.mark.parametrize("weights", ["unequal", "equal"])
def test_summarise_groupings_matches_independent_references(weights):
    speed, depth, area, codes, seg, zone = _random_case(weights=weights)
    unit = 2.0 if weights == "unequal" else 4.0
    fr = speed / np.sqrt(9.80665 * depth)
    names = ["very slow", "slow", "moderate", "fast"]
    seg_t, zone_t = stats.summarise_groupings(speed, depth, area, codes, [(seg, 10), (zone, 3)], names, unit,
                                              froude=fr)
    w = np.rint(area / unit).astype(int)
    for k in range(10):
        m = seg == k
        assert seg_t["wet_area_m2"][k] == pytest.approx(area[m].sum())
        assert seg_t["n_elements"][k] == m.sum()
        ref_v = np.percentile(np.repeat(speed[m].astype(np.float64), w[m]), stats.PERCENTILES)
        got_v = [seg_t[f"v_{lab}_ms"][k] for lab in stats.PERCENTILE_LABELS]
        np.testing.assert_allclose(got_v, ref_v, rtol=0, atol=1e-9)
        ref_d = np.percentile(np.repeat(depth[m].astype(np.float64), w[m]), stats.PERCENTILES)
        np.testing.assert_allclose([seg_t[f"d_{lab}_m"][k] for lab in stats.PERCENTILE_LABELS], ref_d, atol=1e-9)
        assert seg_t["v_mean_ms"][k] == pytest.approx(np.average(speed[m], weights=area[m]), rel=1e-9)
        ref_cv = np.sqrt(np.cov(speed[m].astype(float), aweights=area[m], ddof=0)) / np.average(speed[m],
                                                                                                   weights=area[m])
        assert seg_t["v_cv"][k] == pytest.approx(ref_cv, rel=1e-7)
        assert seg_t["fr_mean"][k] == pytest.approx(np.average(fr[m], weights=area[m]), rel=1e-9)
        for c, name in enumerate(names, start=1):
            key = stats.field_key(name)
            ref_area = area[m & (codes == c)].sum()
            assert seg_t[f"area_{key}_m2"][k] == pytest.approx(ref_area)
            assert seg_t[f"pct_{key}"][k] == pytest.approx(100 * ref_area / area[m].sum())
    # zones: the same from the combined pass
    for z in range(3):
        m = zone == z
        assert zone_t["wet_area_m2"][z] == pytest.approx(area[m].sum())
        assert zone_t["d_mean_m"][z] == pytest.approx(np.average(depth[m], weights=area[m]), rel=1e-9)


def test_combined_sums_equal_per_grouping_sums():
    speed, depth, area, codes, seg, zone = _random_case(5000)
    gs = [stats.Grouping(seg, 10), stats.Grouping(zone, 3)]
    q = [area, area * speed, np.where(codes == 2, area, 0.0)]
    a = stats._combined_sums(gs, iter(q))
    b = stats._combined_sums(gs, iter(q), max_cells=0)
    for x, y in zip(a, b):
        for u, v in zip(x, y):
            np.testing.assert_allclose(u, v, rtol=1e-12)


def test_class_areas_sum_to_wet_area_for_a_complete_scheme():
    speed, depth, area, _, seg, _ = _random_case(8000)
    codes = np.digitize(speed, [0.05, 0.2, 0.3]).astype(np.uint8) + 1  # every element classified
    t = stats.summarise(speed, depth, area, codes, seg, 10, ["a", "b", "c", "d"], 2.0)
    total = sum(t[f"area_{k}_m2"] for k in "abcd")
    np.testing.assert_allclose(total, t["wet_area_m2"], rtol=1e-12)
    np.testing.assert_allclose(sum(t[f"pct_{k}"] for k in "abcd"), 100.0, rtol=1e-12)


def test_diversity_of_one_class_is_zero_and_of_equal_classes_maximal():
    assert stats.shannon([1.0, 0.0, 0.0]) == 0.0
    assert stats.simpson([1.0, 0.0, 0.0]) == 0.0
    assert stats.shannon([0.25] * 4) == pytest.approx(np.log(4))
    assert stats.simpson([0.25] * 4) == pytest.approx(0.75)
    assert np.isnan(stats.shannon([0.0, 0.0]))


def test_summary_without_percentiles_has_no_percentile_columns():
    speed, depth, area, codes, seg, _ = _random_case(2000)
    t = stats.summarise(speed, depth, area, codes, seg, 10, ["a", "b", "c", "d"], 2.0, percentiles=False)
    assert "v_p50_ms" not in t and "v_mean_ms" in t and "area_a_m2" in t


def test_field_key():
    assert stats.field_key("very slow") == "very_slow"
    assert stats.field_key(" Deep/Fast ") == "deep_fast"
    assert stats.field_key("!!") == "class"
