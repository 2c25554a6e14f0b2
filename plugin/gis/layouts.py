"""Print layouts for map panels: the page template, styled layers, an atlas of pages, export.

A panel layout comes from a template (resources/templates/panel_a4_landscape.qpt or
panel_a3_landscape.qpt, or the user's own) whose items are found by id:

  main_map (required)  locator_map  legend  title  subtitle  page_number  caption  data_note
  caution  scalebar  scale_text  north_arrow

Pages are the features of a coverage layer (the PAGES output: one rotated rectangle per page, see
core/panels.py) driving the layout's atlas: the main map takes each page's rectangle and rotation
(data-defined from the field ``rotation_deg``), labels read the page fields through expressions
(``[% "label" %]``). The layout therefore stays an ordinary, editable QGIS atlas when it is added
to a project. Export goes to one PDF (all pages) and one PNG per page, each written to a temporary
name first and renamed into place.

Styles: class layers take the class scheme's colours (a class raster its colour table, polygons or
lines with a ``class`` field a categorized renderer); the other layers take the QML styles in
resources/styles (``panel_*.qml``, ``veg_*.qml``). ``write_resources()`` regenerates the templates
and QML files from the definitions here (the shipped files are the result; users may edit them).
"""

from __future__ import annotations

import math
import os
import re
import shutil
import tempfile
from dataclasses import dataclass, field

import numpy as np
from osgeo import gdal
from qgis.core import (
    QgsCategorizedSymbolRenderer,
    QgsColorRampLegendNodeSettings,
    QgsColorRampShader,
    QgsFeature,
    QgsFeatureRequest,
    QgsFillSymbol,
    QgsGeometry,
    QgsLayerTree,
    QgsLayoutExporter,
    QgsLayoutItemLabel,
    QgsLayoutItemLegend,
    QgsLayoutItemMap,
    QgsLayoutItemMapOverview,
    QgsLayoutItemPicture,
    QgsLayoutItemScaleBar,
    QgsLayoutMeasurement,
    QgsLayoutObject,
    QgsLayoutPoint,
    QgsLayoutSize,
    QgsLegendStyle,
    QgsLinePatternFillSymbolLayer,
    QgsLineSymbol,
    QgsMapLayerLegendUtils,
    QgsMarkerSymbol,
    QgsPalettedRasterRenderer,
    QgsPalLayerSettings,
    QgsPointXY,
    QgsPrintLayout,
    QgsProperty,
    QgsRasterLayer,
    QgsRasterShader,
    QgsReadWriteContext,
    QgsRectangle,
    QgsRenderContext,
    QgsRendererCategory,
    QgsScaleBarSettings,
    QgsSimpleFillSymbolLayer,
    QgsSimpleLineSymbolLayer,
    QgsSingleBandPseudoColorRenderer,
    QgsSingleSymbolRenderer,
    QgsTextBufferSettings,
    QgsTextFormat,
    QgsUnitTypes,
    QgsVectorLayer,
    QgsVectorLayerSimpleLabeling,
    QgsWkbTypes,
)
from qgis.PyQt.QtCore import QSize, Qt
from qgis.PyQt.QtGui import QColor, QFont
from qgis.PyQt.QtXml import QDomDocument

from ..core.errors import Cancelled, ChannelHabitatError
from ..resources import resource_path

gdal.UseExceptions()

# --------------------------------------------------------------------------------------------
# The panel's own neutral colours (class colours come from the class scheme, never from here)
# --------------------------------------------------------------------------------------------
INK = "#262626"  # text, frames
MUTED = "#5C5C5C"  # secondary text
MAP_BACKGROUND = "#F3F2EE"  # land: a light warm grey, so white never reads as 'no data'
AXIS_COLOUR = "#4A4A4A"
POST_COLOUR = "#1C1C1C"
BANK_COLOUR = "#7D7D7D"
VEGETATION_COLOUR = "#2E5A3A"
PAGE_OUTLINE = "#8A8A8A"
OVERVIEW_COLOUR = "#1C1C1C"
# speed change (alternative minus base): slower -> browns, faster -> blues, no change near white
CHANGE_RAMP = ("#7A3E16", "#D9A45B", "#F5F3EF", "#6DB6CC", "#1F4E8C")

IDS = ("main_map", "locator_map", "legend", "title", "subtitle", "page_number", "caption", "data_note",
       "caution", "scalebar", "scale_text", "north_arrow")
TEMPLATES = {"A4": "panel_a4_landscape.qpt", "A3": "panel_a3_landscape.qpt"}
PAPERS_MM = {"A4": (297.0, 210.0), "A3": (420.0, 297.0)}

# A4 landscape positions (x, y, width, height) in mm; A3 is the same page scaled by sqrt(2).
_A4 = {
    "title": (8.0, 6.0, 215.0, 9.0),
    "page_number": (225.0, 7.0, 64.0, 6.0),
    "subtitle": (8.0, 15.0, 281.0, 6.0),
    "main_map": (8.0, 22.0, 207.0, 150.0),
    "locator_map": (219.0, 22.0, 70.0, 40.0),
    "legend": (219.0, 65.0, 70.0, 78.0),
    "scalebar": (219.0, 146.0, 50.0, 11.0),
    "north_arrow": (272.0, 143.0, 17.0, 17.0),
    "scale_text": (219.0, 159.0, 56.0, 12.0),
    "caption": (8.0, 174.0, 281.0, 8.0),
    "data_note": (8.0, 183.0, 281.0, 10.0),
    "caution": (8.0, 194.0, 281.0, 10.0),
}
_FONT_PT = {"title": 15.0, "subtitle": 10.0, "page_number": 8.0, "caption": 10.0, "data_note": 7.0,
            "caution": 7.0, "scale_text": 7.5}


def _font(size_pt: float, bold: bool = False, italic: bool = False) -> QFont:
    f = QFont()
    f.setPointSizeF(size_pt)
    f.setBold(bold)
    f.setItalic(italic)
    return f


def _text_format(size_pt: float, colour: str = INK, bold: bool = False) -> QgsTextFormat:
    tf = QgsTextFormat()
    tf.setFont(_font(size_pt, bold))
    tf.setSize(size_pt)
    tf.setSizeUnit(QgsUnitTypes.RenderPoints)
    tf.setColor(QColor(colour))
    return tf


# --------------------------------------------------------------------------------------------
# Template
# --------------------------------------------------------------------------------------------

def design_layout(project, paper: str = "A4") -> QgsPrintLayout:
    """The panel page built from the definitions above (what the shipped templates contain)."""
    k = 1.0 if paper == "A4" else math.sqrt(2.0)
    fk = 1.0 if paper == "A4" else 1.25
    layout = QgsPrintLayout(project)
    layout.initializeDefaults()
    w, h = PAPERS_MM[paper]
    layout.pageCollection().page(0).setPageSize(QgsLayoutSize(w, h, QgsUnitTypes.LayoutMillimeters))
    layout.setName(f"Channel Habitat panel {paper} landscape")

    def place(item, key):
        x, y, iw, ih = (v * k for v in _A4[key])
        item.attemptMove(QgsLayoutPoint(x, y, QgsUnitTypes.LayoutMillimeters))
        item.attemptResize(QgsLayoutSize(iw, ih, QgsUnitTypes.LayoutMillimeters))
        item.setId(key)

    main = QgsLayoutItemMap(layout)
    layout.addLayoutItem(main)
    place(main, "main_map")
    main.setFrameEnabled(True)
    main.setFrameStrokeColor(QColor(INK))
    main.setFrameStrokeWidth(QgsLayoutMeasurement(0.3 * fk))
    main.setBackgroundColor(QColor(MAP_BACKGROUND))

    loc = QgsLayoutItemMap(layout)
    layout.addLayoutItem(loc)
    place(loc, "locator_map")
    loc.setFrameEnabled(True)
    loc.setFrameStrokeColor(QColor(MUTED))
    loc.setFrameStrokeWidth(QgsLayoutMeasurement(0.2 * fk))
    loc.setBackgroundColor(QColor("#FFFFFF"))
    ov = loc.overview()
    ov.setLinkedMap(main)
    ov.setFrameSymbol(QgsFillSymbol.createSimple({
        "color": "0,0,0,0", "outline_color": OVERVIEW_COLOUR, "outline_width": str(0.45 * fk),
        "outline_width_unit": "MM"}))

    for key, bold, italic, colour, halign in (
            ("title", True, False, INK, Qt.AlignLeft), ("subtitle", False, False, INK, Qt.AlignLeft),
            ("page_number", False, False, MUTED, Qt.AlignRight), ("caption", True, False, INK, Qt.AlignLeft),
            ("data_note", False, False, MUTED, Qt.AlignLeft), ("caution", False, True, MUTED, Qt.AlignLeft),
            ("scale_text", False, False, MUTED, Qt.AlignLeft)):
        lab = QgsLayoutItemLabel(layout)
        layout.addLayoutItem(lab)
        place(lab, key)
        lab.setFont(_font(_FONT_PT[key] * fk, bold, italic))
        lab.setFontColor(QColor(colour))
        lab.setHAlign(halign)
        lab.setVAlign(Qt.AlignTop)
        lab.setMarginX(0.0)
        lab.setMarginY(0.0)
        lab.setText(key.replace("_", " "))
    layout.itemById("subtitle").setText('[% "label" %] · [% "km_text" %] · [% "flow" %]')
    layout.itemById("page_number").setText("Page [% @atlas_featurenumber %] of [% @atlas_totalfeatures %]")
    layout.itemById("scale_text").setText(
        f"Scale 1:[% format_number(\"scale\", 0) %] on {paper} paper\n"
        "[% if(abs(\"rotation_deg\") < 0.5, 'North up', 'Map turned ' || format_number(abs(\"rotation_deg\"), 0) "
        "|| '° to follow the channel') %]")

    leg = QgsLayoutItemLegend(layout)
    layout.addLayoutItem(leg)
    place(leg, "legend")
    leg.setTitle("")
    leg.setLinkedMap(main)
    leg.setResizeToContents(False)
    leg.setBackgroundEnabled(False)
    leg.setFrameEnabled(False)
    leg.setSymbolWidth(6.0 * fk)
    leg.setSymbolHeight(3.6 * fk)
    leg.setWrapString("|")
    for style, size, bold in ((QgsLegendStyle.Title, 9.0, True), (QgsLegendStyle.Group, 8.5, True),
                              (QgsLegendStyle.Subgroup, 8.0, True), (QgsLegendStyle.SymbolLabel, 7.5, False)):
        leg.setStyleFont(style, _font(size * fk, bold))
    leg.rstyle(QgsLegendStyle.Subgroup).setMargin(QgsLegendStyle.Top, 2.2 * fk)
    leg.rstyle(QgsLegendStyle.Symbol).setMargin(QgsLegendStyle.Top, 1.2 * fk)
    leg.rstyle(QgsLegendStyle.SymbolLabel).setMargin(QgsLegendStyle.Top, 1.2 * fk)
    leg.setFontColor(QColor(INK))

    sb = QgsLayoutItemScaleBar(layout)
    layout.addLayoutItem(sb)
    sb.setStyle("Single Box")
    sb.setLinkedMap(main)
    sb.setUnits(QgsUnitTypes.DistanceMeters)
    sb.setUnitLabel("m")
    sb.setNumberOfSegments(2)
    sb.setNumberOfSegmentsLeft(0)
    sb.setSegmentSizeMode(QgsScaleBarSettings.SegmentSizeFitWidth)
    sb.setMinimumBarWidth(24.0 * k)
    sb.setMaximumBarWidth(44.0 * k)
    sb.setHeight(1.8 * fk)
    sb.setTextFormat(_text_format(7.0 * fk))
    sb.setFillColor(QColor(INK))
    sb.setFillColor2(QColor("#FFFFFF"))
    sb.setLineColor(QColor(INK))
    sb.setLineWidth(0.25 * fk)
    sb.setBackgroundEnabled(False)
    place(sb, "scalebar")
    sb.update()

    na = QgsLayoutItemPicture(layout)
    layout.addLayoutItem(na)
    place(na, "north_arrow")
    na.setPicturePath(str(resource_path("templates", "north_arrow.svg")))
    na.setLinkedMap(main)
    na.setNorthMode(QgsLayoutItemPicture.GridNorth)
    na.setResizeMode(QgsLayoutItemPicture.Zoom)
    return layout


def load_template(project, path: str, parameter: str = "TEMPLATE") -> QgsPrintLayout:
    """A layout from a .qpt file; refuses templates without a map item with id 'main_map'."""
    if not os.path.isfile(path):
        raise ChannelHabitatError(f"layout template '{path}' does not exist", parameter)
    with open(path, encoding="utf-8") as fh:
        text = fh.read()
    # the north arrow SVG is stored with the path of the machine that wrote the template
    text = text.replace("@CHANNEL_HABITAT_TEMPLATES@", str(resource_path("templates")))
    doc = QDomDocument()
    if not doc.setContent(text)[0]:
        raise ChannelHabitatError(f"'{path}' is not a QGIS layout template (.qpt XML)", parameter)
    layout = QgsPrintLayout(project)
    _, ok = layout.loadFromTemplate(doc, QgsReadWriteContext())
    if not ok:
        raise ChannelHabitatError(f"QGIS could not read the layout template '{path}'", parameter)
    if not isinstance(layout.itemById("main_map"), QgsLayoutItemMap):
        raise ChannelHabitatError(
            f"the layout template '{path}' has no map item with the id 'main_map'; give the map that "
            "shows the pages that id (Item properties > Item ID)", parameter)
    return layout


def default_template(paper: str) -> str:
    return str(resource_path("templates", TEMPLATES[paper]))


# --------------------------------------------------------------------------------------------
# Layer styles
# --------------------------------------------------------------------------------------------

def class_label(name: str, rule: str = "") -> str:
    rule = rule.replace("<=", "≤").replace(">=", "≥")
    return f"{name} ({rule})" if rule and rule != "all other wet water" else name


def raster_classes(path: str, fallback_names=()) -> list:
    """[(code, '#RRGGBB', name)] of a class raster: colours from its colour table; names from its
    category names, else from the ``classes`` metadata item maphabitat writes ('1 very slow: ...;
    2 slow: ...'), else ``fallback_names`` for codes 1..N (the scheme's classes). Code 0 (dry) and the
    nodata value are left out; [] when the raster has no colour table."""
    ds = gdal.Open(str(path))
    band = ds.GetRasterBand(1)
    ct = band.GetRasterColorTable()
    names = list(band.GetRasterCategoryNames() or [])
    meta = ds.GetMetadataItem("classes") or ""
    nd = band.GetNoDataValue()
    out = []
    if ct is not None:
        if any(names[1:]):
            codes = [c for c in range(1, min(len(names), ct.GetCount())) if names[c]]
        else:
            named = {int(m.group(1)): m.group(2).strip()
                     for m in re.finditer(r"(?:^|;)\s*(\d+)\s+([^:;]+):", meta)}
            if named:
                codes = sorted(c for c in named if 0 < c < ct.GetCount())
                names = [named.get(i, "") for i in range(max(codes) + 1)] if codes else []
            else:
                codes = list(range(1, min(len(fallback_names) + 1, ct.GetCount())))
                names = [""] + list(fallback_names)
        for code in codes:
            if nd is not None and code == nd:
                continue
            r, g, b, _ = ct.GetColorEntry(code)
            out.append((code, f"#{r:02X}{g:02X}{b:02X}", names[code]))
    del band, ds
    return out


def style_class_raster(layer: QgsRasterLayer, classes, scheme=None) -> None:
    """Paletted renderer from [(code, colour, name)]; labels carry the scheme's rule when the scheme
    has a class of that name."""
    rules = {c.name: c.describe() for c in scheme.classes} if scheme is not None else {}
    items = [QgsPalettedRasterRenderer.Class(code, QColor(colour), class_label(name, rules.get(name, "")))
             for code, colour, name in classes]
    r = QgsPalettedRasterRenderer(layer.dataProvider(), 1, items)
    layer.setRenderer(r)
    layer.resampleFilter().setZoomedInResampler(None)
    layer.resampleFilter().setZoomedOutResampler(None)


def scheme_classes(scheme):
    return [(i + 1, c.colour, c.name) for i, c in enumerate(scheme.classes)]


def style_class_vector(layer: QgsVectorLayer, scheme, field_name: str = "class") -> None:
    """Categorized renderer on ``field_name`` with the scheme's colours; classes present in the
    data but not in the scheme get a neutral grey and their own name."""
    geom = layer.geometryType()
    idx = layer.fields().indexOf(field_name)
    present = sorted({str(v) for v in layer.uniqueValues(idx)} - {"", "NULL", "None"}) if idx >= 0 else []
    cats = []
    known = [c.name for c in scheme.classes]
    for c in scheme.classes:
        cats.append(QgsRendererCategory(c.name, _class_symbol(geom, c.colour), class_label(c.name, c.describe())))
    for name in present:
        if name not in known:
            cats.append(QgsRendererCategory(name, _class_symbol(geom, "#9A9A9A"), name))
    layer.setRenderer(QgsCategorizedSymbolRenderer(field_name, cats))


def _class_symbol(geom_type, colour: str):
    if geom_type == QgsWkbTypes.PolygonGeometry:
        return QgsFillSymbol.createSimple({"color": colour, "outline_color": colour, "outline_width": "0.05",
                                           "outline_width_unit": "MM"})
    if geom_type == QgsWkbTypes.LineGeometry:
        sym = QgsLineSymbol.createSimple({"line_color": INK, "line_width": "1.2", "line_width_unit": "MM",
                                          "capstyle": "flat"})
        inner = QgsSimpleLineSymbolLayer(QColor(colour), 0.8)
        inner.setWidthUnit(QgsUnitTypes.RenderMillimeters)
        inner.setPenCapStyle(Qt.FlatCap)
        sym.appendSymbolLayer(inner)
        return sym
    return QgsMarkerSymbol.createSimple({"color": colour, "outline_color": INK, "size": "2.4"})


def style_change_raster(layer: QgsRasterLayer, limit: float | None = None, unit: str = "m/s") -> float:
    """A diverging pseudocolour ramp symmetric about 0 (limit: the 98th percentile of |value|
    rounded up to 1, 2 or 5 x 10^k, unless given). Returns the limit used."""
    if limit is None:
        limit = _symmetric_limit(layer.source())
    shader = QgsColorRampShader(-limit, limit)
    shader.setColorRampType(QgsColorRampShader.Interpolated)
    vals = np.linspace(-limit, limit, len(CHANGE_RAMP))
    labels = [f"{v:+.2g} {unit}".replace("-", "−") if abs(v) > 1e-12 else f"0 {unit} (no change)"
              for v in vals]
    labels[0] += " (slower)"
    labels[-1] += " (faster)"
    shader.setColorRampItemList([QgsColorRampShader.ColorRampItem(float(v), QColor(c), lab)
                                 for v, c, lab in zip(vals, CHANGE_RAMP, labels)])
    shader.setClip(False)
    legend = QgsColorRampLegendNodeSettings()
    legend.setUseContinuousLegend(False)  # one row per ramp stop, with the labels above
    shader.setLegendSettings(legend)
    rs = QgsRasterShader()
    rs.setRasterShaderFunction(shader)
    layer.setRenderer(QgsSingleBandPseudoColorRenderer(layer.dataProvider(), 1, rs))
    return limit


def _symmetric_limit(path: str) -> float:
    ds = gdal.Open(str(path))
    band = ds.GetRasterBand(1)
    step = max(1, int(math.sqrt(ds.RasterXSize * ds.RasterYSize / 4e6)))
    a = band.ReadAsArray(0, 0, ds.RasterXSize, ds.RasterYSize,
                         buf_xsize=max(ds.RasterXSize // step, 1), buf_ysize=max(ds.RasterYSize // step, 1))
    nd = band.GetNoDataValue()
    del band, ds
    a = a.astype(float)
    ok = np.isfinite(a) & ((a != nd) if nd is not None else True)
    if not ok.any():
        return 0.1
    q = float(np.percentile(np.abs(a[ok]), 98))
    if q <= 0:
        return 0.1
    k = math.floor(math.log10(q))
    for s in (1, 2, 5, 10):
        if s * 10 ** k >= q:
            return float(s * 10 ** k)
    return float(10 ** (k + 1))  # pragma: no cover


def apply_qml(layer, name: str) -> None:
    """Load resources/styles/<name> onto ``layer`` (a missing or unreadable style is an error: the
    plugin's own files must be intact)."""
    path = resource_path("styles", name)
    msg, ok = layer.loadNamedStyle(str(path))
    if not ok:
        raise RuntimeError(f"style {path} could not be loaded: {msg}")


# --------------------------------------------------------------------------------------------
# Style definitions (write_resources saves them as QML)
# --------------------------------------------------------------------------------------------

def _posts_style(layer: QgsVectorLayer) -> None:
    sym = QgsMarkerSymbol.createSimple({"name": "circle", "color": "#FFFFFF", "outline_color": POST_COLOUR,
                                        "outline_width": "0.35", "size": "1.8"})
    layer.setRenderer(QgsSingleSymbolRenderer(sym))
    pal = QgsPalLayerSettings()
    pal.fieldName = "label"
    pal.placement = QgsPalLayerSettings.OrderedPositionsAroundPoint
    pal.dist = 0.8
    tf = _text_format(7.5, POST_COLOUR, bold=True)
    buf = QgsTextBufferSettings()
    buf.setEnabled(True)
    buf.setSize(0.9)
    buf.setColor(QColor("#FFFFFF"))
    tf.setBuffer(buf)
    pal.setFormat(tf)
    pal.priority = 9
    pal.displayAll = True
    layer.setLabeling(QgsVectorLayerSimpleLabeling(pal))
    layer.setLabelsEnabled(True)


def _axis_style(layer: QgsVectorLayer) -> None:
    layer.setRenderer(QgsSingleSymbolRenderer(QgsLineSymbol.createSimple({
        "line_color": AXIS_COLOUR, "line_width": "0.3", "line_style": "dash", "customdash": "3;1.5",
        "use_custom_dash": "1"})))


def _banks_polygon_style(layer: QgsVectorLayer) -> None:
    layer.setRenderer(QgsSingleSymbolRenderer(QgsFillSymbol.createSimple({
        "color": "0,0,0,0", "style": "no", "outline_color": BANK_COLOUR, "outline_width": "0.3"})))


def _banks_line_style(layer: QgsVectorLayer) -> None:
    layer.setRenderer(QgsSingleSymbolRenderer(QgsLineSymbol.createSimple({
        "line_color": BANK_COLOUR, "line_width": "0.3"})))


def _vegetation_style(layer: QgsVectorLayer) -> None:
    sym = QgsFillSymbol()
    sym.deleteSymbolLayer(0)
    hatch = QgsLinePatternFillSymbolLayer()
    hatch.setLineAngle(45.0)
    hatch.setDistance(1.6)
    hatch.setLineWidth(0.18)
    hatch.setColor(QColor(VEGETATION_COLOUR))
    sym.appendSymbolLayer(hatch)
    outline = QgsSimpleFillSymbolLayer.create({"color": "0,0,0,0", "style": "no",
                                               "outline_color": VEGETATION_COLOUR, "outline_width": "0.35"})
    sym.appendSymbolLayer(outline)
    sym.setOpacity(0.9)
    layer.setRenderer(QgsSingleSymbolRenderer(sym))


def _vegetation_outline_style(layer: QgsVectorLayer) -> None:
    layer.setRenderer(QgsSingleSymbolRenderer(QgsFillSymbol.createSimple({
        "color": "0,0,0,0", "style": "no", "outline_color": VEGETATION_COLOUR, "outline_width": "0.2"})))


def _pages_style(layer: QgsVectorLayer) -> None:
    layer.setRenderer(QgsSingleSymbolRenderer(QgsFillSymbol.createSimple({
        "color": "0,0,0,0", "style": "no", "outline_color": PAGE_OUTLINE, "outline_width": "0.2"})))


def _locator_axis_style(layer: QgsVectorLayer) -> None:
    layer.setRenderer(QgsSingleSymbolRenderer(QgsLineSymbol.createSimple({
        "line_color": "#3C6E9F", "line_width": "0.6"})))


STYLES = {
    "panel_km_posts.qml": ("Point", _posts_style, [("label", "string")]),
    "panel_axis.qml": ("LineString", _axis_style, []),
    "panel_locator_axis.qml": ("LineString", _locator_axis_style, []),
    "panel_banks_polygon.qml": ("Polygon", _banks_polygon_style, []),
    "panel_banks_line.qml": ("LineString", _banks_line_style, []),
    "panel_pages.qml": ("Polygon", _pages_style, []),
    "veg_stands.qml": ("Polygon", _vegetation_style, []),
    "veg_outline.qml": ("Polygon", _vegetation_outline_style, []),
}


def write_resources(project=None) -> list:
    """(Re)write the shipped QML styles and layout templates from the definitions in this module."""
    from qgis.core import QgsProject

    project = project or QgsProject()
    written = []
    for name, (geom, func, fields) in STYLES.items():
        uri = geom + "?crs=EPSG:3857" + "".join(f"&field={f}:{t}" for f, t in fields)
        lyr = QgsVectorLayer(uri, name, "memory")
        func(lyr)
        path = str(resource_path("styles", name))
        lyr.saveNamedStyle(path)
        written.append(path)
    for paper, fname in TEMPLATES.items():
        path = str(resource_path("templates", fname))
        layout = design_layout(project, paper)
        layout.saveAsTemplate(path, QgsReadWriteContext())
        with open(path, encoding="utf-8") as fh:
            text = fh.read()
        text = text.replace(str(resource_path("templates")), "@CHANNEL_HABITAT_TEMPLATES@")
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(text)
        written.append(path)
    return written


# --------------------------------------------------------------------------------------------
# Building the panel layout
# --------------------------------------------------------------------------------------------

@dataclass
class PanelLayer:
    """A layer on the panels. ``legend``: its legend name (None: not in the legend)."""

    layer: object
    legend: str | None = None
    locator: bool = False


@dataclass
class PanelSpec:
    title: str
    caption: str
    data_note: str
    caution: str
    layers: list  # PanelLayer, drawing order: first drawn on top
    coverage: QgsVectorLayer
    locator_layers: list = field(default_factory=list)
    locator_extent: QgsRectangle | None = None
    name: str = "Channel Habitat panels"
    file_stem: str = "panel"
    scalebar_km: bool = False
    legend_order: list | None = None  # PanelLayers in legend order (default: drawing order)


def pages_layer_fields():
    """(name, QVariant type name) of the PAGES coverage fields."""
    return [("page", "int"), ("label", "string"), ("zone", "string"), ("chainage_from_m", "double"),
            ("chainage_to_m", "double"), ("km_text", "string"), ("rotation_deg", "double"),
            ("scale", "double"), ("flow", "string")]


def build_layout(project, template_path: str, spec: PanelSpec, feedback=None) -> QgsPrintLayout:
    """The atlas layout: template items filled, layers set, atlas driven by ``spec.coverage``."""
    layout = load_template(project, template_path)
    layout.setName(spec.name)
    main = layout.itemById("main_map")
    main.setCrs(spec.coverage.crs())
    main.setLayers([pl.layer for pl in spec.layers])
    main.setKeepLayerSet(True)
    main.setAtlasDriven(True)
    main.setAtlasScalingMode(QgsLayoutItemMap.Auto)
    main.setAtlasMargin(0.0)
    main.dataDefinedProperties().setProperty(QgsLayoutObject.MapRotation, QgsProperty.fromField("rotation_deg"))

    missing = [i for i in IDS if layout.itemById(i) is None]
    if missing and feedback is not None:
        feedback.pushInfo(f"The layout template has no item(s) {', '.join(missing)}; they are left out.")

    loc = layout.itemById("locator_map")
    if isinstance(loc, QgsLayoutItemMap):
        loc.setCrs(spec.coverage.crs())
        loc.setLayers(spec.locator_layers)
        loc.setKeepLayerSet(True)
        loc.setAtlasDriven(False)
        if spec.locator_extent is not None:
            loc.setExtent(fit_extent(spec.locator_extent, loc.rect().width() / loc.rect().height(), 0.06))
        stack = loc.overviews()
        if stack.size() == 0:
            stack.addOverview(QgsLayoutItemMapOverview("overview", loc))
        ov = stack.overview(0)
        ov.setLinkedMap(main)
        ov.setEnabled(True)

    for key, text in (("title", spec.title), ("caption", spec.caption), ("data_note", spec.data_note),
                      ("caution", f"Caution: {spec.caution}")):
        item = layout.itemById(key)
        if isinstance(item, QgsLayoutItemLabel):
            item.setText(text.replace("[%", "[ %"))  # user text is never an expression

    leg = layout.itemById("legend")
    if isinstance(leg, QgsLayoutItemLegend):
        leg.setAutoUpdateModel(False)
        root = QgsLayerTree()
        for pl in spec.legend_order or spec.layers:
            if pl.legend is None:
                continue
            node = root.addLayer(pl.layer)
            node.setName(pl.legend)
            node.setCustomProperty("legend/title-label", pl.legend)
        leg.model().setRootGroup(root)
        layout.channel_habitat_legend_root = root  # the model does not own its root: keep it alive
        model = leg.model()
        for node in root.findLayers():
            # rasters list their band ('Band 1 (Palette)') above the classes: leave it out
            nodes = model.layerLegendNodes(node)
            keep = [i for i, n in enumerate(nodes)
                    if not str(n.data(Qt.DisplayRole) or "").startswith("Band ")]
            if len(keep) < len(nodes):
                QgsMapLayerLegendUtils.setLegendNodeOrder(node, keep)
                model.refreshLayerLegend(node)
        leg.setLinkedMap(main)
        leg.updateLegend()
        if not fit_legend(leg)[2] and feedback is not None:
            feedback.pushWarning("The legend has more entries than its box holds even with small text: some are "
                                 "cut off. Use A3, fewer classes or extra layers, or a template with a larger legend.")

    sb = layout.itemById("scalebar")
    if isinstance(sb, QgsLayoutItemScaleBar):
        sb.setLinkedMap(main)
        # QGIS converts map units to the bar's units itself; the factor stays 1
        sb.setUnits(QgsUnitTypes.DistanceKilometers if spec.scalebar_km else QgsUnitTypes.DistanceMeters)
        sb.setUnitLabel("km" if spec.scalebar_km else "m")
        sb.setMapUnitsPerScaleBarUnit(1.0)
    na = layout.itemById("north_arrow")
    if isinstance(na, QgsLayoutItemPicture):
        na.setLinkedMap(main)

    atlas = layout.atlas()
    atlas.setCoverageLayer(spec.coverage)
    atlas.setEnabled(True)
    atlas.setHideCoverage(False)
    atlas.setSortFeatures(True)
    atlas.setSortExpression('"page"')
    atlas.setPageNameExpression('"label"')
    stem = spec.file_stem.replace("'", "")
    atlas.setFilenameExpression(f"'{stem}_page' || lpad(to_string(\"page\"), 2, '0')")
    return layout


_LEGEND_STYLES = (QgsLegendStyle.Title, QgsLegendStyle.Group, QgsLegendStyle.Subgroup, QgsLegendStyle.SymbolLabel)


def fit_legend(leg) -> tuple:
    """Keep the legend inside its box: when its entries need more room than the template gives,
    use smaller text (down to 65 %), then two columns. Returns (columns, text scale, fits); when no
    option fits, the one that overflows least is kept (and ``fits`` is False: the caller warns)."""
    box = QgsLayoutSize(leg.rect().width(), leg.rect().height(), QgsUnitTypes.LayoutMillimeters)
    fonts = {st: QFont(leg.styleFont(st)) for st in _LEGEND_STYLES}
    sym = (leg.symbolWidth(), leg.symbolHeight())

    def apply(cols, scale):
        for st, f in fonts.items():
            g = QFont(f)
            g.setPointSizeF(f.pointSizeF() * scale)
            leg.setStyleFont(st, g)
        leg.setSymbolWidth(sym[0] * scale)
        leg.setSymbolHeight(sym[1] * scale)
        leg.setColumnCount(cols)
        leg.setSplitLayer(cols > 1)
        leg.setEqualColumnWidth(False)
        leg.adjustBoxSize()
        w, h = leg.rect().width(), leg.rect().height()
        return max(w - box.width(), 0.0) * h + max(h - box.height(), 0.0) * w  # overflow area, mm2

    leg.setResizeToContents(True)
    # QGIS sizes a legend only after it has been painted once (it needs the render DPI): paint its
    # region at a low resolution first
    QgsLayoutExporter(leg.layout()).renderRegionToImage(leg.sceneBoundingRect(), QSize(), 30)
    best = None
    chosen = None
    for cols, scale in ((1, 1.0), (1, 0.9), (1, 0.8), (1, 0.72), (1, 0.65), (2, 0.72), (2, 0.65)):
        over = apply(cols, scale)
        if over <= 0.01:
            chosen = (cols, scale, True)
            break
        if best is None or over < best[0]:
            best = (over, cols, scale)
    if chosen is None:
        apply(best[1], best[2])
        chosen = (best[1], best[2], False)
    leg.setResizeToContents(False)
    leg.attemptResize(box)
    return chosen


def fit_extent(rect: QgsRectangle, aspect: float, margin: float = 0.05) -> QgsRectangle:
    """``rect`` grown by ``margin`` (fraction) on each side and widened to width/height = ``aspect``."""
    w = max(rect.width(), 1e-9) * (1 + 2 * margin)
    h = max(rect.height(), 1e-9) * (1 + 2 * margin)
    if w / h < aspect:
        w = h * aspect
    else:
        h = w / aspect
    c = rect.center()
    return QgsRectangle(c.x() - w / 2, c.y() - h / 2, c.x() + w / 2, c.y() + h / 2)


def export_layout(layout: QgsPrintLayout, pdf_path: str | None, png_dir: str | None, dpi: int,
                  feedback=None) -> tuple:
    """Export every atlas page: one PDF with all pages and/or one PNG per page at ``dpi``.
    Files are written under temporary names and renamed into place. Returns (pdf, [pngs])."""
    atlas = layout.atlas()
    pngs = []
    pdf_out = None
    if pdf_path:
        d = os.path.dirname(os.path.abspath(pdf_path)) or "."
        os.makedirs(d, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=".partial-", suffix=".pdf", dir=d)
        os.close(fd)
        s = QgsLayoutExporter.PdfExportSettings()
        s.dpi = float(max(min(dpi, 600), 72))
        s.rasterizeWholeImage = False
        s.forceVectorOutput = False
        s.textRenderFormat = QgsRenderContext.TextFormatAlwaysText
        s.exportMetadata = True
        s.appendGeoreference = True
        s.simplifyGeometries = True
        try:
            res, err = QgsLayoutExporter.exportToPdf(atlas, tmp, s, feedback)
            if res == QgsLayoutExporter.Canceled or (feedback is not None and feedback.isCanceled()):
                raise Cancelled("cancelled by the user")
            if res != QgsLayoutExporter.Success:
                raise ChannelHabitatError(f"the PDF could not be written ({_result_text(res)}): {err}", "PDF")
            _chmod_default(tmp)
            os.replace(tmp, pdf_path)
            pdf_out = pdf_path
        finally:
            if os.path.exists(tmp):
                os.remove(tmp)
    if png_dir:
        os.makedirs(png_dir, exist_ok=True)
        tmpdir = tempfile.mkdtemp(prefix=".partial-", dir=png_dir)
        try:
            s = QgsLayoutExporter.ImageExportSettings()
            s.dpi = float(dpi)
            s.generateWorldFile = False
            s.exportMetadata = False
            res, err = QgsLayoutExporter.exportToImage(atlas, os.path.join(tmpdir, "page"), "png", s, feedback)
            if res == QgsLayoutExporter.Canceled or (feedback is not None and feedback.isCanceled()):
                raise Cancelled("cancelled by the user")
            if res != QgsLayoutExporter.Success:
                raise ChannelHabitatError(f"the PNG pages could not be written ({_result_text(res)}): {err}",
                                          "PNG_FOLDER")
            for name in sorted(os.listdir(tmpdir)):
                if name.lower().endswith(".png"):
                    dest = os.path.join(png_dir, name)
                    os.replace(os.path.join(tmpdir, name), dest)
                    pngs.append(dest)
        finally:
            shutil.rmtree(tmpdir, ignore_errors=True)
    return pdf_out, pngs


def _chmod_default(path: str) -> None:
    """Give a file made by mkstemp (mode 0600) the mode a plain new file gets (0666 less umask)."""
    mask = os.umask(0)
    os.umask(mask)
    os.chmod(path, 0o666 & ~mask)


def _result_text(res) -> str:
    return {QgsLayoutExporter.Canceled: "cancelled", QgsLayoutExporter.FileError: "file error",
            QgsLayoutExporter.MemoryError: "out of memory", QgsLayoutExporter.PrintError: "print error",
            QgsLayoutExporter.SvgLayerError: "SVG layer error",
            QgsLayoutExporter.IteratorError: "atlas error"}.get(res, str(res))


# --------------------------------------------------------------------------------------------
# Small layer helpers
# --------------------------------------------------------------------------------------------

def memory_layer(geom: str, crs, fields, name: str) -> QgsVectorLayer:
    """A memory layer with ``fields`` [(name, 'int'|'double'|'string')] in ``crs``."""
    uri = f"{geom}?crs={crs.authid()}" if crs.authid() else geom
    lyr = QgsVectorLayer(uri + "".join(f"&field={n}:{t}" for n, t in fields), name, "memory")
    if not crs.authid():
        lyr.setCrs(crs)
    return lyr


def add_features(layer: QgsVectorLayer, rows, geometries) -> None:
    feats = []
    for row, g in zip(rows, geometries):
        f = QgsFeature(layer.fields())
        f.setAttributes(list(row))
        f.setGeometry(g if isinstance(g, QgsGeometry) else QgsGeometry.fromWkt(g.wkt))
        feats.append(f)
    layer.dataProvider().addFeatures(feats)
    layer.updateExtents()


def point_geometry(x: float, y: float) -> QgsGeometry:
    return QgsGeometry.fromPointXY(QgsPointXY(float(x), float(y)))


def panel_copy(layer):
    """A copy of an input layer for styling on the panels (inputs are never restyled). Memory
    layers are copied with their features (a plain clone of one would be empty)."""
    if isinstance(layer, QgsVectorLayer) and layer.providerType() == "memory":
        copy = layer.materialize(QgsFeatureRequest())
        copy.setName(layer.name())
        return copy
    return layer.clone()


# --------------------------------------------------------------------------------------------
# Assembling the panel layers
# --------------------------------------------------------------------------------------------

def template_frame_mm(path: str) -> tuple:
    """(width, height) in mm of the template's main map (the page frame the pages are fitted to)."""
    from qgis.core import QgsProject

    project = QgsProject()  # kept alive while the layout is used
    layout = load_template(project, path)
    item = layout.itemById("main_map")
    size = layout.renderContext().measurementConverter().convert(item.sizeWithUnits(),
                                                                 QgsUnitTypes.LayoutMillimeters)
    return float(size.width()), float(size.height())


def habitat_kind(layer) -> str:
    """'class_raster' (a colour table), 'change_raster' (any other raster), 'class_vector' (a
    ``class`` field) or 'other' (a vector layer kept in its own style)."""
    if isinstance(layer, QgsRasterLayer):
        try:
            ds = gdal.Open(layer.source())
            band = ds.GetRasterBand(1)
            has_ct = band.GetRasterColorTable() is not None
            del band, ds
        except RuntimeError:
            has_ct = False
        return "class_raster" if has_ct else "change_raster"
    if isinstance(layer, QgsVectorLayer) and layer.fields().indexOf("class") >= 0:
        return "class_vector"
    return "other"


def pretty_name(name: str) -> str:
    """'speed_change' -> 'Speed change' (layer names made from file names read as words)."""
    text = name.replace("_", " ").strip()
    return text[:1].upper() + text[1:] if text else name


def scheme_title(scheme) -> str:
    return {"velocity": "Velocity class", "froude": "Mesohabitat (Jowett 1993)"}.get(scheme.name, "Habitat class")


def style_habitat(layer, scheme, feedback=None, from_project: bool = False) -> tuple:
    """Style the panel copy of the main layer; (kind, legend title). Class layers take the scheme's
    colours. Other layers keep their style: the one they have in the project, or for a layer read
    from a file the style stored with it (a .qml beside it, or the GeoPackage's default style, as
    compareregimes writes them); a change raster without any gets a diverging ramp."""
    kind = habitat_kind(layer)
    if kind in ("change_raster", "other") and not from_project:
        _, loaded = layer.loadDefaultStyle()
        if loaded and feedback is not None:
            feedback.pushInfo(f"{layer.name()}: drawn with the style stored with it")
    if kind == "class_raster":
        names = [c.name for c in scheme.classes]
        filled = raster_classes(layer.source(), names)
        unknown = [n for _, _, n in filled if n not in names]
        if unknown and feedback is not None:
            feedback.pushWarning(f"the class raster has classes not in the chosen scheme ({', '.join(unknown)}); "
                                 "they are shown with the raster's own colours and names")
        style_class_raster(layer, filled, scheme)
        return kind, scheme_title(scheme)
    if kind == "change_raster":
        renderer = layer.renderer()
        if renderer is not None and renderer.type() not in ("singlebandgray", "multibandcolor"):
            # a style came with the raster (e.g. compareregimes' .qml beside it): keep its colours
            return kind, pretty_name(layer.name())
        limit = style_change_raster(layer)
        if feedback is not None:
            feedback.pushInfo(f"{layer.name()}: a raster without a class colour table, drawn as a change "
                              f"(diverging colours, ±{limit:g})")
        return kind, f"{pretty_name(layer.name())} (m/s)"
    if kind == "class_vector":
        style_class_vector(layer, scheme)
        return kind, scheme_title(scheme)
    return kind, pretty_name(layer.name())


EDGE_FIELDS = ("stand_id", "class", "length_m")  # vegetationoverlay EDGES


def style_extra(layer, scheme, from_project: bool = False) -> str:
    """Extra layers keep their style (a file's stored style when not from the project), except class
    layers (a ``class`` field) which take the scheme's colours (e.g. vegetationoverlay EDGES).
    Returns the layer's legend name."""
    if isinstance(layer, QgsVectorLayer) and layer.fields().indexOf("class") >= 0:
        style_class_vector(layer, scheme)
        if all(layer.fields().indexOf(f) >= 0 for f in EDGE_FIELDS):
            return "Water beside the vegetation|(class of the nearest water)"  # '|' wraps in the legend
    elif not from_project:
        layer.loadDefaultStyle()
    return layer.name()


def posts_layer(crs, chainage, x, y, labels) -> QgsVectorLayer:
    lyr = memory_layer("Point", crs, [("chainage_m", "double"), ("label", "string")], "km posts")
    add_features(lyr, [(float(c), lab) for c, lab in zip(chainage, labels)],
                 [point_geometry(a, b) for a, b in zip(x, y)])
    return lyr


def keep_in_project(project, layout, spec: PanelSpec, context, pages_dest: str) -> None:
    """Add the layout and the layers it draws to ``project`` (a group, unchecked, so the map canvas is
    unchanged); the PAGES output is moved into the group instead of being loaded a second time."""
    store = context.temporaryLayerStore()
    cov = spec.coverage
    if store.mapLayer(cov.id()) is not None:
        store.takeMapLayer(cov)
    group = project.layerTreeRoot().insertGroup(0, spec.name)
    seen = set()
    for lyr in [pl.layer for pl in spec.layers] + list(spec.locator_layers) + [cov]:
        if lyr.id() in seen:
            continue
        seen.add(lyr.id())
        if project.mapLayer(lyr.id()) is None:
            project.addMapLayer(lyr, False)
        group.addLayer(lyr)
    group.setItemVisibilityCheckedRecursive(False)
    group.setExpanded(False)
    pending = context.layersToLoadOnCompletion()
    if pages_dest in pending:
        del pending[pages_dest]
        context.setLayersToLoadOnCompletion(pending)
    project.layoutManager().addLayout(layout)
