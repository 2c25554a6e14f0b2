"""vegetationoverlay through Processing: outputs opened and checked against shapely.

Independent values: wetted areas as shapely (GEOS) areas of stand ∩ union of wet cells built from
the raster's geotransform; discharges by the SI definitions (1 ML/d = 1000/86400 m3/s); the demo
checks are plausibility only (invented data is never a reference).
"""

import csv

import numpy as np
import pytest
import shapely
from osgeo import gdal, ogr, osr
from qgis.core import NULL, QgsProcessingException, QgsVectorLayer

gdal.UseExceptions()
EPSG = 28355
X0, Y0, DX = 400000.0, 6100000.0, 2.0
ROWS, COLS = 80, 120


def _tif(path, a, epsg=EPSG, gt=(X0, DX, 0.0, Y0, 0.0, -DX)):
    srs = osr.SpatialReference()
    srs.ImportFromEPSG(epsg)
    ds = gdal.GetDriverByName("GTiff").Create(str(path), a.shape[1], a.shape[0], 1, gdal.GDT_Float32)
    ds.SetGeoTransform(gt)
    ds.SetProjection(srs.ExportToWkt())
    b = ds.GetRasterBand(1)
    b.SetNoDataValue(-9999.0)
    b.WriteArray(np.where(np.isfinite(a), a, -9999.0).astype(np.float32))
    b = None
    ds = None
    return str(path)


def _gpkg(path, polys, attrs, epsg=EPSG, id_type=ogr.OFTInteger):
    srs = osr.SpatialReference()
    srs.ImportFromEPSG(epsg)
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    lyr = ds.CreateLayer("vegetation", srs, ogr.wkbPolygon)
    lyr.CreateField(ogr.FieldDefn("community", ogr.OFTString))
    lyr.CreateField(ogr.FieldDefn("stand_id", id_type))
    for g, (comm, sid) in zip(polys, attrs):
        f = ogr.Feature(lyr.GetLayerDefn())
        f.SetField("community", comm)
        f.SetField("stand_id", sid)
        f.SetGeometry(ogr.CreateGeometryFromWkb(shapely.to_wkb(g)))
        lyr.CreateFeature(f)
    ds = None
    return str(path)


def run_rasters(tmp_path, name, level):
    """A bank rising to the east (bed 0.04 m per m); depth = level - bed; speed rises towards the
    deep west side: 0.4 m/s at depth >= 2 m down to 0 at the water's edge."""
    yy, xx = np.mgrid[0:ROWS, 0:COLS]
    bed = 0.04 * (xx + 0.5) * DX + 0.1 * np.sin(yy / 6.0)
    depth = level - bed
    depth[depth < 0] = np.nan
    speed = np.clip(0.2 * depth, 0, 0.4)
    return _tif(tmp_path / f"{name}_depth.tif", depth), _tif(tmp_path / f"{name}_speed.tif", speed), depth


def wet_union(depth, threshold=0.05):
    r, c = np.nonzero(np.isfinite(depth) & (depth >= threshold))
    boxes = shapely.box(X0 + c * DX, Y0 - (r + 1) * DX, X0 + (c + 1) * DX, Y0 - r * DX)
    return shapely.union_all(boxes)


STANDS = [
    shapely.Polygon([(X0 + 60, Y0 - 20), (X0 + 130, Y0 - 30), (X0 + 120, Y0 - 90), (X0 + 70, Y0 - 100)]),
    shapely.box(X0 + 150, Y0 - 150, X0 + 200, Y0 - 110),
    shapely.Point(X0 + 100, Y0 - 120).buffer(15),
    shapely.box(X0 + 205, Y0 - 60, X0 + 235, Y0 - 10),  # high on the bank: dry, maybe beside water
]
ATTRS = [("reeds", 1), ("sedge", 2), ("reeds", 3), ("woodland", 4)]


def _features(path, layer=None):
    lyr = QgsVectorLayer(str(path) if layer is None else f"{path}|layername={layer}", "t", "ogr")
    assert lyr.isValid(), path
    return lyr, list(lyr.getFeatures())


def test_single_run_against_shapely(run_alg, tmp_path):
    d, s, depth = run_rasters(tmp_path, "weir", 6.0)
    veg = _gpkg(tmp_path / "veg.gpkg", STANDS, ATTRS)
    res = run_alg("vegetationoverlay", {
        "VEGETATION": veg, "DEPTH": d, "SPEED": s, "REGIME": "weir", "DISCHARGE": 3000, "DISCHARGE_UNIT": 0,
        "EDGE_DISTANCE": 6.0, "VEGETATION_STATS": str(tmp_path / "stats.gpkg"),
        "COMMUNITY_SUMMARY": str(tmp_path / "summary.gpkg"), "EDGES": str(tmp_path / "edges.gpkg"),
        "REPORT": str(tmp_path / "veg.html")})
    lyr, feats = _features(res["VEGETATION_STATS"])
    names = lyr.fields().names()
    for f in ("stand_id", "community", "regime", "q_mld", "q_m3s", "run", "area_m2", "wet_area_m2", "wet_pct",
              "depth_mean_m", "depth_max_m", "wet_very_slow_m2", "wet_fast_m2", "perimeter_m", "edge_m",
              "edge_very_slow_m", "edge_slow_m", "edge_moderate_m", "edge_fast_m", "edge_main_class"):
        assert f in names, f
    assert len(feats) == len(STANDS)
    water = wet_union(depth)
    for f in feats:
        g = STANDS[f["stand_id"] - 1]
        ref = shapely.intersection(g, water).area  # reference: shapely
        assert f["wet_area_m2"] == pytest.approx(ref, rel=1e-9, abs=1e-6)
        assert f["area_m2"] == pytest.approx(g.area, rel=1e-9)
        assert f["wet_pct"] == pytest.approx(100 * ref / g.area, rel=1e-9, abs=1e-9)
        assert f["q_mld"] == 3000 and f["q_m3s"] == pytest.approx(3000 * 1000 / 86400)
        assert f["regime"] == "weir"
        assert f.geometry().area() == pytest.approx(g.area, rel=1e-9)  # the stand's own geometry
        edge_sum = sum(f[k] for k in ("edge_very_slow_m", "edge_slow_m", "edge_moderate_m", "edge_fast_m"))
        assert edge_sum == pytest.approx(f["edge_m"], rel=1e-9, abs=1e-9)
    by_id = {f["stand_id"]: f for f in feats}
    assert by_id[1]["wet_pct"] == pytest.approx(100.0)  # deep side: fully under water
    assert by_id[4]["wet_area_m2"] == 0 and by_id[4]["depth_mean_m"] == NULL  # dry: no depth
    # the community summary sums the stands (reference: shapely areas of the reed stands)
    _, summ = _features(res["COMMUNITY_SUMMARY"])
    reeds = [f for f in summ if f["community"] == "reeds"][0]
    a = STANDS[0].area + STANDS[2].area
    w = shapely.intersection(STANDS[0], water).area + shapely.intersection(STANDS[2], water).area
    assert reeds["n_stands"] == 2
    assert reeds["area_m2"] == pytest.approx(a)
    assert reeds["wet_pct"] == pytest.approx(100 * w / a, rel=1e-9)
    # edges: lines per stand, lengths add up to edge_m, each line within EDGE_DISTANCE of the water
    _, edges = _features(res["EDGES"])
    assert edges
    for sid, f in by_id.items():
        total = sum(e["length_m"] for e in edges if e["stand_id"] == sid)
        assert total == pytest.approx(f["edge_m"], rel=1e-9, abs=1e-9)
    zone = water.buffer(6.0 + 0.6)
    for e in edges:
        line = shapely.from_wkb(bytes(e.geometry().asWkb()))
        assert e["length_m"] == pytest.approx(line.length, rel=1e-9)
        assert zone.contains(line)
        assert e["class"] in ("very slow", "slow", "moderate", "fast")
    with open(res["REPORT"], encoding="utf-8") as fh:
        html = fh.read()
    assert "Vegetation overlay" in html and "licensed professional practice" in html and "reeds" in html
    share = 100 * sum(shapely.intersection(g, water).area for g in STANDS) / sum(g.area for g in STANDS)
    assert f"weir 3000 ML/d: {share:.1f} % of the vegetation area wetted" in html  # reference: shapely


def test_scenario_table_regimes_and_reprojection(run_alg, tmp_path):
    rows = []
    for regime, level in (("lowered", 5.0), ("normal", 5.5), ("raised", 6.0)):
        d, s, _ = run_rasters(tmp_path, regime, level)
        rows.append((regime, 3000, "ML/d", d, s))
    d, s, _ = run_rasters(tmp_path, "normal_high", 6.5)
    rows.append(("normal", 9000, "ML/d", d, s))
    table = tmp_path / "scenarios.csv"
    with open(table, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["regime", "discharge", "unit", "depth", "speed"])
        w.writerows(rows)
    # the vegetation is stored in another CRS (GDA94 / MGA zone 55 -> GDA2020 / MGA zone 55): reprojected
    src, dst = osr.SpatialReference(), osr.SpatialReference()
    src.ImportFromEPSG(EPSG)
    dst.ImportFromEPSG(7855)
    for s_ in (src, dst):
        s_.SetAxisMappingStrategy(osr.OAMS_TRADITIONAL_GIS_ORDER)
    tr = osr.CoordinateTransformation(src, dst)

    def fwd(g):
        return shapely.transform(g, lambda xy: np.array(tr.TransformPoints(xy))[:, :2])

    veg = _gpkg(tmp_path / "veg7855.gpkg", [fwd(g) for g in STANDS], ATTRS, epsg=7855)
    res = run_alg("vegetationoverlay", {
        "VEGETATION": veg, "SCENARIOS": str(table), "SCENARIO_DISCHARGES": "3000", "EDGES": None, "REPORT": None,
        "VEGETATION_STATS": str(tmp_path / "stats.gpkg"), "COMMUNITY_SUMMARY": str(tmp_path / "summary.gpkg")})
    _, feats = _features(res["VEGETATION_STATS"])
    assert len(feats) == 3 * len(STANDS)
    assert {f["regime"] for f in feats} == {"lowered", "normal", "raised"}
    total = {}
    for f in feats:
        total.setdefault(f["regime"], [0.0, 0.0])
        total[f["regime"]][0] += f["wet_area_m2"]
        total[f["regime"]][1] += f["area_m2"]
    pct = {k: 100 * a / b for k, (a, b) in total.items()}
    assert pct["lowered"] < pct["normal"] < pct["raised"]
    # the raised run's wetted area against shapely, in the runs' CRS (the stands as first drawn)
    _, _, depth = run_rasters(tmp_path, "raised", 6.0)
    water = wet_union(depth)
    raised = {f["stand_id"]: f["wet_area_m2"] for f in feats if f["regime"] == "raised"}
    for sid, g in enumerate(STANDS, start=1):
        # a round trip through the datum change moves vertices by well under a millimetre here
        assert raised[sid] == pytest.approx(shapely.intersection(g, water).area, rel=1e-4, abs=0.05)
    with pytest.raises(QgsProcessingException, match="REGIMES"):
        run_alg("vegetationoverlay", {"VEGETATION": veg, "SCENARIOS": str(table), "REGIMES": "natural",
                                      "VEGETATION_STATS": "TEMPORARY_OUTPUT", "COMMUNITY_SUMMARY": "TEMPORARY_OUTPUT"})


def test_bad_inputs(run_alg, tmp_path):
    veg = _gpkg(tmp_path / "veg.gpkg", STANDS, ATTRS)
    with pytest.raises(QgsProcessingException, match="SCENARIOS"):
        run_alg("vegetationoverlay", {"VEGETATION": veg, "VEGETATION_STATS": "TEMPORARY_OUTPUT",
                                      "COMMUNITY_SUMMARY": "TEMPORARY_OUTPUT"})
    yy, xx = np.mgrid[0:20, 0:20]
    geo = (144.0, 0.0001, 0.0, -36.0, 0.0, -0.0001)
    d = _tif(tmp_path / "geo_depth.tif", np.full((20, 20), 1.0), epsg=4326, gt=geo)
    s = _tif(tmp_path / "geo_speed.tif", np.full((20, 20), 0.1), epsg=4326, gt=geo)
    with pytest.raises(QgsProcessingException, match="DEPTH.*geographic"):
        run_alg("vegetationoverlay", {"VEGETATION": veg, "DEPTH": d, "SPEED": s, "VEGETATION_STATS": "TEMPORARY_OUTPUT",
                                      "COMMUNITY_SUMMARY": "TEMPORARY_OUTPUT"})


def test_cancel_leaves_no_output(run_alg, tmp_path):
    from qgis.core import QgsProcessingFeedback

    d, s, _ = run_rasters(tmp_path, "weir", 6.0)
    veg = _gpkg(tmp_path / "veg.gpkg", STANDS, ATTRS)
    fb = QgsProcessingFeedback()
    fb.cancel()
    with pytest.raises(QgsProcessingException, match="[Cc]ancel"):
        run_alg("vegetationoverlay", {"VEGETATION": veg, "DEPTH": d, "SPEED": s,
                                      "VEGETATION_STATS": str(tmp_path / "stats.gpkg"),
                                      "COMMUNITY_SUMMARY": str(tmp_path / "summary.gpkg"),
                                      "REPORT": str(tmp_path / "veg.html")}, feedback=fb)
    for name in ("stats.gpkg", "summary.gpkg", "veg.html"):
        assert not (tmp_path / name).exists()


@pytest.mark.slow
def test_demo_wetted_share_follows_pool_level(run_alg, sample_dir, tmp_path):
    # plausibility on the invented demo (not a reference): at the lowest discharge, a higher pool
    # wets more bank vegetation (the reed benches near the weir sit just above the normal pool)
    res = run_alg("vegetationoverlay", {
        "VEGETATION": str(sample_dir / "vegetation.gpkg"), "SCENARIOS": str(sample_dir / "scenarios.csv"),
        "REGIMES": "weir_lowered, weir, weir_raised", "SCENARIO_DISCHARGES": "3000", "EDGES": None,
        "REPORT": None, "VEGETATION_STATS": str(tmp_path / "stats.gpkg"),
        "COMMUNITY_SUMMARY": str(tmp_path / "summary.gpkg")})
    _, feats = _features(res["VEGETATION_STATS"])
    wet, area = {}, {}
    for f in feats:
        wet[f["regime"]] = wet.get(f["regime"], 0.0) + f["wet_area_m2"]
        area[f["regime"]] = area.get(f["regime"], 0.0) + f["area_m2"]
    pct = {k: 100 * wet[k] / area[k] for k in wet}
    assert pct["weir_lowered"] < pct["weir"] < pct["weir_raised"]
    # a higher pool raises the water everywhere upstream of the weir, so no community loses wetted area
    _, summ = _features(res["COMMUNITY_SUMMARY"])
    by = {(f["community"], f["regime"]): f["wet_pct"] for f in summ}
    for comm in {c for c, _ in by}:
        assert by[(comm, "weir_lowered")] <= by[(comm, "weir")] <= by[(comm, "weir_raised")], comm


@pytest.mark.slow
def test_demo_mesh_runs(run_alg, sample_dir, tmp_path):
    # UGRID mesh rows through the shared runner: every stand gets a row per run, and each stand's
    # wetted area is at most its area (plausibility on invented data)
    res = run_alg("vegetationoverlay", {
        "VEGETATION": str(sample_dir / "vegetation.gpkg"), "SCENARIOS": str(sample_dir / "scenarios_mesh.csv"),
        "SCENARIO_DISCHARGES": "3000, 40000", "EDGES": None, "REPORT": None,
        "VEGETATION_STATS": str(tmp_path / "stats.gpkg"), "COMMUNITY_SUMMARY": str(tmp_path / "summary.gpkg")})
    lyr, feats = _features(res["VEGETATION_STATS"])
    n_stands = QgsVectorLayer(str(sample_dir / "vegetation.gpkg"), "v", "ogr").featureCount()
    assert len(feats) == 2 * n_stands
    assert all(f["wet_area_m2"] <= f["area_m2"] * (1 + 1e-9) for f in feats)
    wet = {q: sum(f["wet_area_m2"] for f in feats if f["q_mld"] == q) for q in (3000, 40000)}
    assert 0 < wet[3000] < wet[40000]  # more water, more of the banks wetted
