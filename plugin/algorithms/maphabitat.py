"""maphabitat: one hydraulic model run -> habitat classes, patches, segment and zone statistics."""

from __future__ import annotations

import os

from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessing,
    QgsProcessingOutputNumber,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
    QgsProcessingParameterString,
    QgsWkbTypes,
)

from ..core import habitat
from ..core.field import MeshSupport
from ..core.reach import locate_field
from ..gis import classraster, habitatstyles, memory, outputs, patches, reachinput, runinput, runprefetch, schemeinput
from ..gis.habitatreport import build_report
from .base import ChannelHabitatAlgorithm

MIN_PATCH_AREA = "MIN_PATCH_AREA"
RUN_NAME = "RUN_NAME"


class MapHabitat(ChannelHabitatAlgorithm):
    ALG_ID = "maphabitat"
    DISPLAY_NAME = "Map habitat of one run"
    GROUP_ID = "habitat"
    HELP = """
<p>Turns one run of a 2D hydraulic model (depth and depth-averaged velocity, as rasters or a mesh) into habitat
classes, habitat polygons and area-weighted statistics per chainage segment, per reach zone and for the whole
reach, with an HTML report.</p>
<h3>Parameters</h3>
<ul>
<li><b>DEPTH</b> (m) with <b>SPEED</b> (m/s), or with <b>VELOCITY_U</b> and <b>VELOCITY_V</b> (m/s): rasters.
Velocity rasters on another grid or CRS are resampled (bilinear) or reprojected onto the depth grid, and the log
and report say so.</li>
<li>or <b>MESH</b>: a mesh layer (UGRID NetCDF read directly; other formats through QGIS) with
<b>MESH_DEPTH_GROUP</b> and <b>MESH_VELOCITY_GROUP</b> (a vector group or a speed group; empty: found by name),
or <b>MESH_U_GROUP</b> and <b>MESH_V_GROUP</b> (x and y scalar groups), <b>MESH_TIME_INDEX</b> (-1 = last step)
and <b>MESH_CRS</b> for a mesh that carries no CRS. Face values are used as stored; vertex values are averaged
to faces.</li>
<li><b>WET_DEPTH</b> (m, default 0.05): shallower elements are dry. NaN and nodata are dry.</li>
<li><b>CENTRELINE</b>: the reach axis from <i>buildreach</i> (chainage from its M values) or any centreline
(axis built on the fly, chainage from the upstream end; <b>CENTRELINE_DIRECTION</b> says whether the first
vertex is the upstream end); reprojected to the run's CRS when they differ. <b>SEGMENT_LENGTH</b> (m, default
1000) and <b>ZONE_BREAKS</b> (e.g. <code>0 upper, 12000 middle, 25000 lower</code>; empty: equal thirds), or
buildreach's <b>SEGMENTS</b> and <b>ZONES</b> polygons (advanced).</li>
<li><b>SCHEME</b>: the velocity classes (very slow &lt; 0.05 &le; slow &lt; 0.20 &le; moderate &lt; 0.30 &le;
fast, m/s; DESIGN section 4 sources), the Froude mesohabitat classes after Jowett 1993 (pool: Fr &lt; 0.18 and
V/D &lt; 1.24 s<sup>-1</sup>; riffle: Fr &gt; 0.41 and V/D &gt; 3.20 s<sup>-1</sup>; run otherwise), or a custom
table: <b>CLASS_TABLE</b> (columns class, speed_min, speed_max, depth_min, depth_max, froude_min, froude_max,
vd_min, vd_max, colour; pre-filled with the velocity classes) or <b>CLASS_FILE</b> (CSV with those columns),
e.g. a depth x velocity matrix. Bounds are lower-inclusive, upper-exclusive; blank = unbounded; the first
matching row wins.</li>
<li><b>MIN_PATCH_AREA</b> (m&sup2;, default 0 = keep all): in PATCHES, patches smaller than this merge into
their largest neighbour (rasters: GDAL sieve, 4-connected) or into the class they share the longest boundary
with (meshes). Statistics always use the unsieved classes.</li>
<li><b>RUN_NAME</b> (optional, e.g. <code>weir pool, 3000 ML/d</code>): names the run in the <i>run</i> column
of the statistics and in the report's title; empty: the depth file's name (or the mesh layer's).</li>
</ul>
<h3>Outputs</h3>
<ul>
<li><b>CLASSES</b> (raster runs): Byte GeoTIFF on the depth grid, class code 1..N, 0 = dry (nodata), tiled,
DEFLATE, with the class colours and names (and a .qml style beside it).</li>
<li><b>MESH_CLASSES</b> (mesh runs): one polygon per wet face: <i>face</i> (0-based face number), <i>class</i>,
<i>class_code</i>, <i>segment</i> (1-based, 0 outside the reach), <i>chainage_m</i>, <i>offset_m</i> (+ left
looking downstream), <i>depth_m</i>, <i>speed_ms</i>, <i>froude</i>, <i>area_m2</i>.</li>
<li><b>PATCHES</b>: valid multipolygons dissolved per class and segment: <i>class</i>, <i>class_code</i>,
<i>segment</i>, <i>zone</i>, <i>chainage_from_m</i>, <i>chainage_to_m</i>, <i>area_m2</i>, <i>pct_segment</i>
(% of the segment's wet area), <i>n_parts</i>.</li>
<li><b>SEGMENT_STATS</b>: one polygon per segment (the segment polygons of the reach when given, else the wet
area of the segment): <i>run</i>, <i>segment</i>, <i>chainage_from_m</i>, <i>chainage_to_m</i>, <i>zone</i>,
<i>wet_area_m2</i>, <i>n_elements</i>; speed <i>v_min_ms, v_p10_ms, v_p25_ms, v_p50_ms, v_p75_ms, v_p90_ms,
v_max_ms, v_mean_ms, v_cv</i> (coefficient of variation); the same for depth (<i>d_..._m, d_mean_m, d_cv</i>);
<i>fr_mean</i> (mean Froude number); <i>area_&lt;class&gt;_m2</i> and <i>pct_&lt;class&gt;</i> per class;
<i>shannon</i> and <i>simpson</i> diversity of the class shares.</li>
<li><b>ZONE_STATS</b>: the same per zone (<i>zone</i> instead of segment).</li>
<li><b>REPORT</b>: HTML page: the run, the classes, the whole reach and zone table, class shares per zone, speed
percentile bands along chainage with the class thresholds, class shares per segment, the segment table
(CSV links hold every column).</li>
<li><b>WET_AREA_M2</b>: the wet area inside the reach.</li>
</ul>
<h3>Method</h3>
<p>Every wet element (raster cell or mesh face) is located on the axis (nearest point: chainage, offset),
classified, and given the segment and zone of its chainage; elements beyond the ends of the axis are left out
of the statistics (and said). Statistics are area-weighted: a percentile is numpy's linear percentile of the
sample in which every element is repeated in proportion to its area (exactly np.percentile of the cells on a
raster); CV = area-weighted standard deviation / mean; Fr = V / sqrt(g D), g = 9.80665 m/s&sup2;; Shannon
H = &minus;&Sigma; p ln p and Simpson 1 &minus; &Sigma; p&sup2; over class area shares p. Patches are polygonized
per segment window (4-connected, so every polygon is valid) and grouped per class; meshes merge their faces
by coverage union. The CRS must be projected, in metres.</p>
"""

    def define(self, config):
        runinput.add_run_parameters(self)
        reachinput.add_reach_parameters(self)
        schemeinput.add_scheme_parameters(self)
        self.addParameter(QgsProcessingParameterNumber(
            MIN_PATCH_AREA, "Minimum patch area in PATCHES (m2; 0 = keep every patch)",
            QgsProcessingParameterNumber.Type.Double, 0.0, minValue=0.0))
        self.addParameter(QgsProcessingParameterString(
            RUN_NAME, "Name of the run (statistics' run column and report title; empty: the depth file's name)",
            "", optional=True))
        self.addParameter(QgsProcessingParameterRasterDestination(
            "CLASSES", "Habitat classes (raster runs)", optional=True, createByDefault=True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "MESH_CLASSES", "Habitat classes per face (mesh runs)", QgsProcessing.SourceType.TypeVectorPolygon,
            optional=True, createByDefault=True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "PATCHES", "Habitat patches", QgsProcessing.SourceType.TypeVectorPolygon))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "SEGMENT_STATS", "Segment statistics", QgsProcessing.SourceType.TypeVectorPolygon))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "ZONE_STATS", "Zone statistics", QgsProcessing.SourceType.TypeVectorPolygon))
        self.addParameter(QgsProcessingParameterFileDestination(
            "REPORT", "Report", "HTML files (*.html)", optional=True, createByDefault=True))
        self.addOutput(QgsProcessingOutputNumber("WET_AREA_M2", "Wet area inside the reach (m2)"))

    def compute(self, parameters, context, feedback):
        # --- read: the rasters in the background while the reach and the scheme are read -----------
        run_name = (self.parameterAsString(parameters, RUN_NAME, context) or "").strip()
        run = runprefetch.start_run_parameters(self, parameters, context, feedback, label=run_name,
                                               progress=self.progress(feedback, 0.0, 0.25))
        if not run.crs_wkt:
            run.result()  # says that the run has no CRS
        habitat.check_metric_crs(run.crs_wkt, run.src.params["mesh_crs"] if run.src.is_mesh else
                                 run.src.params["depth"])
        line = self.parameterAsSource(parameters, reachinput.CENTRELINE, context)
        crs_note = habitat.reprojection_note(reachinput.crs_wkt_of(line.sourceCrs()) if line else "", run.crs_wkt)
        reach = reachinput.read_reach_parameters(self, parameters, context, feedback, target_crs_wkt=run.crs_wkt)
        reach, _ = habitat.reach_in_crs(reach, run.crs_wkt)  # no-op when reachinput already transformed it
        if crs_note:
            feedback.pushWarning(crs_note)
        scheme = schemeinput.read_scheme_parameters(self, parameters, context, feedback)
        min_area = self.parameterAsDouble(parameters, MIN_PATCH_AREA, context)
        # the CLASSES GeoTIFF: classes computed and encoded in the background as soon as the run is read,
        # moved into place when the outputs are written
        classes = None
        classes_path = self.parameterAsOutputLayer(parameters, "CLASSES", context) if run.is_raster else None
        if classes_path:
            classes = classraster.start_class_raster(classes_path, run.field_future, None, scheme, None)
            for p in classes.temporary_paths:
                self.will_write(p)
        try:
            progress = self.progress(feedback, 0.0, 0.25)
            progress(0.0, "reading the run")
            cells = run.cells()  # where the wet cells are: located while their velocities are read
            memory.release()  # the depth raster's buffers and GDAL blocks are free again: hand them back
            progress = self.progress(feedback, 0.25, 0.9)
            progress(0.0, "locating the run along the reach")
            location = locate_field(reach, cells)
            fld, src = run.result()
            location = run.align(location, cells, fld)
            del cells
            memory.release()  # and those of the velocity rasters and of locating
            codes = classes.codes() if classes is not None else scheme.classify(fld.depth, fld.speed)
            return self._compute(parameters, context, feedback, fld, src, reach, scheme, codes, min_area, crs_note,
                                 fld.name or src.label, classes, location)
        except BaseException:
            if classes is not None:
                classes.discard()
            raise

    def _compute(self, parameters, context, feedback, fld, src, reach, scheme, codes, min_area, crs_note,
                 run_label, classes, location):
        # --- compute ------------------------------------------------------------------------------
        progress = self.progress(feedback, 0.25, 0.9)
        analysis = habitat.classify_run(fld, reach, scheme, location=location, progress=progress.sub(0.2, 0.3),
                                        codes=codes)
        memory.release()
        is_mesh = isinstance(fld.support, MeshSupport)
        polys = patches.face_polygons(fld.support) if is_mesh else None
        seg_geoms, zone_geoms = habitat.reach_polygons(reach)
        # patches (and wet footprints) are drawn in the background (2 threads) while statistics (1 thread)
        # and report are made: measured on 2 cores, less CPU and wall time than 2 + 2 or 1 + 1 threads
        job = patches.start_patch_job(analysis, min_area, polygons=polys, progress=progress, threads=2,
                                      footprints=seg_geoms is None or zone_geoms is None)
        habitat.summarise_run(analysis, progress=progress.sub(0.3, 0.6), threads=1)
        notes = list(fld.notes) + ([crs_note] if crs_note else []) + list(analysis.notes)
        notes += habitat.geometry_notes(reach)
        seg_cols = {"run": [run_label] * reach.n_segments, **analysis.segment_stats}
        zone_cols = {"run": [run_label] * reach.n_zones, **analysis.zone_stats}
        report_path = self.parameterAsFileOutput(parameters, "REPORT", context)
        report = None
        if report_path:
            progress(0.6, "report")
            report = build_report(analysis, habitat.run_summary(analysis, src, min_area), notes, subtitle=run_label)
        progress(0.8, "habitat patches")
        ptc = job.patches()  # the wet footprints may still be joined meanwhile
        if report is not None:
            report.notes(ptc.notes)
            report.note(f"PATCHES holds {len(ptc)} features: one multipolygon per class and segment.")
        for n in analysis.notes + ptc.notes:
            feedback.pushInfo(n)

        # --- write --------------------------------------------------------------------------------
        progress = self.progress(feedback, 0.9, 1.0)
        progress(0.0, "writing outputs")
        crs = QgsCoordinateReferenceSystem.fromWkt(fld.crs_wkt)
        results = {"WET_AREA_M2": float(analysis.reach_stats["wet_area_m2"][0])}
        # first the file outputs that a failure removes again (the footprints are still being joined)
        if classes is not None:
            path = classes.path
            self.will_write(path)
            qml = os.path.splitext(path)[0] + ".qml"
            self.will_write(qml)
            classes.finish()
            habitatstyles.save_raster_style(path, scheme)
            results["CLASSES"] = path
            outputs.style_on_load(context, path, func=habitatstyles.raster_styler(scheme),
                                  layer_name="Habitat classes")
        if report is not None:
            self.will_write(report_path)
            report.write(report_path)
            results["REPORT"] = report_path
        footprints = job.footprints()  # everything is computed now
        if footprints is not None:
            seg_geoms = seg_geoms if seg_geoms is not None else footprints[0]
            zone_geoms = zone_geoms if zone_geoms is not None else footprints[1]
        progress(0.3)
        if is_mesh and parameters.get("MESH_CLASSES") is not None:
            face_cols = habitat.face_table(analysis)
            results["MESH_CLASSES"] = outputs.write_features(
                self, parameters, context, "MESH_CLASSES", face_cols, polys, crs, QgsWkbTypes.Polygon,
                progress=progress.sub(0.3, 0.5))
            self._style(context, results["MESH_CLASSES"], habitatstyles.class_styler(scheme), "Habitat classes")
        results["PATCHES"] = outputs.write_features(self, parameters, context, "PATCHES", ptc.columns,
                                                    ptc.geometries, crs, QgsWkbTypes.MultiPolygon)
        self._style(context, results["PATCHES"], habitatstyles.class_styler(scheme), "Habitat patches")
        progress(0.6)
        results["SEGMENT_STATS"] = outputs.write_features(self, parameters, context, "SEGMENT_STATS", seg_cols,
                                                          seg_geoms, crs, QgsWkbTypes.MultiPolygon)
        self._style(context, results["SEGMENT_STATS"], habitatstyles.stats_styler(scheme, "segment"),
                    "Segment statistics")
        results["ZONE_STATS"] = outputs.write_features(self, parameters, context, "ZONE_STATS", zone_cols,
                                                       zone_geoms, crs, QgsWkbTypes.MultiPolygon)
        self._style(context, results["ZONE_STATS"], habitatstyles.stats_styler(scheme, "zone"), "Zone statistics")
        del analysis, ptc, fld, location, polys
        memory.release()
        progress(1.0)
        return results

    def _style(self, context, dest, func, name):
        """Style on load, and store the style in the written GeoPackage so it opens styled anywhere."""
        outputs.style_on_load(context, dest, func=func, layer_name=name)
        if isinstance(dest, str) and not dest.startswith("memory:"):
            habitatstyles.save_vector_style(dest, func)
