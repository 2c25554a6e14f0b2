"""Flow-habitat curves (core/curves.py): interpolation properties, the CURVES table, targets."""

from __future__ import annotations

import math

import numpy as np
import pytest

from plugin.core.curves import (
    CURVE_COLUMNS,
    INTERPOLATED,
    MET_AT_LOWEST,
    NOT_REACHED,
    FlowHabitatCurves,
    RunAreas,
    ScopeUnit,
    evaluate_targets,
    inside_ladder,
    parse_targets,
    pchip_log_q,
    required_discharge,
    run_areas_from_stats,
    scope_units,
    targets_table,
)
from plugin.core.errors import ChannelHabitatError
from plugin.core.reach import Reach, ReachAxis

LADDER = np.array([3000, 4000, 5000, 6000, 8000, 10000, 13000, 17000, 22000, 30000, 40000], dtype=float)
CLASSES = ["very slow", "slow", "moderate", "fast"]


# --------------------------------------------------------------------------------------------
# Interpolation
# --------------------------------------------------------------------------------------------

def test_exact_at_ladder_points_and_nan_outside():
    rng = np.random.default_rng(1)
    y = rng.uniform(0, 100, (LADDER.size, 5))
    got = pchip_log_q(LADDER, y, LADDER)
    assert np.array_equal(got, y)  # bit for bit
    out = pchip_log_q(LADDER, y, [2999.0, 40001.0, np.nan, -1.0])
    assert np.isnan(out).all()
    # within the relative slack the ends count as the ends (m3/s -> ML/d rounding)
    edge = pchip_log_q(LADDER, y, [3000.0 * (1 - 1e-12), 40000.0 * (1 + 1e-12)])
    assert np.array_equal(edge, y[[0, -1]])
    assert inside_ladder(LADDER, [3000.0, 40000.0, 2999.9]).tolist() == [True, True, False]


def test_monotone_between_monotone_runs_and_no_overshoot():
    rng = np.random.default_rng(7)
    for _ in range(50):
        y = np.sort(rng.uniform(0, 100, LADDER.size))
        if rng.random() < 0.5:
            y = y[::-1].copy()
        y[rng.integers(0, LADDER.size - 1)] = y[rng.integers(0, LADDER.size - 1)]  # plateaus too
        y = np.maximum.accumulate(y) if y[0] <= y[-1] else np.minimum.accumulate(y)
        q = np.exp(np.linspace(np.log(LADDER[0]), np.log(LADDER[-1]), 4001))
        v = pchip_log_q(LADDER, y, q)
        d = np.diff(v)
        assert np.all(d >= -1e-9) or np.all(d <= 1e-9)
    # non-monotone data: between two runs the curve stays within their values
    y = rng.uniform(0, 100, LADDER.size)
    for k in range(LADDER.size - 1):
        q = np.exp(np.linspace(np.log(LADDER[k]), np.log(LADDER[k + 1]), 301))
        v = pchip_log_q(LADDER, y, q)
        lo, hi = min(y[k], y[k + 1]), max(y[k], y[k + 1])
        assert np.all(v >= lo - 1e-9) and np.all(v <= hi + 1e-9)


def test_shapes_two_and_one_node():
    y = np.arange(2 * 3 * 4, dtype=float).reshape(2, 3, 4)
    out = pchip_log_q([100.0, 400.0], y, np.array([[100.0, 200.0], [400.0, 500.0]]))
    assert out.shape == (2, 2, 3, 4)
    # two nodes: a straight line in ln q; 200 is halfway between 100 and 400 in ln q
    np.testing.assert_allclose(out[0, 1], (y[0] + y[1]) / 2, rtol=1e-14)
    assert np.isnan(out[1, 1]).all()
    one = pchip_log_q([500.0], np.array([[1.0, 2.0]]), [500.0, 600.0])
    assert one[0].tolist() == [1.0, 2.0] and np.isnan(one[1]).all()
    with pytest.raises(ValueError):
        pchip_log_q([2.0, 1.0], [1.0, 2.0], [1.5])


# --------------------------------------------------------------------------------------------
# Scope units, runs, the CURVES table
# --------------------------------------------------------------------------------------------

def _reach():
    axis = ReachAxis([0.0, 2500.0], [0.0, 0.0])
    return Reach(axis, [0.0, 1000.0, 2000.0, 2500.0], [0.0, 1200.0, 2500.0], ["upper", "lower"])


def test_scope_units_from_reach():
    units = scope_units(_reach())
    assert [(u.scope, u.unit) for u in units] == [("reach", "reach"), ("zone", "upper"), ("zone", "lower"),
                                                  ("segment", "1"), ("segment", "2"), ("segment", "3")]
    assert [u.key for u in units][-1] == "segment 3"
    assert (units[2].chainage_from_m, units[2].chainage_to_m) == (1200.0, 2500.0)
    assert (units[0].chainage_from_m, units[0].chainage_to_m) == (0.0, 2500.0)


def _runs(units, regimes=("weir", "natural"), ladder=LADDER[:4], seed=3):
    rng = np.random.default_rng(seed)
    runs = []
    for reg in regimes:
        for q in ladder[::-1]:  # any order
            a = rng.uniform(0, 1000, (len(units), len(CLASSES)))
            wet = a.sum(axis=1) + rng.uniform(0, 50, len(units))  # a little unclassified wet area
            runs.append(RunAreas(reg, float(q), a, wet))
    return runs


def test_curves_table_round_trip_and_values():
    units = scope_units(_reach())
    runs = _runs(units)
    curves = FlowHabitatCurves.from_runs(runs, units, CLASSES)
    t = curves.table()
    assert tuple(t) == CURVE_COLUMNS
    n = 2 * 4 * len(units) * len(CLASSES)
    assert all(len(v) == n for v in t.values())
    # one row checked by hand: regime natural, 5000 ML/d, zone lower, class moderate
    run = next(r for r in runs if r.regime == "natural" and r.q_mld == 5000.0)
    i = np.flatnonzero((t["regime"] == "natural") & (t["q_mld"] == 5000.0) & (t["unit"] == "lower")
                       & (t["class"] == "moderate"))
    assert i.size == 1
    i = i[0]
    assert t["scope"][i] == "zone" and t["area_m2"][i] == run.class_areas[2, 2]
    assert t["wet_area_m2"][i] == run.wet_area[2]
    assert t["percent"][i] == pytest.approx(100 * run.class_areas[2, 2] / run.wet_area[2], rel=1e-15)
    assert t["q_m3s"][i] == pytest.approx(5000 / 86.4, rel=1e-15)
    assert t["chainage_from_m"][i] == 1200.0
    # discharges increase within each regime
    w = t["q_mld"][t["regime"] == "weir"]
    assert np.all(np.diff(w) >= 0)
    # round trip through the table (text values as from a CSV layer)
    as_text = {k: [str(x) for x in v] for k, v in t.items()}
    back = FlowHabitatCurves.from_table(as_text)
    assert back.regimes == curves.regimes and back.class_names == CLASSES
    assert [u.key for u in back.units] == [u.key for u in units]
    for reg in curves.regimes:
        np.testing.assert_array_equal(back.ladder(reg), curves.ladder(reg))
        np.testing.assert_allclose(back.regime(reg).percent(), curves.regime(reg).percent(), rtol=1e-15)


def test_q_m3s_kept_as_given_and_dry_units():
    units = [ScopeUnit("reach", "reach", 0, 10)]
    runs = [RunAreas("w", 4000.0000000000005, np.array([[1.0, 2.0]]), np.array([3.0]), q_m3s=46.296296296296298),
            RunAreas("w", 3000.0, np.array([[0.0, 0.0]]), np.array([0.0]))]
    c = FlowHabitatCurves.from_runs(runs, units, ["a", "b"])
    t = c.table()
    assert t["q_m3s"][2] == 46.296296296296298
    assert np.isnan(t["percent"][0]) and np.isnan(t["percent"][1])  # a dry unit has no percentage


def test_from_runs_and_from_table_errors():
    units = [ScopeUnit("reach", "reach", 0, 10)]
    r = RunAreas("w", 3000.0, np.array([[1.0, 2.0]]), np.array([3.0]))
    with pytest.raises(ChannelHabitatError, match="two runs at 3000"):
        FlowHabitatCurves.from_runs([r, r], units, ["a", "b"])
    r2 = RunAreas("w", 4000.0, np.array([[1.0, 2.0]]), np.array([3.0]))
    t = FlowHabitatCurves.from_runs([r, r2], units, ["a", "b"]).table()
    cols = {k: list(v) for k, v in t.items()}
    with pytest.raises(ChannelHabitatError, match="two rows") as exc:
        FlowHabitatCurves.from_table({k: v + v[:1] for k, v in cols.items()})
    assert exc.value.parameter == "CURVES"
    with pytest.raises(ChannelHabitatError, match="no row for regime w at 4000 ML/d, reach reach, class b"):
        FlowHabitatCurves.from_table({k: v[:3] for k, v in cols.items()})
    with pytest.raises(ChannelHabitatError, match="no column class"):
        FlowHabitatCurves.from_table({k: v for k, v in cols.items() if k != "class"})
    with pytest.raises(ChannelHabitatError, match="scope 'river'"):
        FlowHabitatCurves.from_table({**cols, "scope": ["river"] * 4})
    with pytest.raises(ChannelHabitatError, match="'x' is not a number"):
        FlowHabitatCurves.from_table({**cols, "area_m2": ["x", "1", "1", "1"]})


def test_run_areas_from_stats_columns():
    reach = {"wet_area_m2": np.array([10.0]), "area_very_slow_m2": np.array([4.0]), "area_fast_m2": np.array([5.0])}
    zones = {"wet_area_m2": np.array([6.0, 4.0]), "area_very_slow_m2": np.array([3.0, 1.0]),
             "area_fast_m2": np.array([2.0, 3.0])}
    segs = {"wet_area_m2": np.array([10.0]), "area_very_slow_m2": np.array([4.0]), "area_fast_m2": np.array([5.0])}
    r = run_areas_from_stats("weir", 3000, ["very slow", "fast"], reach, zones, segs)
    assert r.class_areas.tolist() == [[4, 5], [3, 2], [1, 3], [4, 5]]
    assert r.wet_area.tolist() == [10, 6, 4, 10]


# --------------------------------------------------------------------------------------------
# Targets
# --------------------------------------------------------------------------------------------

def test_parse_targets():
    ts = parse_targets("lower: moderate+fast >= 50%; Upper : Very_Slow <= 10 %\n"
                       "reach: fast > 5%\n\n# a comment\nsegment 3: slow < 30.5%;segment_2: fast \u2265 1%",
                       ["upper", "lower"], CLASSES, n_segments=3)
    assert [t.text for t in ts] == ["lower: moderate+fast >= 50%", "upper: very slow <= 10%", "reach: fast > 5%",
                                    "segment 3: slow < 30.5%", "segment 2: fast >= 1%"]
    assert ts[0].classes == ("moderate", "fast") and ts[0].threshold_pct == 50.0
    assert parse_targets("", ["upper"], CLASSES) == []


@pytest.mark.parametrize("text, expect", [
    ("moderate >= 50%", "start with the zone name"),
    ("middle: fast >= 50%", "'middle' is not a zone"),
    ("lower: quick >= 50%", "'quick' is not a class"),
    ("lower: fast+fast >= 50%", "named twice"),
    ("lower: fast >= 50", "as a percentage"),
    ("lower: fast >= 150%", "outside 0-100%"),
    ("lower: fast = 50%", "a comparison"),
    ("lower: fast >= abc%", "'abc' is not a number"),
    ("segment 9: fast >= 5%", "segment 9 does not exist"),
    ("segment 0: fast >= 5%", "segment 0 does not exist"),
])
def test_parse_targets_errors(text, expect):
    with pytest.raises(ChannelHabitatError) as exc:
        parse_targets(text, ["upper", "lower"], CLASSES, n_segments=3)
    assert expect in str(exc.value) and exc.value.parameter == "TARGET_STATEMENTS"


def _curve(pcts, ladder=LADDER, regime="weir"):
    """A one-unit, two-class curve whose class 'a' has the given percentages (of wet area 1000)."""
    pcts = np.asarray(pcts, dtype=float)
    units = [ScopeUnit("reach", "reach", 0.0, 1.0)]
    runs = [RunAreas(regime, float(q), np.array([[10 * p, 1000 - 10 * p]]), np.array([1000.0]))
            for q, p in zip(ladder, pcts)]
    return FlowHabitatCurves.from_runs(runs, units, ["a", "b"])


def test_required_discharge_statuses():
    rising = np.linspace(20, 70, LADDER.size)
    c = _curve(rising)
    res = required_discharge(c, parse_targets("reach: a >= 10%; reach: a >= 90%; reach: a >= 44%",
                                              [], ["a", "b"]))
    low, never, mid = res
    assert low.status == MET_AT_LOWEST and low.q_mld == 3000.0 and low.q_m3s == pytest.approx(3000 / 86.4)
    assert never.status == NOT_REACHED and math.isnan(never.q_mld)
    assert mid.status == INTERPOLATED
    k = np.searchsorted(rising, 44.0)
    assert LADDER[k - 1] < mid.q_mld < LADDER[k]
    assert c.percent_at("weir", mid.q_mld, "reach", "a") == pytest.approx(44.0, abs=1e-9)
    assert mid.q_m3s == pytest.approx(mid.q_mld * 1000 / 86400, rel=1e-15)
    tab = targets_table(res)
    assert tab["status"].tolist() == [MET_AT_LOWEST, NOT_REACHED, INTERPOLATED]
    assert tab["pct_at_lowest"][0] == pytest.approx(20.0) and tab["pct_at_highest"][0] == pytest.approx(70.0)
    assert "PCHIP" in tab["method"][0]


def test_threshold_exactly_at_a_run_gives_its_discharge_exactly():
    pcts = [10, 20, 30, 40, 50, 60, 60, 70, 75, 80, 90]
    c = _curve(pcts)
    for k in range(1, LADDER.size):
        if pcts[k] == pcts[k - 1]:
            continue
        r = required_discharge(c, parse_targets(f"reach: a >= {pcts[k]}%", [], ["a", "b"]))[0]
        assert r.q_mld == LADDER[k]  # exactly, not approximately
        assert r.q_m3s == pytest.approx(LADDER[k] / 86.4, rel=1e-15)
    # strict '>' with equality at a run: met only above it; the infimum is that run's discharge
    r = required_discharge(c, parse_targets("reach: a > 30%", [], ["a", "b"]))[0]
    assert r.status == INTERPOLATED and r.q_mld == LADDER[2]


def test_falling_class_and_lost_again():
    falling = np.linspace(40, 5, LADDER.size)
    c = _curve(falling)
    r = required_discharge(c, parse_targets("reach: a <= 20%", [], ["a", "b"]))[0]
    k = int(np.argmax(falling <= 20))
    assert r.status == INTERPOLATED and LADDER[k - 1] < r.q_mld <= LADDER[k]
    assert c.percent_at("weir", r.q_mld, "reach", "a") == pytest.approx(20.0, abs=1e-9)
    # a hump: met between the 4th and 8th runs only
    hump = [10, 20, 30, 45, 55, 60, 55, 45, 30, 20, 10]
    c = _curve(hump)
    r = required_discharge(c, parse_targets("reach: a >= 50%", [], ["a", "b"]))[0]
    assert r.status == INTERPOLATED and LADDER[3] < r.q_mld < LADDER[4]
    assert LADDER[6] < r.lost_above_q_mld < LADDER[7]
    assert c.percent_at("weir", r.lost_above_q_mld, "reach", "a") == pytest.approx(50.0, abs=1e-9)
    assert not r.met_at_highest and "lost again above" in r.note
    # met, lost and met again
    c = _curve([60, 40, 60, 60, 60, 60, 60, 60, 60, 60, 60])
    r = required_discharge(c, parse_targets("reach: a >= 50%", [], ["a", "b"]))[0]
    assert r.status == MET_AT_LOWEST and "met again at the run of 5000 ML/d" in r.note


def test_class_sets_are_summed_before_interpolating():
    units = [ScopeUnit("reach", "reach", 0.0, 1.0), ScopeUnit("zone", "lower", 0.0, 1.0)]
    runs = []
    for q, (a, b) in zip(LADDER[:3], [(10, 5), (20, 30), (60, 20)]):
        areas = np.array([[a, b, 100 - a - b], [a, b, 100 - a - b]], dtype=float)
        runs.append(RunAreas("w", float(q), areas, np.array([100.0, 100.0])))
    c = FlowHabitatCurves.from_runs(runs, units, ["m", "f", "s"])
    q, p = c.percent_ladder("w", "lower", "m+f")
    assert p.tolist() == [15.0, 50.0, 80.0]
    r = required_discharge(c, parse_targets("lower: m+f >= 50%", ["lower"], ["m", "f", "s"]))[0]
    assert r.q_mld == LADDER[1]
    grid = c.percent_grid("w", LADDER[:3])
    assert grid.shape == (3, 2, 3) and grid[1, 1, 0] == 20.0


def test_evaluate_targets_along_a_series():
    c = _curve(np.linspace(20, 70, LADDER.size))
    ts = parse_targets("reach: a >= 45%; reach: b >= 50%", [], ["a", "b"])
    q = np.array([2000.0, 3000.0, 10000.0, 40000.0, 50000.0, np.nan])
    ev = evaluate_targets(c, ts, "weir", q)
    assert ev["inside"].tolist() == [False, True, True, True, False, False]
    assert ev["pct"].shape == (2, 6) and np.isnan(ev["pct"][:, [0, 4, 5]]).all()
    assert ev["pct"][0, 1] == 20.0 and ev["pct"][1, 1] == 80.0
    assert ev["met"][0].tolist() == [False, False, True, True, False, False]  # 45 % at 10000 ML/d
    assert ev["met"][1].tolist() == [False, True, True, False, False, False]  # b = 100 - a


def test_lookups_name_the_callers_parameter():
    c = _curve(np.linspace(20, 70, LADDER.size))
    assert c.unit_index("REACH") == 0 and c.class_indices("A + b") == [0, 1]
    with pytest.raises(ChannelHabitatError, match="no unit 'middle'") as exc:
        c.unit_index("middle", "ZONES")
    assert exc.value.parameter == "ZONES"
    with pytest.raises(ChannelHabitatError, match="no class 'c'") as exc:
        c.class_indices("a+c", "BLOOM_CLASSES")
    assert exc.value.parameter == "BLOOM_CLASSES"
    with pytest.raises(ChannelHabitatError, match="no regime 'natural'"):
        c.ladder("natural")
