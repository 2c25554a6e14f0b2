"""Vegetation polygons in and out of QGIS for the vegetation overlay (no hydraulics here).

``read_stands`` turns a polygon feature source into core ``Stands`` in the runs' CRS (features
without geometry are left out and counted); ``to_source_crs`` brings result geometries (edge lines)
back to the vegetation layer's CRS; ``wet_pct_style`` styles VEGETATION_STATS on load.
"""

from __future__ import annotations

import shapely
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsCoordinateTransform,
    QgsGeometry,
    QgsGraduatedSymbolRenderer,
    QgsRendererRange,
    QgsSymbol,
    QgsWkbTypes,
)
from qgis.PyQt.QtGui import QColor

from ..core.errors import ChannelHabitatError
from ..core.vegetation import make_stands

# wetted share of a stand: pale (dry) to a deep blue-grey (fully wetted); the project's own ramp
WET_RAMP = (("dry (0 %)", 0.0, 0.0, "#EFEDE4"), ("up to 25 %", 0.0, 25.0, "#C9D3D6"),
            ("25 – 50 %", 25.0, 50.0, "#93A9B5"), ("50 – 75 %", 50.0, 75.0, "#5F7F93"),
            ("75 – 100 %", 75.0, 100.0, "#34506B"))


class StandSource:
    """The stands as read: core Stands (in the run CRS), their original geometries and CRS."""

    def __init__(self, stands, geometries, crs, skipped: int):
        self.stands = stands
        self.geometries = geometries  # QgsGeometry in the layer's CRS, aligned with stands
        self.crs = crs
        self.skipped = skipped


def read_stands(source, community_field: str | None, id_field: str | None, target_wkt: str, context,
                parameter: str = "VEGETATION") -> StandSource:
    if source is None:
        raise ChannelHabitatError("give the vegetation polygon layer", parameter)
    src_crs = source.sourceCrs()
    target = QgsCoordinateReferenceSystem.fromWkt(target_wkt) if target_wkt else QgsCoordinateReferenceSystem()
    xform = None
    if src_crs.isValid() and target.isValid() and src_crs != target:
        xform = QgsCoordinateTransform(src_crs, target, context.transformContext())
    fields = source.fields()
    for name, par in ((community_field, "COMMUNITY_FIELD"), (id_field, "ID_FIELD")):
        if name and fields.indexOf(name) < 0:
            raise ChannelHabitatError(f"the vegetation layer has no field '{name}'", par)
    geoms, originals, ids, comms = [], [], [], []
    skipped = 0
    for n, feat in enumerate(source.getFeatures()):
        g = feat.geometry()
        if g.isNull() or g.isEmpty():
            skipped += 1
            continue
        if QgsWkbTypes.geometryType(g.wkbType()) != QgsWkbTypes.PolygonGeometry:
            raise ChannelHabitatError(f"feature {feat.id()} of the vegetation layer is not a polygon", parameter)
        originals.append(QgsGeometry(g))
        if xform is not None:
            g = QgsGeometry(g)
            g.transform(xform)
        geoms.append(shapely.from_wkb(bytes(g.asWkb())))
        if id_field:
            v = feat[id_field]
            try:
                ids.append(int(v))
            except (TypeError, ValueError):
                raise ChannelHabitatError(f"feature {feat.id()}: stand id '{v}' is not a whole number",
                                          "ID_FIELD") from None
        else:
            ids.append(int(feat.id()) if feat.id() >= 0 else n + 1)
        comms.append("" if not community_field or feat[community_field] is None else str(feat[community_field]))
    stands = make_stands([shapely.force_2d(g) for g in geoms], ids, comms, parameter)
    return StandSource(stands, originals, src_crs, skipped)


def to_source_crs(geoms, run_wkt: str, src_crs, context) -> list:
    """shapely geometries in the run CRS -> QgsGeometry in the vegetation layer's CRS."""
    out = []
    target = QgsCoordinateReferenceSystem.fromWkt(run_wkt) if run_wkt else QgsCoordinateReferenceSystem()
    xform = None
    if src_crs.isValid() and target.isValid() and src_crs != target:
        xform = QgsCoordinateTransform(target, src_crs, context.transformContext())
    for g in geoms:
        q = QgsGeometry()
        q.fromWkb(shapely.to_wkb(g))
        if xform is not None:
            q.transform(xform)
        out.append(q)
    return out


def wet_pct_style(layer) -> None:
    """Graduated fill on ``wet_pct`` with the ramp above (thin dark outline)."""
    ranges = []
    for label, lo, hi, colour in WET_RAMP:
        sym = QgsSymbol.defaultSymbol(layer.geometryType())
        sym.setColor(QColor(colour))
        sym.symbolLayer(0).setStrokeColor(QColor("#3A3A3A"))
        sym.symbolLayer(0).setStrokeWidth(0.2)
        ranges.append(QgsRendererRange(lo, hi, sym, label))
    layer.setRenderer(QgsGraduatedSymbolRenderer("wet_pct", ranges))


def as_multi(geom: QgsGeometry) -> QgsGeometry:
    """A multi-part copy (the outputs are MultiPolygon / MultiLineString layers)."""
    g = QgsGeometry(geom)
    g.convertToMultiType()
    return g
