"""Styles of compareregimes outputs.

Palettes live in resources/styles/compare_*.qml (the project's own; colour-blind safe: brown/blue and
ochre/violet diverging ramps with lightness symmetric about a near-white zero, so they also read for
red-green colour blindness and in grey):

* compare_speed_change.qml / compare_depth_change.qml: SPEED_CHANGE / DEPTH_CHANGE. The ramp is
  rescaled to the data: a symmetric limit at the 98th percentile of |change| rounded up to 1, 2, 2.5 or
  5 x 10^k (``comparemaps.symmetric_limit``), so a pool manipulation of 0.5 m and a weir of 4 m both use
  the whole ramp; the legend says the limit.
* compare_wet_dry.qml: WET_DRY_CHANGE (1 wet in both, 2 wet only in base, 3 wet only in alternative).
* compare_segment_change.qml: SEGMENT_CHANGE / ZONE_CHANGE by change in median speed.
* compare_mesh_change.qml: MESH_CHANGE by change in speed per face.

TRANSITIONS are styled in code from the class colours (:func:`transition_renderer`): fill = the class in
the alternative run, outline = the class in the base run; unchanged transitions are drawn pale; water that
dries takes the 'dried' colour of compare_wet_dry.qml, with the former class as outline.
"""

from __future__ import annotations

import os
import shutil

from qgis.core import (
    QgsCategorizedSymbolRenderer,
    QgsColorRampShader,
    QgsFillSymbol,
    QgsRasterLayer,
    QgsRendererCategory,
    QgsSingleBandPseudoColorRenderer,
)
from qgis.PyQt.QtGui import QColor

from ..core.compare import DRY
from ..resources import resource_path

SPEED_QML = "compare_speed_change.qml"
DEPTH_QML = "compare_depth_change.qml"
WET_DRY_QML = "compare_wet_dry.qml"
SEGMENT_QML = "compare_segment_change.qml"
MESH_QML = "compare_mesh_change.qml"
DRIED = "#B0652A"  # as 'wet only in base' in compare_wet_dry.qml
NEWLY_WET_OUTLINE = "#2F7FA8"  # as 'wet only in alternative'
UNCHANGED_ALPHA = 70


def qml_path(name: str) -> str:
    return str(resource_path("styles", name))


def rescale_ramp(layer, limit: float, unit: str) -> bool:
    """Scale a loaded single-band pseudocolour ramp so its ends sit at -limit and +limit."""
    r = layer.renderer()
    if not isinstance(r, QgsSingleBandPseudoColorRenderer):
        return False
    fn = r.shader().rasterShaderFunction()
    items = fn.colorRampItemList()
    old = max(abs(i.value) for i in items) or 1.0
    f = limit / old
    new = []
    for k, it in enumerate(items):
        v = it.value * f
        if v == 0:
            label = f"0 {unit} (no change)"
        else:
            label = f"{v:+.3g} {unit}"
            if k == 0:
                label += " or less"
            elif k == len(items) - 1:
                label += " or more"
        new.append(QgsColorRampShader.ColorRampItem(v, it.color, label))
    fn.setColorRampItemList(new)
    fn.setMinimumValue(-limit)
    fn.setMaximumValue(limit)
    r.setClassificationMin(-limit)
    r.setClassificationMax(limit)
    return True


def change_raster_styler(qml: str, limit: float, unit: str):
    def apply(layer):
        layer.loadNamedStyle(qml_path(qml))
        rescale_ramp(layer, limit, unit)
    return apply


def save_change_raster_style(path: str, qml: str, limit: float | None = None, unit: str = "") -> str | None:
    """A '<name>.qml' beside a written GeoTIFF (QGIS loads it as the default style)."""
    side = os.path.splitext(path)[0] + ".qml"
    if limit is None:
        shutil.copyfile(qml_path(qml), side)
        return side
    layer = QgsRasterLayer(path, "change", "gdal")
    if not layer.isValid():
        return None
    change_raster_styler(qml, limit, unit)(layer)
    layer.saveNamedStyle(side)
    return side if os.path.exists(side) else None


def qml_styler(qml: str):
    def apply(layer):
        layer.loadNamedStyle(qml_path(qml))
    return apply


def _symbol(fill: str, outline: str, width: float, alpha: int = 255):
    c = QColor(fill)
    return QgsFillSymbol.createSimple({
        "color": f"{c.red()},{c.green()},{c.blue()},{alpha}", "style": "solid", "outline_color": outline,
        "outline_width": str(width), "outline_width_unit": "MM"})


def transition_renderer(states, colours, labels):
    """Categorized by 'transition'. ``states``: the state names (0 = dry); ``colours``: colour per class
    state (1..N; states beyond, e.g. 'no class', are grey); ``labels``: the transitions to list, as
    (from state, to state, label)."""
    def colour(i):
        return colours[i - 1] if 1 <= i <= len(colours) else "#9C9C9C"

    cats = []
    for f, t, lab in labels:
        if f == t:
            sym = _symbol(colour(t), colour(t), 0.1, UNCHANGED_ALPHA)
        elif states[t] == DRY:
            sym = _symbol(DRIED, colour(f), 0.35)
        elif states[f] == DRY:
            sym = _symbol(colour(t), NEWLY_WET_OUTLINE, 0.35)
        else:
            sym = _symbol(colour(t), colour(f), 0.35)
        cats.append(QgsRendererCategory(lab, sym, lab))
    return QgsCategorizedSymbolRenderer("transition", cats)


def transition_styler(states, colours, labels):
    def apply(layer):
        layer.setRenderer(transition_renderer(states, colours, labels))
    return apply
