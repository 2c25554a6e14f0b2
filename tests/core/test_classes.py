"""core/classes.py: rule tables, presets, bounds at thresholds, table and CSV parsing."""

import numpy as np
import pytest

from plugin.core.classes import (
    TABLE_COLUMNS,
    depth_velocity_matrix,
    froude_preset,
    preset,
    scheme_from_csv,
    scheme_from_matrix,
    scheme_from_rows,
    velocity_preset,
)
from plugin.core.errors import ChannelHabitatError


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_velocity_bounds_lower_inclusive_upper_exclusive(dtype):
    s = velocity_preset()
    speed = np.array([0.0, 0.049, 0.05, 0.1999, 0.2, 0.2999, 0.3, 2.0], dtype=dtype)
    depth = np.ones_like(speed)
    codes = s.classify(depth, speed)
    names = [s.names[c - 1] for c in codes]
    assert names == ["very slow", "very slow", "slow", "slow", "moderate", "moderate", "fast", "fast"]


def test_non_finite_values_get_code_zero():
    s = velocity_preset()
    codes = s.classify(np.array([1.0, np.nan, 1.0]), np.array([np.nan, 0.1, np.inf]))
    assert codes.tolist() == [0, 0, 0]


def test_general_path_equals_interval_fast_path():
    s = velocity_preset()
    # the same table with a depth bound that never binds forces the general (row by row) path
    rows = [r[:3] + ["0", ""] + r[5:] for r in s.to_rows()]
    g = scheme_from_rows(rows)
    assert g._interval_edges() is None and s._interval_edges() is not None
    rng = np.random.default_rng(3)
    speed = rng.gamma(2, 0.1, 10000).astype(np.float32)
    speed[:4] = [0.05, 0.2, 0.3, 0.0]
    depth = rng.uniform(0.05, 3, speed.size).astype(np.float32)
    np.testing.assert_array_equal(s.classify(depth, speed), g.classify(depth, speed))


def test_gapped_table_leaves_unmatched_values_unclassified():
    s = scheme_from_rows([["slow", "", "0.2"], ["fast", "0.5", ""]])
    assert s.classify(np.ones(3), np.array([0.1, 0.3, 0.6])).tolist() == [1, 0, 2]


def test_first_matching_row_wins():
    s = scheme_from_rows([["deep", "", "", "2", ""], ["any", "", "", "", ""]])
    assert s.classify(np.array([3.0, 1.0]), np.array([0.1, 0.1])).tolist() == [1, 2]


def test_depth_velocity_matrix():
    s = depth_velocity_matrix([1.0], [0.2, 0.5], ["shallow", "deep"], ["slow", "medium", "fast"])
    assert s.names == ["shallow slow", "shallow medium", "shallow fast", "deep slow", "deep medium", "deep fast"]
    depth = np.array([0.5, 0.5, 0.5, 1.0, 1.0, 3.0])
    speed = np.array([0.1, 0.2, 0.6, 0.19, 0.5, 0.49])
    got = [s.names[c - 1] for c in s.classify(depth, speed)]
    assert got == ["shallow slow", "shallow medium", "shallow fast", "deep slow", "deep fast", "deep medium"]
    with pytest.raises(ChannelHabitatError):
        depth_velocity_matrix([1.0, 0.5], [0.2])


def test_table_round_trip_through_matrix_and_csv():
    s = velocity_preset()
    flat = [c for r in s.to_rows() for c in r]
    m = scheme_from_matrix(flat)
    assert m.names == s.names and m.colours == s.colours
    assert [c.bounds for c in m.classes] == [c.bounds for c in s.classes]
    text = ",".join(TABLE_COLUMNS) + "\n" + "\n".join(",".join(r) for r in s.to_rows())
    c = scheme_from_csv(text)
    assert [x.bounds for x in c.classes] == [x.bounds for x in s.classes]


@pytest.mark.parametrize("rows,fragment", [
    ([["a", "x"]], "not a number"),
    ([["a", "0.3", "0.2"]], "not below"),
    ([["a"], ["a"]], "twice"),
    ([["very slow"], ["very-slow"]], "same field name"),
    ([["a", "", "", "", "", "", "", "", "", "red"]], "#RRGGBB"),
    ([["", "0.1"]], "no class name"),
    ([], "empty"),
])
def test_bad_tables_are_refused_with_a_message(rows, fragment):
    with pytest.raises(ChannelHabitatError) as err:
        scheme_from_rows(rows)
    assert fragment in str(err.value)
    assert err.value.parameter == "CLASS_TABLE"


def test_csv_needs_class_column_and_known_columns():
    with pytest.raises(ChannelHabitatError, match="class"):
        scheme_from_csv("name,speed_min\nx,0\n")
    with pytest.raises(ChannelHabitatError, match="unknown column"):
        scheme_from_csv("class,velocity_min\nx,0\n")


def test_matrix_with_wrong_cell_count():
    with pytest.raises(ChannelHabitatError, match="multiple"):
        scheme_from_matrix(["a", "1", "2"])


def test_presets_and_colours():
    assert preset("velocity").names == ["very slow", "slow", "moderate", "fast"]
    assert froude_preset().names == ["pool", "riffle", "run"]
    for s in (velocity_preset(), froude_preset()):
        assert len(set(s.colours)) == len(s.colours)
    with pytest.raises(ChannelHabitatError):
        preset("nope")


def test_describe():
    s = velocity_preset()
    assert s.classes[0].describe() == "V < 0.05 m/s"
    assert s.classes[1].describe() == "0.05 <= V < 0.2 m/s"
    assert froude_preset().classes[2].describe() == "all other wet water"
