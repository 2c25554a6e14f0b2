"""Suitability curves (core/suitability.py): reading, validation, interpolation, composites, WUA."""

from __future__ import annotations

import numpy as np
import pytest

from plugin.core.errors import ChannelHabitatError
from plugin.core.suitability import (
    combine,
    read_suitability_csv,
    select_curve_set,
    suitability_from_csv_text,
    suitability_from_rows,
    weighted_usable_area,
)

CSV = """species,life_stage,variable,value,unit,suitability,source
fish a,adult,depth,0.0,m,0.0,workshop
fish a,adult,depth,0.5,m,1.0,workshop
fish a,adult,depth,3.0,m,0.4,workshop
fish a,adult,velocity,0,cm/s,1.0,workshop
fish a,adult,velocity,20,cm/s,1.0,workshop
fish a,adult,velocity,60,cm/s,0.0,workshop
fish a,larva,speed,0.0,,1.0,
fish a,larva,speed,0.1,,0.2,
"""


def test_read_sets_and_interpolate(tmp_path):
    p = tmp_path / "hsc.csv"
    p.write_text(CSV, encoding="utf-8")
    sets = read_suitability_csv(p)
    assert [s.label for s in sets] == ["fish a / adult", "fish a / larva"]
    adult = select_curve_set(sets, "Fish A/Adult")
    assert adult.variables == ["depth", "velocity"] and adult.sources == ("workshop",)
    assert adult.keys == {"species": "fish a", "life_stage": "adult"}
    d = adult.curves["depth"]
    # piecewise linear, hand values; clamped beyond the ends
    np.testing.assert_allclose(d([0.25, 0.5, 1.75, 3.0, 10.0, -1.0]), [0.5, 1.0, 0.7, 0.4, 0.4, 0.0], rtol=1e-15)
    v = adult.curves["velocity"]  # cm/s converted to m/s
    np.testing.assert_allclose(v.values, [0.0, 0.2, 0.6])
    np.testing.assert_allclose(v([0.1, 0.4, 2.0]), [1.0, 0.5, 0.0], rtol=1e-15)
    assert np.isnan(v([np.nan]))[0]
    larva = select_curve_set(sets, "fish a / larva")
    assert larva.variables == ["velocity"]
    # one-variable set: every combination is that suitability
    for m in ("product", "geometric mean", "minimum"):
        np.testing.assert_allclose(larva.composite(velocity=[0.05], method=m), [0.6])
    assert "depth (0 m: 0, 0.5 m: 1, 3 m: 0.4)" == d.describe()


def test_composites_by_hand():
    s_d = np.array([0.9, 0.5, 0.0, 1.0])
    s_v = np.array([0.24, 0.5, 0.7, 1.0])
    np.testing.assert_allclose(combine([s_d, s_v], "product"), [0.216, 0.25, 0.0, 1.0])
    np.testing.assert_allclose(combine([s_d, s_v], "geometric mean"), [np.sqrt(0.216), 0.5, 0.0, 1.0])
    np.testing.assert_allclose(combine([s_d, s_v], "minimum"), [0.24, 0.5, 0.0, 1.0])
    np.testing.assert_allclose(combine([s_d, s_v], "geometric_mean"), combine([s_d, s_v], "geometric mean"))
    assert np.isnan(combine([np.array([np.nan]), np.array([0.5])], "minimum"))[0]
    with pytest.raises(ChannelHabitatError, match="unknown combination") as exc:
        combine([s_d], "mean")
    assert exc.value.parameter == "COMBINATION"


def test_weighted_usable_area_by_group():
    csi = np.array([1.0, 0.5, 0.0, 0.25, np.nan, 1.0])
    area = np.array([10.0, 20.0, 30.0, 40.0, 50.0, 60.0])
    groups = np.array([0, 0, 1, 1, 1, -1])
    w = weighted_usable_area(csi, area, groups, 3)
    np.testing.assert_allclose(w["wua_m2"], [20.0, 10.0, 0.0])
    np.testing.assert_allclose(w["wet_area_m2"], [30.0, 120.0, 0.0])
    np.testing.assert_allclose(w["wua_fraction"][:2], [20 / 30, 10 / 120])
    assert np.isnan(w["wua_fraction"][2])
    one = weighted_usable_area(csi[:4], area[:4])
    assert one["wua_m2"].tolist() == [30.0]


@pytest.mark.parametrize("row, expect", [
    ("a,depth,0.5,m,1.2", "suitability 1.2 is outside [0, 1]"),
    ("a,depth,0.5,m,-0.1", "suitability -0.1 is outside [0, 1]"),
    ("a,depth,0.5,m,80", "write 0.8, not 80"),
    ("a,temperature,0.5,m,0.5", "unknown variable 'temperature'"),
    ("a,depth,0.5,ft/s,0.5", "unit 'ft/s' is not a depth unit"),
    ("a,depth,-1,m,0.5", "negative"),
    ("a,depth,x,m,0.5", "value 'x' is not a number"),
    ("a,depth,0.5,m,", "suitability '' is not a number"),
    ("a,depth,0.1,m,0.5", "value 0.1 is not above the previous point's 0.2 (row 2)"),
    ("a,depth,0.2,cm,0.5", "changes unit from m to cm"),
])
def test_validation_messages(row, expect):
    text = "set,variable,value,unit,suitability\na,depth,0.2,m,0.1\n" + row + "\n"
    with pytest.raises(ChannelHabitatError) as exc:
        suitability_from_csv_text(text, parameter="HSC_FILE", name="hsc.csv")
    assert expect in str(exc.value) and exc.value.parameter == "HSC_FILE"
    assert "hsc.csv row 3" in str(exc.value)


def test_table_errors_and_selection(tmp_path):
    with pytest.raises(ChannelHabitatError, match="no column suitability"):
        suitability_from_csv_text("variable,value\ndepth,1\n")
    with pytest.raises(ChannelHabitatError, match="does not exist"):
        read_suitability_csv(tmp_path / "none.csv")
    sets = suitability_from_csv_text(CSV)
    with pytest.raises(ChannelHabitatError, match="several curve sets; name one of: fish a / adult; fish a / larva"):
        select_curve_set(sets, "")
    with pytest.raises(ChannelHabitatError, match="no curve set 'fish b'") as exc:
        select_curve_set(sets, "fish b")
    assert exc.value.parameter == "CURVE_SET"
    single = suitability_from_rows([{"Variable": "depth", "Value": 1, "Suitability": 0.5}])
    assert select_curve_set(single, None).label == "curves"
    with pytest.raises(ChannelHabitatError, match="has a depth curve but no depth values"):
        single[0].composite(velocity=[0.1])
