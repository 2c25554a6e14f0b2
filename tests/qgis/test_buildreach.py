"""buildreach through Processing: every output opened and checked, on the demo reach and on small
hand-made lines; reachinput reading a buildreach AXIS (M values), SEGMENTS and ZONES back."""

import math

import numpy as np
import pytest
import shapely
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsFeature,
    QgsGeometry,
    QgsLineString,
    QgsPointXY,
    QgsProcessingAlgorithm,
    QgsProcessingContext,
    QgsProcessingFeedback,
    QgsVectorLayer,
    QgsWkbTypes,
)

UTM = "EPSG:32755"


def line_layer(coords_list, crs=UTM, name="centreline"):
    layer = QgsVectorLayer(f"LineString?crs={crs}", name, "memory")
    feats = []
    for coords in coords_list:
        f = QgsFeature()
        f.setGeometry(QgsGeometry.fromPolylineXY([QgsPointXY(x, y) for x, y in coords]))
        feats.append(f)
    layer.dataProvider().addFeatures(feats)
    return layer


def multiline_layer(parts, crs=UTM):
    layer = QgsVectorLayer(f"MultiLineString?crs={crs}", "centreline", "memory")
    f = QgsFeature()
    f.setGeometry(QgsGeometry.fromMultiPolylineXY([[QgsPointXY(x, y) for x, y in p] for p in parts]))
    layer.dataProvider().addFeatures([f])
    return layer


def polygon_layer(geom, crs=UTM):
    layer = QgsVectorLayer(f"Polygon?crs={crs}", "extent", "memory")
    f = QgsFeature()
    f.setGeometry(QgsGeometry.fromWkt(geom.wkt))
    layer.dataProvider().addFeatures([f])
    return layer


def features(path):
    layer = QgsVectorLayer(path, "out", "ogr")
    assert layer.isValid(), path
    return layer, list(layer.getFeatures())


def outputs(tmp_path):
    return {k: str(tmp_path / f"{k.lower()}.gpkg") for k in ("AXIS", "POSTS", "SEGMENTS", "ZONES")}


class Feedback(QgsProcessingFeedback):
    def __init__(self):
        super().__init__()
        self.infos, self.warnings = [], []

    def pushInfo(self, info):  # noqa: N802
        self.infos.append(info)

    def pushWarning(self, warning):  # noqa: N802
        self.warnings.append(warning)


def test_demo_reach(run_alg, sample_dir, tmp_path):
    out = outputs(tmp_path)
    fb = Feedback()
    res = run_alg("buildreach", {
        "CENTRELINE": str(sample_dir / "centreline.gpkg") + "|layername=centreline",
        "DIRECTION": 1,  # the demo centreline is digitised downstream -> upstream
        "EXTENT": str(sample_dir / "channel.gpkg") + "|layername=channel",
        "ZONE_BREAKS": "0 upper, 12000 middle, 25000 lower", **out}, feedback=fb)
    # AXIS: one LineStringM whose M values are the chainage (= cumulative planar length)
    axis_layer, (axis,) = features(res["AXIS"])
    assert QgsWkbTypes.hasM(axis_layer.wkbType())
    geom = axis.geometry()  # keep the geometry alive while reading its vertices
    pts = list(geom.vertices())
    x = np.array([p.x() for p in pts])
    y = np.array([p.y() for p in pts])
    m = np.array([p.m() for p in pts])
    np.testing.assert_allclose(m, np.concatenate([[0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))]), atol=1e-6)
    assert axis["length_m"] == pytest.approx(m[-1]) and axis["origin"] == "upstream"
    assert axis["direction"] == "reversed" and axis["method"].startswith("planar")
    # upstream end of the demo river: the last vertex of the drawn line
    src = QgsVectorLayer(str(sample_dir / "centreline.gpkg") + "|layername=centreline", "c", "ogr")
    feat = next(src.getFeatures())
    g_drawn = feat.geometry()
    drawn = list(g_drawn.vertices())
    assert (x[0], y[0]) == pytest.approx((drawn[-1].x(), drawn[-1].y()))
    # POSTS every 1000 m, labelled in km, on the axis
    _, posts = features(res["POSTS"])
    ch = np.array([p["chainage_m"] for p in posts])
    np.testing.assert_allclose(ch[:-1], np.arange(len(ch) - 1) * 1000.0)
    assert ch[-1] == pytest.approx(m[-1])
    assert posts[12]["label"] == "km 12"
    line = shapely.linestrings(np.column_stack([x, y]))
    for p in posts[:5]:
        gp = p.geometry()
        pt = shapely.Point(gp.asPoint().x(), gp.asPoint().y())
        assert line.distance(pt) < 1e-6 and line.project(pt) == pytest.approx(p["chainage_m"], abs=1e-6)
    # SEGMENTS: 1-based, contiguous, last partial with its true length, zones, areas
    seg_layer, segs = features(res["SEGMENTS"])
    n = len(segs)
    assert [s["segment"] for s in segs] == list(range(1, n + 1))
    assert segs[-1]["partial"] and not any(s["partial"] for s in segs[:-1])
    assert segs[-1]["length_m"] == pytest.approx(m[-1] - 1000.0 * (n - 1))
    assert segs[0]["zone"] == "upper" and segs[12]["zone"] == "middle" and segs[-1]["zone"] == "lower"
    polys = [shapely.from_wkb(bytes(s.geometry().asWkb())) for s in segs]
    for s, p in zip(segs, polys):
        assert s["area_m2"] == pytest.approx(p.area, rel=1e-9)
    # they cover the channel outline without gaps or overlaps
    chan = QgsVectorLayer(str(sample_dir / "channel.gpkg") + "|layername=channel", "ch", "ogr")
    channel = shapely.union_all([shapely.from_wkb(bytes(f.geometry().asWkb())) for f in chan.getFeatures()])
    assert sum(p.area for p in polys) == pytest.approx(channel.area, rel=1e-6)
    assert shapely.union_all(polys).area == pytest.approx(channel.area, rel=1e-6)
    # ZONES as named
    _, zones = features(res["ZONES"])
    assert [z["zone"] for z in zones] == ["upper", "middle", "lower"]
    assert [z["chainage_from_m"] for z in zones] == pytest.approx([0.0, 12000.0, 25000.0])
    assert sum(z["area_m2"] for z in zones) == pytest.approx(channel.area, rel=1e-6)
    assert any("segments of 1000 m" in i for i in fb.infos)


def test_direction_inferred_from_the_demo_run(run_alg, sample_dir, tmp_path):
    out = outputs(tmp_path)
    r = sample_dir / "rasters" / "weir"
    res = run_alg("buildreach", {
        "CENTRELINE": str(sample_dir / "centreline.gpkg") + "|layername=centreline", "DIRECTION": 2,
        "RUN_DEPTH": str(r / "q03000_depth.tif"), "RUN_VELOCITY_U": str(r / "q03000_u.tif"),
        "RUN_VELOCITY_V": str(r / "q03000_v.tif"), "SEGMENT_LENGTH": 5000.0, **out})
    _, (axis,) = features(res["AXIS"])
    assert axis["direction"].startswith("inferred from velocity (reversed")
    # the extent is the run's wet area: the segments cover exactly the wet cells
    from osgeo import gdal

    ds = gdal.Open(str(r / "q03000_depth.tif"))
    d = ds.GetRasterBand(1).ReadAsArray()
    nd = ds.GetRasterBand(1).GetNoDataValue()
    wet = (d != nd) & np.isfinite(d) & (d >= 0.05)
    cell = abs(ds.GetGeoTransform()[1] * ds.GetGeoTransform()[5])
    _, segs = features(res["SEGMENTS"])
    assert sum(s["area_m2"] for s in segs) == pytest.approx(wet.sum() * cell, rel=1e-9)


def test_downstream_origin_datum_and_buffer(run_alg, tmp_path):
    coords = [(0.0, 0.0), (1500.0, 0.0), (1500.0, 1200.0)]  # flows east, then north: 2700 m
    out = outputs(tmp_path)
    res = run_alg("buildreach", {"CENTRELINE": line_layer([coords]), "ORIGIN": 1, "DATUM": 100.0,
                                 "SEGMENT_LENGTH": 1000.0, "BUFFER_HALF_WIDTH": 50.0, **out})
    _, (axis,) = features(res["AXIS"])
    geom = axis.geometry()
    pts = list(geom.vertices())
    # vertices run downstream -> upstream, M from the datum at the downstream end
    assert (pts[0].x(), pts[0].y()) == (1500.0, 1200.0)
    assert [p.m() for p in pts] == pytest.approx([100.0, 1300.0, 2800.0])
    assert axis["origin"] == "downstream" and axis["datum_m"] == 100.0
    _, zones = features(res["ZONES"])
    assert [z["zone"] for z in zones] == ["lower", "middle", "upper"]
    _, segs = features(res["SEGMENTS"])
    assert [s["chainage_from_m"] for s in segs] == pytest.approx([100, 1100, 2100])
    assert segs[-1]["length_m"] == pytest.approx(700.0) and segs[-1]["partial"]
    # the buffer: 100 m wide along 2700 m, the outer corner rounded (quarter disc), flat ends
    total = sum(s["area_m2"] for s in segs)
    assert total == pytest.approx(2700 * 100 + math.pi * 50 ** 2 / 4 - 50 ** 2, rel=2e-3)
    # segment 1 (chainage 100-1100) runs 1000 m south from the downstream end: y 1200 to 200, 100 m wide
    g = shapely.from_wkb(bytes(segs[0].geometry().asWkb()))
    assert g.bounds == pytest.approx((1450.0, 200.0, 1550.0, 1200.0), abs=1e-6)


def test_parts_joined_and_gap_refused(run_alg, tmp_path):
    parts = [[(1000.0, 0.0), (2000.0, 0.0)], [(0.0, 0.0), (999.5, 0.0)]]
    res = run_alg("buildreach", {"CENTRELINE": multiline_layer(parts), "SEGMENT_LENGTH": 500.0,
                                 **outputs(tmp_path)})
    _, (axis,) = features(res["AXIS"])
    assert axis["length_m"] == pytest.approx(2000.0)
    from qgis.core import QgsProcessingException

    with pytest.raises(QgsProcessingException, match=r"CENTRELINE: .*gap of 20\.00 m"):
        run_alg("buildreach", {"CENTRELINE": multiline_layer([[(0.0, 0.0), (980.0, 0.0)],
                                                              [(1000.0, 0.0), (2000.0, 0.0)]]),
                               **outputs(tmp_path)})


@pytest.mark.parametrize("case, match", [
    ("empty", "CENTRELINE: the centreline layer has no line"),
    ("crossing", "CENTRELINE: the centreline crosses or touches itself"),
    ("extent", "EXTENT: the channel extent does not overlap the centreline"),
    ("infer", "DIRECTION: inferring the direction needs a run"),
    ("zones", "ZONE_BREAKS: zone breaks must increase"),
])
def test_bad_input_messages(run_alg, tmp_path, case, match):
    from qgis.core import QgsProcessingException

    params = {"CENTRELINE": line_layer([[(0.0, 0.0), (1000.0, 0.0)]]), **outputs(tmp_path)}
    if case == "empty":
        params["CENTRELINE"] = QgsVectorLayer(f"LineString?crs={UTM}", "c", "memory")
    elif case == "crossing":
        params["CENTRELINE"] = line_layer([[(0, 0), (100, 0), (100, 50), (50, 50), (50, -20)]])
    elif case == "extent":
        params["EXTENT"] = polygon_layer(shapely.box(0, 500, 1000, 600))
    elif case == "infer":
        params["DIRECTION"] = 2
    elif case == "zones":
        params["ZONE_BREAKS"] = "0 a, 500 b, 300 c"
    with pytest.raises(QgsProcessingException, match=match):
        run_alg("buildreach", params)


def test_geographic_centreline_warns_and_writes_the_method(run_alg, tmp_path):
    from pyproj import Geod

    geod = Geod(ellps="WGS84")
    pts = [(145.0, -37.0)]
    for az in (80.0, 100.0):
        lo, la, _ = geod.fwd(pts[-1][0], pts[-1][1], az, 3000.0)
        pts.append((lo, la))
    fb = Feedback()
    res = run_alg("buildreach", {"CENTRELINE": line_layer([pts], crs="EPSG:4326"), "BUFFER_HALF_WIDTH": 40.0,
                                 **outputs(tmp_path)}, feedback=fb)
    _, (axis,) = features(res["AXIS"])
    assert axis["length_m"] == pytest.approx(6000.0, abs=1e-3)
    assert axis["method"].startswith("geodesic") and "ellipsoid" in axis["method"]
    assert any("projected CRS in metres" in w for w in fb.warnings)
    _, segs = features(res["SEGMENTS"])
    assert len(segs) == 6 and segs[2]["area_m2"] == pytest.approx(80000.0, rel=0.01)


# ------------------------------------------------------------------------------------------------
# reachinput: an algorithm reading the reach back
# ------------------------------------------------------------------------------------------------

class ReachReader(QgsProcessingAlgorithm):
    def name(self):
        return "reachreader"

    def displayName(self):  # noqa: N802
        return "reach reader"

    def createInstance(self):  # noqa: N802
        return ReachReader()

    def initAlgorithm(self, config=None):  # noqa: N802
        from plugin.gis import reachinput

        reachinput.add_reach_parameters(self)

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802
        return {}


def read(params, target=None):
    from plugin.gis import reachinput

    alg = ReachReader()
    alg.initAlgorithm()
    fb = Feedback()
    reach = reachinput.read_reach_parameters(alg, params, QgsProcessingContext(), fb, target_crs_wkt=target)
    return reach, fb


def test_reach_read_from_buildreach_outputs(run_alg, tmp_path, qgis_app):
    coords = [(0.0, 0.0), (800.0, 300.0), (1600.0, 0.0), (2600.0, 100.0)]
    out = outputs(tmp_path)
    run_alg("buildreach", {"CENTRELINE": line_layer([coords[::-1]]), "DIRECTION": 1, "DATUM": 5000.0,
                           "SEGMENT_LENGTH": 750.0, "ZONE_BREAKS": "0 top, 6000 bottom", **out})
    # AXIS with M: chainage, origin and datum as written, whatever SEGMENT_LENGTH says
    reach, fb = read({"CENTRELINE": out["AXIS"], "SEGMENT_LENGTH": 1000.0, "SEGMENTS": out["SEGMENTS"],
                      "ZONES": out["ZONES"]})
    axis = reach.axis
    assert axis.start_m == 5000.0 and axis.method == "planar" and axis.origin == "upstream"
    seg = np.hypot(np.diff([c[0] for c in coords]), np.diff([c[1] for c in coords]))
    np.testing.assert_allclose(axis.chainage, 5000.0 + np.concatenate([[0], np.cumsum(seg)]))
    np.testing.assert_allclose(reach.segment_edges[:3], [5000, 5750, 6500])
    assert reach.zone_names == ["top", "bottom"] and reach.zone_edges[1] == 6000.0
    assert len(reach.segment_polygons) == reach.n_segments and reach.segment_polygons[0].area > 0
    # the same AXIS in another CRS: transformed, chainage kept, and said
    reach2, fb2 = read({"CENTRELINE": out["AXIS"]}, target=QgsCoordinateReferenceSystem("EPSG:4326").toWkt())
    assert reach2.axis.is_geographic
    np.testing.assert_allclose(reach2.axis.chainage, axis.chainage)
    assert any("transformed" in i for i in fb2.infos)
    # a plain line: reversed on request
    reach3, _ = read({"CENTRELINE": line_layer([coords[::-1]]), "CENTRELINE_DIRECTION": 1})
    assert reach3.axis.x[0] == 0.0 and reach3.axis.start_m == 0.0


def test_lines_with_m_values_that_are_not_an_axis(qgis_app):
    # a LineStringM whose M decrease (not a buildreach AXIS) is taken as a plain line
    layer = QgsVectorLayer(f"LineStringM?crs={UTM}", "m", "memory")
    f = QgsFeature()
    f.setGeometry(QgsGeometry(QgsLineString([0.0, 100.0, 200.0], [0.0, 0.0, 0.0], [], [5.0, 3.0, 1.0])))
    layer.dataProvider().addFeatures([f])
    reach, _ = read({"CENTRELINE": layer})
    assert reach.axis.method == "planar" and reach.axis.end_m == 200.0


def test_wet_extent_of_grid_and_mesh(qgis_app):
    from plugin.core.field import GridSupport, HydraulicField, MeshSupport
    from plugin.gis.extent import wet_extent

    rng = np.random.default_rng(3)
    mask = rng.random((40, 60)) < 0.6
    idx = np.flatnonzero(mask)
    r, c = np.divmod(idx, 60)
    n = idx.size
    fld = HydraulicField(1000 + (c + 0.5) * 2.0, 5000 - (r + 0.5) * 2.0, np.full(n, 4.0), np.ones(n, np.float32),
                         np.ones(n, np.float32), crs_wkt=QgsCoordinateReferenceSystem(UTM).toWkt(),
                         support=GridSupport((1000.0, 2.0, 0.0, 5000.0, 0.0, -2.0), (40, 60), idx))
    ext = wet_extent(fld)
    assert ext.area == pytest.approx(n * 4.0)
    # every wet cell centre inside, every dry one outside
    dr, dc = np.divmod(np.flatnonzero(~mask), 60)
    assert shapely.contains_xy(ext, fld.x, fld.y).all()
    assert not shapely.contains_xy(ext, 1000 + (dc + 0.5) * 2.0, 5000 - (dr + 0.5) * 2.0).any()
    # a mesh of a triangle and a quad, the quad wet only
    nx = np.array([0.0, 10.0, 10.0, 0.0, 20.0])
    ny = np.array([0.0, 0.0, 10.0, 10.0, 0.0])
    fn = np.array([[0, 1, 2, 3], [1, 4, 2, -1]])
    mfld = HydraulicField(np.array([5.0]), np.array([5.0]), np.array([100.0]), np.ones(1, np.float32),
                          np.ones(1, np.float32), support=MeshSupport(nx, ny, fn, np.array([0])))
    assert wet_extent(mfld).area == pytest.approx(100.0)


@pytest.mark.parametrize("wkt, xs, ys, ms", [
    ("LineStringM (0 0 5, 10 0 15, 20 5 30)", [0, 10, 20], [0, 0, 5], [5, 15, 30]),
    ("LineStringZM (0 0 1 5, 10 0 2 15)", [0, 10], [0, 0], [5, 15]),
    ("LineStringZ (0 0 1, 10 0 2)", [0, 10], [0, 0], None),
])
def test_line_source_coordinates_and_measures(wkt, xs, ys, ms):
    """Coordinates and M values read from the layer's WKB equal the geometry's own vertices."""
    from qgis.core import QgsFeature, QgsGeometry

    from plugin.gis.reachinput import read_line_source

    geom = QgsGeometry.fromWkt(wkt)
    layer = QgsVectorLayer(f"{wkt.split()[0]}?crs={UTM}", "l", "memory")
    f = QgsFeature()
    f.setGeometry(geom)
    layer.dataProvider().addFeatures([f])
    parts, measures, _, _ = read_line_source(layer)
    vertices = list(geom.vertices())
    assert list(parts[0][0]) == [v.x() for v in vertices] == xs
    assert list(parts[0][1]) == [v.y() for v in vertices] == ys
    assert (measures[0] is None) if ms is None else (list(measures[0]) == [v.m() for v in vertices] == ms)
