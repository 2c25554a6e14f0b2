"""Styles of suitability outputs: a 0-1 ramp for the SUITABILITY raster and the face layer.

The ramp is cividis-like (dark blue at 0 to yellow at 1: ordered in lightness, so it reads in grey and
for the common colour-vision deficiencies), in five steps of 0.2 so the legend is readable.
"""

from __future__ import annotations

import os

from qgis.core import (
    QgsColorRampShader,
    QgsFillSymbol,
    QgsGraduatedSymbolRenderer,
    QgsRasterLayer,
    QgsRasterShader,
    QgsRendererRange,
    QgsSingleBandPseudoColorRenderer,
)
from qgis.PyQt.QtGui import QColor

RAMP = ((0.0, "#00224E"), (0.2, "#35456C"), (0.4, "#666970"), (0.6, "#948E77"), (0.8, "#C8B866"),
        (1.0, "#FEE838"))


def raster_style(layer) -> None:
    """Continuous 0-1 pseudocolour on band 1 (interpolated between the ramp stops)."""
    shader_fn = QgsColorRampShader(0.0, 1.0)
    shader_fn.setColorRampType(QgsColorRampShader.Interpolated)
    shader_fn.setColorRampItemList([QgsColorRampShader.ColorRampItem(v, QColor(c), f"{v:g}") for v, c in RAMP])
    shader = QgsRasterShader()
    shader.setRasterShaderFunction(shader_fn)
    renderer = QgsSingleBandPseudoColorRenderer(layer.dataProvider(), 1, shader)
    renderer.setClassificationMin(0.0)
    renderer.setClassificationMax(1.0)
    layer.setRenderer(renderer)


def save_raster_style(path: str) -> str | None:
    """A .qml beside the GeoTIFF so it opens styled outside Processing."""
    layer = QgsRasterLayer(path, "suitability")
    if not layer.isValid():
        return None
    raster_style(layer)
    qml = os.path.splitext(path)[0] + ".qml"
    layer.saveNamedStyle(qml)
    return qml


def face_style(layer, field: str = "suitability") -> None:
    """Graduated fill of mesh faces by composite suitability in five classes of 0.2."""
    ranges = []
    for (lo, colour), (hi, _) in zip(RAMP[:-1], RAMP[1:]):
        sym = QgsFillSymbol.createSimple({"color": QColor(colour).name(), "outline_style": "no"})
        mid = RAMP[[v for v, _ in RAMP].index(lo) + 1][1]
        sym.setColor(QColor(_mix(colour, mid)))
        ranges.append(QgsRendererRange(lo, hi, sym, f"{lo:.1f} – {hi:.1f}"))
    layer.setRenderer(QgsGraduatedSymbolRenderer(field, ranges))


def _mix(a: str, b: str) -> str:
    ca, cb = QColor(a), QColor(b)
    return QColor((ca.red() + cb.red()) // 2, (ca.green() + cb.green()) // 2, (ca.blue() + cb.blue()) // 2).name()
