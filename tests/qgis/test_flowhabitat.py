"""flowhabitat through Processing on the demo scenario table (all regimes x 11 discharges; one full run
shared by several tests), checked against an independent recomputation (GDAL + numpy + shapely), the
targets against scipy's PCHIP on the CURVES values, units, table layers, meshes and bad input."""

from __future__ import annotations

import csv
import os
from html import escape

import numpy as np
import pytest
import shapely
from osgeo import gdal
from qgis.core import QgsProcessingException, QgsProcessingFeedback, QgsVectorLayer
from scipy.interpolate import PchipInterpolator

from plugin.algorithms.base import CAUTION
from plugin.core.curves import CURVE_COLUMNS, METHOD, TARGET_COLUMNS
from tests.qgis import flow_cases as fc

TARGETS = "lower: moderate+fast >= 50%\nupper: fast >= 85%\nreach: very slow <= 5%"
REGIMES = ("weir", "weir_raised", "weir_lowered", "natural")


def _params(axis, out, **kw):
    p = {"CENTRELINE": axis, "SEGMENT_LENGTH": fc.SEGMENT_M, "ZONE_BREAKS": fc.ZONES, "TARGET_STATEMENTS": TARGETS,
         "CURVES": str(out / "curves.gpkg"), "TARGETS": str(out / "targets.gpkg"), "REPORT": str(out / "report.html")}
    p.update(kw)
    return p


@pytest.fixture(scope="module")
def demo(provider, sample_dir, tmp_path_factory):
    out = tmp_path_factory.mktemp("flowhabitat")
    axis = fc.write_axis(sample_dir, out / "axis.gpkg")
    fb = fc.LogFeedback.make()
    res = fc.run("flowhabitat", _params(axis, out, SCENARIOS=str(sample_dir / "scenarios.csv")), fb)
    names, rows = fc.read_layer(res["CURVES"])
    tnames, trows = fc.read_layer(res["TARGETS"])
    return {"out": out, "axis": axis, "res": res, "names": names, "rows": rows, "tnames": tnames, "trows": trows,
            "log": fb.lines, "sample": sample_dir}


def _ladder(sample_dir):
    with open(sample_dir / "ladder.csv", encoding="utf-8") as fh:
        return sorted(float(r["q_mld"]) for r in csv.DictReader(fh))


def _pct(rows, regime, unit, classes):
    """(q, % of the unit's wet area in the classes) from CURVES rows, increasing q."""
    sel = [r for r in rows if r["regime"] == regime and (f"segment {r['unit']}" if r["scope"] == "segment"
                                                            else r["unit"]) == unit]
    qs = sorted({r["q_mld"] for r in sel})
    out = []
    for q in qs:
        rr = [r for r in sel if r["q_mld"] == q]
        area = sum(r["area_m2"] for r in rr if r["class"] in classes)
        out.append(100.0 * area / rr[0]["wet_area_m2"])
    return np.array(qs), np.array(out)


def test_curves_fields_rows_and_ladders(demo):
    assert [n for n in demo["names"] if n != "fid"] == list(CURVE_COLUMNS)
    rows = demo["rows"]
    n_seg = len({r["unit"] for r in rows if r["scope"] == "segment"})
    axis_len = fc.axis_line(demo["axis"]).length
    assert n_seg == int(np.ceil(axis_len / fc.SEGMENT_M))  # 1 km segments over the whole axis
    assert len(rows) == 4 * 11 * (1 + 3 + n_seg) * 4
    ladder = _ladder(demo["sample"])
    for regime in REGIMES:
        assert sorted({r["q_mld"] for r in rows if r["regime"] == regime}) == ladder
    for r in rows[:500]:
        assert r["q_m3s"] == pytest.approx(r["q_mld"] * 1000.0 / 86400.0, rel=1e-15)
    assert {r["unit"] for r in rows if r["scope"] == "zone"} == set(fc.ZONE_NAMES)
    assert {r["class"] for r in rows} == set(fc.CLASSES)


def test_class_areas_add_up_to_the_wet_area(demo):
    groups = {}
    for r in demo["rows"]:
        groups.setdefault((r["regime"], r["q_mld"], r["scope"], r["unit"]), []).append(r)
    for key, rr in groups.items():
        wet = rr[0]["wet_area_m2"]
        assert all(r["wet_area_m2"] == wet for r in rr)
        assert sum(r["area_m2"] for r in rr) == pytest.approx(wet, rel=1e-9, abs=1e-6), key
        if wet > 0:
            assert sum(r["percent"] for r in rr) == pytest.approx(100.0, rel=1e-9)
    # zones and segments partition the reach
    for regime in REGIMES:
        for q in (3000.0, 40000.0):
            sel = [r for r in demo["rows"] if r["regime"] == regime and r["q_mld"] == q and r["class"] == "fast"]
            reach = [r for r in sel if r["scope"] == "reach"][0]
            for scope in ("zone", "segment"):
                assert sum(r["area_m2"] for r in sel if r["scope"] == scope) == pytest.approx(reach["area_m2"],
                                                                                              rel=1e-9)


@pytest.mark.parametrize("regime,q", [("weir", 3000), ("natural", 40000), ("weir_raised", 11000)])
def test_curves_against_an_independent_recomputation(demo, regime, q):
    # Independent: GDAL + numpy for wet cells and classes, shapely (reference library) for chainage.
    g = demo["sample"] / "rasters" / regime
    x, y, area, depth, speed = fc.raster_cells(g / f"q{q:05d}_depth.tif", g / f"q{q:05d}_speed.tif")
    line = fc.axis_line(demo["axis"])
    ch, outside = fc.locate(line, x, y)
    pick = np.random.default_rng(1).choice(x.size, 300, replace=False)  # the helper against shapely
    np.testing.assert_allclose(ch[pick], shapely.line_locate_point(line, shapely.points(x[pick], y[pick])),
                               atol=1e-6)
    zone = fc.zone_of(ch, line.length)
    seg = fc.segment_of(ch, line.length)
    cls = fc.velocity_class(speed)
    rows = [r for r in demo["rows"] if r["regime"] == regime and r["q_mld"] == q]
    cell = area[0]
    inside = ~outside
    reach = {r["class"]: r for r in rows if r["scope"] == "reach"}
    for k, name in enumerate(fc.CLASSES):
        ref = area[inside & (cls == k)].sum()
        assert reach[name]["area_m2"] == pytest.approx(ref, abs=3 * cell)
    for zi, zname in enumerate(fc.ZONE_NAMES):
        zr = {r["class"]: r for r in rows if r["scope"] == "zone" and r["unit"] == zname}
        wet = area[inside & (zone == zi)].sum()
        assert zr["fast"]["wet_area_m2"] == pytest.approx(wet, abs=3 * cell)
        for k, name in enumerate(fc.CLASSES):
            ref = area[inside & (zone == zi) & (cls == k)].sum()
            assert zr[name]["area_m2"] == pytest.approx(ref, abs=3 * cell)
            assert zr[name]["percent"] == pytest.approx(100.0 * ref / wet, abs=0.05)
    for si in (0, 17, 30):
        sr = {r["class"]: r for r in rows if r["scope"] == "segment" and r["unit"] == str(si + 1)}
        assert sr["fast"]["chainage_from_m"] == pytest.approx(si * fc.SEGMENT_M)
        for k, name in enumerate(fc.CLASSES):
            ref = area[inside & (seg == si) & (cls == k)].sum()
            assert sr[name]["area_m2"] == pytest.approx(ref, abs=3 * cell)


def test_targets_against_scipy_pchip_on_the_curves(demo):
    # Independent: the class-set percentages summed from CURVES rows, scipy.interpolate.PchipInterpolator
    # (reference library) on ln q, and the first run that meets the target.
    assert [n for n in demo["tnames"] if n != "fid"] == list(TARGET_COLUMNS)
    trows = demo["trows"]
    assert len(trows) == 4 * 3
    checked = 0
    for t in trows:
        classes = t["classes"].split("+")
        q, pct = _pct(demo["rows"], t["regime"], t["unit"], classes)
        met = pct >= t["threshold_pct"] if t["op"] == ">=" else pct <= t["threshold_pct"]
        assert t["method"] == METHOD
        assert t["pct_at_lowest"] == pytest.approx(pct[0], rel=1e-12)
        assert t["pct_at_highest"] == pytest.approx(pct[-1], rel=1e-12)
        if not met.any():
            assert t["status"] == "not reached within the runs" and t["q_mld"] is None
            continue
        k = int(np.argmax(met))
        if k == 0:
            assert t["status"] == "met at the lowest run" and t["q_mld"] == q[0]
            continue
        assert t["status"] == "interpolated"
        assert q[k - 1] < t["q_mld"] <= q[k]  # between the last run that fails and the first that meets
        f = PchipInterpolator(np.log(q), pct)
        assert float(f(np.log(t["q_mld"]))) == pytest.approx(t["threshold_pct"], abs=1e-6)
        assert t["q_m3s"] == pytest.approx(t["q_mld"] * 1000 / 86400, rel=1e-12)
        checked += 1
    assert checked >= 6


def test_weir_pool_needs_more_flow_than_the_natural_river(demo):
    # Plausibility (common practice, no source): a weir pool slows the lower zone, so reaching
    # 50 % moderate-or-fast water there takes more discharge with the weir than without it.
    by = {(t["regime"], t["target"]): t for t in demo["trows"]}
    key = "lower: moderate+fast >= 50%"
    weir, natural = by[("weir", key)], by[("natural", key)]
    assert weir["q_mld"] is not None and natural["q_mld"] is not None
    assert weir["q_mld"] > natural["q_mld"]
    assert by[("weir_raised", key)]["q_mld"] > weir["q_mld"] > by[("weir_lowered", key)]["q_mld"]


def test_report_and_log(demo):
    with open(demo["res"]["REPORT"], encoding="utf-8") as fh:
        html = fh.read()
    assert escape(CAUTION) in html and escape(METHOD) in html
    assert html.count("<svg") >= 8 and "data:image/png;base64" not in html  # every chart is SVG text
    for word in REGIMES + fc.ZONE_NAMES + ("lower: moderate+fast &gt;= 50%", "not reached", "Runs"):
        assert word in html, word
    assert sum("wet elements" in line for line in demo["log"]) == 44
    ds = gdal.Open(str(demo["sample"] / "rasters" / "weir" / "q03000_depth.tif"))
    cell = ds.GetGeoTransform()[1]
    grid = f"{ds.RasterXSize} x {ds.RasterYSize} cells of {cell:g} x {cell:g} m"
    del ds
    assert any(line.startswith(f"chainage on {grid}: 44 run(s)") for line in demo["log"])


def test_ladder_point_answers_exactly_and_regime_filter(demo):
    # A threshold equal to a run's own percentage gives exactly that run's discharge (the run before it
    # is below): the interpolation is exact at ladder points.
    q, pct = _pct(demo["rows"], "weir", "lower", ["fast"])
    k = next(i for i in range(1, len(q)) if pct[i] > pct[:i].max() and pct[i] > 1.0)
    out = demo["out"] / "exact"
    out.mkdir()
    res = fc.run("flowhabitat", _params(demo["axis"], out, SCENARIOS=str(demo["sample"] / "scenarios.csv"),
                                        REGIMES="weir", TARGET_STATEMENTS=f"lower: fast >= {pct[k]!r}%"))
    _, trows = fc.read_layer(res["TARGETS"])
    assert len(trows) == 1 and trows[0]["regime"] == "weir"
    assert trows[0]["q_mld"] == q[k] and trows[0]["status"] == "interpolated"
    _, rows = fc.read_layer(res["CURVES"])
    assert {r["regime"] for r in rows} == {"weir"}
    full = {(r["q_mld"], r["scope"], r["unit"], r["class"]): r["area_m2"] for r in demo["rows"]
            if r["regime"] == "weir"}
    for r in rows:
        assert r["area_m2"] == full[(r["q_mld"], r["scope"], r["unit"], r["class"])]


def _subset(sample_dir, tmp_path, regime="weir", qs=("3000", "4000"), unit="ML/d"):
    rows = [r for r in fc.scenario_rows(sample_dir) if r["regime"] == regime and r["discharge"] in qs]
    for r in rows:
        for c in ("depth", "speed"):
            r[c] = str(sample_dir / r[c])
        if unit == "m3/s":
            r["discharge"] = repr(float(r["discharge"]) * 1000 / 86400)
            r["unit"] = "m3/s"
    return rows


def test_units_round_trip_exactly(demo, tmp_path):
    # SI definitions: 1 ML/d = 1000 m3 / 86400 s exactly.
    rows = _subset(demo["sample"], tmp_path, unit="m3/s")
    table = fc.write_table(tmp_path / "m3s.csv", rows)
    res = fc.run("flowhabitat", _params(demo["axis"], tmp_path, SCENARIOS=table, TARGET_STATEMENTS=""))
    _, out = fc.read_layer(res["CURVES"])
    written = sorted(float(r["discharge"]) for r in rows)
    assert sorted({r["q_m3s"] for r in out}) == written  # as written, bit for bit
    for r in out:
        assert r["q_mld"] == pytest.approx(r["q_m3s"] * 86.4, rel=1e-15)
        assert r["q_mld"] == pytest.approx(round(r["q_mld"]), rel=1e-12)  # 3000 and 4000 ML/d again
    full = {(round(r["q_mld"]), r["scope"], r["unit"], r["class"]): r["area_m2"] for r in demo["rows"]
            if r["regime"] == "weir"}
    for r in out:
        assert r["area_m2"] == full[(round(r["q_mld"]), r["scope"], r["unit"], r["class"])]
    _, trows = fc.read_layer(res["TARGETS"])
    assert trows == []


def test_table_layers_give_the_same_curves(demo, tmp_path):
    rows = _subset(demo["sample"], tmp_path)
    path = fc.write_table(tmp_path / "layer.csv", rows)
    uri = f"file://{path}?type=csv&delimiter=,&detectTypes=yes&geomType=none"
    lyr = QgsVectorLayer(uri, "scenarios", "delimitedtext")
    assert lyr.isValid()
    res = fc.run("flowhabitat", _params(demo["axis"], tmp_path, SCENARIOS=lyr, TARGET_STATEMENTS=""))
    _, a = fc.read_layer(res["CURVES"])
    # a GeoPackage table with paths relative to its own folder
    from osgeo import ogr

    sub = tmp_path / "gpkg"
    sub.mkdir()
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(sub / "scen.gpkg"))
    lyr2 = ds.CreateLayer("scenarios", geom_type=ogr.wkbNone)
    for c, t in (("regime", ogr.OFTString), ("discharge", ogr.OFTReal), ("unit", ogr.OFTString),
                 ("depth", ogr.OFTString), ("speed", ogr.OFTString)):
        lyr2.CreateField(ogr.FieldDefn(c, t))
    for r in rows:
        f = ogr.Feature(lyr2.GetLayerDefn())
        f.SetField("regime", r["regime"])
        f.SetField("discharge", float(r["discharge"]))
        f.SetField("unit", r["unit"])
        f.SetField("depth", os.path.relpath(r["depth"], sub))
        f.SetField("speed", os.path.relpath(r["speed"], sub))
        lyr2.CreateFeature(f)
    del f, lyr2, ds
    out2 = tmp_path / "o2"
    out2.mkdir()
    res2 = fc.run("flowhabitat", _params(demo["axis"], out2, SCENARIOS=str(sub / "scen.gpkg") + "|layername=scenarios",
                                         TARGET_STATEMENTS=""))
    _, b = fc.read_layer(res2["CURVES"])
    key = lambda r: (r["q_mld"], r["scope"], r["unit"], r["class"])  # noqa: E731
    full = {key(r): r["area_m2"] for r in demo["rows"] if r["regime"] == "weir"}
    assert len(a) == len(b) == 2 * len(full) // 11
    for r in a + b:
        assert r["area_m2"] == full[key(r)]


def test_mesh_table_against_an_independent_recomputation(demo, tmp_path):
    # Independent: netCDF4 for the face values, shapely (reference library) for face areas, centroids
    # and chainage, numpy for classes.
    import netCDF4

    sample = demo["sample"]
    with open(sample / "scenarios_mesh.csv", encoding="utf-8") as fh:
        rows = [r for r in csv.DictReader(fh) if r["discharge"] in ("3000", "24000")]
    for r in rows:
        r["mesh"] = str(sample / r["mesh"])
    table = fc.write_table(tmp_path / "mesh.csv", rows,
                           ("regime", "discharge", "unit", "mesh", "depth_group", "velocity_group", "time_index"))
    res = fc.run("flowhabitat", _params(demo["axis"], tmp_path, SCENARIOS=table, TARGET_STATEMENTS=""))
    _, out = fc.read_layer(res["CURVES"])
    line = fc.axis_line(demo["axis"])
    for r in rows:
        with netCDF4.Dataset(r["mesh"]) as ds:
            ds.set_auto_mask(False)
            nx, ny = ds["mesh2d_node_x"][:], ds["mesh2d_node_y"][:]
            fn = ds["mesh2d_face_nodes"][:]
            d = ds["depth"][-1]
            u, v = ds["velocity_x"][-1], ds["velocity_y"][-1]
        valid = fn >= 0
        rings = shapely.linearrings(np.column_stack([nx[fn[valid]], ny[fn[valid]]]),
                                    indices=np.repeat(np.arange(len(fn)), valid.sum(axis=1)))
        polys = shapely.polygons(rings)
        wet = (d != -999.0) & (d >= 0.05) & (u != -999.0) & (v != -999.0)
        c = shapely.centroid(polys[wet])
        ch, outside = fc.locate(line, shapely.get_x(c), shapely.get_y(c))
        area = shapely.area(polys[wet])
        cls = fc.velocity_class(np.hypot(u[wet], v[wet]).astype(np.float32))
        zone = fc.zone_of(ch, line.length)
        q = float(r["discharge"])
        got = {(o["scope"], o["unit"], o["class"]): o for o in out if o["q_mld"] == q}
        for zi, zname in enumerate(fc.ZONE_NAMES):
            wet_z = area[~outside & (zone == zi)].sum()
            assert got[("zone", zname, "fast")]["wet_area_m2"] == pytest.approx(wet_z, rel=1e-6)
            for k, name in enumerate(fc.CLASSES):
                ref = area[~outside & (zone == zi) & (cls == k)].sum()
                assert got[("zone", zname, name)]["area_m2"] == pytest.approx(ref, rel=1e-6, abs=1e-3)


def _fails(params, parameter, *phrases):
    with pytest.raises(QgsProcessingException) as e:
        fc.run("flowhabitat", params)
    msg = str(e.value)
    assert msg.startswith(f"{parameter}: "), msg
    for p in phrases:
        assert p in msg, msg
    return msg


def test_bad_tables_are_refused_naming_the_row(demo, tmp_path):
    base = _params(demo["axis"], tmp_path, TARGET_STATEMENTS="")
    rows = _subset(demo["sample"], tmp_path, qs=("3000", "4000", "5000"))
    # a missing file
    bad = [dict(r) for r in rows]
    bad[1]["speed"] = str(tmp_path / "nowhere.tif")
    _fails({**base, "SCENARIOS": fc.write_table(tmp_path / "a.csv", bad)}, "SCENARIOS",
           "row 3 (regime weir, 4000 ML/d): speed file", "does not exist")
    # a duplicate regime + discharge
    dup = rows + [dict(rows[0])]
    _fails({**base, "SCENARIOS": fc.write_table(tmp_path / "b.csv", dup)}, "SCENARIOS",
           "row 5 (regime weir, 3000 ML/d) repeats the regime and discharge of row 2")
    # non-numeric, non-positive discharge and unknown unit
    for k, (field, value, phrase) in enumerate((("discharge", "3,000", "is not a number"),
                                                ("discharge", "-5", "is not a positive number"),
                                                ("unit", "cfs", "unknown discharge unit 'cfs'"))):
        b = [dict(r) for r in rows]
        b[2][field] = value
        _fails({**base, "SCENARIOS": fc.write_table(tmp_path / f"c{k}.csv", b)}, "SCENARIOS", "row 4", phrase)
    # unknown regime in the filter
    _fails({**base, "SCENARIOS": fc.write_table(tmp_path / "d.csv", rows), "REGIMES": "weir, lake"}, "REGIMES",
           "lake")


def test_mixed_crs_is_refused_naming_the_rows(demo, tmp_path):
    rows = _subset(demo["sample"], tmp_path)
    for c in ("depth", "speed"):
        dst = str(tmp_path / f"moved_{c}.tif")
        gdal.Warp(dst, rows[1][c], dstSRS="EPSG:32755", format="GTiff")
        rows[1][c] = dst
    from osgeo import osr

    srs = osr.SpatialReference()
    srs.ImportFromWkt(gdal.Open(rows[0]["depth"]).GetProjection())
    _fails({**_params(demo["axis"], tmp_path, TARGET_STATEMENTS=""),
            "SCENARIOS": fc.write_table(tmp_path / "m.csv", rows)}, "SCENARIOS",
           "row 3 (regime weir, 4000 ML/d) is in WGS 84 / UTM zone 55S",
           f"row 2 (regime weir, 3000 ML/d) is in {srs.GetName()}", "reproject")


def test_bad_target_is_refused_before_any_run_is_read(demo, tmp_path):
    fb = fc.LogFeedback.make()
    with pytest.raises(QgsProcessingException) as e:
        fc.run("flowhabitat", _params(demo["axis"], tmp_path, SCENARIOS=str(demo["sample"] / "scenarios.csv"),
                                      TARGET_STATEMENTS="lower: moderate+rapid >= 50%"), fb)
    assert str(e.value).startswith("TARGET_STATEMENTS: target 'lower: moderate+rapid >= 50%': 'rapid' is not a class")
    assert not any("wet elements" in line for line in fb.lines)
    assert not (tmp_path / "curves.gpkg").exists()


def test_cancel_leaves_no_outputs(demo, tmp_path):
    class Cancelling(QgsProcessingFeedback):
        def setProgress(self, p):  # noqa: N802
            super().setProgress(p)
            if p > 5:
                self.cancel()

    out = tmp_path / "c"
    out.mkdir()
    with pytest.raises(QgsProcessingException, match="Cancelled"):
        fc.run("flowhabitat", _params(demo["axis"], out, SCENARIOS=str(demo["sample"] / "scenarios.csv")),
               Cancelling())
    assert not (out / "report.html").exists()
    assert not (out / "targets.gpkg").exists()


def test_a_regime_with_one_run(demo, tmp_path):
    # one run of 'weir' and two of 'natural': the single run is a curve of one point; its targets are
    # met at that run or not reached, never interpolated.
    rows = _subset(demo["sample"], tmp_path, qs=("3000",)) + _subset(demo["sample"], tmp_path, regime="natural")
    table = fc.write_table(tmp_path / "one.csv", rows)
    res = fc.run("flowhabitat", _params(demo["axis"], tmp_path, SCENARIOS=table,
                                        TARGET_STATEMENTS="lower: moderate+fast >= 50%\nupper: fast >= 10%"))
    _, trows = fc.read_layer(res["TARGETS"])
    by = {(t["regime"], t["target"]): t for t in trows}
    w = by[("weir", "lower: moderate+fast >= 50%")]
    assert w["status"] == "not reached within the runs" and w["q_lowest_mld"] == w["q_highest_mld"] == 3000
    u = by[("weir", "upper: fast >= 10%")]
    assert u["status"] == "met at the lowest run" and u["q_mld"] == 3000
    with open(res["REPORT"], encoding="utf-8") as fh:
        html = fh.read()  # written, with the charts of a one-point curve
    assert "<th>Regime weir</th><td>1 run, 3,000 ML/d</td>" in html
    assert "<th>Regime natural</th><td>2 runs, 3,000–4,000 ML/d</td>" in html
