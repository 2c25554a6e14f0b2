"""usablearea through Processing on the demo reach: one raster run, one mesh run and a scenario table,
checked against an independent recomputation (GDAL/netCDF4 + numpy interpolation of the curve points +
exact projection on the axis), and bad input."""

from __future__ import annotations

import csv
from html import escape

import numpy as np
import pytest
import shapely
from osgeo import gdal
from qgis.core import QgsProcessingException

from plugin.algorithms.base import CAUTION
from plugin.core.usable import WUA_COLUMNS
from tests.qgis import flow_cases as fc

CURVES_CSV = "suitability_demo.csv"
SET = "large-bodied native fish (illustrative) / adult"


def _curve_points(root):
    """{variable: (values, suitability)} read from the demo CSV with the csv module (SI units in it)."""
    pts = {}
    with open(root / CURVES_CSV, encoding="utf-8") as fh:
        for r in csv.DictReader(fh):
            pts.setdefault(r["variable"], ([], []))
            pts[r["variable"]][0].append(float(r["value"]))
            pts[r["variable"]][1].append(float(r["suitability"]))
    return pts


def _composite(pts, depth, speed, how="product"):
    sd = np.interp(depth.astype(float), *pts["depth"])  # numpy: piecewise linear, clamped at the ends
    sv = np.interp(speed.astype(float), *pts["velocity"])
    if how == "product":
        return sd * sv
    if how == "geometric mean":
        return np.sqrt(sd * sv)
    return np.minimum(sd, sv)


@pytest.fixture(scope="module")
def setup(provider, sample_dir, tmp_path_factory):
    out = tmp_path_factory.mktemp("usablearea")
    axis = fc.write_axis(sample_dir, out / "axis.gpkg")
    root = sample_dir.parent
    base = {"CENTRELINE": axis, "SEGMENT_LENGTH": fc.SEGMENT_M, "ZONE_BREAKS": fc.ZONES,
            "SUITABILITY_CURVES": str(root / CURVES_CSV), "CURVE_SET": "", "COMBINATION": 0}
    return {"out": out, "axis": axis, "base": base, "sample": sample_dir, "root": root,
            "pts": _curve_points(root), "line": fc.axis_line(axis)}


@pytest.fixture(scope="module")
def single(setup):
    g = setup["sample"] / "rasters" / "weir"
    out = setup["out"] / "single"
    out.mkdir()
    res = fc.run("usablearea", {**setup["base"], "DEPTH": str(g / "q03000_depth.tif"),
                                "SPEED": str(g / "q03000_speed.tif"), "REGIME": "weir", "DISCHARGE": 3000,
                                "SUITABILITY": str(out / "suit.tif"), "WUA_TABLE": str(out / "wua.gpkg"),
                                "REPORT": str(out / "wua.html")})
    return res, g


def _by_unit(rows):
    return {(r["scope"], r["unit"]): r for r in rows}


def test_single_run_suitability_raster(setup, single):
    res, g = single
    ds = gdal.Open(res["SUITABILITY"])
    b = ds.GetRasterBand(1)
    s = b.ReadAsArray()
    assert b.DataType == gdal.GDT_Float32 and b.GetNoDataValue() == -9999.0
    ref = gdal.Open(str(g / "q03000_depth.tif"))
    assert ds.GetGeoTransform() == ref.GetGeoTransform() and (ds.RasterXSize, ds.RasterYSize) == (
        ref.RasterXSize, ref.RasterYSize)
    assert "UTM zone 44S" in ds.GetProjection()
    del b, ds, ref
    d = gdal.Open(str(g / "q03000_depth.tif")).ReadAsArray()
    v = gdal.Open(str(g / "q03000_speed.tif")).ReadAsArray()
    wet = (d != -9999) & np.isfinite(d) & (d >= 0.05) & (v != -9999)
    assert np.array_equal(s != -9999.0, wet)
    np.testing.assert_allclose(s[wet], _composite(setup["pts"], d[wet], v[wet]), atol=2e-7)
    assert 0.0 <= s[wet].min() and s[wet].max() <= 1.0


def test_single_run_wua_table(setup, single):
    res, g = single
    names, rows = fc.read_layer(res["WUA_TABLE"])
    assert [n for n in names if n != "fid"] == list(WUA_COLUMNS)
    n_seg = int(np.ceil(setup["line"].length / fc.SEGMENT_M))
    assert len(rows) == 1 + 3 + n_seg
    assert {r["regime"] for r in rows} == {"weir"} and {r["q_mld"] for r in rows} == {3000.0}
    assert rows[0]["q_m3s"] == pytest.approx(3000 / 86.4, rel=1e-15)
    assert {r["curve_set"] for r in rows} == {SET} and {r["combination"] for r in rows} == {"product"}
    x, y, area, depth, speed = fc.raster_cells(g / "q03000_depth.tif", g / "q03000_speed.tif")
    ch, outside = fc.locate(setup["line"], x, y)
    csi = _composite(setup["pts"], depth, speed)
    by = _by_unit(rows)
    cell = area[0]
    r = by[("reach", "reach")]
    assert r["wet_area_m2"] == pytest.approx(area[~outside].sum(), abs=3 * cell)
    assert r["wua_m2"] == pytest.approx((area * csi)[~outside].sum(), abs=3 * cell)
    assert r["wua_fraction"] == pytest.approx(r["wua_m2"] / r["wet_area_m2"], rel=1e-12)
    zone = fc.zone_of(ch, setup["line"].length)
    for zi, zn in enumerate(fc.ZONE_NAMES):
        m = ~outside & (zone == zi)
        assert by[("zone", zn)]["wua_m2"] == pytest.approx((area * csi)[m].sum(), abs=3 * cell)
    seg = fc.segment_of(ch, setup["line"].length)
    for si in (0, 20, n_seg - 1):
        m = ~outside & (seg == si)
        assert by[("segment", str(si + 1))]["wua_m2"] == pytest.approx((area * csi)[m].sum(), abs=3 * cell)
    assert sum(by[("zone", z)]["wua_m2"] for z in fc.ZONE_NAMES) == pytest.approx(r["wua_m2"], rel=1e-9)


@pytest.mark.parametrize("code,how", [(1, "geometric mean"), (2, "minimum")])
def test_other_combinations(setup, single, tmp_path, code, how):
    _, g = single
    res = fc.run("usablearea", {**setup["base"], "COMBINATION": code, "DEPTH": str(g / "q03000_depth.tif"),
                                "SPEED": str(g / "q03000_speed.tif"), "SUITABILITY": None,
                                "WUA_TABLE": str(tmp_path / "w.gpkg"), "REPORT": None})
    assert "SUITABILITY" not in res and "REPORT" not in res
    _, rows = fc.read_layer(res["WUA_TABLE"])
    x, y, area, depth, speed = fc.raster_cells(g / "q03000_depth.tif", g / "q03000_speed.tif")
    _, outside = fc.locate(setup["line"], x, y)
    r = _by_unit(rows)[("reach", "reach")]
    assert r["combination"] == how
    assert r["wua_m2"] == pytest.approx((area * _composite(setup["pts"], depth, speed, how))[~outside].sum(),
                                        abs=3 * area[0])
    assert r["regime"] == "q03000_depth" and r["q_mld"] is None  # no REGIME, no DISCHARGE given


def test_report_single(single):
    res, _ = single
    with open(res["REPORT"], encoding="utf-8") as fh:
        html = fh.read()
    assert escape(CAUTION) in html and "Hyra 1978" in html and "ILLUSTRATIVE ONLY" in html
    assert html.count("<svg") >= 3 and "WUA per segment" in html


def test_mesh_run_faces(setup, tmp_path):
    import netCDF4

    mesh = setup["sample"] / "mesh" / "weir" / "q24000.nc"
    res = fc.run("usablearea", {**setup["base"], "MESH": str(mesh), "MESH_SUITABILITY": str(tmp_path / "f.gpkg"),
                                "WUA_TABLE": str(tmp_path / "w.gpkg"), "REPORT": None})
    names, faces = fc.read_layer(res["MESH_SUITABILITY"])
    assert [n for n in names if n != "fid"] == ["face", "segment", "zone", "chainage_m", "depth_m", "speed_ms",
                                                "suit_depth", "suit_velocity", "suitability", "area_m2", "wua_m2"]
    with netCDF4.Dataset(mesh) as ds:
        ds.set_auto_mask(False)
        d = ds["depth"][-1]
        u, v = ds["velocity_x"][-1], ds["velocity_y"][-1]
        nx, ny, fn = ds["mesh2d_node_x"][:], ds["mesh2d_node_y"][:], ds["mesh2d_face_nodes"][:]
    wet = np.flatnonzero((d != -999) & (d >= 0.05) & (u != -999) & (v != -999))
    assert sorted(f["face"] for f in faces) == wet.tolist()
    face = np.array([f["face"] for f in faces])
    suit = np.array([f["suitability"] for f in faces])
    ref = _composite(setup["pts"], d[face].astype(np.float32), np.hypot(u[face], v[face]).astype(np.float32))
    np.testing.assert_allclose(suit, ref, atol=1e-6)
    valid = fn >= 0
    polys = shapely.polygons(shapely.linearrings(np.column_stack([nx[fn[valid]], ny[fn[valid]]]),
                                                 indices=np.repeat(np.arange(len(fn)), valid.sum(axis=1))))
    area = shapely.area(polys[face])
    np.testing.assert_allclose([f["area_m2"] for f in faces], area, rtol=1e-9)
    np.testing.assert_allclose([f["wua_m2"] for f in faces], area * suit, rtol=1e-9)
    _, rows = fc.read_layer(res["WUA_TABLE"])
    inside = np.array([f["segment"] for f in faces]) > 0
    assert _by_unit(rows)[("reach", "reach")]["wua_m2"] == pytest.approx((area * suit)[inside].sum(), rel=1e-9)


@pytest.fixture(scope="module")
def table(setup):
    out = setup["out"] / "table"
    out.mkdir()
    fb = fc.LogFeedback.make()
    res = fc.run("usablearea", {**setup["base"], "SCENARIOS": str(setup["sample"] / "scenarios.csv"),
                                "REGIMES": "weir, natural", "WUA_TABLE": str(out / "wua.gpkg"),
                                "REPORT": str(out / "wua.html")}, fb)
    names, rows = fc.read_layer(res["WUA_TABLE"])
    return res, names, rows, fb.lines


def test_scenario_table_wua(setup, table):
    res, names, rows, log = table
    assert "SUITABILITY" not in res
    n_seg = int(np.ceil(setup["line"].length / fc.SEGMENT_M))
    assert len(rows) == 2 * 11 * (1 + 3 + n_seg)
    assert {r["regime"] for r in rows} == {"weir", "natural"}
    for regime, q in (("weir", 3000), ("natural", 40000)):
        g = setup["sample"] / "rasters" / regime
        x, y, area, depth, speed = fc.raster_cells(g / f"q{q:05d}_depth.tif", g / f"q{q:05d}_speed.tif")
        _, outside = fc.locate(setup["line"], x, y)
        csi = _composite(setup["pts"], depth, speed)
        by = _by_unit([r for r in rows if r["regime"] == regime and r["q_mld"] == q])
        assert by[("reach", "reach")]["wua_m2"] == pytest.approx((area * csi)[~outside].sum(), abs=3 * area[0])
        assert by[("reach", "reach")]["run"] == f"{regime} {q} ML/d"
    for regime in ("weir", "natural"):
        for q in {r["q_mld"] for r in rows}:
            sel = [r for r in rows if r["regime"] == regime and r["q_mld"] == q]
            reach = [r for r in sel if r["scope"] == "reach"][0]["wua_m2"]
            for scope in ("zone", "segment"):
                assert sum(r["wua_m2"] for r in sel if r["scope"] == scope) == pytest.approx(reach, rel=1e-9)
    assert sum("wet elements" in line for line in log) == 22


def test_scenario_report_and_habitatseries_reads_the_table(table):
    res, names, rows, _ = table
    with open(res["REPORT"], encoding="utf-8") as fh:
        html = fh.read()
    assert "Weighted usable area against discharge" in html and "Largest WUA within the runs" in html
    assert html.count("<svg") >= 3 and escape(CAUTION) in html
    from plugin.core.series import WuaCurves

    cols = {n: [r[n] for r in rows] for n in names if n != "fid"}
    w = WuaCurves.from_table(cols, "weir", ["reach", "lower"])
    ref = sorted((r["q_mld"], r["wua_m2"]) for r in rows if r["regime"] == "weir" and r["unit"] == "lower")
    name = [n for n in w.names if "lower" in n][0]
    np.testing.assert_allclose(w.value(name, [q for q, _ in ref]), [v for _, v in ref], rtol=1e-12)


def _fails(params, parameter, *phrases):
    with pytest.raises(QgsProcessingException) as e:
        fc.run("usablearea", params)
    msg = str(e.value)
    assert msg.startswith(f"{parameter}: "), msg
    for p in phrases:
        assert p in msg, msg


def test_bad_input(setup, tmp_path):
    g = setup["sample"] / "rasters" / "weir"
    run = {"DEPTH": str(g / "q03000_depth.tif"), "SPEED": str(g / "q03000_speed.tif")}
    outs = {"WUA_TABLE": str(tmp_path / "w.gpkg"), "REPORT": None, "SUITABILITY": None}
    base = {**setup["base"], **outs}
    _fails({**base, **run, "SCENARIOS": str(setup["sample"] / "scenarios.csv")}, "SCENARIOS", "not both")
    _fails(base, "SCENARIOS", "give one run")
    bad = tmp_path / "bad.csv"
    bad.write_text("variable,value,suitability\ndepth,0,0\ndepth,1,1.2\n", encoding="utf-8")
    _fails({**base, **run, "SUITABILITY_CURVES": str(bad)}, "SUITABILITY_CURVES", "row 3", "outside [0, 1]")
    two = tmp_path / "two.csv"
    two.write_text("species,variable,value,suitability\nfish a,depth,0,0\nfish a,depth,1,1\n"
                   "fish b,velocity,0,1\nfish b,velocity,1,0\n", encoding="utf-8")
    _fails({**base, **run, "SUITABILITY_CURVES": str(two)}, "CURVE_SET", "several curve sets", "fish a; fish b")
    _fails({**base, **run, "SUITABILITY_CURVES": str(two), "CURVE_SET": "fish c"}, "CURVE_SET", "no curve set")
    assert not (tmp_path / "w.gpkg").exists()
