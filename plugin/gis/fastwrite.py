"""Writing many features quickly through a Processing sink (e.g. one polygon per mesh face).

``write_columns`` has the same contract as ``gis/outputs.write_features`` (ordered columns of numpy
arrays or lists, optional shapely geometries; field types from the dtypes; NaN written as NULL) but
converts whole columns at once (``ndarray.tolist``) and geometries in one vectorised ``shapely.to_wkb``
call, instead of one Python conversion per value: about three times faster for tens of thousands of
features. Date columns and masked arrays are handed to ``outputs.write_features``.
"""

from __future__ import annotations

import numpy as np
import shapely
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsFeature,
    QgsFeatureSink,
    QgsGeometry,
    QgsProcessingException,
    QgsWkbTypes,
)
from qgis.PyQt.QtCore import QVariant

from . import outputs

BATCH = 10000


def _as_list(values, qtype) -> list:
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
    return [None if v is None else str(v) for v in (values if isinstance(values, list) else arr.tolist())]


def write_columns(alg, parameters, context, name: str, columns: dict, geometries=None, crs=None,
                  wkb_type=QgsWkbTypes.NoGeometry, progress=None):
    """Create the sink ``name`` and add one feature per row (fast path). Returns the destination id."""
    if any(isinstance(v, np.ma.MaskedArray) or np.asarray(v).dtype.kind == "M" for v in columns.values()):
        return outputs.write_features(alg, parameters, context, name, columns, geometries, crs, wkb_type, progress)
    fields = outputs.fields_from_columns(columns)
    types = [fields.at(i).type() for i in range(fields.count())]
    n = len(next(iter(columns.values()))) if columns else (len(geometries) if geometries is not None else 0)
    sink, dest = alg.parameterAsSink(parameters, name, context, fields, wkb_type,
                                     crs or QgsCoordinateReferenceSystem())
    if sink is None:
        raise QgsProcessingException(alg.invalidSinkError(parameters, name))
    cols = [_as_list(v, t) for v, t in zip(columns.values(), types)]
    rows = list(zip(*cols)) if cols else [()] * n
    wkbs = None
    if geometries is not None:
        geoms = np.asarray(geometries, dtype=object)
        wkbs = shapely.to_wkb(geoms)
    feats = []
    for i in range(n):
        f = QgsFeature(fields)
        f.setAttributes(list(rows[i]))
        if wkbs is not None and wkbs[i] is not None:
            g = QgsGeometry()
            g.fromWkb(wkbs[i])
            f.setGeometry(g)
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
