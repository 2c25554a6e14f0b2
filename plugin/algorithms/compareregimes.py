"""compareregimes: what an alternative regime changes against a base run -- differences and class transitions."""

from __future__ import annotations

import os

from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessing,
    QgsProcessingOutputNumber,
    QgsProcessingOutputString,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFile,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
    QgsProcessingParameterString,
    QgsWkbTypes,
)

from ..core import compare, habitat
from ..core.field import MeshSupport
from ..gis import comparemaps, comparestyles, geotiff, outputs, reachinput, resample, runinput, schemeinput
from ..gis.comparereport import build_report
from ..gis.habitatstyles import save_vector_style
from .base import ChannelHabitatAlgorithm

BASE, ALT = "BASE_", "ALT_"
BASE_NAME, ALT_NAME = "BASE_NAME", "ALT_NAME"
ALT_CLASS_FILE = "ALT_CLASS_FILE"
RESAMPLE_CELL_SIZE = "RESAMPLE_CELL_SIZE"
WET_DRY_COLOURS = {1: "#CBD5DF", 2: comparestyles.DRIED, 3: comparestyles.NEWLY_WET_OUTLINE}


class CompareRegimes(ChannelHabitatAlgorithm):
    ALG_ID = "compareregimes"
    DISPLAY_NAME = "Compare two regimes (changes and class transitions)"
    GROUP_ID = "habitat"
    HELP = """
<p>Compares an <i>alternative</i> run (e.g. a weir pool, or a raised or lowered pool) with a <i>base</i> run (e.g. the
natural river) at the same discharge: maps of the change in speed and depth, where water dries or becomes wet, polygons
of class transitions ("moderate -&gt; slow") with their areas, the from/to area matrix, and per segment and zone the
change in class shares, median and 90th-percentile speed, wet area and diversity, with an HTML report. Every change
is alternative minus base.</p>
<h3>Parameters</h3>
<ul>
<li><b>BASE_DEPTH</b> + <b>BASE_SPEED</b> (or <b>BASE_VELOCITY_U</b> + <b>BASE_VELOCITY_V</b>) rasters, or
<b>BASE_MESH</b> with <b>BASE_MESH_DEPTH_GROUP</b>, <b>BASE_MESH_VELOCITY_GROUP</b> (or x/y groups),
<b>BASE_MESH_TIME_INDEX</b> and <b>BASE_MESH_CRS</b>: the base run, as in maphabitat. The same with the prefix
<b>ALT_</b> for the alternative run. <b>BASE_NAME</b>, <b>ALT_NAME</b>: names for the report and tables (default:
from the files).</li>
<li><b>WET_DEPTH</b> (m, default 0.05): shallower elements are dry, in both runs.</li>
<li><b>CENTRELINE</b>, <b>SEGMENT_LENGTH</b>, <b>ZONE_BREAKS</b>: the reach, as in maphabitat.</li>
<li><b>SCHEME</b> / <b>CLASS_TABLE</b> / <b>CLASS_FILE</b>: one class scheme for both runs, as in maphabitat.
<b>ALT_CLASS_FILE</b> (optional): the class table the alternative was classified with elsewhere; it must describe
the same classes (names, order, bounds) as the scheme, else the run is refused: transitions between two different
schemes have no meaning.</li>
<li><b>RESAMPLE_CELL_SIZE</b> (m, default 0 = the finer of the two runs): the cell of the common grid when the runs
are on different grids or meshes; a value &gt; 0 forces the common grid even for runs on the same grid or mesh.</li>
</ul>
<h3>How the runs are matched</h3>
<p>Same grid (geotransform and size) or same mesh (nodes and faces), same CRS: compared element by element. Otherwise
both are put on one aligned grid at the finer resolution covering the wet extent of both: rasters by nearest
neighbour (an exact re-indexing when a run's grid is aligned with the same cell), meshes by face-constant sampling at
cell centres. Values are sampled, never interpolated. An alternative in another CRS is reprojected to the base's CRS
(GDAL warp, nearest; mesh nodes by PROJ), and the log and report say so. Runs that share no wet element are refused.
The method is stated in the raster metadata and the report. Segment and zone statistics are always those of each run
on its own grid or mesh (exactly what maphabitat reports for it).</p>
<h3>Outputs</h3>
<ul>
<li><b>SPEED_CHANGE</b>, <b>DEPTH_CHANGE</b> (m/s, m; Float32 GeoTIFF, nodata -9999 where dry in both): alternative
minus base; a run dry in an element counts there as 0 m deep and still. Mesh-by-mesh comparisons are sampled onto a
grid of the mesh's typical face size (face-constant); <b>MESH_CHANGE</b> holds the exact face values.</li>
<li><b>WET_DRY_CHANGE</b> (Byte GeoTIFF): 1 wet in both, 2 wet only in base, 3 wet only in alternative, 0 nodata.</li>
<li><b>MESH_CHANGE</b> (same-mesh comparisons): one polygon per face wet in either run: <i>face, wet_change,
wet_change_code, from_class, to_class, transition, changed, base_depth_m, alt_depth_m, chg_depth_m, base_speed_ms,
alt_speed_ms, chg_speed_ms, segment, chainage_m, area_m2</i>.</li>
<li><b>TRANSITIONS</b>: one multipolygon per segment and transition (including unchanged water): <i>base_run,
alt_run, transition</i> ('moderate -&gt; slow', 'dry -&gt; slow', 'fast -&gt; dry'), <i>from_class, to_class,
from_code, to_code</i> (0 = dry), <i>changed, segment, zone, chainage_from_m, chainage_to_m, area_m2, pct_segment</i>
(% of the segment's wet area in either run), <i>n_parts</i>.</li>
<li><b>TRANSITION_TABLE</b>: the from/to area matrix for the whole reach and every zone: <i>base_run, alt_run, scope,
unit, chainage_from_m, chainage_to_m, from_class, from_code, to_&lt;state&gt;_m2</i> (one per state, dry
first), <i>total_m2, kept_m2</i>. The matrix of a unit sums to the union of the wet areas of both runs.</li>
<li><b>SEGMENT_CHANGE</b> / <b>ZONE_CHANGE</b>: per segment / zone: <i>base_&lt;x&gt;, alt_&lt;x&gt;,
chg_&lt;x&gt;</i> for wet_area_m2, v_p50_ms, v_p90_ms, v_mean_ms, d_p50_m, pct_&lt;class&gt; (change in percentage
points), shannon, simpson; <i>chg_area_&lt;class&gt;_m2</i>; and element by element <i>wet_both_m2,
wet_base_only_m2, wet_alt_only_m2, union_wet_m2, changed_m2, pct_changed</i>. Polygons: the reach's segment/zone
polygons when it brings them, else the wet area of either run in the segment/zone.</li>
<li><b>REPORT</b>: HTML: the biggest changes in words, class areas, wet/dry change, transition matrices, class
balance, charts of the change of every class along chainage, median speeds of both runs, tables, method.</li>
<li>Numbers: <b>WET_BOTH_M2, WET_BASE_ONLY_M2, WET_ALT_ONLY_M2, CHANGED_AREA_M2</b> (inside the reach) and
<b>METHOD</b> ('same grid', 'same mesh' or 'common grid').</li>
</ul>
"""

    def define(self, config):
        runinput.add_run_parameters(self, prefix=BASE, label="Base run")
        runinput.add_run_parameters(self, prefix=ALT, label="Alternative run")
        for name, label in ((BASE_NAME, "Name of the base run in tables and report (empty: from the files)"),
                            (ALT_NAME, "Name of the alternative run in tables and report (empty: from the files)")):
            self.addParameter(QgsProcessingParameterString(name, label, optional=True))
        reachinput.add_reach_parameters(self)
        schemeinput.add_scheme_parameters(self)
        adv = [QgsProcessingParameterFile(
                   ALT_CLASS_FILE, "Class table the alternative was classified with (CSV; optional check: must match "
                   "the scheme)", QgsProcessingParameterFile.File, fileFilter="CSV files (*.csv *.txt)", optional=True),
               QgsProcessingParameterNumber(
                   RESAMPLE_CELL_SIZE, "Common grid cell size (m) for runs on different grids/meshes (0 = the finer)",
                   QgsProcessingParameterNumber.Type.Double, 0.0, minValue=0.0)]
        for p in adv:
            p.setFlags(p.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
            self.addParameter(p)
        for name, label in (("SPEED_CHANGE", "Speed change (alternative minus base)"),
                            ("DEPTH_CHANGE", "Depth change (alternative minus base)"),
                            ("WET_DRY_CHANGE", "Wet/dry change")):
            self.addParameter(QgsProcessingParameterRasterDestination(name, label, optional=True, createByDefault=True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "MESH_CHANGE", "Change per face (runs on the same mesh)", QgsProcessing.SourceType.TypeVectorPolygon,
            optional=True, createByDefault=True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "TRANSITIONS", "Class transitions", QgsProcessing.SourceType.TypeVectorPolygon))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "SEGMENT_CHANGE", "Change per segment", QgsProcessing.SourceType.TypeVectorPolygon))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "ZONE_CHANGE", "Change per zone", QgsProcessing.SourceType.TypeVectorPolygon))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "TRANSITION_TABLE", "Transition matrix (from/to areas)", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFileDestination(
            "REPORT", "Report", "HTML files (*.html)", optional=True, createByDefault=True))
        for name, label in (("WET_BOTH_M2", "Wet in both runs (m2)"), ("WET_BASE_ONLY_M2", "Wet only in base (m2)"),
                            ("WET_ALT_ONLY_M2", "Wet only in alternative (m2)"),
                            ("CHANGED_AREA_M2", "Area whose class or wet state changes (m2)")):
            self.addOutput(QgsProcessingOutputNumber(name, label))
        self.addOutput(QgsProcessingOutputString("METHOD", "How the runs were matched"))

    def compute(self, parameters, context, feedback):
        # --- read ---------------------------------------------------------------------------------
        base, bsrc = runinput.read_run_parameters(self, parameters, context, feedback, prefix=BASE,
                                                  progress=self.progress(feedback, 0.0, 0.08))
        alt, asrc = runinput.read_run_parameters(self, parameters, context, feedback, prefix=ALT,
                                                 progress=self.progress(feedback, 0.08, 0.16))
        base_name, alt_name = _run_names(self.parameterAsString(parameters, BASE_NAME, context).strip(),
                                         self.parameterAsString(parameters, ALT_NAME, context).strip(), bsrc, asrc)
        habitat.check_metric_crs(base.crs_wkt, bsrc.params["mesh" if bsrc.is_mesh else "depth"])
        scheme = schemeinput.read_scheme_parameters(self, parameters, context, feedback)
        notes = []
        alt_file = self.parameterAsFile(parameters, ALT_CLASS_FILE, context)
        if alt_file:
            notes += compare.check_same_scheme(scheme, schemeinput.read_scheme_file(alt_file, ALT_CLASS_FILE),
                                               ALT_CLASS_FILE)
        reach = reachinput.read_reach_parameters(self, parameters, context, feedback, target_crs_wkt=base.crs_wkt)
        reach, crs_note = habitat.reach_in_crs(reach, base.crs_wkt)
        cell = self.parameterAsDouble(parameters, RESAMPLE_CELL_SIZE, context)
        alt_param = asrc.params["mesh" if asrc.is_mesh else "depth"]

        # --- compute ------------------------------------------------------------------------------
        aligned = resample.align_runs(base, alt, cell, progress=self.progress(feedback, 0.16, 0.3),
                                      alt_parameter=alt_param)
        warnings = [crs_note] * bool(crs_note) + aligned.warnings + resample.coverage_notes(base, alt)
        for n in warnings:
            feedback.pushWarning(n)
        for n in aligned.notes + notes:
            feedback.pushInfo(n)
        notes = warnings + aligned.notes + notes
        feedback.pushInfo(aligned.method_text)
        cmp = compare.compare_runs(aligned.base, aligned.alt, reach, scheme, aligned.base_stats, aligned.alt_stats,
                                   progress=self.progress(feedback, 0.3, 0.6), alt_parameter=alt_param)
        for n in cmp.notes:
            feedback.pushInfo(n)
        polys = comparemaps.face_polygons(cmp)
        tcols, tgeoms = comparemaps.transition_patches(cmp, self.progress(feedback, 0.6, 0.75), polygons=polys)
        seg_geoms, zone_geoms = habitat.reach_polygons(reach)
        if seg_geoms is None or zone_geoms is None:
            self.progress(feedback, 0.75, 0.8)(0.0, "segment and zone footprints")
            wseg, wzone = comparemaps.footprints(cmp, polygons=polys)
            seg_geoms = seg_geoms if seg_geoms is not None else wseg
            zone_geoms = zone_geoms if zone_geoms is not None else wzone
            notes.append("SEGMENT_CHANGE and ZONE_CHANGE polygons are the wet area of either run in each segment and "
                         "zone (give the buildreach SEGMENTS layer for fixed segment polygons).")
        spec, grids, grid_text = comparemaps.change_grids(cmp, cell, self.progress(feedback, 0.8, 0.85))
        method = aligned.method_text + (" " + grid_text if grid_text else "")
        names = {"base_run": base_name, "alt_run": alt_name}
        ttable = _with_names(names, compare.transition_table(cmp))
        seg_cols = _with_names(names, cmp.segment_change)
        zone_cols = _with_names(names, cmp.zone_change)
        tcols = _with_names(names, tcols)
        report_path = self.parameterAsFileOutput(parameters, "REPORT", context)
        report = None
        if report_path:
            inputs = _summary(cmp, aligned, base, alt, bsrc, asrc, base_name, alt_name, spec)
            report = build_report(cmp, aligned, inputs, notes + cmp.notes, base_name, alt_name, len(tgeoms))
            if grid_text:
                report.note(grid_text)
        limits = {"speed": comparemaps.symmetric_limit(cmp.speed_change),
                  "depth": comparemaps.symmetric_limit(cmp.depth_change)}

        # --- write --------------------------------------------------------------------------------
        progress = self.progress(feedback, 0.85, 1.0)
        progress(0.0, "writing outputs")
        crs = QgsCoordinateReferenceSystem.fromWkt(base.crs_wkt)
        rc = cmp.reach_change
        results = {"WET_BOTH_M2": float(rc["wet_both_m2"][0]), "WET_BASE_ONLY_M2": float(rc["wet_base_only_m2"][0]),
                   "WET_ALT_ONLY_M2": float(rc["wet_alt_only_m2"][0]), "CHANGED_AREA_M2": float(rc["changed_m2"][0]),
                   "METHOD": aligned.method}
        meta = {"base_run": base_name, "alternative_run": alt_name, "sign": "alternative minus base",
                "dry_rule": "an element dry in one run counts there as 0 m deep and 0 m/s; nodata = dry in both runs",
                "comparison_method": method, "wet_depth_m": f"{base.wet_depth_m:g}", "scheme": scheme.name}
        rasters = (("SPEED_CHANGE", "speed", "m/s", comparestyles.SPEED_QML, "Speed change"),
                   ("DEPTH_CHANGE", "depth", "m", comparestyles.DEPTH_QML, "Depth change"),
                   ("WET_DRY_CHANGE", "wet_dry", "", comparestyles.WET_DRY_QML, "Wet/dry change"))
        for key, what, unit, qml, title in rasters:
            path = self.parameterAsOutputLayer(parameters, key, context)
            if not path:
                continue
            self.will_write(path)
            self.will_write(os.path.splitext(path)[0] + ".qml")
            if what == "wet_dry":
                geotiff.write(path, grids[what], spec.transform, base.crs_wkt, nodata=0, colours=WET_DRY_COLOURS,
                              description="wet/dry change: 1 wet in both, 2 only in base, 3 only in alternative",
                              metadata={**meta, "classes": "1 wet in both; 2 wet only in base; 3 wet only in "
                                                           "alternative; 0 nodata (dry in both)"})
                comparestyles.save_change_raster_style(path, qml)
                outputs.style_on_load(context, path, func=comparestyles.qml_styler(qml), layer_name=title)
            else:
                geotiff.write(path, grids[what], spec.transform, base.crs_wkt, nodata=comparemaps.NODATA,
                              description=f"{what} change ({unit}), alternative minus base",
                              metadata={**meta, "quantity": f"{what} change", "unit": unit,
                                        "style_limit": f"{limits[what]:g}"})
                comparestyles.save_change_raster_style(path, qml, limits[what], unit)
                outputs.style_on_load(context, path, func=comparestyles.change_raster_styler(qml, limits[what], unit),
                                      layer_name=title)
            results[key] = path
        progress(0.3)
        if not isinstance(cmp.union.support, MeshSupport) and parameters.get("MESH_CHANGE") is not None:
            feedback.pushInfo("MESH_CHANGE is written only for two runs on the same mesh; here the change is in the "
                              "rasters.")
        if isinstance(cmp.union.support, MeshSupport) and parameters.get("MESH_CHANGE") is not None:
            results["MESH_CHANGE"] = outputs.write_features(
                self, parameters, context, "MESH_CHANGE", compare.element_table(cmp), polys, crs, QgsWkbTypes.Polygon)
            self._style(context, results["MESH_CHANGE"], comparestyles.qml_styler(comparestyles.MESH_QML),
                        "Change per face")
        results["TRANSITIONS"] = outputs.write_features(self, parameters, context, "TRANSITIONS", tcols, tgeoms, crs,
                                                        QgsWkbTypes.MultiPolygon)
        _, info = compare.transition_codes(cmp)
        self._style(context, results["TRANSITIONS"], comparestyles.transition_styler(cmp.states, scheme.colours, info),
                    "Class transitions")
        progress(0.6)
        results["SEGMENT_CHANGE"] = outputs.write_features(self, parameters, context, "SEGMENT_CHANGE", seg_cols,
                                                           seg_geoms, crs, QgsWkbTypes.MultiPolygon)
        self._style(context, results["SEGMENT_CHANGE"], comparestyles.qml_styler(comparestyles.SEGMENT_QML),
                    "Change per segment")
        results["ZONE_CHANGE"] = outputs.write_features(self, parameters, context, "ZONE_CHANGE", zone_cols,
                                                        zone_geoms, crs, QgsWkbTypes.MultiPolygon)
        self._style(context, results["ZONE_CHANGE"], comparestyles.qml_styler(comparestyles.SEGMENT_QML),
                    "Change per zone")
        results["TRANSITION_TABLE"] = outputs.write_features(self, parameters, context, "TRANSITION_TABLE", ttable)
        if report is not None:
            self.will_write(report_path)
            report.write(report_path)
            results["REPORT"] = report_path
        progress(1.0)
        return results

    def _style(self, context, dest, func, name):
        """Style on load, and store the style in the written GeoPackage so it opens styled anywhere."""
        outputs.style_on_load(context, dest, func=func, layer_name=name)
        if isinstance(dest, str) and not dest.startswith("memory:"):
            save_vector_style(dest, func)


def _run_label(src) -> str:
    """'folder/file' of the run's depth raster or mesh file (runs are often named by their folder)."""
    path = src.mesh or src.depth or ""
    if not path:
        return src.label or "run"
    path = path.split("|")[0]
    parent = os.path.basename(os.path.dirname(os.path.abspath(path)))
    stem = os.path.splitext(os.path.basename(path))[0]
    return f"{parent}/{stem}" if parent else stem


def _run_names(base_name: str, alt_name: str, bsrc, asrc):
    b = base_name or _run_label(bsrc)
    a = alt_name or _run_label(asrc)
    if a == b:
        b, a = f"{b} (base)", f"{a} (alternative)"
    return b, a


def _with_names(names: dict, cols: dict) -> dict:
    n = len(next(iter(cols.values())))
    return {**{k: [v] * n for k, v in names.items()}, **cols}


def _summary(cmp, aligned, base, alt, bsrc, asrc, base_name, alt_name, spec) -> list:
    """(label, value[, unit]) rows for the report."""
    rows = [("Base run", f"{base_name} ({_source_text(bsrc)})"),
            ("Alternative run", f"{alt_name} ({_source_text(asrc)})"), ("CRS", habitat.crs_name(base.crs_wkt))]
    if aligned.reprojected:
        rows.append(("Alternative's own CRS", habitat.crs_name(alt.crs_wkt) + " (reprojected)"))
    rows.append(("Matching", aligned.method))
    if aligned.method == "common grid":
        rows.append(("Common grid", f"{spec.shape[1]} x {spec.shape[0]} cells of {aligned.cell_m:g} m"))
    rows += [("Wet-depth threshold", base.wet_depth_m, "m"),
             ("Wet area, base (inside the reach)", float(cmp.reach_change["base_wet_area_m2"][0]), "m2"),
             ("Wet area, alternative (inside the reach)", float(cmp.reach_change["alt_wet_area_m2"][0]), "m2"),
             ("Union of the wet areas (inside the reach)", float(cmp.reach_change["union_wet_m2"][0]), "m2")]
    ax = cmp.reach.axis
    rows.append(("Reach", f"chainage {ax.start_m:,.0f} to {ax.end_m:,.0f} m ({ax.length_m / 1000:.2f} km), "
                          f"{cmp.reach.n_segments} segments, zones {', '.join(cmp.reach.zone_names)}"))
    rows.append(("Class scheme", f"{cmp.scheme.name}: {', '.join(cmp.scheme.names)}"))
    return rows


def _source_text(src) -> str:
    if src.is_mesh:
        return f"mesh {os.path.basename(src.mesh)}"
    if src.depth:
        return f"rasters {os.path.basename(src.depth)}, {os.path.basename(src.speed or src.u or '')}"
    return "mesh layer"
