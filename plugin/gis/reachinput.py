"""Processing parameters for the reach (axis, segments, zones) and reading them into a Reach.

CENTRELINE            a line layer: buildreach's AXIS output (chainage, origin and method taken
                      from it: its M values are the chainage), or any centreline (axis built on
                      the fly: parts joined within 1 m, chainage from the upstream end)
SEGMENT_LENGTH        m, default 1000 (used when no SEGMENTS layer is given)
ZONE_BREAKS           '0 upper, 12000 middle, 25000 lower'; empty = equal thirds (used when no
                      ZONES layer is given)
CENTRELINE_DIRECTION  advanced: for a plain centreline, whether its first vertex is the upstream
                      end ('as digitised') or the downstream end ('reversed')
SEGMENTS, ZONES       advanced, optional: buildreach's SEGMENTS / ZONES polygons; their chainage
                      boundaries, zone names and polygons are used as they are

The reach must be in the run's CRS: ``read_reach_parameters(..., target_crs_wkt=run CRS)``
transforms the axis (and polygons) when the layers differ and says so in the log; vertex
chainages are kept, so the chainage is the one measured when the axis was built.
"""

from __future__ import annotations

import numpy as np
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsFeatureRequest,
    QgsLineString,
    QgsProcessing,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
    QgsWkbTypes,
)

from ..core.errors import ChannelHabitatError
from ..core.reach import (
    DEFAULT_SEGMENT_LENGTH_M,
    ORIGINS,
    Reach,
    ReachAxis,
    build_axis,
    crs_name,
    parse_zone_breaks,
    same_crs,
    segment_edges,
)

CENTRELINE = "CENTRELINE"
SEGMENT_LENGTH = "SEGMENT_LENGTH"
ZONE_BREAKS = "ZONE_BREAKS"
CENTRELINE_DIRECTION = "CENTRELINE_DIRECTION"
SEGMENTS = "SEGMENTS"
ZONES = "ZONES"

DIRECTIONS = ["as digitised", "reversed"]
DIRECTION_LABELS = ["As digitised: the first vertex is the upstream end",
                    "Reversed: the first vertex is the downstream end"]
JOIN_TOLERANCE_M = 1.0


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
    adv = [
        QgsProcessingParameterEnum(
            CENTRELINE_DIRECTION, "Plain centreline: which end is upstream (a buildreach AXIS knows)",
            DIRECTION_LABELS, defaultValue=0),
        QgsProcessingParameterFeatureSource(
            SEGMENTS, "Segments from buildreach (instead of SEGMENT_LENGTH)",
            [QgsProcessing.SourceType.TypeVectorPolygon], optional=True),
        QgsProcessingParameterFeatureSource(
            ZONES, "Zones from buildreach (instead of ZONE_BREAKS)",
            [QgsProcessing.SourceType.TypeVectorPolygon], optional=True),
    ]
    for p in adv:
        p.setFlags(p.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
        alg.addParameter(p)


def crs_wkt_of(crs) -> str:
    return crs.toWkt(QgsCoordinateReferenceSystem.WKT_PREFERRED_GDAL) if crs is not None and crs.isValid() else ""


def _line_arrays(line):
    """(x, y, m or None) of a QgsLineString from its WKB in one numpy view (a per-vertex loop
    through PyQGIS costs ~20 us a vertex)."""
    wkb = bytes(line.asWkb())
    order = "<" if wkb[0] == 1 else ">"
    n = int(np.frombuffer(wkb, dtype=f"{order}u4", count=1, offset=5)[0])
    has_z = QgsWkbTypes.hasZ(line.wkbType())
    has_m = QgsWkbTypes.hasM(line.wkbType())
    width = 2 + int(has_z) + int(has_m)
    xyzm = np.frombuffer(wkb, dtype=f"{order}f8", count=n * width, offset=9).reshape(n, width)
    xyzm = xyzm.astype(np.float64)  # native byte order, a copy the caller owns
    return xyzm[:, 0].copy(), xyzm[:, 1].copy(), (xyzm[:, width - 1].copy() if has_m else None)


def read_line_source(source, param: str = CENTRELINE):
    """Parts, M values and the first feature's attributes of a line source.

    Returns (parts [(x, y)], ms [array or None per part], attributes dict, CRS WKT)."""
    parts, ms = [], []
    attrs = {}
    names = source.fields().names()
    for feat in source.getFeatures():
        geom = feat.geometry()
        if geom is None or geom.isNull() or geom.isEmpty():
            continue
        if not attrs:
            attrs = {n: feat[n] for n in names}
        for part in geom.constParts():
            line = part if isinstance(part, QgsLineString) else part.curveToLine()  # curves segmentised
            if line.numPoints() < 2:
                continue
            x, y, m = _line_arrays(line)
            parts.append((x, y))
            ms.append(m)
    if not parts:
        raise ChannelHabitatError("the centreline layer has no line with at least two vertices: "
                                  "give a layer with the reach's centreline", param)
    return parts, ms, attrs, crs_wkt_of(source.sourceCrs())


def is_axis_output(parts, ms, attrs) -> bool:
    """A buildreach AXIS: one part whose M values increase strictly, with an 'origin' field."""
    return (len(parts) == 1 and ms[0] is not None and np.all(np.isfinite(ms[0]))
            and np.all(np.diff(ms[0]) > 0) and str(attrs.get("origin", "")) in ORIGINS)


def axis_from_source(source, direction: str = "as digitised", feedback=None, param: str = CENTRELINE,
                     join_tolerance_m: float = JOIN_TOLERANCE_M) -> ReachAxis:
    """The ReachAxis of a line source: a buildreach AXIS as it is (M = chainage), or a plain
    centreline joined and oriented."""
    parts, ms, attrs, wkt = read_line_source(source, param)
    if is_axis_output(parts, ms, attrs):
        method = str(attrs.get("method") or "from M values").split(":")[0]
        direction_text = str(attrs.get("direction") or "as digitised")
        axis = ReachAxis(parts[0][0], parts[0][1], wkt, chainage=ms[0], method=method,
                         origin=str(attrs["origin"]), direction=direction_text)
        if feedback is not None:
            feedback.pushInfo(f"Reach axis from buildreach: chainage {axis.start_m:.1f}-{axis.end_m:.1f} m from its "
                              f"M values ({axis.origin} origin, {axis.method}).")
        return axis
    try:
        axis, notes = build_axis(parts, wkt, join_tolerance_m, direction)
    except ChannelHabitatError as err:
        raise ChannelHabitatError(str(err), param if err.parameter == "CENTRELINE" else err.parameter) from None
    if feedback is not None:
        for n in notes:
            feedback.pushInfo(n)
        feedback.pushInfo(f"Reach axis built from the centreline ({direction}): {axis.length_m:.1f} m, "
                          f"{axis.method} chainage from the upstream end.")
        if axis.is_geographic:
            feedback.pushWarning("The centreline is in a geographic CRS: chainage is geodesic. A projected CRS "
                                 "in metres is preferred.")
    return axis


def _polygons_with_chainage(alg, parameters, name, context, crs_wkt):
    """Features of a buildreach SEGMENTS / ZONES layer: chainage_from_m, chainage_to_m, the
    shapely polygon (in ``crs_wkt``) and all attributes; sorted by chainage."""
    import shapely

    source = alg.parameterAsSource(parameters, name, context)
    if source is None:
        return None
    fields = source.fields().names()
    for f in ("chainage_from_m", "chainage_to_m"):
        if f not in fields:
            raise ChannelHabitatError(f"the layer has no '{f}' field: give buildreach's {name} output", name)
    req = QgsFeatureRequest()
    if crs_wkt:
        req.setDestinationCrs(QgsCoordinateReferenceSystem.fromWkt(crs_wkt), context.transformContext())
    rows = []
    for feat in source.getFeatures(req):
        geom = feat.geometry()
        poly = shapely.from_wkb(bytes(geom.asWkb())) if geom is not None and not geom.isNull() else None
        rows.append((float(feat["chainage_from_m"]), float(feat["chainage_to_m"]), poly,
                     {n: feat[n] for n in fields}))
    if not rows:
        raise ChannelHabitatError("the layer has no features", name)
    rows.sort(key=lambda r: r[0])
    a = np.array([r[0] for r in rows])
    b = np.array([r[1] for r in rows])
    if np.any(b <= a) or np.any(np.abs(a[1:] - b[:-1]) > 1e-6 * max(1.0, float(np.abs(b).max()))):
        raise ChannelHabitatError("its chainage intervals must follow each other without gaps or overlaps "
                                  "(chainage_from_m of each = chainage_to_m of the previous)", name)
    return rows


def read_reach_parameters(alg, parameters, context, feedback, target_crs_wkt: str | None = None) -> Reach:
    """A Reach from the reach parameters, in ``target_crs_wkt`` when given (the run's CRS)."""
    source = alg.parameterAsSource(parameters, CENTRELINE, context)
    if source is None:
        raise ChannelHabitatError("give the reach axis (buildreach AXIS) or a centreline", CENTRELINE)
    direction = "as digitised"
    if alg.parameterDefinition(CENTRELINE_DIRECTION) is not None:
        direction = DIRECTIONS[alg.parameterAsEnum(parameters, CENTRELINE_DIRECTION, context)]
    axis = axis_from_source(source, direction, feedback)
    if target_crs_wkt and axis.crs_wkt and not same_crs(axis.crs_wkt, target_crs_wkt):
        feedback.pushInfo(f"The reach axis was transformed from {crs_name(axis.crs_wkt)} to the run's "
                          f"{crs_name(target_crs_wkt)}; its vertex chainages are kept.")
        axis = axis.reprojected(target_crs_wkt)
    elif target_crs_wkt and not axis.crs_wkt:
        feedback.pushWarning("The centreline layer has no CRS: it is taken to be in the run's CRS.")
        axis = ReachAxis(axis.x, axis.y, target_crs_wkt, axis.datum_m, axis.method, axis.chainage, axis.origin,
                         axis.direction)
    crs = axis.crs_wkt
    seg_rows = _polygons_with_chainage(alg, parameters, SEGMENTS, context, crs) \
        if alg.parameterDefinition(SEGMENTS) is not None else None
    zone_rows = _polygons_with_chainage(alg, parameters, ZONES, context, crs) \
        if alg.parameterDefinition(ZONES) is not None else None
    seg_polys = zone_polys = None
    if seg_rows is not None:
        edges = np.array([r[0] for r in seg_rows] + [seg_rows[-1][1]])
        if edges[0] < axis.start_m - 0.5 or edges[-1] > axis.end_m + 0.5:
            raise ChannelHabitatError(f"the segments span chainage {edges[0]:.1f}-{edges[-1]:.1f} m but the axis "
                                      f"{axis.start_m:.1f}-{axis.end_m:.1f} m: give the SEGMENTS made with this "
                                      "axis", SEGMENTS)
        edges[0], edges[-1] = min(edges[0], axis.start_m), max(edges[-1], axis.end_m)
        seg_polys = [r[2] for r in seg_rows]
        feedback.pushInfo(f"{len(seg_rows)} segments read from the SEGMENTS layer.")
    else:
        seg_len = alg.parameterAsDouble(parameters, SEGMENT_LENGTH, context)
        edges = segment_edges(axis.start_m, axis.end_m, seg_len)
    if zone_rows is not None:
        zedges = np.array([r[0] for r in zone_rows] + [zone_rows[-1][1]])
        names = [str(r[3].get("zone") if r[3].get("zone") is not None else f"zone {i + 1}")
                 for i, r in enumerate(zone_rows)]
        if zedges[0] < axis.start_m - 0.5 or zedges[-1] > axis.end_m + 0.5:
            raise ChannelHabitatError("the zones do not fit the axis's chainage: give the ZONES made with this axis",
                                      ZONES)
        zedges[0], zedges[-1] = min(zedges[0], axis.start_m), max(zedges[-1], axis.end_m)
        zone_polys = [r[2] for r in zone_rows]
    else:
        zones = alg.parameterAsString(parameters, ZONE_BREAKS, context)
        zedges, names = parse_zone_breaks(zones, axis.start_m, axis.end_m, axis.origin)
    return Reach(axis, edges, zedges, names, seg_polys, zone_polys)

