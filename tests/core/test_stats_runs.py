"""core/stats.py: the raster percentile paths (selection per group, one common order for nested
groupings) give exactly the values of the cumulative-weight formula, and numpy's percentiles."""

import numpy as np
import pytest

from plugin.core import stats

RNG = np.random.default_rng(7)


def _chainage_groupings(n=60000):
    """Segments, zones, the whole reach and bins: all intervals of one 'chainage', as in a run."""
    ch = RNG.uniform(-50.0, 10050.0, n)  # some elements beyond both ends
    inside = (ch >= 0) & (ch <= 10000)
    seg = np.where(inside, np.minimum(ch // 1000, 9), -1).astype(np.int32)
    zone = np.where(inside, np.searchsorted([3333.3, 6666.7], ch, side="right"), -1).astype(np.int32)
    whole = np.where(inside, 0, -1).astype(np.int32)
    bins = np.where(inside, np.minimum(ch // 250, 39), -1).astype(np.int32)
    return [(seg, 10), (zone, 3), (whole, 1), (bins, 40)]


def test_common_order_exists_for_chainage_intervals_and_not_for_crossed_groupings():
    gs = [stats.Grouping(*g) for g in _chainage_groupings()]
    combo, sizes = stats._combo_key(gs)
    runs = stats._common_runs(gs, combo, sizes)
    assert runs is not None
    order, ends = runs
    for g, e in zip(gs, ends):  # each group is one run of the common order
        k = g.key[order[: e[-1]]]
        assert np.all(np.diff(k) >= 0)
        np.testing.assert_array_equal(np.diff(np.r_[0, e]), g.counts)
    crossed = [stats.Grouping(RNG.integers(0, 5, 1000), 5), stats.Grouping(RNG.integers(0, 3, 1000), 3)]
    c2, s2 = stats._combo_key(crossed)
    assert stats._common_runs(crossed, c2, s2) is None


@pytest.mark.parametrize("nested", [True, False])
def test_raster_percentiles_equal_the_weighted_formula_bit_for_bit(nested):
    gl = _chainage_groupings()
    n = len(gl[0][0])
    if not nested:  # groupings that cross each other: the per-grouping path
        gl = [(RNG.integers(-1, 7, n).astype(np.int32), 7), (RNG.integers(0, 4, n).astype(np.int32), 4)]
    speed = RNG.gamma(2.0, 0.15, n).astype(np.float32)
    speed[::11] = np.round(speed[::11], 2)  # ties
    depth = RNG.uniform(0.05, 4.0, n).astype(np.float32)
    area = np.full(n, 4.0)
    codes = np.digitize(speed, [0.05, 0.2, 0.3]).astype(np.uint8) + 1
    tables = stats.summarise_groupings(speed, depth, area, codes, gl, ["a", "b", "c", "d"], 4.0)
    for (groups, k), t in zip(gl, tables):
        for var, vals, unit in (("v", speed, "ms"), ("d", depth, "m")):
            ref = stats.grouped_weighted_percentiles(vals, np.ones(n), groups, k, stats.PERCENTILES)
            got = np.column_stack([t[f"{var}_{lab}_{unit}"] for lab in stats.PERCENTILE_LABELS])
            np.testing.assert_array_equal(got, ref)
            for g in range(k):  # and numpy's own percentiles
                m = groups == g
                if m.any():
                    np.testing.assert_allclose(got[g], np.percentile(vals[m].astype(np.float64), stats.PERCENTILES),
                                               rtol=0, atol=1e-12)


def test_percentiles_only_where_wished():
    gl = _chainage_groupings(5000)
    n = len(gl[0][0])
    v = RNG.gamma(2.0, 0.15, n).astype(np.float32)
    tables = stats.summarise_groupings(v, v + 0.1, np.ones(n), np.ones(n, np.uint8), gl, ["a"], 1.0,
                                       percentiles=[True, False, ("d",), ("v",)])
    assert "v_p50_ms" in tables[0] and "d_p50_m" in tables[0]
    assert "v_p50_ms" not in tables[1] and "d_p50_m" not in tables[1] and "v_mean_ms" in tables[1]
    assert "v_p50_ms" not in tables[2] and "d_p50_m" in tables[2]
    assert "v_p50_ms" in tables[3] and "d_p50_m" not in tables[3]
    with pytest.raises(ValueError):
        stats.summarise_groupings(v, v, np.ones(n), np.ones(n, np.uint8), gl, ["a"], 1.0, percentiles=[True])


@pytest.mark.parametrize("n", [1, 2, 3, 5, 11, 100, 20_001, 50_000])
def test_large_group_selection_equals_full_partition(n):
    """The selection used for large groups (a partition at the interior ranks, min/max of the
    neighbouring blocks) gives the values of a partition at every rank: ties, many equal values."""
    q = stats._check_q(stats.PERCENTILES + (5.0, 33.3, 99.9))
    for trial in range(6):
        v = RNG.gamma(2.0, 0.15, n).astype(np.float32)
        if trial % 2:
            v = np.round(v, 1)  # heavy ties
        if trial == 4:
            v[:] = 0.25  # all equal
        ref = np.percentile(v.astype(np.float64), q)
        got = stats._run_percentiles(v.copy(), np.array([n]), q)[0]
        np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12)
        h = (n - 1.0) * q / 100.0
        k0 = np.floor(h).astype(np.int64)
        k1 = np.minimum(k0 + 1, n - 1)
        y = v.copy()
        y.partition(np.unique(np.r_[k0, k1]))
        v0, v1 = y[k0].astype(np.float64), y[k1].astype(np.float64)
        np.testing.assert_array_equal(got, v0 + (v1 - v0) * (h - np.floor(h)))
