"""core/series.py: flow series parsing and validation, spells, delivery patterns and volumes."""

import math

import numpy as np
import pytest

from plugin.core.errors import ChannelHabitatError
from plugin.core.series import (
    FlowSeries,
    added_flow,
    alternative_delivery,
    find_spells,
    parse_delivery_options,
    read_flow_series,
    trapezoid_weights,
    volume_ml,
    volume_to_ml,
)


def _csv(rows, header="date,discharge,unit"):
    return header + "\n" + "\n".join(rows) + "\n"


def _days(start, n):
    return np.datetime64(start) + np.arange(n)


def _series(q, start="2023-07-01"):
    q = np.asarray(q, dtype=float)
    return FlowSeries(_days(start, len(q)), q, {}, ("ML/d",))


# ---------------------------------------------------------------------------------------------
# Reading the series
# ---------------------------------------------------------------------------------------------
def test_read_series_units_and_order():
    text = _csv(["2023-07-03,10,m3/s", "2023-07-01,5000,ML/d", "2023-07-02,5500,mld"])
    s = read_flow_series(text)
    assert [str(d) for d in s.dates] == ["2023-07-01", "2023-07-02", "2023-07-03"]
    # 10 m3/s = 10 * 86400 / 1000 ML/d = 864 ML/d (SI definitions, hand calculation)
    np.testing.assert_allclose(s.q_mld, [5000.0, 5500.0, 864.0], rtol=0, atol=1e-9)
    assert set(s.units) == {"ML/d", "m3/s"}


def test_read_series_q_columns_and_unit_argument():
    s = read_flow_series("date,q_m3s\n2023-01-01,1\n2023-01-02,2\n")
    np.testing.assert_allclose(s.q_mld, [86.4, 172.8])
    s = read_flow_series("Date,Discharge\n2023-01-01,100\n", unit="ML/d")
    assert s.q_mld.tolist() == [100.0]
    with pytest.raises(ChannelHabitatError, match="no 'unit' column"):
        read_flow_series("date,discharge\n2023-01-01,100\n")


def test_read_series_alternative_columns():
    text = _csv(["2023-07-01,100,ML/d,150,1", "2023-07-02,100,m3/s,150,1"],
                header="date,discharge,unit,with_pulse,other")
    s = read_flow_series(text)
    assert list(s.alternatives) == ["with_pulse", "other"]
    # the row's unit applies to the alternative columns too: 150 m3/s = 12960 ML/d
    np.testing.assert_allclose(s.alternatives["with_pulse"], [150.0, 12960.0])
    s = read_flow_series(text, alternatives=["WITH_PULSE"])
    assert list(s.alternatives) == ["with_pulse"]
    with pytest.raises(ChannelHabitatError, match="'missing' is not in the flow series"):
        read_flow_series(text, alternatives=["missing"])
    bad = _csv(["2023-07-01,100,ML/d,A"], header="date,discharge,unit,quality")
    with pytest.raises(ChannelHabitatError, match="quality is 'A', not a number"):
        read_flow_series(bad)


def test_read_series_refuses_duplicates_naming_dates_and_lines():
    text = _csv(["2023-07-01,1,ML/d", "2023-07-02,1,ML/d", "2023-07-02,2,ML/d", "2023-07-03,1,ML/d"])
    with pytest.raises(ChannelHabitatError, match=r"duplicate dates: 2023-07-02 \(lines 3 and 4\)") as e:
        read_flow_series(text)
    assert e.value.parameter == "FLOWS"


def test_read_series_refuses_gaps_naming_the_first():
    text = _csv(["2023-07-01,1,ML/d", "2023-07-02,1,ML/d", "2023-07-06,1,ML/d", "2023-07-07,1,ML/d",
                 "2023-07-09,1,ML/d"])
    with pytest.raises(ChannelHabitatError) as e:
        read_flow_series(text)
    msg = str(e.value)
    assert "gaps" in msg
    assert "nothing between 2023-07-02 and 2023-07-06 (3 days missing)" in msg
    assert "nothing between 2023-07-07 and 2023-07-09 (1 day missing)" in msg
    assert msg.index("2023-07-02") < msg.index("2023-07-07")


@pytest.mark.parametrize("row, needle", [
    ("2023-07-02,-5,ML/d", "line 3 (2023-07-02): discharge -5 is negative"),
    ("2023-07-02,,ML/d", "line 3 (2023-07-02): discharge is empty"),
    ("2023-07-02,abc,ML/d", "discharge is 'abc', not a number"),
    ("2023-07-02,nan,ML/d", "not a number"),
    ("2023-07-02,5,gallons", "unknown discharge unit 'gallons'"),
    ("2023-07-02,5,", "line 3 (2023-07-02): the unit is empty"),
    ("02/07/2023,5,ML/d", "line 3: date '02/07/2023' is not an ISO date"),
    ("2023-02-30,5,ML/d", "not a valid calendar date"),
])
def test_read_series_bad_rows(row, needle):
    text = _csv(["2023-07-01,1,ML/d", row, "2023-07-03,1,ML/d"])
    with pytest.raises(ChannelHabitatError) as e:
        read_flow_series(text)
    assert needle in str(e.value)
    assert e.value.parameter == "FLOWS"


def test_read_series_times_of_day():
    s = read_flow_series(_csv(["2023-07-01 09:00,1,ML/d", "2023-07-02 09:00,2,ML/d"]))
    assert s.n_days == 2
    with pytest.raises(ChannelHabitatError, match="mixes times of day"):
        read_flow_series(_csv(["2023-07-01 09:00,1,ML/d", "2023-07-02 00:00,2,ML/d"]))


def test_read_series_header_problems():
    with pytest.raises(ChannelHabitatError, match="empty"):
        read_flow_series("")
    with pytest.raises(ChannelHabitatError, match="no data rows"):
        read_flow_series("date,discharge,unit\n")
    with pytest.raises(ChannelHabitatError, match="header with columns date"):
        read_flow_series("day,discharge,unit\n2023-01-01,1,ML/d\n")
    with pytest.raises(ChannelHabitatError, match="no discharge column"):
        read_flow_series("date,flow,unit\n2023-01-01,1,ML/d\n")
    with pytest.raises(ChannelHabitatError, match="repeated column"):
        read_flow_series("date,discharge,unit,DATE\n2023-01-01,1,ML/d,x\n")


# ---------------------------------------------------------------------------------------------
# Spells
# ---------------------------------------------------------------------------------------------
def _spells_by_loop(cond, known):
    """Independent reference: a plain walk over the days."""
    out, i, n = [], 0, len(cond)
    while i < n:
        if cond[i] and known[i]:
            j = i
            while j + 1 < n and cond[j + 1] and known[j + 1]:
                j += 1
            cs = i == 0 or not known[i - 1]
            ce = j == n - 1 or not known[j + 1]
            out.append((i, j, j - i + 1, cs, ce))
            i = j + 1
        else:
            i += 1
    return out


def _as_tuples(sp):
    return [(int(a), int(b), int(c), bool(d), bool(e))
            for a, b, c, d, e in zip(sp.start, sp.end, sp.length, sp.censored_start, sp.censored_end)]


def test_spells_hand_made():
    # days:            0  1  2  3  4  5  6  7  8  9
    cond = np.array([1, 1, 0, 1, 1, 1, 0, 0, 1, 1], bool)
    sp = find_spells(cond)
    # hand-made: [0-1] touches the start, [3-5] complete, [8-9] touches the end
    assert _as_tuples(sp) == [(0, 1, 2, True, False), (3, 5, 3, False, False), (8, 9, 2, False, True)]


def test_spells_whole_record_and_none():
    assert _as_tuples(find_spells(np.ones(4, bool))) == [(0, 3, 4, True, True)]
    assert len(find_spells(np.zeros(4, bool))) == 0
    assert len(find_spells(np.zeros(0, bool))) == 0
    assert _as_tuples(find_spells(np.array([True]))) == [(0, 0, 1, True, True)]


def test_spells_unknown_days_break_and_censor():
    cond = np.array([1, 1, 1, 1, 1, 0, 1], bool)
    known = np.array([1, 1, 0, 1, 1, 1, 1], bool)
    # day 2 unknown: [0-1] censored at both ends (start of record, unknown day after),
    # [3-4] censored at its start only, [6] at the end of record
    assert _as_tuples(find_spells(cond, known)) == [(0, 1, 2, True, True), (3, 4, 2, True, False),
                                                    (6, 6, 1, False, True)]


def test_spells_random_against_loop():
    rng = np.random.default_rng(7)
    for _ in range(200):
        n = int(rng.integers(1, 40))
        cond = rng.random(n) < 0.6
        known = rng.random(n) < 0.85
        assert _as_tuples(find_spells(cond, known)) == _spells_by_loop(cond, known)


# ---------------------------------------------------------------------------------------------
# Delivery options: parsing
# ---------------------------------------------------------------------------------------------
def test_parse_options():
    opts = parse_delivery_options(
        "spring pulse: pulse start=2023-10-01 duration=5 ramp_up=3 ramp_down=10\n"
        "# a comment\n"
        "lift: peak from=2023-08-01 to=2023-09-30 duration=3 ramp=2; slow fall: recession start=2023-11-01 "
        "fall=2% level=150m3/s\n"
        "steady: constant start=2023-09-01 days=30")
    assert [o.name for o in opts] == ["spring pulse", "lift", "slow fall", "steady"]
    assert opts[0].params == {"start": np.datetime64("2023-10-01"), "duration": 5, "ramp_up": 3, "ramp_down": 10}
    assert opts[1].params["ramp_up"] == 2 and opts[1].params["ramp_down"] == 2
    assert opts[2].params["fall"] == 2.0
    assert opts[2].params["level"] == pytest.approx(150 * 86.4)  # 150 m3/s in ML/d
    assert opts[3].params["days"] == 30


@pytest.mark.parametrize("text, needle", [
    ("pulse start=2023-10-01 duration=5", "has no name"),
    ("a: wave start=2023-10-01", "unknown pattern 'wave'"),
    ("a: pulse start=2023-10-01", "needs duration="),
    ("a: pulse start=2023-10-01 duration=0", "whole number of days >= 1"),
    ("a: pulse start=2023-10-01 duration=2.5", "whole number of days"),
    ("a: pulse start=01/10/2023 duration=2", "not an ISO date"),
    ("a: pulse start=2023-10-01 duration=2 speed=3", "'speed' is not a setting of a pulse"),
    ("a: pulse start=2023-10-01 duration=2 ramp=1 ramp_up=2", "not both"),
    ("a: constant start=2023-10-01", "end=DATE or days=N"),
    ("a: constant start=2023-10-01 end=2023-09-01", "before start"),
    ("a: recession start=2023-10-01 fall=100", "percentage per day"),
    ("a: recession start=2023-10-01 level=-4", "discharge > 0"),
    ("a: peak from=2023-10-01 to=2023-09-01 duration=1", "before from"),
    ("a: constant start=2023-10-01 days=3; A: constant start=2023-10-01 days=3", "used twice"),
    ("base: constant start=2023-10-01 days=3", "used twice"),
])
def test_parse_options_errors(text, needle):
    with pytest.raises(ChannelHabitatError) as e:
        parse_delivery_options(text)
    assert needle in str(e.value)
    assert e.value.parameter == "DELIVERY"


# ---------------------------------------------------------------------------------------------
# Delivery options: volume accounting (added flow x 1 day summed equals the volume)
# ---------------------------------------------------------------------------------------------
BASE = 3000.0 + 2000.0 * np.sin(np.linspace(0, 3 * np.pi, 365)) ** 2  # an arbitrary year, ML/d


@pytest.mark.parametrize("text", [
    "o: pulse start=2023-09-10 duration=5 ramp_up=3 ramp_down=10",
    "o: pulse start=2023-09-10 duration=1",
    "o: pulse start=2023-09-10 duration=7 ramp_down=21",
    "o: peak from=2023-08-01 to=2023-12-31 duration=4 ramp=5",
    "o: recession start=2023-09-01 fall=0.2 level=6500",
    "o: recession start=2023-09-01",
    "o: recession start=2023-08-20 fall=1 level=9000",
    "o: constant start=2023-09-01 end=2023-11-29",
    "o: constant start=2023-09-01 days=1",
])
@pytest.mark.parametrize("volume", [1.0, 777.7, 25000.0, 123456.789])
def test_volume_used_equals_volume_given(text, volume):
    s = _series(BASE)
    opt = parse_delivery_options(text)[0]
    d = added_flow(opt, s, volume)
    added = d.added_mld
    assert np.all(added >= 0)
    # independent sum: plain Python over ML/d x 1 day
    total = sum(float(a) * 1.0 for a in added)
    assert round(total) == round(volume)  # to the megalitre (the requirement)
    assert abs(total - volume) < 1e-6  # and in fact to floating precision
    assert d.volume_ml == pytest.approx(volume, abs=1e-9)


def test_pulse_shape_and_peak_by_hand():
    s = _series(np.full(40, 1000.0))
    opt = parse_delivery_options("p: pulse start=2023-07-05 duration=4 ramp_up=3 ramp_down=1")[0]
    d = added_flow(opt, s, 1100.0)
    # weights by hand: ramp up 1/4, 2/4, 3/4; 4 days at 1; ramp down 1/2 -> sum = 1.5 + 4 + 0.5 = 6
    peak = 1100.0 / 6.0
    expected = np.zeros(40)
    expected[4:12] = peak * np.array([0.25, 0.5, 0.75, 1, 1, 1, 1, 0.5])
    np.testing.assert_allclose(d.added_mld, expected, rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(trapezoid_weights(3, 4, 1), [0.25, 0.5, 0.75, 1, 1, 1, 1, 0.5])


def test_peak_centred_on_highest_base_flow():
    q = np.full(30, 1000.0)
    q[12] = 5000.0  # the natural peak, 2023-07-13
    q[25] = 9000.0  # outside the window
    s = _series(q)
    opt = parse_delivery_options("lift: peak from=2023-07-05 to=2023-07-20 duration=3 ramp=2")[0]
    d = added_flow(opt, s, 500.0)
    nz = np.nonzero(d.added_mld)[0]
    # 3 peak days centred on day 12 -> days 11..13; ramps of 2 days -> 9..15
    assert nz.tolist() == list(range(9, 16))
    assert np.argmax(d.added_mld) in (11, 12, 13)
    # weights: 1/3, 2/3, 1, 1, 1, 2/3, 1/3 -> sum 5
    assert d.added_mld[12] == pytest.approx(100.0)


def test_recession_hold_by_hand():
    q = np.array([100.0, 90, 80, 70, 60, 50, 40])
    s = _series(q)
    opt = parse_delivery_options("r: recession start=2023-07-01")[0]  # hold the level of day 0: 100
    d = added_flow(opt, s, 45.0)
    # needs 0, 10, 20, 30 ... -> 0 + 10 + 20 = 30 by day 2; day 3 takes the remaining 15 (partial)
    np.testing.assert_allclose(d.added_mld, [0, 10, 20, 15, 0, 0, 0])
    assert "partial" in d.summary


def test_recession_with_fall_rate_by_hand():
    q = np.array([100.0, 50, 50, 50, 50])
    s = _series(q)
    opt = parse_delivery_options("r: recession start=2023-07-01 fall=10")[0]
    d = added_flow(opt, s, 100.0)
    # target 100, 90, 81, 72.9 -> added 0, 40, 31, 22.9 (cum 93.9), then 6.1 of 15.61 on day 4
    np.testing.assert_allclose(d.added_mld, [0, 40, 31, 22.9, 6.1], atol=1e-9)


def test_recession_not_enough_room_is_refused():
    s = _series(np.array([100.0, 90, 80]))
    opt = parse_delivery_options("r: recession start=2023-07-01")[0]
    with pytest.raises(ChannelHabitatError, match="adds only 30 ML") as e:
        added_flow(opt, s, 45.0)
    assert e.value.parameter == "DELIVERY"


def test_constant_by_hand():
    s = _series(np.full(10, 500.0))
    opt = parse_delivery_options("c: constant start=2023-07-03 end=2023-07-06")[0]
    d = added_flow(opt, s, 1000.0)
    np.testing.assert_allclose(d.added_mld, [0, 0, 250, 250, 250, 250, 0, 0, 0, 0])


@pytest.mark.parametrize("text, needle", [
    ("p: pulse start=2023-07-08 duration=2 ramp_down=2", "after the flow series ends (2023-07-10)"),
    ("p: pulse start=2023-06-30 duration=2", "outside the flow series"),
    ("p: peak from=2023-07-01 to=2023-07-03 duration=3 ramp=2", "before the flow series begins"),
    ("c: constant start=2023-07-05 days=10", "after the flow series ends"),
])
def test_patterns_must_fit_in_the_record(text, needle):
    s = _series(np.full(10, 500.0))
    with pytest.raises(ChannelHabitatError, match=needle.replace("(", r"\(").replace(")", r"\)")):
        added_flow(parse_delivery_options(text)[0], s, 100.0)


def test_volume_required_and_units():
    s = _series(np.full(10, 500.0))
    opt = parse_delivery_options("c: constant start=2023-07-03 days=2")[0]
    with pytest.raises(ChannelHabitatError, match="volume") as e:
        added_flow(opt, s, 0.0)
    assert e.value.parameter == "ENV_VOLUME"
    assert volume_to_ml(2.5, "GL") == 2500.0  # 1 GL = 1000 ML
    assert volume_to_ml(12, "ML") == 12.0
    with pytest.raises(ChannelHabitatError, match="unknown volume unit"):
        volume_to_ml(1, "acre-feet")
    with pytest.raises(ChannelHabitatError):
        volume_to_ml(-1, "ML")


def test_alternative_delivery_volume():
    s = _series(np.array([10.0, 20, 30]))
    d = alternative_delivery("alt", np.array([15.0, 20, 25]), s)
    assert d.volume_ml == 0.0  # +5 and -5 (hand calculation)
    assert "below the base series on 1 day" in d.summary
    assert volume_ml([0.1] * 10) == 1.0  # exactly rounded summation
    assert math.isclose(volume_ml(np.full(365, 1234.5)), 365 * 1234.5)
