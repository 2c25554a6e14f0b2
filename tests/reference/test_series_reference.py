"""habitatseries checked against outside sources (each check names its source beside it)."""

import itertools
import math

import numpy as np
import pytest
from scipy.interpolate import PchipInterpolator

from plugin.core.curves import FlowHabitatCurves
from plugin.core.series import (
    DEFAULT_BLOOM_MIN_DAYS,
    FlowSeries,
    added_flow,
    analyse_series,
    bloom_criteria,
    find_spells,
    parse_delivery_options,
    read_flow_series,
    volume_to_ml,
)
from tests.core.test_series_analysis import CLASSES, LADDER, curves_table

NODES = {  # arbitrary, non-linear class shares at the six runs (%), summing to 100
    "very slow": [70.0, 55.0, 41.0, 30.0, 12.0, 5.0],
    "slow": [25.0, 30.0, 33.0, 30.0, 33.0, 25.0],
    "fast": [5.0, 15.0, 26.0, 40.0, 55.0, 70.0],
}


def _pct(cls, q):
    i = int(np.argmin(np.abs(LADDER - q)))
    return NODES[cls][i]


def _view():
    from plugin.core.series import CurveView

    return CurveView(FlowHabitatCurves.from_table(curves_table(pct=_pct)), "weir")


def _series(q):
    q = np.asarray(q, dtype=float)
    return FlowSeries(np.datetime64("2023-07-01") + np.arange(len(q)), q, {}, ("ML/d",))


def test_daily_shares_equal_scipy_pchip_on_log_discharge():
    # Reference: scipy.interpolate.PchipInterpolator (Fritsch & Carlson monotone cubic, the
    # interpolation flowhabitat states) on ln(q); outside the runs nothing is extrapolated.
    rng = np.random.default_rng(11)
    q = np.exp(rng.uniform(math.log(LADDER[0]), math.log(LADDER[-1]), 300))
    q = np.concatenate([q, LADDER, [LADDER[0] * 0.5, LADDER[-1] * 1.5]])
    res = analyse_series(_series(q), _view(), ["lower"], [], [])
    for c in CLASSES:
        ref = PchipInterpolator(np.log(LADDER), NODES[c], extrapolate=False)(np.log(q))
        got = res.daily[f"pct_lower_{c.replace(' ', '_')}"]
        np.testing.assert_allclose(got[:-2], ref[:-2], rtol=1e-10, atol=1e-9)
        assert np.isnan(got[-2:]).all() and np.isnan(ref[-2:]).all()


def test_class_set_is_one_pchip_curve():
    # Reference: scipy PchipInterpolator of the summed shares at the runs (a class set is one curve).
    crit = bloom_criteria(["lower"], ("very slow", "slow"), 60.0, 1)[0]
    q = np.geomspace(LADDER[0], LADDER[-1], 97)
    res = analyse_series(_series(q), _view(), ["lower"], [crit], [])
    summed = np.add(NODES["very slow"], NODES["slow"])
    ref = PchipInterpolator(np.log(LADDER), summed)(np.log(q))
    np.testing.assert_allclose(res.daily[f"{crit.key}_pct"], ref, rtol=1e-10, atol=1e-9)
    assert res.daily[f"{crit.key}_met"].tolist() == (ref > 60.0).tolist()


def test_units_and_volumes_si():
    # SI: 1 m3 = 1000 L, 1 day = 86 400 s -> 1 m3/s = 86.4 ML/d; 1 GL = 1000 ML (SI prefixes)
    s = read_flow_series("date,discharge,unit\n2023-01-01,1,m3/s\n2023-01-02,1,m3/s\n2023-01-03,1,m3/s\n")
    np.testing.assert_allclose(s.q_mld, 86.4, rtol=1e-15)
    assert volume_to_ml(1.0, "GL") == 1000.0
    # a constant addition of 1 m3/s for one day delivers 86.4 ML (added ML/d x 1 day)
    opt = parse_delivery_options("c: constant start=2023-01-02 days=1")[0]
    d = added_flow(opt, s, 86.4)
    assert d.added_mld.tolist() == [0.0, pytest.approx(86.4), 0.0]


def test_spells_equal_run_lengths_of_itertools_groupby():
    # Spell = maximal run of consecutive days meeting the condition (common practice, no source);
    # reference: the Python standard library's itertools.groupby run-length encoding.
    rng = np.random.default_rng(5)
    cond = rng.random(500) < 0.7
    ref = [len(list(g)) for k, g in itertools.groupby(cond.tolist()) if k]
    assert find_spells(cond).length.tolist() == ref


def test_bloom_default_counts_every_spell_mitrovic_would():
    # Mitrovic et al. 2003, Freshwater Biology 48:164-174 (abstract): growth of A. circinalis occurred
    # only during periods of persistent stratification of more than 5 days. The default minimum
    # (5 days) must count every such period (6 days or more); it also counts exactly 5 days
    # (precautionary reading of the threshold).
    assert DEFAULT_BLOOM_MIN_DAYS <= 6
    for n in (6, 7, 30):
        crit = bloom_criteria(["lower"], ("very slow",), 50.0, DEFAULT_BLOOM_MIN_DAYS)[0]
        q = np.concatenate([np.full(3, LADDER[-1]), np.full(n, LADDER[0]), np.full(3, LADDER[-1])])
        res = analyse_series(_series(q), _view(), ["lower"], [crit], [])
        assert res.table[f"{crit.key}_spells"][0] == 1 and res.table[f"{crit.key}_days"][0] == n
