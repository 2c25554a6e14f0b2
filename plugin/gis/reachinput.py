"""Processing parameters for the reach (axis, segments, zones) and reading them into a Reach.

CENTRELINE      a line layer: buildreach's AXIS output, or any centreline
SEGMENT_LENGTH  m, default 1000 (used when the axis is built on the fly)
ZONE_BREAKS     '0 upper, 12000 middle, 25000 lower'; empty = equal thirds
"""

from __future__ import annotations

import numpy as np
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessing,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
)

from ..core.errors import ChannelHabitatError
from ..core.reach import DEFAULT_SEGMENT_LENGTH_M, Reach, ReachAxis, parse_zone_breaks, segment_edges

CENTRELINE = "CENTRELINE"
SEGMENT_LENGTH = "SEGMENT_LENGTH"
ZONE_BREAKS = "ZONE_BREAKS"


def add_reach_parameters(alg, optional: bool = False) -> None:
    alg.addParameter(QgsProcessingParameterFeatureSource(
        CENTRELINE, "Reach axis or centreline (buildreach AXIS, or any line)",
        [QgsProcessing.SourceType.TypeVectorLine], optional=optional))
    alg.addParameter(QgsProcessingParameterNumber(
        SEGMENT_LENGTH, "Segment length (m)", QgsProcessingParameterNumber.Type.Double,
        DEFAULT_SEGMENT_LENGTH_M, minValue=1.0))
    alg.addParameter(QgsProcessingParameterString(
        ZONE_BREAKS, "Reach zones: 'chainage name, ...' (empty: equal thirds upper/middle/lower)",
        optional=True))


def _line_vertices(source):
    xs, ys, ms = [], [], []
    for feat in source.getFeatures():
        geom = feat.geometry()
        if geom.isNull() or geom.isEmpty():
            continue
        for part in geom.constParts():
            pts = list(part.vertices())
            xs.append(np.array([p.x() for p in pts]))
            ys.append(np.array([p.y() for p in pts]))
            ms.append(np.array([p.m() for p in pts]) if part.isMeasure() else None)
    return xs, ys, ms


def read_reach_parameters(alg, parameters, context, feedback, target_crs_wkt: str | None = None) -> Reach:
    """A Reach from the centreline parameters (axis in the layer's CRS)."""
    source = alg.parameterAsSource(parameters, CENTRELINE, context)
    if source is None:
        raise ChannelHabitatError("give the reach axis (buildreach AXIS) or a centreline", CENTRELINE)
    xs, ys, ms = _line_vertices(source)
    if not xs:
        raise ChannelHabitatError("the centreline layer has no line geometry", CENTRELINE)
    if len(xs) > 1:
        raise ChannelHabitatError("the centreline has several parts; join them into one line "
                                  "(or run buildreach, which joins touching parts)", CENTRELINE)
    crs = source.sourceCrs() if source.sourceCrs().isValid() else QgsCoordinateReferenceSystem()
    wkt = crs.toWkt(QgsCoordinateReferenceSystem.WKT_PREFERRED_GDAL) if crs.isValid() else ""
    x, y, m = xs[0], ys[0], ms[0]
    if m is not None and np.all(np.isfinite(m)) and np.all(np.diff(m) > 0):
        axis = ReachAxis(x, y, wkt, chainage=m, method="from M values")
    else:
        axis = ReachAxis(x, y, wkt)
    seg_len = alg.parameterAsDouble(parameters, SEGMENT_LENGTH, context)
    zones = alg.parameterAsString(parameters, ZONE_BREAKS, context)
    zedges, znames = parse_zone_breaks(zones, axis.start_m, axis.end_m)
    return Reach(axis, segment_edges(axis.start_m, axis.end_m, seg_len), zedges, znames)
