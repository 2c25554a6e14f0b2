"""mappanels through Processing on synthetic layers: PDF pages and text, PNG pixels, PAGES output.

Independent values: page counts from the shapely length of the synthetic axis; caption numbers by
hand (3000 ML/d x 1000 / 86 400 = 34.7 m3/s); PNG sizes from ISO 216 paper sizes and the DPI;
class colours from core/classes.py VELOCITY_COLOURS as written into the synthetic raster.
"""

import math
import os
import re
import shutil
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest
from qgis.core import (
    QgsProcessingContext,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsProject,
    QgsVectorLayer,
)
from qgis.PyQt.QtGui import QColor, QImage

from tests.qgis.panel_data import COLOURS, NAMES, make_panel_inputs

pytestmark = pytest.mark.skipif(shutil.which("pdftotext") is None, reason="poppler-utils not installed "
                                "(tools/install_sysdeps.sh installs it)")

ROOT = Path(__file__).resolve().parents[2]
A4_MM = (297.0, 210.0)
A3_MM = (420.0, 297.0)


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    return make_panel_inputs(str(tmp_path_factory.mktemp("panel_inputs")))


def pdf_pages(path):
    out = subprocess.run(["pdfinfo", str(path)], capture_output=True, text=True, check=True).stdout
    pages = int(re.search(r"Pages:\s+(\d+)", out).group(1))
    size = re.search(r"Page size:\s+([\d.]+) x ([\d.]+) pts", out)
    return pages, (float(size.group(1)), float(size.group(2)))


def pdf_text(path, page=None):
    args = ["pdftotext", "-layout"]
    if page is not None:
        args += ["-f", str(page), "-l", str(page)]
    out = subprocess.run(args + [str(path), "-"], capture_output=True, text=True, check=True).stdout
    out = out.replace("\ufb02", "fl").replace("\ufb01", "fi").replace("\u2009", " ")
    return re.sub(r"[ \t]+", " ", out)


def main_map_rect_mm(template):
    """(x, y, w, h) of the main_map item, read from the template XML (not through the plugin)."""
    root = ET.parse(template).getroot()
    for item in root.iter("LayoutItem"):
        if item.get("id") == "main_map":
            x, y = (float(v) for v in item.get("position").split(",")[:2])
            w, h = (float(v) for v in item.get("size").split(",")[:2])
            return x, y, w, h
    raise AssertionError("no main_map")


def colour_counts(png, rect_mm, dpi, colours):
    img = QImage(str(png))
    assert not img.isNull()
    px = dpi / 25.4
    x0, y0, w, h = (int(round(v * px)) for v in rect_mm)
    counts = dict.fromkeys(colours, 0)
    wanted = {QColor(c).rgb() & 0xFFFFFF: c for c in colours}
    seen = set()
    step = 2
    for yy in range(y0 + 3, y0 + h - 3, step):
        for xx in range(x0 + 3, x0 + w - 3, step):
            rgb = img.pixel(xx, yy) & 0xFFFFFF
            seen.add(rgb)
            if rgb in wanted:
                counts[wanted[rgb]] += 1
    return counts, len(seen), img


def base_params(data, tmp_path, **kw):
    p = {"HABITAT": data["classes"], "CENTRELINE": data["axis"], "POSTS": data["posts"],
         "BANKS": data["channel"], "VEGETATION": data["vegetation"], "REGIME": "weir", "DISCHARGE": 3000,
         "DISCHARGE_UNIT": 0, "DATE": "2026-12-01", "PDF": str(tmp_path / "panels.pdf"),
         "PNG_FOLDER": str(tmp_path / "png"), "PAGES": str(tmp_path / "pages.gpkg"), "ADD_TO_PROJECT": False,
         "DPI": 80}
    p.update(kw)
    return p


def test_zone_pages_pdf_png_and_pages(run_alg, data, tmp_path):
    res = run_alg("mappanels", base_params(data, tmp_path))
    # three zones (equal thirds by default) -> three pages
    pages, size = pdf_pages(res["PDF"])
    assert pages == 3 == res["PAGE_COUNT"]
    mask = os.umask(0)
    os.umask(mask)
    assert os.stat(res["PDF"]).st_mode & 0o777 == 0o666 & ~mask  # an ordinary file, not mkstemp's 0600
    assert size == pytest.approx((A4_MM[0] / 25.4 * 72, A4_MM[1] / 25.4 * 72), abs=1.0)  # ISO 216 A4
    text = pdf_text(res["PDF"])
    for name in NAMES:
        assert name in text
    assert "V < 0.05 m/s" in text and "V ≥ 0.3 m/s" in text  # legend rules from the class table
    assert "Regime: weir" in text
    assert "3 000 ML/d (34.7 m³/s)" in text  # 3000 * 1000 / 86400 = 34.72
    assert "Date: 2026-12-01" in text
    assert "licensed professional practice prevail" in text  # the caution
    assert "km 5" in text and "Bank vegetation" in text
    for i, zone in enumerate(("Upper", "Middle", "Lower"), start=1):
        t = pdf_text(res["PDF"], i)
        assert f"{zone} zone" in t and f"Page {i} of 3" in t
        assert "flow left to right" in t or "flow right to left" in t
    # PNGs: one per page, A4 at 80 dpi, not blank, class colours inside the map frame
    pngs = res["PNG_FILES"].split(";")
    assert [Path(p).name for p in pngs] == [f"weir_q03000_page0{i}.png" for i in (1, 2, 3)]
    rect = main_map_rect_mm(ROOT / "resources" / "templates" / "panel_a4_landscape.qpt")
    found = set()
    for p in pngs:
        counts, distinct, img = colour_counts(p, rect, 80, COLOURS)
        assert abs(img.width() - A4_MM[0] / 25.4 * 80) <= 1 and abs(img.height() - A4_MM[1] / 25.4 * 80) <= 1
        assert distinct > 20  # not blank
        assert sum(v > 30 for v in counts.values()) >= 2
        found |= {c for c, v in counts.items() if v > 30}
    assert found == set(COLOURS)  # every class shows somewhere along the reach
    # PAGES: the atlas coverage
    lyr = QgsVectorLayer(res["PAGES"], "pages", "ogr")
    assert lyr.isValid() and lyr.featureCount() == 3
    names = lyr.fields().names()
    for f in ("page", "label", "zone", "chainage_from_m", "chainage_to_m", "km_text", "rotation_deg", "scale",
              "flow"):
        assert f in names
    feats = sorted(lyr.getFeatures(), key=lambda f: f["page"])
    assert feats[0]["chainage_from_m"] == pytest.approx(0.0)
    assert feats[-1]["chainage_to_m"] == pytest.approx(data["length_m"], rel=1e-6)
    w_mm = rect[2]
    for f in feats:
        assert -90 < f["rotation_deg"] <= 90
        # the page rectangle is the map frame at the page's scale
        g = f.geometry()
        assert g.area() == pytest.approx((rect[2] / 1000 * f["scale"]) * (rect[3] / 1000 * f["scale"]), rel=1e-6)
        assert f["scale"] >= 1000
    assert w_mm > 100


def test_atlas_pages_along_the_river(run_alg, data, tmp_path):
    res = run_alg("mappanels", base_params(data, tmp_path, PAGES_MODE=1, PAGE_LENGTH=2500, PNG_FOLDER=None,
                                           PAPER=1))
    expected = math.ceil(data["length_m"] / 2500.0)  # reference: shapely length of the axis
    pages, size = pdf_pages(res["PDF"])
    assert pages == expected == res["PAGE_COUNT"]
    assert size == pytest.approx((A3_MM[0] / 25.4 * 72, A3_MM[1] / 25.4 * 72), abs=1.0)  # ISO 216 A3
    lyr = QgsVectorLayer(res["PAGES"], "pages", "ogr")
    scales = {f["scale"] for f in lyr.getFeatures()}
    assert len(scales) == 1  # atlas pages share one scale
    rotations = [f["rotation_deg"] for f in lyr.getFeatures()]
    assert len({round(r) for r in rotations}) > 1  # the map turns with the channel
    assert f"Page {expected} of {expected}" in pdf_text(res["PDF"], expected)
    turned = [f for f in lyr.getFeatures() if abs(f["rotation_deg"]) >= 0.5][0]
    page_text = pdf_text(res["PDF"], turned["page"])
    assert f"Map turned {abs(turned['rotation_deg']):.0f}° to follow the channel" in page_text
    assert not res["PNG_FILES"]


def test_class_polygons_take_scheme_colours(run_alg, data, tmp_path):
    res = run_alg("mappanels", base_params(data, tmp_path, HABITAT=data["patches"], VEGETATION=None,
                                           PAGES_MODE=1, PAGE_LENGTH=4500, DPI=150))
    rect = main_map_rect_mm(ROOT / "resources" / "templates" / "panel_a4_landscape.qpt")
    for p in res["PNG_FILES"].split(";"):
        counts, _, _ = colour_counts(p, rect, 150, COLOURS)
        assert all(v > 30 for v in counts.values()), counts  # all four bands run the whole reach
    assert "moderate (0.2 ≤ V < 0.3 m/s)" in pdf_text(res["PDF"])


def test_change_raster_diverging_legend(run_alg, data, tmp_path):
    res = run_alg("mappanels", base_params(data, tmp_path, HABITAT=data["change"], TITLE="Speed change, raised "
                                           "minus normal pool", PNG_FOLDER=None, DISCHARGE=40, DISCHARGE_UNIT=1,
                                           ROTATE=False))
    text = pdf_text(res["PDF"])
    assert text.count("North up") == 3 and "Map turned" not in text  # ROTATE off: north-up pages
    assert "Speed change, raised minus normal pool" in text
    assert "(slower)" in text and "(faster)" in text
    assert "3 456 ML/d (40 m³/s)" in text  # 40 * 86400 / 1000 = 3456


def test_change_raster_keeps_its_own_style(run_alg, data, tmp_path):
    # a raster that comes with a style (a .qml beside it, as compareregimes writes) keeps that style
    from qgis.core import QgsRasterLayer

    from plugin.gis.layouts import style_change_raster

    tif = tmp_path / "own_change.tif"
    shutil.copy(data["change"], tif)
    lyr = QgsRasterLayer(str(tif), "own")
    style_change_raster(lyr, limit=0.4, unit="m/s")
    fn = lyr.renderer().shader().rasterShaderFunction()
    items = fn.colorRampItemList()
    for it in items:
        it.label = f"own label {it.value:+.1f}"
    fn.setColorRampItemList(items)
    lyr.saveNamedStyle(str(tmp_path / "own_change.qml"))
    del lyr
    res = run_alg("mappanels", base_params(data, tmp_path, HABITAT=str(tif), PNG_FOLDER=None))
    text = pdf_text(res["PDF"])
    assert "own label +0.4" in text and "(faster)" not in text


def test_edges_layer_on_top(run_alg, data, tmp_path):
    # a vegetationoverlay EDGES-like line layer: class colours, its own legend entry
    from osgeo import ogr, osr

    srs = osr.SpatialReference()
    srs.ImportFromEPSG(28355)
    path = str(tmp_path / "edges.gpkg")
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(path)
    lyr = ds.CreateLayer("edges", srs, ogr.wkbLineString)
    for name, kind in (("stand_id", ogr.OFTInteger), ("class", ogr.OFTString), ("length_m", ogr.OFTReal)):
        lyr.CreateField(ogr.FieldDefn(name, kind))
    line = data["line"]
    for i, cls in enumerate(NAMES):
        piece = line.parallel_offset(60, "left") if i % 2 else line.parallel_offset(60, "right")
        f = ogr.Feature(lyr.GetLayerDefn())
        f.SetField("stand_id", i + 1)
        f.SetField("class", cls)
        f.SetField("length_m", piece.length)
        f.SetGeometry(ogr.CreateGeometryFromWkt(piece.wkt))
        lyr.CreateFeature(f)
    ds = None
    res = run_alg("mappanels", base_params(data, tmp_path, EXTRA_LAYERS=[path], PNG_FOLDER=None))
    text = pdf_text(res["PDF"])
    assert "Water beside the vegetation" in text and "(class of the nearest water)" in text


def test_layout_kept_in_project(run_alg, data, tmp_path):
    project = QgsProject()
    context = QgsProcessingContext()
    context.setProject(project)
    res = run_alg("mappanels", base_params(data, tmp_path, ADD_TO_PROJECT=True, PNG_FOLDER=None,
                                           PAGES="TEMPORARY_OUTPUT"), context=context)
    layout = project.layoutManager().layoutByName(res["LAYOUT_NAME"])
    assert layout is not None
    atlas = layout.atlas()
    assert atlas.enabled() and atlas.coverageLayer() is not None
    assert atlas.coverageLayer().featureCount() == 3
    assert project.mapLayer(atlas.coverageLayer().id()) is not None
    assert layout.itemById("main_map").layers()
    # a second run does not overwrite the first layout
    res2 = run_alg("mappanels", base_params(data, tmp_path / "b", ADD_TO_PROJECT=True, PNG_FOLDER=None,
                                            PAGES="TEMPORARY_OUTPUT"), context=context)
    assert res2["LAYOUT_NAME"] != res["LAYOUT_NAME"]
    assert len(project.layoutManager().printLayouts()) == 2


def test_own_template_and_bad_inputs(run_alg, data, tmp_path):
    bad = tmp_path / "no_map.qpt"
    text = (ROOT / "resources" / "templates" / "panel_a4_landscape.qpt").read_text(encoding="utf-8")
    bad.write_text(text.replace('id="main_map"', 'id="other_map"'), encoding="utf-8")
    with pytest.raises(QgsProcessingException, match="TEMPLATE"):
        run_alg("mappanels", base_params(data, tmp_path, TEMPLATE=str(bad)))
    with pytest.raises(QgsProcessingException, match="SCALE"):
        run_alg("mappanels", base_params(data, tmp_path, SCALE=1000))
    assert not (tmp_path / "panels.pdf").exists()
    # a template without the optional items still works (only main_map is required)
    ok = tmp_path / "bare.qpt"
    root = ET.fromstring(text)
    for parent in root.iter():
        for item in list(parent):
            if item.tag == "LayoutItem" and item.get("id") in ("legend", "locator_map", "north_arrow"):
                parent.remove(item)
    ok.write_text(ET.tostring(root, encoding="unicode"), encoding="utf-8")
    fb = QgsProcessingFeedback()
    res = run_alg("mappanels", base_params(data, tmp_path, TEMPLATE=str(ok), PNG_FOLDER=None), feedback=fb)
    assert pdf_pages(res["PDF"])[0] == 3


def test_shipped_templates_and_styles(qgis_app):
    from plugin.gis import layouts

    project = QgsProject()
    for paper in ("A4", "A3"):
        lay = layouts.load_template(project, layouts.default_template(paper))
        for item_id in layouts.IDS:
            assert lay.itemById(item_id) is not None, (paper, item_id)
        w, h = layouts.PAPERS_MM[paper]
        size = lay.pageCollection().page(0).pageSize()
        assert (size.width(), size.height()) == pytest.approx((w, h))
    for name, (geom, _, fields) in layouts.STYLES.items():
        lyr = QgsVectorLayer(f"{geom}?crs=EPSG:28355" + "".join(f"&field={f}:{t}" for f, t in fields), "t",
                             "memory")
        layouts.apply_qml(lyr, name)


def test_cancel_leaves_no_output(run_alg, data, tmp_path):
    fb = QgsProcessingFeedback()
    # cancel as soon as the export reports progress (the PAGES output is written by then)
    fb.progressChanged.connect(lambda value: fb.cancel() if value > 0 else None)
    with pytest.raises(QgsProcessingException, match="[Cc]ancel"):
        run_alg("mappanels", base_params(data, tmp_path), feedback=fb)
    assert not (tmp_path / "panels.pdf").exists()
    assert not (tmp_path / "pages.gpkg").exists()
    assert not list(tmp_path.rglob("*.png"))
    assert not list(tmp_path.rglob(".partial-*"))


def _legend_with(project, n, label):
    from qgis.core import QgsCategorizedSymbolRenderer, QgsLayerTree, QgsRendererCategory, QgsSymbol, QgsWkbTypes

    from plugin.gis import layouts

    lay = layouts.load_template(project, layouts.default_template("A4"))
    leg = lay.itemById("legend")
    vl = QgsVectorLayer("Polygon?crs=EPSG:28355&field=class:string", "many classes", "memory")
    cats = []
    for i in range(n):
        sym = QgsSymbol.defaultSymbol(QgsWkbTypes.PolygonGeometry)
        sym.setColor(QColor.fromHsv(i * 15, 150, 200))
        cats.append(QgsRendererCategory(f"c{i}", sym, label.format(i)))
    vl.setRenderer(QgsCategorizedSymbolRenderer("class", cats))
    root = QgsLayerTree()
    root.addLayer(vl)
    leg.setAutoUpdateModel(False)
    leg.model().setRootGroup(root)
    leg.updateLegend()
    return lay, leg, (vl, root, project)


def test_long_legend_is_fitted_into_its_box(qgis_app):
    # 20 categories do not fit the side panel at full size: the legend shrinks its text until its
    # contents fit the template's box (QGIS's own measure of what the contents need)
    from qgis.PyQt.QtCore import QSize

    from plugin.gis import layouts

    project = QgsProject()  # a layout needs its project alive
    lay, leg, keep = _legend_with(project, 20, "class {} (a label)")
    box = (leg.rect().width(), leg.rect().height())
    cols, scale, fits = layouts.fit_legend(leg)
    assert fits and scale < 1.0
    assert (leg.rect().width(), leg.rect().height()) == pytest.approx(box)
    leg.setResizeToContents(True)
    layouts.QgsLayoutExporter(lay).renderRegionToImage(leg.sceneBoundingRect(), QSize(), 30)
    leg.adjustBoxSize()
    assert leg.rect().height() <= box[1] + 0.01 and leg.rect().width() <= box[0] + 0.01
    # far too many long labels: reported as not fitting (the algorithm then warns)
    project2 = QgsProject()
    _, leg2, keep2 = _legend_with(project2, 40, "class number {} with a rather long label")
    assert layouts.fit_legend(leg2)[2] is False


def test_class_names_of_a_class_raster(tmp_path):
    # names from category names, else from maphabitat's 'classes' metadata, else the scheme's
    from osgeo import gdal

    from plugin.gis.layouts import raster_classes

    def tif(name, names=None, meta=None):
        ds = gdal.GetDriverByName("GTiff").Create(str(tmp_path / name), 4, 4, 1, gdal.GDT_Byte)
        ds.SetGeoTransform((0, 1, 0, 4, 0, -1))
        ct = gdal.ColorTable()
        ct.SetColorEntry(1, (255, 0, 0, 255))
        ct.SetColorEntry(2, (0, 0, 255, 255))
        band = ds.GetRasterBand(1)
        band.SetRasterColorTable(ct)
        band.SetNoDataValue(0)
        if names:
            band.SetRasterCategoryNames(names)
        if meta:
            ds.SetMetadataItem("classes", meta)
        band = None
        ds = None
        return str(tmp_path / name)

    assert raster_classes(tif("a.tif", names=["dry", "pool", "riffle"]), ["x", "y"]) == [
        (1, "#FF0000", "pool"), (2, "#0000FF", "riffle")]
    assert raster_classes(tif("b.tif", meta="1 pool: Fr < 0.18; 2 riffle: Fr >= 0.41"), ["x", "y"]) == [
        (1, "#FF0000", "pool"), (2, "#0000FF", "riffle")]
    assert raster_classes(tif("c.tif"), ["x", "y"]) == [(1, "#FF0000", "x"), (2, "#0000FF", "y")]
