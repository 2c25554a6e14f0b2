"""Writing results through Processing sinks, and loading them styled.

Algorithms compute everything first (core), then write: ``write_features`` turns ordered columns
(name -> numpy array or list) and optional shapely geometries into features of a sink. Field types
follow the numpy dtypes. ``style_on_load`` applies a QML from resources/styles (or a function) to
the layer when Processing loads it, and ``save_style_with`` stores the style with a written file
so it also loads styled when opened by hand (GeoPackage layer_styles table, or a .qml sidecar).
"""

from __future__ import annotations

import numpy as np
from qgis.core import (
    QgsFeature,
    QgsFeatureSink,
    QgsField,
    QgsFields,
    QgsGeometry,
    QgsLineString,
    QgsProcessingException,
    QgsProcessingLayerPostProcessorInterface,
    QgsWkbTypes,
)
from qgis.PyQt.QtCore import QDate, QDateTime, QVariant

from ..resources import resource_path

_KEEP_ALIVE = []  # post-processors must outlive the algorithm call


def _qvariant_type(values):
    arr = np.asarray(values) if not isinstance(values, np.ndarray) else values
    if arr.dtype.kind == "M":
        return QVariant.Date if arr.dtype == np.dtype("datetime64[D]") else QVariant.DateTime
    if arr.dtype.kind == "b":
        return QVariant.Bool
    if arr.dtype.kind in "iu":
        return QVariant.LongLong
    if arr.dtype.kind == "f":
        return QVariant.Double
    return QVariant.String


def fields_from_columns(columns: dict) -> QgsFields:
    fields = QgsFields()
    for name, values in columns.items():
        fields.append(QgsField(name, _qvariant_type(values)))
    return fields


def _py(value, qtype):
    if value is None or value is np.ma.masked:
        return None
    if qtype in (QVariant.Date, QVariant.DateTime):
        if np.isnat(value):
            return None
        text = str(np.datetime_as_string(value, unit="D" if qtype == QVariant.Date else "s"))
        if qtype == QVariant.Date:
            return QDate.fromString(text, "yyyy-MM-dd")
        return QDateTime.fromString(text, "yyyy-MM-ddTHH:mm:ss")
    if qtype == QVariant.Double:
        v = float(value)
        return None if not np.isfinite(v) else v
    if qtype == QVariant.LongLong:
        return int(value)
    if qtype == QVariant.Bool:
        return bool(value)
    return str(value)


def to_qgs_geometry(geom) -> QgsGeometry:
    """shapely geometry (or QgsGeometry, or None) -> QgsGeometry."""
    if geom is None:
        return QgsGeometry()
    if isinstance(geom, QgsGeometry):
        return geom
    g = QgsGeometry()
    g.fromWkb(geom.wkb)
    return g


def line_m(x, y, m) -> QgsGeometry:
    """A LineStringM from coordinate and measure arrays."""
    return QgsGeometry(QgsLineString([float(v) for v in x], [float(v) for v in y], [],
                                     [float(v) for v in m]))


def _column_list(values, qtype) -> list:
    """A whole column as Python values for QgsFeature.setAttributes (NaN, NaT, masked -> None)."""
    if isinstance(values, np.ma.MaskedArray):
        out = values.tolist()  # masked entries become None
        return [None if v is None else _py(v, qtype) for v in out] if qtype in (
            QVariant.Date, QVariant.DateTime) else [
            None if v is None or (isinstance(v, float) and not np.isfinite(v)) else v for v in out]
    if qtype in (QVariant.Date, QVariant.DateTime):
        return [_py(v, qtype) for v in np.asarray(values)]
    arr = np.asarray(values)
    if qtype == QVariant.Double:
        a = arr.astype(np.float64)
        out = a.tolist()
        for i in np.flatnonzero(~np.isfinite(a)):
            out[i] = None
        return out
    if qtype == QVariant.LongLong:
        return arr.astype(np.int64).tolist()
    if qtype == QVariant.Bool:
        return arr.astype(bool).tolist()
    seq = values if isinstance(values, list) else arr.tolist()
    return [None if v is None else str(v) for v in seq]


def _geometries(geometries):
    """QgsGeometry per row from shapely geometries (vectorised WKB), QgsGeometry objects or None."""
    import shapely

    geoms = list(geometries)
    out = [None] * len(geoms)
    shapely_idx = [i for i, g in enumerate(geoms) if g is not None and not isinstance(g, QgsGeometry)]
    if shapely_idx:
        wkbs = shapely.to_wkb(np.asarray([geoms[i] for i in shapely_idx], dtype=object))
        for i, w in zip(shapely_idx, wkbs):
            g = QgsGeometry()
            g.fromWkb(w)
            out[i] = g
    for i, g in enumerate(geoms):
        if isinstance(g, QgsGeometry):
            out[i] = g
        elif g is None:
            out[i] = QgsGeometry()
    return out


BATCH = 10000


def write_features(alg, parameters, context, name: str, columns: dict, geometries=None,
                   crs=None, wkb_type=QgsWkbTypes.NoGeometry, progress=None):
    """Create the sink ``name`` and add one feature per row. Returns the destination id.

    ``columns``: ordered name -> numpy array (masked arrays write NULL where masked) or list;
    field types follow the dtypes (float -> Double, int -> LongLong, bool -> Bool,
    datetime64[D] -> Date, else String; NaN/NaT -> NULL). ``geometries``: shapely geometries
    (converted in one vectorised WKB call), QgsGeometry objects or None, one per row.
    Whole columns are converted at once: tens of thousands of features per second.
    """
    from qgis.core import QgsCoordinateReferenceSystem

    fields = fields_from_columns(columns)
    types = [fields.at(i).type() for i in range(fields.count())]
    n = len(next(iter(columns.values()))) if columns else (len(geometries) if geometries is not None else 0)
    sink, dest = alg.parameterAsSink(parameters, name, context, fields, wkb_type,
                                     crs or QgsCoordinateReferenceSystem())
    if sink is None:
        raise QgsProcessingException(alg.invalidSinkError(parameters, name))
    cols = [_column_list(v, t) for v, t in zip(columns.values(), types)]
    rows = list(zip(*cols)) if cols else [()] * n
    geoms = _geometries(geometries) if geometries is not None else None
    feats = []
    for i in range(n):
        f = QgsFeature(fields)
        f.setAttributes(list(rows[i]))
        if geoms is not None:
            f.setGeometry(geoms[i])
        feats.append(f)
        if len(feats) >= BATCH:
            sink.addFeatures(feats, QgsFeatureSink.FastInsert)
            feats = []
            if progress is not None:
                progress(i / max(n, 1), f"writing {name}")
    if feats:
        sink.addFeatures(feats, QgsFeatureSink.FastInsert)
    del sink
    return dest


class _QmlStyler(QgsProcessingLayerPostProcessorInterface):
    def __init__(self, qml_path=None, func=None, name=None):
        super().__init__()
        self.qml_path = qml_path
        self.func = func
        self.name = name

    def postProcessLayer(self, layer, context, feedback):  # noqa: N802
        if layer is None or not layer.isValid():
            return
        if self.qml_path:
            layer.loadNamedStyle(str(self.qml_path))
        if self.func is not None:
            self.func(layer)
        if self.name:
            layer.setName(self.name)
        layer.triggerRepaint()


def style_on_load(context, dest_id, qml: str | None = None, func=None, layer_name=None):
    """Apply resources/styles/<qml> (and/or ``func(layer)``) when Processing loads ``dest_id``."""
    if not context.willLoadLayerOnCompletion(dest_id):
        return
    details = context.layerToLoadOnCompletionDetails(dest_id)
    proc = _QmlStyler(resource_path("styles", qml) if qml else None, func, layer_name)
    _KEEP_ALIVE.append(proc)
    details.setPostProcessor(proc)
    if layer_name:
        details.name = layer_name
