"""buildreach: centreline (+ optional channel extent) -> oriented reach axis, km posts, segments, zones."""

from __future__ import annotations

from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessing,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
    QgsWkbTypes,
)

from ..core.errors import ChannelHabitatError
from ..core.reachbuild import build_outputs, velocity_for_direction
from ..gis import extent as extent_io
from ..gis import outputs, reachinput, runinput
from .base import ChannelHabitatAlgorithm

DIRECTION_OPTIONS = ["as digitised", "reversed", "infer"]
DIRECTION_LABELS = ["As digitised: the first vertex is the upstream end",
                    "Reversed: the first vertex is the downstream end",
                    "Infer from the run's velocity (flow runs from upstream to downstream)"]
ORIGIN_OPTIONS = ["upstream", "downstream"]
ORIGIN_LABELS = ["Upstream end (chainage increases downstream)",
                 "Downstream end (chainage increases upstream)"]


class BuildReach(ChannelHabitatAlgorithm):
    ALG_ID = "buildreach"
    DISPLAY_NAME = "Build reach axis, km posts, segments and zones"
    GROUP_ID = "reach"
    HELP = """
<p>Turns a drawn river centreline into the oriented <b>reach axis</b> every summary along the river stands on:
chainage (distance along the river), km posts, <b>segments</b> of equal length bounded by cross-sections, and
reach <b>zones</b>. Other algorithms take the AXIS as their centreline and reuse its chainage exactly, and can
take SEGMENTS and ZONES as they are.</p>
<h3>Parameters</h3>
<ul>
<li><b>CENTRELINE</b>: the river centreline, any CRS. A multi-part line is joined when its parts' ends touch
within <b>JOIN_TOLERANCE</b> (m, default 1; a gap is bridged by a straight segment); otherwise the error gives
the gap and where it is. A line that crosses or touches itself is refused.</li>
<li><b>DIRECTION</b>: as digitised (first vertex upstream), reversed (first vertex downstream), or inferred
from the velocity vectors of a run (RUN_ parameters below): the flow goes from upstream to downstream.</li>
<li><b>ORIGIN</b>: chainage zero at the upstream end (default; chainage increases downstream) or at the
downstream end (chainage increases upstream). <b>DATUM</b> (m, default 0): the chainage of the origin.</li>
<li><b>SEGMENT_LENGTH</b> (m, default 1000): segments and km posts every this far from the origin; the last
segment is shorter and flagged <code>partial</code>.</li>
<li><b>ZONE_BREAKS</b>: named zones as <code>chainage name</code> pairs giving where each zone starts, e.g.
<code>0 upper, 12000 middle, 25000 lower</code>; empty: equal thirds named upper, middle, lower in the
direction of flow.</li>
<li>Channel extent for the segment and zone polygons, the first given of: <b>EXTENT</b> (a polygon layer,
e.g. the bank-top outline), the wet area of a run (<b>RUN_DEPTH</b> with <b>RUN_SPEED</b> or
<b>RUN_VELOCITY_U</b>/<b>RUN_VELOCITY_V</b> rasters, or <b>RUN_MESH</b>, cells deeper than <b>WET_DEPTH</b>),
or a buffer of <b>BUFFER_HALF_WIDTH</b> (m, default 100) either side of the centreline.</li>
</ul>
<h3>Outputs</h3>
<ul>
<li><b>AXIS</b>: one line with M values = chainage (m) at every vertex, in the centreline's CRS; fields
<code>length_m</code>, <code>start_m</code>, <code>end_m</code>, <code>datum_m</code>, <code>origin</code>
(upstream/downstream), <code>direction</code> (as digitised / reversed / inferred from velocity ...),
<code>method</code> (how chainage is measured), <code>segment_length_m</code>, <code>zone_breaks</code>,
<code>necks</code>, <code>tight_bends</code> (counts) and <code>notes</code>.</li>
<li><b>POSTS</b>: points at the origin and every SEGMENT_LENGTH, and at the reach end: <code>chainage_m</code>,
<code>label</code> ('km 12'), <code>bearing_deg</code> (direction of increasing chainage, clockwise from grid
north).</li>
<li><b>SEGMENTS</b>: polygons of the channel extent per segment: <code>segment</code> (1-based from the
origin), <code>chainage_from_m</code>, <code>chainage_to_m</code>, <code>length_m</code>, <code>partial</code>
(the last, shorter segment), <code>zone</code> (the zone holding the segment's middle), <code>area_m2</code>.
</li>
<li><b>ZONES</b>: polygons per zone: <code>zone</code>, <code>zone_number</code>, <code>chainage_from_m</code>,
<code>chainage_to_m</code>, <code>length_m</code>, <code>area_m2</code>.</li>
</ul>
<h3>Method</h3>
<p>Chainage is planar length in a projected CRS, and the geodesic length between vertices on the CRS's
ellipsoid in a geographic CRS (pyproj; Karney 2013, J. Geodesy 87:43-55), with a warning that a projected CRS
in metres is preferred; the method is written into the outputs. A point's chainage is that of its nearest
point on the centreline (exact). Segment and zone polygons hold exactly the part of the extent whose chainage
falls in them: they are cut by cross-sections perpendicular to the axis at each boundary, clipped to the
channel bank to bank, and where two loops of the river are closer than the channel is wide (a neck) or a bend
is tighter than the channel's half-width, the cut stops where the other part of the river becomes nearer
instead of cutting across it. They cover the extent without gaps or overlaps. The log lists necks and tight
bends, where points far from the centreline can have an ambiguous chainage.</p>
"""

    def define(self, config):
        self.addParameter(QgsProcessingParameterFeatureSource(
            "CENTRELINE", "River centreline", [QgsProcessing.SourceType.TypeVectorLine]))
        self.addParameter(QgsProcessingParameterEnum("DIRECTION", "Flow direction", DIRECTION_LABELS,
                                                     defaultValue=0))
        self.addParameter(QgsProcessingParameterEnum("ORIGIN", "Chainage origin", ORIGIN_LABELS, defaultValue=0))
        self.addParameter(QgsProcessingParameterNumber(
            "DATUM", "Chainage at the origin (datum, m)", QgsProcessingParameterNumber.Type.Double, 0.0))
        self.addParameter(QgsProcessingParameterNumber(
            "SEGMENT_LENGTH", "Segment length and km post spacing (m)", QgsProcessingParameterNumber.Type.Double,
            1000.0, minValue=1.0))
        self.addParameter(QgsProcessingParameterString(
            "ZONE_BREAKS", "Reach zones: 'chainage name, ...' (empty: equal thirds upper/middle/lower)",
            optional=True))
        self.addParameter(QgsProcessingParameterFeatureSource(
            "EXTENT", "Channel extent polygons (optional; else a run's wet area, else a buffer)",
            [QgsProcessing.SourceType.TypeVectorPolygon], optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            "BUFFER_HALF_WIDTH", "Buffer half-width when no extent or run is given (m)",
            QgsProcessingParameterNumber.Type.Double, 100.0, minValue=0.1))
        join = QgsProcessingParameterNumber("JOIN_TOLERANCE", "Join parts whose ends are this close (m)",
                                            QgsProcessingParameterNumber.Type.Double, 1.0, minValue=0.0)
        join.setFlags(join.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
        self.addParameter(join)
        runinput.add_run_parameters(self, prefix="RUN_", label="Run (optional: direction, wet-area extent)")
        self.addParameter(QgsProcessingParameterFeatureSink("AXIS", "Reach axis (M = chainage)",
                                                            QgsProcessing.SourceType.TypeVectorLine))
        self.addParameter(QgsProcessingParameterFeatureSink("POSTS", "Km posts",
                                                            QgsProcessing.SourceType.TypeVectorPoint))
        self.addParameter(QgsProcessingParameterFeatureSink("SEGMENTS", "Segments",
                                                            QgsProcessing.SourceType.TypeVectorPolygon))
        self.addParameter(QgsProcessingParameterFeatureSink("ZONES", "Zones",
                                                            QgsProcessing.SourceType.TypeVectorPolygon))

    def compute(self, parameters, context, feedback):
        source = self.parameterAsSource(parameters, "CENTRELINE", context)
        if source is None:
            raise ChannelHabitatError("give the river centreline (a line layer)", "CENTRELINE")
        parts, _, _, crs_wkt = reachinput.read_line_source(source)
        if not crs_wkt:
            raise ChannelHabitatError("the centreline layer has no CRS: set its CRS (a projected CRS in metres "
                                      "is best)", "CENTRELINE")
        direction = DIRECTION_OPTIONS[self.parameterAsEnum(parameters, "DIRECTION", context)]
        run_given = any(parameters.get(f"RUN_{k}") not in (None, "") for k in
                        ("DEPTH", "SPEED", "VELOCITY_U", "VELOCITY_V", "MESH"))
        fld = None
        if run_given:
            fld, _ = runinput.read_run_parameters(self, parameters, context, feedback, prefix="RUN_",
                                                  progress=self.progress(feedback, 0.0, 0.3))
        elif direction == "infer":
            raise ChannelHabitatError("inferring the direction needs a run with velocity vectors: give RUN_DEPTH "
                                      "with RUN_VELOCITY_U and RUN_VELOCITY_V (or RUN_MESH)", "DIRECTION")
        extent_src = self.parameterAsSource(parameters, "EXTENT", context)
        extent = None
        if extent_src is not None:
            extent, moved = extent_io.layer_extent(extent_src, crs_wkt, context)
            extent_note = "Channel extent: the EXTENT polygons" + (
                " (transformed into the centreline's CRS)." if moved else ".")
        elif fld is not None:
            extent = extent_io.wet_extent(fld, self.progress(feedback, 0.3, 0.4))
            extent_note = f"Channel extent: the wet area of the run (depth >= {fld.wet_depth_m:g} m)."
        else:
            extent_note = None
        velocity = velocity_for_direction(fld, crs_wkt) if direction == "infer" else None
        built = build_outputs(
            parts, crs_wkt,
            join_tolerance_m=self.parameterAsDouble(parameters, "JOIN_TOLERANCE", context),
            direction=direction, velocity=velocity,
            origin=ORIGIN_OPTIONS[self.parameterAsEnum(parameters, "ORIGIN", context)],
            datum_m=self.parameterAsDouble(parameters, "DATUM", context),
            segment_length_m=self.parameterAsDouble(parameters, "SEGMENT_LENGTH", context),
            zone_breaks=self.parameterAsString(parameters, "ZONE_BREAKS", context),
            extent=extent, extent_crs_wkt=fld.crs_wkt if (extent_src is None and fld is not None) else crs_wkt,
            buffer_half_width_m=self.parameterAsDouble(parameters, "BUFFER_HALF_WIDTH", context),
            run_field=fld, progress=self.progress(feedback, 0.4, 0.9))
        if extent_note:
            built.notes.insert(0, extent_note)
        for n in built.notes:
            feedback.pushInfo(n)
        for w in built.warnings:
            feedback.pushWarning(w)
        crs = QgsCoordinateReferenceSystem.fromWkt(crs_wkt)
        results = {}
        results["AXIS"] = outputs.write_features(self, parameters, context, "AXIS", built.axis_columns,
                                                 [outputs.line_m(*built.axis_xym)], crs, QgsWkbTypes.LineStringM)
        results["POSTS"] = outputs.write_features(self, parameters, context, "POSTS", built.post_columns,
                                                  built.post_geometries, crs, QgsWkbTypes.Point)
        results["SEGMENTS"] = outputs.write_features(self, parameters, context, "SEGMENTS", built.segment_columns,
                                                     built.segment_geometries, crs, QgsWkbTypes.MultiPolygon)
        results["ZONES"] = outputs.write_features(self, parameters, context, "ZONES", built.zone_columns,
                                                  built.zone_geometries, crs, QgsWkbTypes.MultiPolygon)
        for key, qml, name in (("AXIS", "reach_axis.qml", "Reach axis"), ("POSTS", "reach_posts.qml", "Km posts"),
                               ("SEGMENTS", "reach_segments.qml", "Segments"), ("ZONES", "reach_zones.qml", "Zones")):
            outputs.style_on_load(context, results[key], qml, layer_name=name)
        feedback.setProgress(100)
        return results
