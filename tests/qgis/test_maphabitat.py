"""maphabitat through Processing: hand-made raster and mesh runs (every output opened and checked
against independent numpy/scipy/shapely computations), mesh options, and bad input."""

from __future__ import annotations

import re
import sqlite3
from pathlib import Path

import numpy as np
import pytest
import scipy.stats
import shapely
from osgeo import gdal
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsMeshLayer,
    QgsProcessingContext,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsRasterLayer,
    QgsVectorLayer,
)

from tests.qgis import habitat_cases as hc
from tests.qgis.habitat_cases import table

SEG = 200.0
NAMES = ["very slow", "slow", "moderate", "fast"]
KEYS = ["very_slow", "slow", "moderate", "fast"]
PCT = [0, 10, 25, 50, 75, 90, 100]
LABS = ["min", "p10", "p25", "p50", "p75", "p90", "max"]



def outputs(tmp_path, **extra):
    p = {"PATCHES": str(tmp_path / "patches.gpkg"), "SEGMENT_STATS": str(tmp_path / "segments.gpkg"),
         "ZONE_STATS": str(tmp_path / "zones.gpkg"), "REPORT": str(tmp_path / "report.html")}
    p.update(extra)
    return p


def cells(folder):
    """Independent reading of the hand-made rasters: x, speed, depth of the wet cells (GDAL + numpy)."""
    d_ds = gdal.Open(str(folder / "depth.tif"))
    s_ds = gdal.Open(str(folder / "speed.tif"))
    d = d_ds.GetRasterBand(1).ReadAsArray().astype(float)
    s = s_ds.GetRasterBand(1).ReadAsArray().astype(float)
    gt = d_ds.GetGeoTransform()
    rows, cols = np.indices(d.shape)
    x = gt[0] + (cols + 0.5) * gt[1]
    wet = (d != -9999.0) & (d >= 0.05)
    return x[wet], s[wet].astype(np.float32), d[wet].astype(np.float32), wet, gt


def expected_codes(speed):
    return np.digitize(speed, np.array([0.05, 0.2, 0.3], dtype=np.float32)) + 1


@pytest.fixture()
def raster_run(run_alg, tmp_path):
    r = hc.write_rasters(tmp_path)
    cl = hc.write_centreline(tmp_path / "centreline.gpkg")
    params = {"DEPTH": r["depth"], "SPEED": r["speed"], "CENTRELINE": cl, "SEGMENT_LENGTH": SEG,
              "ZONE_BREAKS": "0 upper, 500 middle, 900 lower", "CLASSES": str(tmp_path / "classes.tif"),
              **outputs(tmp_path)}
    res = run_alg("maphabitat", params)
    return tmp_path, res, params


def test_raster_classes_geotiff(raster_run):
    folder, res, _ = raster_run
    x, s, d, wet, gt = cells(folder)
    ds = gdal.Open(res["CLASSES"])
    band = ds.GetRasterBand(1)
    assert band.DataType == gdal.GDT_Byte and band.GetNoDataValue() == 0
    assert ds.GetMetadata("IMAGE_STRUCTURE").get("COMPRESSION") == "DEFLATE"
    assert band.GetBlockSize() == [256, 256]
    assert ds.GetGeoTransform() == gt
    ct = band.GetColorTable()
    colours = ["#{:02X}{:02X}{:02X}".format(*ct.GetColorEntry(i)[:3]) for i in range(1, 5)]
    assert colours == ["#8E4A1C", "#E3B35F", "#5FB3C8", "#1F4E8C"]
    a = band.ReadAsArray()
    assert (a[~wet] == 0).all()
    np.testing.assert_array_equal(a[wet], expected_codes(s))
    lyr = QgsRasterLayer(res["CLASSES"], "c")  # opens styled: the .qml beside it
    assert lyr.renderer().type() == "paletted"
    assert [c.label for c in lyr.renderer().classes()] == NAMES


def test_raster_segment_statistics(raster_run):
    folder, res, _ = raster_run
    x, s, d, wet, _ = cells(folder)
    names, rows, geoms = table(res["SEGMENT_STATS"], geometry=True)
    for col in ["run", "segment", "chainage_from_m", "chainage_to_m", "zone", "wet_area_m2", "v_cv", "d_p50_m",
                "fr_mean", "shannon", "simpson"] + [f"v_{lab}_ms" for lab in LABS] + \
            [f"area_{k}_m2" for k in KEYS] + [f"pct_{k}" for k in KEYS]:
        assert col in names, col
    assert [r["segment"] for r in rows] == [1, 2, 3, 4, 5, 6]
    codes = expected_codes(s)
    ch = x - hc.X0  # straight axis along +x from X0: chainage = x - X0
    for r, g in zip(rows, geoms):
        m = (ch >= r["chainage_from_m"]) & (ch < r["chainage_to_m"])
        assert r["chainage_to_m"] - r["chainage_from_m"] == SEG
        assert r["wet_area_m2"] == pytest.approx(4.0 * m.sum())
        assert g.area == pytest.approx(r["wet_area_m2"])  # the polygon is the segment's wet area
        np.testing.assert_allclose([r[f"v_{lab}_ms"] for lab in LABS], np.percentile(s[m].astype(float), PCT),
                                   atol=1e-6)
        np.testing.assert_allclose([r[f"d_{lab}_m"] for lab in LABS], np.percentile(d[m].astype(float), PCT),
                                   atol=1e-6)
        assert r["v_cv"] == pytest.approx(s[m].std() / s[m].mean(), rel=1e-4)
        fr = s[m] / np.sqrt(9.80665 * d[m].astype(float))
        assert r["fr_mean"] == pytest.approx(fr.mean(), rel=1e-4)
        areas = np.array([4.0 * (m & (codes == c)).sum() for c in (1, 2, 3, 4)])
        np.testing.assert_allclose([r[f"area_{k}_m2"] for k in KEYS], areas)
        assert sum(r[f"pct_{k}"] for k in KEYS) == pytest.approx(100.0)
        assert r["shannon"] == pytest.approx(scipy.stats.entropy(areas))
        assert r["simpson"] == pytest.approx(1 - ((areas / areas.sum()) ** 2).sum())
    assert sum(r["wet_area_m2"] for r in rows) == pytest.approx(4.0 * len(s))
    assert res["WET_AREA_M2"] == pytest.approx(4.0 * len(s))


def test_raster_zone_statistics(raster_run):
    folder, res, _ = raster_run
    x, s, d, _, _ = cells(folder)
    names, rows = table(res["ZONE_STATS"])
    assert [r["zone"] for r in rows] == ["upper", "middle", "lower"]
    assert [(r["chainage_from_m"], r["chainage_to_m"]) for r in rows] == [(0, 500), (500, 900), (900, 1200)]
    ch = x - hc.X0
    m = (ch >= 500) & (ch < 900)
    assert rows[1]["v_p90_ms"] == pytest.approx(np.percentile(s[m].astype(float), 90), abs=1e-6)
    assert sum(r["wet_area_m2"] for r in rows) == pytest.approx(4.0 * len(s))


def test_raster_patches(raster_run):
    folder, res, _ = raster_run
    x, s, d, _, _ = cells(folder)
    names, rows, geoms = table(res["PATCHES"], geometry=True)
    assert names[1:] == ["class", "class_code", "segment", "zone", "chainage_from_m", "chainage_to_m", "area_m2",
                         "pct_segment", "n_parts"]
    assert all(shapely.is_valid(g) for g in geoms)
    codes = expected_codes(s)
    ch = x - hc.X0
    seen = set()
    for r, g in zip(rows, geoms):
        assert (r["segment"], r["class"]) not in seen  # dissolved: one feature per class and segment
        seen.add((r["segment"], r["class"]))
        assert g.area == pytest.approx(r["area_m2"])
        m = (ch >= r["chainage_from_m"]) & (ch < r["chainage_to_m"]) & (codes == NAMES.index(r["class"]) + 1)
        assert r["area_m2"] == pytest.approx(4.0 * m.sum())
        assert r["n_parts"] == len(shapely.get_parts(g))
    # patches tile the wet area: no overlaps, total = wet area
    union = shapely.union_all(geoms)
    assert union.area == pytest.approx(4.0 * len(s))
    # the file opens styled: categorized by class, style stored in the GeoPackage
    lyr = QgsVectorLayer(res["PATCHES"], "p", "ogr")
    assert lyr.renderer().type() == "categorizedSymbol"
    cats = {c.value(): c.symbol().color().name().upper() for c in lyr.renderer().categories()}
    assert cats == dict(zip(NAMES, ["#8E4A1C", "#E3B35F", "#5FB3C8", "#1F4E8C"]))
    with sqlite3.connect(res["PATCHES"]) as con:
        assert con.execute("select count(*) from layer_styles where useAsDefault").fetchone()[0] == 1


def test_raster_report(raster_run):
    folder, res, _ = raster_run
    page = Path(res["REPORT"]).read_text(encoding="utf-8")
    assert "licensed professional practice prevail" in page
    assert page.count("<svg") == 3  # zone shares, speed profile, segment shares
    for text in ("Whole reach and zones", "Segment statistics", "fast ≥ 0.3 m/s", "upper", "lower", "very slow"):
        assert text in page
    assert not list(folder.glob(".partial*"))


def test_uv_rasters_give_the_same_statistics(run_alg, raster_run, tmp_path_factory):
    folder, res, params = raster_run
    t = tmp_path_factory.mktemp("uv")
    r = hc.write_rasters(t, uv=True)
    res2 = run_alg("maphabitat", {**params, "DEPTH": r["depth"], "SPEED": None, "VELOCITY_U": r["u"],
                                  "VELOCITY_V": r["v"], "CLASSES": str(t / "c.tif"), **outputs(t),
                                  "RUN_NAME": " pool & raised, 3 000 ML/d "})
    _, a = table(res["SEGMENT_STATS"])
    _, b = table(res2["SEGMENT_STATS"])
    # the run is named by RUN_NAME (trimmed) where given, else by the depth file's name
    assert {row["run"] for row in a} == {"depth"}
    assert {row["run"] for row in b} == {"pool & raised, 3 000 ML/d"}
    _, zb = table(res2["ZONE_STATS"])
    assert {row["run"] for row in zb} == {"pool & raised, 3 000 ML/d"}
    assert "pool &amp; raised, 3 000 ML/d" in Path(res2["REPORT"]).read_text(encoding="utf-8")
    for ra, rb in zip(a, b):
        assert rb["v_p50_ms"] == pytest.approx(ra["v_p50_ms"], abs=2e-7)  # hypot(0.8 s, 0.6 s) = s
        assert rb["area_fast_m2"] == pytest.approx(ra["area_fast_m2"], abs=4.0 * 2)


def test_min_patch_area_sieves_patches_not_statistics(run_alg, raster_run, tmp_path_factory):
    folder, res, params = raster_run
    t = tmp_path_factory.mktemp("sieve")
    res2 = run_alg("maphabitat", {**params, "MIN_PATCH_AREA": 400.0, "CLASSES": str(t / "c.tif"), **outputs(t)})
    _, p1, g1 = table(res["PATCHES"], geometry=True)
    _, p2, g2 = table(res2["PATCHES"], geometry=True)
    assert sum(r["area_m2"] for r in p2) == pytest.approx(sum(r["area_m2"] for r in p1))  # area kept
    parts = np.concatenate([shapely.get_parts(g) for g in g2])
    # every remaining part >= 400 m2 unless it touches a segment edge (patches are cut by segments)
    small = [p for p in parts if p.area < 400.0]
    for p in small:
        xmin, _, xmax, _ = p.bounds
        ch = np.array([xmin, xmax]) - hc.X0
        assert np.any(np.isclose(np.mod(ch, SEG), 0.0) | np.isclose(np.mod(ch, SEG), SEG))
    _, s1 = table(res["SEGMENT_STATS"])
    _, s2 = table(res2["SEGMENT_STATS"])
    assert [r["area_fast_m2"] for r in s1] == [r["area_fast_m2"] for r in s2]
    page = Path(res2["REPORT"]).read_text(encoding="utf-8")
    assert "smaller than 400 m2" in page


# ------------------------------------------------------------------------------------------------
# Meshes
# ------------------------------------------------------------------------------------------------

def mesh_reference(node_values=False, time_factor=1.0):
    """Independent face values and areas of the hand-made mesh (numpy only)."""
    node_x, node_y, fn, fx, fy = hc.mesh_arrays()
    if node_values:
        d = hc.depth_of(node_x, node_y)[fn].mean(axis=1) * time_factor
        s = (np.hypot(hc.speed_of(node_x, node_y) * 0.8, hc.speed_of(node_x, node_y) * 0.6))[fn].mean(axis=1)
        s = np.hypot(*[(hc.speed_of(node_x, node_y) * k)[fn].mean(axis=1) for k in (0.8, 0.6)]) * time_factor
    else:
        d = hc.depth_of(fx, fy).astype(float) * time_factor
        s = np.hypot(hc.speed_of(fx, fy) * 0.8, hc.speed_of(fx, fy) * 0.6).astype(np.float32).astype(float) * \
            time_factor
    xs, ys = node_x[fn], node_y[fn]
    area = (xs.max(axis=1) - xs.min(axis=1)) * (ys.max(axis=1) - ys.min(axis=1))
    return fx, fy, d, s, area


def mesh_params(tmp_path, cl, mesh, **extra):
    tmp_path.mkdir(parents=True, exist_ok=True)
    layer = QgsMeshLayer(mesh, "mesh", "mdal")
    assert layer.isValid()
    return {"MESH": layer, "CENTRELINE": cl, "SEGMENT_LENGTH": SEG, "ZONE_BREAKS": "0 upper, 500 middle, 900 lower",
            "MESH_CLASSES": str(tmp_path / "faces.gpkg"), **outputs(tmp_path), **extra}


@pytest.fixture()
def mesh_run(run_alg, tmp_path):
    cl = hc.write_centreline(tmp_path / "centreline.gpkg")
    mesh = hc.write_ugrid(tmp_path / "mesh.nc")
    res = run_alg("maphabitat", mesh_params(tmp_path, cl, mesh))
    return tmp_path, res, cl


def test_mesh_faces_and_area_weighted_statistics(mesh_run):
    folder, res, _ = mesh_run
    fx, fy, d, s, area = mesh_reference()
    assert set(np.unique(area)) == {4.0, 16.0}  # two face sizes
    names, faces, geoms = table(res["MESH_CLASSES"], geometry=True)
    assert names[1:] == ["face", "class", "class_code", "segment", "chainage_m", "offset_m", "depth_m", "speed_ms",
                         "froude", "area_m2"]
    wet = d >= 0.05
    assert len(faces) == wet.sum()
    fid = np.array([r["face"] for r in faces])
    np.testing.assert_allclose([r["speed_ms"] for r in faces], s[fid], rtol=1e-6)
    np.testing.assert_allclose([r["area_m2"] for r in faces], area[fid])
    np.testing.assert_allclose([g.area for g in geoms], area[fid])
    np.testing.assert_allclose([r["chainage_m"] for r in faces], fx[fid] - hc.X0, atol=1e-6)
    np.testing.assert_allclose([r["offset_m"] for r in faces], fy[fid] - (hc.Y0 + hc.WIDTH / 2), atol=1e-6)
    assert [r["class"] for r in faces] == [NAMES[c - 1] for c in expected_codes(s[fid].astype(np.float32))]
    _, rows = table(res["SEGMENT_STATS"])
    ch = fx - hc.X0
    w = (area / 4.0).astype(int)  # median face area 4 m2 -> coarse faces count 4 times
    for r in rows:
        m = wet & (ch >= r["chainage_from_m"]) & (ch < r["chainage_to_m"])
        assert r["wet_area_m2"] == pytest.approx(area[m].sum())
        ref = np.percentile(np.repeat(s[m], w[m]), PCT)
        np.testing.assert_allclose([r[f"v_{lab}_ms"] for lab in LABS], ref, atol=1e-6)
        unweighted = np.percentile(s[m], [25, 75])
        assert not np.allclose([r["v_p25_ms"], r["v_p75_ms"]], unweighted, atol=1e-4)  # weighting matters here
        assert r["v_mean_ms"] == pytest.approx(np.average(s[m], weights=area[m]), rel=1e-5)


def test_mesh_patches_are_valid_and_dissolved(mesh_run):
    folder, res, _ = mesh_run
    _, rows, geoms = table(res["PATCHES"], geometry=True)
    assert all(shapely.is_valid(g) for g in geoms)
    assert len({(r["segment"], r["class"]) for r in rows}) == len(rows)
    for r, g in zip(rows, geoms):
        assert g.area == pytest.approx(r["area_m2"])
    _, seg = table(res["SEGMENT_STATS"])
    assert sum(r["area_m2"] for r in rows) == pytest.approx(sum(r["wet_area_m2"] for r in seg))
    lyr = QgsVectorLayer(res["MESH_CLASSES"], "f", "ogr")
    assert lyr.renderer().type() == "categorizedSymbol"


def test_mesh_time_step_node_values_and_groups(run_alg, tmp_path):
    cl = hc.write_centreline(tmp_path / "centreline.gpkg")
    # first time step (index 0) holds half the values
    mesh = hc.write_ugrid(tmp_path / "mesh.nc")
    r0 = run_alg("maphabitat", mesh_params(tmp_path / "t0", cl, mesh, MESH_TIME_INDEX=0))
    fx, fy, d, s, area = mesh_reference(time_factor=0.5)
    _, rows = table(r0["ZONE_STATS"])
    wet = d >= 0.05
    assert sum(r["wet_area_m2"] for r in rows) == pytest.approx(area[wet].sum())
    # vertex-based datasets are averaged to faces
    mesh_n = hc.write_ugrid(tmp_path / "mesh_nodes.nc", node_values=True)
    rn = run_alg("maphabitat", mesh_params(tmp_path / "n", cl, mesh_n))
    fx, fy, d, s, area = mesh_reference(node_values=True)
    _, faces = table(rn["MESH_CLASSES"])
    fid = np.array([r["face"] for r in faces])
    np.testing.assert_allclose([r["depth_m"] for r in faces], d[fid], rtol=1e-5)
    np.testing.assert_allclose([r["speed_ms"] for r in faces], s[fid], rtol=1e-5)
    # x and y scalar groups, and a scalar speed group
    mesh_xy = hc.write_ugrid(tmp_path / "mesh_xy.nc", groups="xy")
    rxy = run_alg("maphabitat", mesh_params(tmp_path / "xy", cl, mesh_xy, MESH_U_GROUP="u velocity",
                                            MESH_V_GROUP="v velocity"))
    mesh_s = hc.write_ugrid(tmp_path / "mesh_s.nc", groups="speed")
    rs = run_alg("maphabitat", mesh_params(tmp_path / "s", cl, mesh_s, MESH_VELOCITY_GROUP="speed"))
    _, a = table(rxy["SEGMENT_STATS"])
    _, b = table(rs["SEGMENT_STATS"])
    for ra, rb in zip(a, b):
        assert ra["v_p50_ms"] == pytest.approx(rb["v_p50_ms"], abs=1e-6)


def test_mesh_without_crs_needs_mesh_crs(run_alg, tmp_path):
    cl = hc.write_centreline(tmp_path / "centreline.gpkg")
    mesh = hc.write_ugrid(tmp_path / "nocrs.nc", epsg=None)
    res = run_alg("maphabitat", mesh_params(tmp_path, cl, mesh,
                                            MESH_CRS=QgsCoordinateReferenceSystem("EPSG:32755")))
    _, rows = table(res["ZONE_STATS"])
    assert sum(r["wet_area_m2"] for r in rows) > 0


def test_raster_and_mesh_of_the_same_field_agree(run_alg, raster_run, mesh_run):
    # Same analytic field sampled on 2 m cells and on 2 m / 4 m faces: discretisation differences only.
    _, rr = table(raster_run[1]["SEGMENT_STATS"])
    _, mr = table(mesh_run[1]["SEGMENT_STATS"])
    for a, b in zip(rr, mr):
        assert b["wet_area_m2"] == pytest.approx(a["wet_area_m2"], rel=0.02)
        assert b["v_p50_ms"] == pytest.approx(a["v_p50_ms"], abs=0.01)
        assert b["v_mean_ms"] == pytest.approx(a["v_mean_ms"], abs=0.01)
        for k in KEYS:
            assert b[f"pct_{k}"] == pytest.approx(a[f"pct_{k}"], abs=3.0)


# ------------------------------------------------------------------------------------------------
# Schemes
# ------------------------------------------------------------------------------------------------

def test_froude_scheme_and_custom_table(run_alg, raster_run, tmp_path_factory):
    folder, res, params = raster_run
    x, s, d, _, _ = cells(folder)
    t = tmp_path_factory.mktemp("fr")
    rf = run_alg("maphabitat", {**params, "SCHEME": 1, "CLASSES": str(t / "c.tif"), **outputs(t)})
    _, rows = table(rf["ZONE_STATS"])
    fr = s / np.sqrt(9.80665 * d.astype(float))
    vd = s / d.astype(float)
    pool = (fr < 0.18) & (vd < 1.24)
    riffle = (fr >= 0.41) & (vd >= 3.2) & ~pool
    assert sum(r["area_pool_m2"] for r in rows) == pytest.approx(4.0 * pool.sum())
    assert sum(r["area_riffle_m2"] for r in rows) == pytest.approx(4.0 * riffle.sum())
    t2 = tmp_path_factory.mktemp("table")
    flat = ["shallow", "", "", "", "1.0", "", "", "", "", "#E3B35F",
            "deep slow", "", "0.25", "1.0", "", "", "", "", "", "",
            "deep fast", "0.25", "", "1.0", "", "", "", "", "", "#1F4E8C"]
    rt = run_alg("maphabitat", {**params, "SCHEME": 2, "CLASS_TABLE": flat, "CLASSES": str(t2 / "c.tif"),
                                **outputs(t2)})
    _, rows = table(rt["SEGMENT_STATS"])
    tot = {k: sum(r[f"area_{k}_m2"] for r in rows) for k in ("shallow", "deep_slow", "deep_fast")}
    assert tot["shallow"] == pytest.approx(4.0 * (d < 1.0).sum())
    assert tot["deep_fast"] == pytest.approx(4.0 * ((d >= 1.0) & (s >= np.float32(0.25))).sum())
    ds = gdal.Open(rt["CLASSES"])
    assert "#{:02X}{:02X}{:02X}".format(*ds.GetRasterBand(1).GetColorTable().GetColorEntry(3)[:3]) == "#1F4E8C"


def test_class_file_with_a_preset_is_refused(run_alg, raster_run, tmp_path_factory):
    folder, res, params = raster_run
    f = folder / "classes.csv"
    f.write_text("class,speed_min,speed_max\nslow,,0.2\nfast,0.2,\n")
    t = tmp_path_factory.mktemp("cf")
    with pytest.raises(QgsProcessingException, match="CLASS_FILE"):
        run_alg("maphabitat", {**params, "CLASS_FILE": str(f), **outputs(t), "CLASSES": str(t / "c.tif")})
    res = run_alg("maphabitat", {**params, "SCHEME": 2, "CLASS_FILE": str(f), **outputs(t),
                                 "CLASSES": str(t / "c.tif")})
    names, _ = table(res["ZONE_STATS"])
    assert "area_slow_m2" in names and "area_fast_m2" in names and "area_moderate_m2" not in names


# ------------------------------------------------------------------------------------------------
# Bad input and CRS handling
# ------------------------------------------------------------------------------------------------

def _fails(run_alg, params, param, pattern):
    with pytest.raises(QgsProcessingException) as err:
        run_alg("maphabitat", params)
    msg = str(err.value)
    assert msg.startswith(f"{param}:") or f"{param}:" in msg, msg
    assert re.search(pattern, msg), msg
    return msg


def test_bad_input(run_alg, tmp_path):
    cl = hc.write_centreline(tmp_path / "cl.gpkg")
    base = {"CENTRELINE": cl, "SEGMENT_LENGTH": SEG, "CLASSES": str(tmp_path / "c.tif"), **outputs(tmp_path)}
    # no overlap: the centreline is 5 km away
    far = hc.write_centreline(tmp_path / "far.gpkg", x_from=hc.X0 + 5000, x_to=hc.X0 + 6000)
    (tmp_path / "ok").mkdir()
    r = hc.write_rasters(tmp_path / "ok")
    _fails(run_alg, {**base, "DEPTH": r["depth"], "SPEED": r["speed"], "CENTRELINE": far}, "CENTRELINE",
           "do not overlap")
    # all dry
    _fails(run_alg, {**base, "DEPTH": r["depth"], "SPEED": r["speed"], "WET_DEPTH": 5.0}, "DEPTH", "dry everywhere")
    # negative depths (a water level given as depth)
    (tmp_path / "neg").mkdir()
    rn = hc.write_rasters(tmp_path / "neg", depth_offset=-1.0)
    _fails(run_alg, {**base, "DEPTH": rn["depth"], "SPEED": rn["speed"]}, "DEPTH", "negative")
    # speeds in cm/s
    (tmp_path / "cm").mkdir()
    rc = hc.write_rasters(tmp_path / "cm", speed_scale=100.0)
    _fails(run_alg, {**base, "DEPTH": rc["depth"], "SPEED": rc["speed"]}, "SPEED", "cm/s")
    # missing mesh dataset group
    mesh = hc.write_ugrid(tmp_path / "m.nc")
    layer = QgsMeshLayer(mesh, "m", "mdal")
    _fails(run_alg, {**base, "MESH": layer, "MESH_DEPTH_GROUP": "water depth"}, "MESH_DEPTH_GROUP", "no dataset group")
    # mesh time step out of range
    _fails(run_alg, {**base, "MESH": layer, "MESH_TIME_INDEX": 5}, "MESH_TIME_INDEX", "outside")
    # a mesh without CRS and no MESH_CRS
    nocrs = QgsMeshLayer(hc.write_ugrid(tmp_path / "n.nc", epsg=None), "n", "mdal")
    _fails(run_alg, {**base, "MESH": nocrs}, "MESH_CRS", "no CRS")
    # geographic rasters
    (tmp_path / "geo").mkdir()
    rg = hc.write_rasters(tmp_path / "geo", epsg=4326)
    _fails(run_alg, {**base, "DEPTH": rg["depth"], "SPEED": rg["speed"]}, "DEPTH", "geographic")
    # nothing half-written
    assert not (tmp_path / "c.tif").exists() and not (tmp_path / "report.html").exists()


def test_speed_on_another_grid_is_resampled_and_said(run_alg, raster_run, tmp_path_factory):
    folder, res, params = raster_run
    t = tmp_path_factory.mktemp("grid")
    gt, x, y = hc.grid(cell=4.0)
    inside = (x > hc.X0) & (x < hc.X0 + hc.LENGTH) & (y > hc.Y0) & (y < hc.Y0 + hc.WIDTH)
    sp = hc.write_tif(t / "speed4.tif", np.where(inside, hc.speed_of(x, y), np.nan), gt)
    res2 = run_alg("maphabitat", {**params, "SPEED": sp, "CLASSES": str(t / "c.tif"), **outputs(t)})
    page = Path(res2["REPORT"]).read_text(encoding="utf-8")
    assert "resampled (bilinear) onto the grid of DEPTH" in page
    _, a = table(res["ZONE_STATS"])
    _, b = table(res2["ZONE_STATS"])
    for ra, rb in zip(a, b):
        assert rb["v_p50_ms"] == pytest.approx(ra["v_p50_ms"], abs=0.01)


def test_centreline_in_another_crs_is_reprojected_and_said(run_alg, raster_run, tmp_path_factory):
    folder, res, params = raster_run
    t = tmp_path_factory.mktemp("crs")
    cl = hc.write_centreline(t / "cl_gda.gpkg", epsg=28355)  # GDA94 / MGA zone 55: another projected CRS
    res2 = run_alg("maphabitat", {**params, "CENTRELINE": cl, "CLASSES": str(t / "c.tif"), **outputs(t)})
    page = Path(res2["REPORT"]).read_text(encoding="utf-8")
    assert "was reprojected to the run" in page
    _, a = table(res["SEGMENT_STATS"])
    _, b = table(res2["SEGMENT_STATS"])
    # the datums differ by about a metre: chainages move by at most a cell or so
    for ra, rb in zip(a, b):
        assert rb["wet_area_m2"] == pytest.approx(ra["wet_area_m2"], rel=0.02)


def test_cancel_leaves_no_outputs(provider, tmp_path):
    import processing

    r = hc.write_rasters(tmp_path)
    cl = hc.write_centreline(tmp_path / "cl.gpkg")
    fb = QgsProcessingFeedback()
    fb.cancel()
    with pytest.raises(QgsProcessingException, match="Cancelled"):
        processing.run("channelhabitat:maphabitat", {"DEPTH": r["depth"], "SPEED": r["speed"], "CENTRELINE": cl,
                                                     "CLASSES": str(tmp_path / "c.tif"), **outputs(tmp_path)},
                       context=QgsProcessingContext(), feedback=fb)
    assert not (tmp_path / "c.tif").exists() and not (tmp_path / "report.html").exists()


# ------------------------------------------------------------------------------------------------
# The demo reach (sample_gis/generated): rasters and the mesh of the weir regime
# ------------------------------------------------------------------------------------------------

def _upstream_first(sample_dir, tmp_path):
    """The demo centreline digitised upstream -> downstream (the file runs the other way on purpose),
    and the same line as a shapely LineString."""
    from osgeo import ogr

    src = ogr.Open(str(sample_dir / "centreline.gpkg"))
    lyr = src.GetLayer(0)
    feat = lyr.GetNextFeature()
    geom = feat.GetGeometryRef()
    pts = geom.GetPoints()[::-1]
    srs = lyr.GetSpatialRef().Clone()
    del geom, feat, lyr, src
    path = tmp_path / "centreline_up.gpkg"
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    out = ds.CreateLayer("centreline", srs, ogr.wkbLineString)
    line = ogr.Geometry(ogr.wkbLineString)
    for p in pts:
        line.AddPoint_2D(p[0], p[1])
    f = ogr.Feature(out.GetLayerDefn())
    f.SetGeometry(line)
    out.CreateFeature(f)
    del f, out, ds
    return str(path) + "|layername=centreline", shapely.LineString([p[:2] for p in pts])


@pytest.fixture(scope="module")
def demo_runs(sample_dir, provider, tmp_path_factory):
    import csv

    import processing

    tmp = tmp_path_factory.mktemp("demo")
    cl, line = _upstream_first(sample_dir, tmp)
    with open(sample_dir / "scenarios_mesh.csv", encoding="utf-8") as fh:
        mesh_rows = list(csv.DictReader(fh))
    mrow = next(r for r in mesh_rows if r["regime"] == "weir")
    q = float(mrow["discharge"])
    with open(sample_dir / "scenarios.csv", encoding="utf-8") as fh:
        rrow = next(r for r in csv.DictReader(fh) if r["regime"] == "weir" and float(r["discharge"]) == q)
    common = {"CENTRELINE": cl, "SEGMENT_LENGTH": 1000.0, "ZONE_BREAKS": ""}

    def run(params):
        return processing.run("channelhabitat:maphabitat", params, context=QgsProcessingContext(),
                              feedback=QgsProcessingFeedback())

    (tmp / "r").mkdir()
    (tmp / "m").mkdir()
    raster = run({**common, "DEPTH": str(sample_dir / rrow["depth"]), "SPEED": str(sample_dir / rrow["speed"]),
                  "CLASSES": str(tmp / "r" / "classes.tif"), **outputs(tmp / "r")})
    layer = QgsMeshLayer(str(sample_dir / mrow["mesh"]), "mesh", "mdal")
    mesh = run({**common, "MESH": layer, "MESH_DEPTH_GROUP": mrow["depth_group"],
                "MESH_VELOCITY_GROUP": mrow["velocity_group"], "MESH_CLASSES": str(tmp / "m" / "faces.gpkg"),
                **outputs(tmp / "m")})
    return {"raster": raster, "mesh": mesh, "line": line, "depth": str(sample_dir / rrow["depth"]),
            "speed": str(sample_dir / rrow["speed"]), "q": q}


def _shapely_chainage(line, x, y):
    """Distance along ``line`` of the nearest point to each (x, y): the nearest line piece by shapely's
    STRtree, then shapely's line_locate_point on that piece (independent of core/reach and core/locate)."""
    xy = shapely.get_coordinates(line)
    pieces = shapely.linestrings(np.stack([xy[:-1], xy[1:]], axis=1))
    start = np.concatenate([[0.0], np.cumsum(shapely.length(pieces))])[:-1]
    pts = shapely.points(x, y)
    which = shapely.STRtree(pieces).query_nearest(pts, all_matches=False)
    ch = np.empty(len(x))
    ch[which[0]] = start[which[1]] + shapely.line_locate_point(pieces[which[1]], pts[which[0]])
    return ch


def test_demo_raster_run_against_shapely_chainage(demo_runs):
    """Segment statistics of the demo raster run against an independent computation: chainage of every wet
    cell by shapely's line_locate_point, percentiles by numpy."""
    d_ds, s_ds = gdal.Open(demo_runs["depth"]), gdal.Open(demo_runs["speed"])
    d = d_ds.GetRasterBand(1).ReadAsArray()
    s = s_ds.GetRasterBand(1).ReadAsArray()
    nd = d_ds.GetRasterBand(1).GetNoDataValue()
    gt = d_ds.GetGeoTransform()
    wet = (d != nd) & np.isfinite(d) & (d >= 0.05)
    rows, cols = np.nonzero(wet)
    x = gt[0] + (cols + 0.5) * gt[1]
    y = gt[3] + (rows + 0.5) * gt[5]
    line = demo_runs["line"]
    ch = _shapely_chainage(line, x, y)
    inside = (ch > 0) & (ch < line.length)
    spd = s[wet].astype(float)
    cell = abs(gt[1] * gt[5])
    _, seg = table(demo_runs["raster"]["SEGMENT_STATS"])
    assert len(seg) == int(np.ceil(line.length / 1000.0))
    for r in seg:
        m = inside & (ch >= r["chainage_from_m"]) & (ch < r["chainage_to_m"])
        assert r["wet_area_m2"] == pytest.approx(cell * m.sum(), rel=0.002)
        assert r["v_p50_ms"] == pytest.approx(np.percentile(spd[m], 50), abs=0.003)
        assert r["v_p90_ms"] == pytest.approx(np.percentile(spd[m], 90), abs=0.003)
        assert sum(r[f"pct_{k}"] for k in KEYS) == pytest.approx(100.0)
    _, zones = table(demo_runs["raster"]["ZONE_STATS"])
    assert [z["zone"] for z in zones] == ["upper", "middle", "lower"]
    assert sum(z["wet_area_m2"] for z in zones) == pytest.approx(cell * inside.sum(), rel=1e-3)
    # the weir pool slows the water towards the downstream end (plausibility of the invented reach)
    assert zones[0]["v_p50_ms"] > zones[2]["v_p50_ms"]
    _, patches, geoms = table(demo_runs["raster"]["PATCHES"], geometry=True)
    assert all(shapely.is_valid(g) for g in geoms)
    assert sum(p["area_m2"] for p in patches) == pytest.approx(sum(r["wet_area_m2"] for r in seg))
    ds = gdal.Open(demo_runs["raster"]["CLASSES"])
    codes = ds.GetRasterBand(1).ReadAsArray()
    np.testing.assert_array_equal(codes[wet], expected_codes(s[wet].astype(np.float32)))


def test_demo_raster_and_mesh_of_the_weir_run_agree(demo_runs):
    """The weir regime as rasters (5 m cells) and as a mesh (about 10 m faces) of the same run: the same
    statistics within discretisation error (numbers in the maphabitat report of the developer)."""
    _, rz = table(demo_runs["raster"]["ZONE_STATS"])
    _, mz = table(demo_runs["mesh"]["ZONE_STATS"])
    for a, b in zip(rz, mz):
        assert b["wet_area_m2"] == pytest.approx(a["wet_area_m2"], rel=0.02)
        assert b["v_p50_ms"] == pytest.approx(a["v_p50_ms"], abs=0.01)
        assert b["v_p90_ms"] == pytest.approx(a["v_p90_ms"], abs=0.01)
        assert b["v_mean_ms"] == pytest.approx(a["v_mean_ms"], abs=0.01)
        assert b["d_p50_m"] == pytest.approx(a["d_p50_m"], abs=0.05)
        for k in KEYS:
            assert b[f"pct_{k}"] == pytest.approx(a[f"pct_{k}"], abs=2.0)
    _, rs = table(demo_runs["raster"]["SEGMENT_STATS"])
    _, ms = table(demo_runs["mesh"]["SEGMENT_STATS"])
    p50 = np.array([b["v_p50_ms"] - a["v_p50_ms"] for a, b in zip(rs, ms)])
    area = np.array([b["wet_area_m2"] / a["wet_area_m2"] - 1 for a, b in zip(rs, ms)])
    assert np.abs(p50).max() < 0.05 and np.median(np.abs(p50)) < 0.01
    assert np.abs(area).max() < 0.10 and np.median(np.abs(area)) < 0.02
    names, faces = table(demo_runs["mesh"]["MESH_CLASSES"])
    assert len(faces) > 1000 and {"face", "class", "speed_ms", "area_m2"} <= set(names)
    assert sum(f["area_m2"] for f in faces if f["segment"] > 0) == pytest.approx(sum(z["wet_area_m2"] for z in mz))


def test_segments_layer_and_reversed_centreline(run_alg, raster_run, tmp_path_factory):
    """Given SEGMENTS polygons are the SEGMENT_STATS geometry; a centreline digitised downstream -> upstream
    with CENTRELINE_DIRECTION 'reversed' gives the same statistics as the upstream-first one."""
    from osgeo import ogr

    folder, res, params = raster_run
    t = tmp_path_factory.mktemp("segs")
    path = t / "segments.gpkg"
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    lyr = ds.CreateLayer("segments", hc.srs(), ogr.wkbPolygon)
    for name in ("chainage_from_m", "chainage_to_m"):
        lyr.CreateField(ogr.FieldDefn(name, ogr.OFTReal))
    lyr.CreateField(ogr.FieldDefn("segment", ogr.OFTInteger))
    rects = []
    for i, a in enumerate(np.arange(0.0, hc.LENGTH, 300.0)):
        b = min(a + 300.0, hc.LENGTH)
        rect = shapely.box(hc.X0 + a, hc.Y0 - 5, hc.X0 + b, hc.Y0 + hc.WIDTH + 5)
        rects.append(rect)
        f = ogr.Feature(lyr.GetLayerDefn())
        f.SetField("chainage_from_m", float(a))
        f.SetField("chainage_to_m", float(b))
        f.SetField("segment", i + 1)
        f.SetGeometry(ogr.CreateGeometryFromWkb(rect.wkb))
        lyr.CreateFeature(f)
        del f
    del lyr, ds
    rev = hc.write_centreline(t / "rev.gpkg", reverse=True)
    res2 = run_alg("maphabitat", {**params, "CENTRELINE": rev, "CENTRELINE_DIRECTION": 1,
                                  "SEGMENTS": str(path) + "|layername=segments", "CLASSES": str(t / "c.tif"),
                                  **outputs(t)})
    _, rows, geoms = table(res2["SEGMENT_STATS"], geometry=True)
    assert len(rows) == 4 and [r["chainage_from_m"] for r in rows] == [0, 300, 600, 900]
    for g, rect in zip(geoms, rects):
        assert g.equals(rect)
    x, s, d, _, _ = cells(folder)
    ch = x - hc.X0
    for r in rows:
        m = (ch >= r["chainage_from_m"]) & (ch < r["chainage_to_m"])
        assert r["v_p50_ms"] == pytest.approx(np.percentile(s[m].astype(float), 50), abs=1e-6)
    _, z1 = table(res["ZONE_STATS"])
    _, z2 = table(res2["ZONE_STATS"])
    assert [r["v_p50_ms"] for r in z1] == pytest.approx([r["v_p50_ms"] for r in z2], abs=1e-9)


def test_speed_raster_in_another_crs_is_reprojected_and_said(run_alg, raster_run, tmp_path_factory):
    folder, res, params = raster_run
    t = tmp_path_factory.mktemp("speedcrs")
    warped = str(t / "speed_28355.tif")
    gdal.Warp(warped, str(folder / "speed.tif"), dstSRS="EPSG:28355", resampleAlg="near", xRes=2.0, yRes=2.0)
    res2 = run_alg("maphabitat", {**params, "SPEED": warped, "CLASSES": str(t / "c.tif"), **outputs(t)})
    page = Path(res2["REPORT"]).read_text(encoding="utf-8")
    assert "reprojected from its CRS to the grid of DEPTH" in page
    _, a = table(res["ZONE_STATS"])
    _, b = table(res2["ZONE_STATS"])
    for ra, rb in zip(a, b):
        assert rb["v_p50_ms"] == pytest.approx(ra["v_p50_ms"], abs=0.02)
