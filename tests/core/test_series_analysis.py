"""core/series.py analysis bookkeeping: days met, spells, bloom risk, the three tables.

The curves come from a CURVES table (interfaces.md) built from known analytic curves that are
linear in ln(discharge) - which the monotone cubic on ln q reproduces exactly between the runs -
so every expected number is computed independently from the formula by a plain loop over days.
"""

import math

import numpy as np
import pytest

from plugin.core.curves import FlowHabitatCurves, Target
from plugin.core.errors import ChannelHabitatError
from plugin.core.series import (
    Criterion,
    CurveUnits,
    CurveView,
    FlowSeries,
    WuaCurves,
    added_flow,
    alternative_delivery,
    analyse_series,
    bloom_criteria,
    match_regime,
    parse_delivery_options,
)

LO, HI = 1000.0, 40000.0
LADDER = np.geomspace(LO, HI, 6)
CLASSES = ("very slow", "slow", "fast")
UNIT_ROWS = (("reach", "reach", 0.0, 30000.0), ("zone", "upper", 0.0, 15000.0), ("zone", "lower", 15000.0, 30000.0))


def analytic_pct(cls, q):
    """very slow = 80 (1 - s) %, slow = 20 %, fast = 80 s % with s = ln(q/LO) / ln(HI/LO).
    Linear in ln q, so the monotone cubic on ln q reproduces it exactly between the runs."""
    s = np.log(np.asarray(q, dtype=float) / LO) / math.log(HI / LO)
    return {"very slow": 80 * (1 - s), "slow": 20 + 0 * s, "fast": 80 * s}[cls]


def curves_table(regimes=("weir",), wet=2.0e6, pct=analytic_pct, ladder=LADDER):
    """A CURVES table (interfaces.md fields) built from known curves, values as text as from a CSV."""
    cols = {c: [] for c in ("regime", "q_mld", "q_m3s", "scope", "unit", "chainage_from_m", "chainage_to_m",
                            "class", "area_m2", "wet_area_m2", "percent")}
    for r in regimes:
        for q in ladder:
            for scope, unit, a, b in UNIT_ROWS:
                for c in CLASSES:
                    p = float(pct(c, q))
                    row = (r, repr(float(q)), repr(float(q) / 86.4), scope, unit, a, b, c, repr(p / 100 * wet),
                           repr(wet), repr(p))
                    for k, v in zip(cols, row):
                        cols[k].append(v)
    return cols


def view(**kw):
    return CurveView(FlowHabitatCurves.from_table(curves_table(**kw)), "weir")


def scalar_share(cls, q):
    """Plain-Python value of the analytic curve for one day (independent of numpy broadcasting)."""
    if not (LO <= q <= HI):
        return None
    s = math.log(q / LO) / math.log(HI / LO)
    return {"very slow": 80 * (1 - s), "slow": 20.0, "fast": 80 * s}[cls]


def _series(q):
    q = np.asarray(q, dtype=float)
    return FlowSeries(np.datetime64("2023-07-01") + np.arange(len(q)), q, {}, ("ML/d",))


UNITS = ["reach", "lower"]


def _target(op=">=", thr=40.0, classes=("fast",), unit="lower", key="t1"):
    return Criterion(key, "target", Target(unit, tuple(classes), op, thr))


def test_days_met_and_spells_against_a_loop():
    rng = np.random.default_rng(3)
    q = np.exp(rng.uniform(math.log(500), math.log(60000), 200))
    s = _series(q)
    crits = [_target(">=", 40.0), _target("<", 30.0, ("very slow", "slow"), key="t2")]
    crits += bloom_criteria(UNITS, ["very slow"], 50.0, 3)
    res = analyse_series(s, view(), UNITS, crits, [])
    base = res.options[0]
    for crit in crits:
        met = []
        for qq in q:
            v = None if scalar_share(crit.classes[0], qq) is None else sum(scalar_share(c, qq) for c in crit.classes)
            thr = crit.target.threshold_pct
            ok = v is not None and {">=": v >= thr, "<": v < thr, ">": v > thr}[crit.target.op]
            met.append(ok)
        assert base.met[crit.key].tolist() == met
        # spells by a loop over the days
        runs, cur = [], 0
        for m in met + [False]:
            if m:
                cur += 1
            elif cur:
                runs.append(cur)
                cur = 0
        assert base.spells[crit.key].length.tolist() == runs
    col = res.table
    assert col["t1_met_days"][0] == int(np.sum(base.met["t1"]))
    assert col["t1_longest_days"][0] == max(base.spells["t1"].length)
    # outside-ladder days counted
    assert col["outside_ladder_days"][0] == int(np.sum((q < LO) | (q > HI)))


def test_bloom_spells_minimum_length_and_censoring():
    # very slow > 50 % <=> s < 0.375 <=> q < LO * (HI/LO)**0.375 (about 3996 ML/d)
    lowq, highq = 2000.0, 20000.0
    pattern = "LLLHLLLLLHHLLHHHHHLLLLLLL"  # starts and ends in a low-flow spell
    q = np.array([lowq if c == "L" else highq for c in pattern])
    res = analyse_series(_series(q), view(), UNITS, bloom_criteria(UNITS, ["very slow"], 50.0, 5), [])
    crit = res.blooms[0]
    sp = res.options[0].spells[crit.key]
    # hand count of runs of L: 3 (censored start), 5, 2, 7 (censored end)
    assert sp.length.tolist() == [3, 5, 2, 7]
    assert sp.censored_start.tolist() == [True, False, False, False]
    assert sp.censored_end.tolist() == [False, False, False, True]
    assert res.table[f"{crit.key}_spells"][0] == 2  # the 5- and 7-day runs
    assert res.table[f"{crit.key}_days"][0] == 12
    assert res.table[f"{crit.key}_longest_days"][0] == 7
    # SPELLS keeps qualifying spells and censored short ones (the 3-day run at the start), not the 2-day one
    rows = [(o, k, n, qual) for o, k, n, qual in zip(res.spells["option"], res.spells["criterion"],
                                                      res.spells["length_days"], res.spells["qualifies"])
            if k == crit.key]
    assert [(n, qual) for _, _, n, qual in rows] == [(3, False), (5, True), (7, True)]


def test_options_and_daily_long_table():
    q = np.full(60, 2000.0)
    s = _series(q)
    opts = parse_delivery_options("p: pulse start=2023-07-11 duration=10 ramp=2; c: constant start=2023-07-01 days=60")
    dels = [added_flow(o, s, 60000.0) for o in opts]
    crit = _target(">=", 40.0)
    res = analyse_series(s, view(), UNITS, [crit], dels, volume_given_ml=60000.0)
    assert [o.name for o in res.options] == ["base", "p", "c"]
    n = 60
    assert len(res.daily["date"]) == 3 * n
    assert res.daily["option"][n] == "p" and res.daily["date"][n] == "2023-07-01"
    np.testing.assert_allclose(res.daily["q_m3s"], res.daily["q_mld"] * 1000 / 86400)
    # constant: 1000 ML/d added, 3000 ML/d -> fast = 80 * log(3)/log(40) on every day
    c_fast = res.daily["pct_lower_fast"][2 * n:]
    np.testing.assert_allclose(c_fast, 80 * math.log(3) / math.log(40), rtol=1e-12)
    # pulse: peak P = 60000 / (10 + 1 + 1); fast >= 40 % needs q >= LO * sqrt(40) = 6325 ML/d
    peak = 60000.0 / 12.0
    assert res.table["added_peak_mld"][1] == pytest.approx(peak)
    q_need = LO * math.sqrt(HI / LO)
    expected_days = sum(1 for w in [1 / 3, 2 / 3] + [1] * 10 + [2 / 3, 1 / 3] if 2000 + peak * w >= q_need)
    assert res.table["t1_met_days"].tolist() == [0, expected_days, 0]
    assert res.table["t1_gain_days"].tolist() == [0, expected_days, 0]
    assert res.table["volume_ml"][1] == pytest.approx(60000.0, abs=1e-6)
    assert res.table["delivery_start"][1] == "2023-07-11" and res.table["delivery_end"][1] == "2023-07-24"


def test_series_entirely_outside_the_ladder_is_refused():
    with pytest.raises(ChannelHabitatError, match="entirely outside the discharge ladder") as e:
        analyse_series(_series(np.full(10, 50000.0)), view(), UNITS, [], [])
    assert e.value.parameter == "FLOWS"
    assert "1000 to 40000 ML/d" in str(e.value)


def test_bloom_parameters_checked():
    with pytest.raises(ChannelHabitatError) as e:
        bloom_criteria(UNITS, ["very slow"], 100.0, 5)
    assert e.value.parameter == "BLOOM_SHARE"
    with pytest.raises(ChannelHabitatError) as e:
        bloom_criteria(UNITS, ["very slow"], 50.0, 0)
    assert e.value.parameter == "BLOOM_MIN_DAYS"


def test_daily_shares_exact_at_ladder_points():
    # a curve that is NOT linear in ln q: at the runs the DAILY share must be the table's value exactly
    def wiggly(cls, q):
        s = np.log(np.asarray(q, dtype=float) / LO) / math.log(HI / LO)
        fast = 100 * s ** 3 * (1 - 0.3 * np.sin(7 * s) ** 2)
        return {"very slow": (100 - fast) * 0.7, "slow": (100 - fast) * 0.3, "fast": fast}[cls]

    v = view(pct=wiggly)
    q = np.concatenate([LADDER, LADDER[::-1]])
    res = analyse_series(_series(q), v, ["lower"], [], [])
    for c in CLASSES:
        got = res.daily[f"pct_lower_{c.replace(' ', '_')}"]
        # the run's share is 100 * area / wet of the areas written to the table
        expect = [100.0 * (float(wiggly(c, qq)) / 100 * 2.0e6) / 2.0e6 for qq in q]
        assert got.tolist() == expect
    assert res.daily["in_ladder"].all()


def test_curve_view_regime_units_classes():
    c = FlowHabitatCurves.from_table(curves_table(regimes=("weir", "natural")))
    with pytest.raises(ChannelHabitatError, match="several regimes") as e:
        CurveView(c, "")
    assert e.value.parameter == "REGIME"
    with pytest.raises(ChannelHabitatError, match="no regime 'lake'") as e:
        CurveView(c, "lake")
    assert CurveView(c, "Natural").regime == "natural"
    v = CurveView(c, "weir")
    assert v.default_units() == ["reach", "upper", "lower"]
    assert v.resolve_units("LOWER, reach") == ["lower", "reach"]
    with pytest.raises(ChannelHabitatError, match="no unit 'middle'") as e:
        v.resolve_units("middle")
    assert e.value.parameter == "REPORT_UNITS"
    assert v.resolve_classes("very_slow+Slow", "BLOOM_CLASSES") == ("very slow", "slow")
    with pytest.raises(ChannelHabitatError, match="no class 'pool'") as e:
        v.resolve_classes("pool", "BLOOM_CLASSES")
    assert e.value.parameter == "BLOOM_CLASSES"


def test_curve_units_check_names_before_any_run():
    # The units and classes of a computation still to come (no regime, no runs): the same answers as a
    # view of finished curves on the same units and classes.
    from plugin.core.curves import ScopeUnit

    units = [ScopeUnit(s, u, a, b) for s, u, a, b in UNIT_ROWS] + [ScopeUnit("segment", "1", 0.0, 1000.0)]
    names = CurveUnits(FlowHabitatCurves(units, CLASSES, {}))
    assert names.zone_names == ["upper", "lower"] and names.n_segments == 1
    assert names.default_units() == ["reach", "upper", "lower"]
    assert names.resolve_units("Segment 1; lower") == ["segment 1", "lower"]
    assert names.resolve_classes("Very_Slow+fast", "BLOOM_CLASSES") == ("very slow", "fast")
    with pytest.raises(ChannelHabitatError, match="no unit 'segment 2'") as e:
        names.resolve_units("segment 2")
    assert e.value.parameter == "REPORT_UNITS"
    v = view()
    assert names.resolve_units("LOWER, reach") == v.resolve_units("LOWER, reach")


def test_match_regime():
    assert match_regime(["weir"], "") == "weir"
    assert match_regime(["weir", "natural"], " NATURAL ") == "natural"
    with pytest.raises(ChannelHabitatError, match="several regimes in the scenario table") as e:
        match_regime(["weir", "natural"], None, where="the scenario table")
    assert e.value.parameter == "REGIME"
    with pytest.raises(ChannelHabitatError, match=r"no regime 'lake' in the curves \(regimes: weir, natural\)"):
        match_regime(["weir", "natural"], "lake")


def test_wua_interpolated_and_checked():
    ladder = [1000.0, 4000.0, 16000.0]
    cols = {"Regime": ["weir"] * 3 + ["weir"] * 3 + ["natural"], "q_mld": ladder * 2 + [1000.0],
            "scope": ["zone"] * 3 + ["segment"] * 3 + ["zone"], "unit": ["lower"] * 3 + ["2"] * 3 + ["lower"],
            "wua_m2": [100.0, 300.0, 500.0, 1, 2, 3, 9]}
    w = WuaCurves.from_table(cols, "weir", ["reach", "lower"])
    assert w.names == ["wua_lower_m2"]
    # 2000 ML/d lies half way between 1000 and 4000 in ln q; the data are linear in ln q -> 200 m2
    np.testing.assert_allclose(w.value("wua_lower_m2", [1000.0, 2000.0, 8000.0, 20000.0]),
                               [100.0, 200.0, 400.0, np.nan], rtol=1e-12)
    cols_bad = dict(cols, wua_m2=[100.0, -3, 500.0, 1, 2, 3, 9])
    with pytest.raises(ChannelHabitatError, match="row 2: wua_m2") as e:
        WuaCurves.from_table(cols_bad, "weir", ["lower"])
    assert e.value.parameter == "WUA"
    with pytest.raises(ChannelHabitatError, match="no rows for regime 'weir'"):
        WuaCurves.from_table(cols, "weir", ["upper"])
    res = analyse_series(_series([2000.0, 500.0, 8000.0]), view(), ["lower"], [], [], wua=w)
    np.testing.assert_allclose(res.daily["wua_lower_m2"], [200.0, np.nan, 400.0], rtol=1e-12)
    assert res.table["mean_wua_lower_m2"][0] == pytest.approx(300.0)


def test_option_names_unique_across_patterns_and_columns():
    s = FlowSeries(np.datetime64("2023-07-01") + np.arange(5), np.full(5, 2000.0), {"p": np.full(5, 2100.0)},
                   ("ML/d",))
    dels = [added_flow(parse_delivery_options("P: constant start=2023-07-01 days=2")[0], s, 10.0)]
    dels.append(alternative_delivery("p", s.alternatives["p"], s))
    with pytest.raises(ChannelHabitatError, match="two options are named 'p'") as e:
        analyse_series(s, view(), UNITS, [], dels)
    assert e.value.parameter == "DELIVERY"
    with pytest.raises(ChannelHabitatError, match="two options are named 'base'"):
        analyse_series(s, view(), UNITS, [], [alternative_delivery("base", s.alternatives["p"], s)])
