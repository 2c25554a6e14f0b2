"""Styles of habitat outputs, built in code from the class scheme (its colours and names).

* ``class_style(scheme, field)``: categorized fill by class name (PATCHES, face classes, TRANSITIONS).
* ``stats_style(scheme)``: SEGMENT_STATS / ZONE_STATS -- a speed-interval scheme colours each polygon
  by its median speed in the class colours (the class the median falls in); any other scheme shades
  Shannon diversity on a neutral ramp. Thin dark outlines; segments labelled with their number.
* ``raster_class_style(layer, scheme)``: paletted renderer with class names for a class GeoTIFF.

Each ``*_styler(scheme)`` returns a function for ``gis/outputs.style_on_load``; ``save_vector_style``
and ``save_raster_style`` store the style with a written file (GeoPackage ``layer_styles`` table as the
default style, or a ``.qml`` beside a raster) so it also opens styled outside Processing.
"""

from __future__ import annotations

import math
import os

from qgis.core import (
    QgsCategorizedSymbolRenderer,
    QgsFillSymbol,
    QgsGraduatedSymbolRenderer,
    QgsPalettedRasterRenderer,
    QgsPalLayerSettings,
    QgsRasterLayer,
    QgsRendererCategory,
    QgsRendererRange,
    QgsTextBufferSettings,
    QgsTextFormat,
    QgsVectorLayer,
    QgsVectorLayerSimpleLabeling,
)
from qgis.PyQt.QtGui import QColor

OUTLINE = "#3a3f45"
NEUTRAL_RAMP = ("#f1f3f5", "#c9d3dc", "#93a6b8", "#5c7893", "#2f4b66")


def _fill(colour: str, outline: str | None = None, width: float = 0.15, alpha: int = 255):
    props = {"color": _rgba(colour, alpha), "style": "solid"}
    if outline:
        props.update({"outline_color": outline, "outline_width": str(width), "outline_width_unit": "MM"})
    else:
        props.update({"outline_style": "no"})
    return QgsFillSymbol.createSimple(props)


def _rgba(colour: str, alpha: int = 255) -> str:
    c = colour.lstrip("#")
    return f"{int(c[0:2], 16)},{int(c[2:4], 16)},{int(c[4:6], 16)},{alpha}"


def class_renderer(scheme, field: str = "class", outline: str | None = None):
    """Categorized renderer: one category per class name, in scheme order."""
    cats = [QgsRendererCategory(c.name, _fill(c.colour, outline), c.name) for c in scheme.classes]
    return QgsCategorizedSymbolRenderer(field, cats)


def class_styler(scheme, field: str = "class", outline: str | None = None):
    def apply(layer):
        layer.setRenderer(class_renderer(scheme, field, outline))
    return apply


def _speed_ranges(scheme):
    edges = scheme._interval_edges() if hasattr(scheme, "_interval_edges") else None
    if edges is None or edges[0] != "speed":
        return None
    _, lows, highs = edges
    out = []
    for lo, hi, c in zip(lows, highs, scheme.classes):
        lo_ = -1e9 if not math.isfinite(lo) else lo
        hi_ = 1e9 if not math.isfinite(hi) else hi
        label = f"{c.name} ({c.describe()})"
        out.append((lo_, hi_, c.colour, label))
    return out


def stats_renderer(scheme):
    """Median speed in class colours (speed-interval schemes) or Shannon diversity (others)."""
    ranges = _speed_ranges(scheme)
    if ranges:
        rr = [QgsRendererRange(lo, hi, _fill(col, OUTLINE, 0.26, 200), f"median speed: {label}")
              for lo, hi, col, label in ranges]
        r = QgsGraduatedSymbolRenderer("v_p50_ms", rr)
    else:
        bounds = [0.0, 0.3, 0.6, 0.9, 1.2, 10.0]
        rr = []
        for i, col in enumerate(NEUTRAL_RAMP):
            lo, hi = bounds[i], bounds[i + 1]
            label = f"Shannon diversity {lo:g}–{hi:g}" if hi < 10 else f"Shannon diversity >= {lo:g}"
            rr.append(QgsRendererRange(lo, hi, _fill(col, OUTLINE, 0.26, 220), label))
        r = QgsGraduatedSymbolRenderer("shannon", rr)
    return r


def _labels(field: str):
    s = QgsPalLayerSettings()
    s.fieldName = field
    s.placement = QgsPalLayerSettings.OverPoint
    fmt = QgsTextFormat()
    fmt.setSize(8)
    fmt.setColor(QColor("#1f2328"))
    buf = QgsTextBufferSettings()
    buf.setEnabled(True)
    buf.setSize(0.8)
    buf.setColor(QColor("#ffffff"))
    fmt.setBuffer(buf)
    s.setFormat(fmt)
    return QgsVectorLayerSimpleLabeling(s)


def stats_styler(scheme, label_field: str | None = None):
    def apply(layer):
        layer.setRenderer(stats_renderer(scheme))
        if label_field and layer.fields().indexOf(label_field) >= 0:
            layer.setLabeling(_labels(label_field))
            layer.setLabelsEnabled(True)
    return apply


def raster_class_style(layer, scheme) -> None:
    """Paletted renderer: value = class code, colour and label from the scheme."""
    classes = [QgsPalettedRasterRenderer.Class(i + 1, QColor(c.colour), c.name) for i, c in enumerate(scheme.classes)]
    layer.setRenderer(QgsPalettedRasterRenderer(layer.dataProvider(), 1, classes))


def raster_styler(scheme):
    def apply(layer):
        raster_class_style(layer, scheme)
    return apply


def save_vector_style(path_or_source: str, func) -> bool:
    """Open the written GeoPackage layer, apply ``func`` and store it as the layer's default style
    (layer_styles table), so the file opens styled anywhere. False when not possible."""
    layer = QgsVectorLayer(path_or_source, "styled", "ogr")
    if not layer.isValid():
        return False
    func(layer)
    if layer.dataProvider().isSaveAndLoadStyleToDatabaseSupported():
        msg = layer.saveStyleToDatabase("default", "Channel Habitat", True, "")
        return not msg
    return False


def save_raster_style(path: str, scheme) -> str | None:
    """Write '<name>.qml' beside a class GeoTIFF (QGIS loads it as the default style)."""
    layer = QgsRasterLayer(path, "classes", "gdal")
    if not layer.isValid():
        return None
    raster_class_style(layer, scheme)
    qml = os.path.splitext(path)[0] + ".qml"
    layer.saveNamedStyle(qml)
    return qml if os.path.exists(qml) else None
