"""Scenario tables (core/scenario.py): reading, paths, units and every validation message."""

from __future__ import annotations

import os

import pytest

from plugin.core.errors import ChannelHabitatError
from plugin.core.scenario import (
    ScenarioRow,
    check_same_crs,
    crs_name,
    read_scenarios,
    regimes_of,
    row_errors,
    scenarios_from_rows,
)


def _touch(base, *names):
    for n in names:
        p = base / n
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_bytes(b"")


@pytest.fixture()
def folder(tmp_path):
    _touch(tmp_path, "rasters/weir/q03000_depth.tif", "rasters/weir/q03000_speed.tif",
           "rasters/weir/q04000_depth.tif", "rasters/weir/q04000_u.tif", "rasters/weir/q04000_v.tif",
           "mesh/weir/q03000.nc")
    return tmp_path


def _write(folder, text, name="scenarios.csv", encoding="utf-8"):
    p = folder / name
    p.write_text(text, encoding=encoding)
    return p


def test_raster_and_mesh_rows(folder):
    p = _write(folder, (
        "Regime,Discharge,Unit,Depth,Speed,U,V,Mesh,Depth_Group,Velocity_Group,Time_Index,notes\n"
        "weir,3000,ML/d,rasters/weir/q03000_depth.tif,rasters/weir/q03000_speed.tif,,,,,,,first run\n"
        "weir,46.296296296296298,m3/s,rasters/weir/q04000_depth.tif,,rasters/weir/q04000_u.tif,"
        "rasters/weir/q04000_v.tif,,,,,\n"
        "meshweir,3000,mld,,,,,mesh/weir/q03000.nc,water depth,velocity,2,\n"))
    rows = read_scenarios(p)
    assert [r.regime for r in rows] == ["weir", "weir", "meshweir"]
    assert [r.line for r in rows] == [2, 3, 4]  # spreadsheet rows: the header is row 1
    a, b, m = rows
    assert a.q_mld == 3000.0 and a.q_m3s == pytest.approx(3000 * 1000 / 86400, rel=1e-15)
    assert a.unit == "ML/d" and a.discharge == 3000.0
    # the number as written is kept exactly in its own unit; the other is converted
    assert b.q_m3s == 46.296296296296298 and b.q_mld == pytest.approx(4000.0, rel=1e-14)
    assert b.unit == "m3/s"
    assert a.source.depth == str(folder / "rasters/weir/q03000_depth.tif")
    assert os.path.isabs(a.source.speed) and a.source.u is None
    assert b.source.speed is None and b.source.u.endswith("q04000_u.tif") and b.source.v.endswith("q04000_v.tif")
    assert m.source.is_mesh and m.source.mesh == str(folder / "mesh/weir/q03000.nc")
    assert m.source.depth_group == "water depth" and m.source.velocity_group == "velocity"
    assert m.source.time_index == 2
    assert a.source.time_index == -1
    assert set(a.source.params.values()) == {"SCENARIOS"}
    assert a.extra == {"notes": "first run"}
    assert a.where == "row 2 (regime weir, 3000 ML/d)"
    assert b.label.startswith("weir 46.2963") and b.label.endswith("m3/s")
    assert regimes_of(rows) == ["weir", "meshweir"]
    # different files of one grid share a cache key
    assert a.source.grid_key() != m.source.grid_key()


def test_semicolons_bom_comments_blank_rows_and_absolute_paths(folder):
    depth = folder / "rasters/weir/q03000_depth.tif"
    p = _write(folder, (
        "regime;discharge;unit;depth;speed\n"
        f"weir;3000;ML/d;{depth};rasters/weir/q03000_speed.tif\n"
        ";;;;\n"
        "#weir;4000;ML/d;missing.tif;missing.tif\n"), encoding="utf-8-sig")
    rows = read_scenarios(p)
    assert len(rows) == 1
    assert rows[0].source.depth == str(depth)


def test_windows_separators_are_accepted(folder):
    p = _write(folder, "regime,discharge,unit,depth,speed\n"
               "weir,3000,ML/d,rasters\\weir\\q03000_depth.tif,rasters\\weir\\q03000_speed.tif\n")
    rows = read_scenarios(p)
    assert rows[0].source.depth == str(folder / "rasters/weir/q03000_depth.tif")


def test_rows_from_a_table_layer(folder):
    rows = scenarios_from_rows([
        {"REGIME": "weir", "DISCHARGE": 3000, "UNIT": "ML/d", "DEPTH": "rasters/weir/q03000_depth.tif",
         "SPEED": "rasters/weir/q03000_speed.tif", "MESH": None, "TIME_INDEX": None},
        {"REGIME": "weir", "DISCHARGE": 3000.0, "UNIT": "ML/d", "DEPTH": None, "SPEED": None,
         "MESH": "mesh/weir/q03000.nc", "TIME_INDEX": 0},
    ][:1], folder)
    assert rows[0].line == 1 and rows[0].q_mld == 3000.0
    mesh = scenarios_from_rows([{"regime": "m", "discharge": 5, "unit": "m3/s", "mesh": "mesh/weir/q03000.nc",
                                 "time_index": 0.0}], folder)
    assert mesh[0].source.time_index == 0 and mesh[0].q_m3s == 5.0


def _error(folder, body, header="regime,discharge,unit,depth,speed,u,v,mesh,time_index,u_group,v_group"):
    p = _write(folder, header + "\n" + body)
    with pytest.raises(ChannelHabitatError) as exc:
        read_scenarios(p)
    assert exc.value.parameter == "SCENARIOS"
    return str(exc.value)


GOOD = "weir,3000,ML/d,rasters/weir/q03000_depth.tif,rasters/weir/q03000_speed.tif,,,,,,\n"


def test_missing_file_names_row_and_column(folder):
    msg = _error(folder, GOOD + GOOD.replace("3000,", "7000,").replace("q03000_depth", "q07000_depth"))
    assert msg.startswith("row 3 (regime weir, 7000 ML/d): depth file 'rasters/weir/q07000_depth.tif' does not "
                          "exist")
    assert str(folder) in msg


def test_duplicate_regime_and_discharge_also_across_units(folder):
    msg = _error(folder, GOOD + GOOD)
    assert "row 3 (regime weir, 3000 ML/d) repeats the regime and discharge of row 2" in msg
    msg = _error(folder, GOOD + GOOD.replace("3000,ML/d", "34.72222222222222,m3/s"))
    assert "repeats the regime and discharge of row 2" in msg


def test_regime_spelled_two_ways(folder):
    msg = _error(folder, GOOD + GOOD.replace("weir,3000", "Weir,4000"))
    assert "differ only in upper/lower case" in msg and "row 3" in msg


@pytest.mark.parametrize("q, expect", [("abc", "'abc' is not a number"), ("3,000", "not a number"),
                                       ("0", "not a positive number"), ("-5", "not a positive number"),
                                       ("nan", "not a positive number"), ("", "discharge is empty")])
def test_bad_discharge(folder, q, expect):
    body = f'weir,"{q}",ML/d,rasters/weir/q03000_depth.tif,rasters/weir/q03000_speed.tif,,,,,,\n'
    msg = _error(folder, body)
    assert expect in msg and msg.startswith("row 2 (regime weir)")


def test_unknown_unit(folder):
    msg = _error(folder, GOOD.replace("ML/d", "cfs"))
    assert "unknown discharge unit 'cfs'" in msg and "row 2" in msg


def test_row_without_runs_or_with_both(folder):
    assert "no run files" in _error(folder, "weir,3000,ML/d,,,,,,,,\n")
    msg = _error(folder, "weir,3000,ML/d,rasters/weir/q03000_depth.tif,rasters/weir/q03000_speed.tif,,,"
                         "mesh/weir/q03000.nc,,,\n")
    assert "not both" in msg


def test_incomplete_raster_rows(folder):
    assert "give a speed raster or u and v" in _error(folder, "weir,3000,ML/d,rasters/weir/q03000_depth.tif,,,,,,,\n")
    assert "both u and v" in _error(folder, "weir,3000,ML/d,rasters/weir/q04000_depth.tif,,rasters/weir/q04000_u.tif"
                                            ",,,,,\n")
    assert "a depth raster is needed" in _error(folder, "weir,3000,ML/d,,rasters/weir/q03000_speed.tif,,,,,,\n")
    assert "belong to mesh rows" in _error(
        folder, "weir,3000,ML/d,rasters/weir/q03000_depth.tif,rasters/weir/q03000_speed.tif,,,,,ux,vy\n")


def test_mesh_row_checks(folder):
    assert "time_index '1.5' is not a whole number" in _error(folder, "w,3000,ML/d,,,,,mesh/weir/q03000.nc,1.5,,\n")
    assert "both u_group and v_group" in _error(folder, "w,3000,ML/d,,,,,mesh/weir/q03000.nc,,ux,\n")


def test_table_level_errors(folder, tmp_path):
    assert "has no column 'unit'" in _error(folder, "weir,3000\n", header="regime,discharge")
    assert "has no runs" in _error(folder, "#only a comment,,\n", header="regime,discharge,unit")
    with pytest.raises(ChannelHabitatError, match="does not exist"):
        read_scenarios(tmp_path / "nope.csv")
    with pytest.raises(ChannelHabitatError, match="is empty"):
        read_scenarios(_write(folder, "", name="empty.csv"))
    with pytest.raises(ChannelHabitatError, match="the regime is empty"):
        read_scenarios(_write(folder, "regime,discharge,unit,depth,speed\n,3000,ML/d,a,b\n", name="x.csv"))
    with pytest.raises(ChannelHabitatError, match="header has 5 columns"):
        read_scenarios(_write(folder, "regime,discharge,unit,depth,speed\nw,3000,ML/d,a,b,c\n", name="y.csv"))


def test_row_errors_names_the_row(folder):
    row = read_scenarios(_write(folder, "regime,discharge,unit,depth,speed\n" + GOOD.rstrip(",\n") + "\n"))[0]
    with pytest.raises(ChannelHabitatError) as exc:
        with row_errors(row):
            raise ChannelHabitatError("the mesh has no dataset group 'depth'", row.source.params["depth_group"])
    assert str(exc.value) == "row 2 (regime weir, 3000 ML/d): the mesh has no dataset group 'depth'"
    assert exc.value.parameter == "SCENARIOS"


def test_check_same_crs(folder):
    rows = [ScenarioRow("weir", 3000.0, 34.7, None, 2, "ML/d", 3000.0),
            ScenarioRow("natural", 3000.0, 34.7, None, 5, "ML/d", 3000.0),
            ScenarioRow("natural", 4000.0, 46.3, None, 6, "ML/d", 4000.0)]
    a = 'PROJCS["GDA2020 / MGA zone 55",GEOGCS["GDA2020"]]'
    b = 'PROJCRS["WGS 84 / UTM zone 55S",BASEGEOGCRS["WGS 84"]]'
    assert crs_name(a) == "GDA2020 / MGA zone 55" and crs_name(b) == "WGS 84 / UTM zone 55S"
    check_same_crs(rows, [a, "", a])  # unknown CRS is not compared
    with pytest.raises(ChannelHabitatError) as exc:
        check_same_crs(rows, [a, a, b])
    msg = str(exc.value)
    assert "row 6 (regime natural, 4000 ML/d) is in WGS 84 / UTM zone 55S" in msg
    assert "row 2 (regime weir, 3000 ML/d) is in GDA2020 / MGA zone 55" in msg
    check_same_crs(rows, [a, a, b], same=lambda x, y: True)  # gis decides equality
