"""usablearea: habitat suitability curves (depth, velocity) -> suitability per element, weighted usable
area per reach, zone and segment, and WUA against discharge over a scenario table."""

from __future__ import annotations

import math
import os

from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessing,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFile,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterDestination,
    QgsProcessingParameterString,
    QgsWkbTypes,
)

from ..core import habitat, usable
from ..core import suitability as su
from ..core.curves import scope_units, unit_groups
from ..core.errors import ChannelHabitatError
from ..core.field import MeshSupport
from ..core.reach import locate_field
from ..core.units import to_m3s, to_mld
from ..gis import geotiff, outputs, reachinput, runinput, scenarioinput, scenariorun, suitabilitystyle
from ..gis.flowreport import grid_rows
from ..gis.patches import face_polygons
from ..gis.wuareport import build_report
from .base import ChannelHabitatAlgorithm

UNITS = ("ML/d", "m3/s")
NODATA = -9999.0
RUN_PARAMETERS = ("DEPTH", "SPEED", "VELOCITY_U", "VELOCITY_V", "MESH")


class UsableArea(ChannelHabitatAlgorithm):
    ALG_ID = "usablearea"
    DISPLAY_NAME = "Weighted usable area (suitability curves)"
    GROUP_ID = "habitat"
    HELP = """
<p>Turns habitat suitability curves for depth and velocity into a <b>suitability</b> value for every wet cell or
mesh face and the <b>weighted usable area</b> (WUA) of the whole reach, every zone and every chainage segment; over
a scenario table, WUA against discharge for every regime.</p>
<h3>Parameters</h3>
<ul>
<li>Either <b>one run</b>: <b>DEPTH</b> with <b>SPEED</b> (or <b>VELOCITY_U</b>/<b>VELOCITY_V</b>) rasters, or a
<b>MESH</b> with its dataset groups (as in maphabitat), optionally labelled with <b>REGIME</b> and
<b>DISCHARGE</b>/<b>DISCHARGE_UNIT</b>; or a <b>SCENARIOS</b> table (CSV or table layer: regime, discharge, unit,
run files; as in flowhabitat) with optional <b>REGIMES</b>. Not both. <b>WET_DEPTH</b> (m, default 0.05).</li>
<li><b>SUITABILITY_CURVES</b>: CSV, one row per curve point: <code>variable</code> (depth or velocity),
<code>value</code>, optional <code>unit</code> (depth m, cm, mm, ft; velocity m/s, cm/s, mm/s, ft/s),
<code>suitability</code> in [0, 1]; values increasing within a curve. Any other column (species, life_stage, ...)
names curve sets; <code>source</code> and <code>notes</code> are kept as text. Curves are piecewise linear between
points and clamped beyond the first and last point. Suitabilities outside [0, 1], unknown variables or units and
non-increasing values are refused with the row named.</li>
<li><b>CURVE_SET</b>: which set, e.g. <code>example fish / adult</code> (the key column values joined by ' / ';
empty when the file holds one set).</li>
<li><b>COMBINATION</b>: how the depth and velocity suitabilities combine per element: <i>product</i> (the composite
probability-of-use of Hyra 1978), <i>geometric mean</i>, or <i>minimum</i> (the limiting factor). A set with one
curve uses it alone.</li>
<li><b>CENTRELINE</b>, <b>SEGMENT_LENGTH</b>, <b>ZONE_BREAKS</b>: the reach, as in maphabitat.</li>
</ul>
<h3>Outputs</h3>
<ul>
<li><b>SUITABILITY</b> (one raster run): Float32 GeoTIFF on the depth grid, composite suitability 0&ndash;1,
nodata &minus;9999 where dry; tiled, DEFLATE; styled on a 0&ndash;1 ramp.</li>
<li><b>MESH_SUITABILITY</b> (one mesh run): a polygon per wet face: <i>face, segment</i> (1-based, 0 outside the
reach), <i>zone, chainage_m, depth_m, speed_ms, suit_depth, suit_velocity</i> (those of the set),
<i>suitability, area_m2, wua_m2</i>.</li>
<li><b>WUA_TABLE</b>: one row per run and unit: <i>regime, q_mld, q_m3s, run, curve_set, combination, scope</i>
(reach, zone, segment), <i>unit</i> ('reach', zone name or segment number), <i>chainage_from_m, chainage_to_m,
wet_area_m2, wua_m2, wua_fraction</i> (WUA / wet area). It is also an input of habitatseries (WUA).</li>
<li><b>REPORT</b>: HTML: the curves plotted and listed, WUA per unit (and per segment for one run), WUA and
WUA fraction against discharge per regime and zone with the largest WUA per regime (scenario table).</li>
</ul>
<h3>Method</h3>
<p>WUA of a unit = &Sigma; area &times; composite suitability over its wet elements (Hyra 1978, Table 3: surface
areas weighted by their composite probability-of-use and summed); elements beyond the ends of the reach axis
belong to no unit. Velocity is the depth-averaged speed of the run. Runs of a scenario table are read as in
flowhabitat (two at a time, chainage once per grid or mesh).</p>
"""

    def define(self, config):
        runinput.add_run_parameters(self)
        self.addParameter(QgsProcessingParameterString(
            "REGIME", "Regime of the single run [empty: its file name]", optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            "DISCHARGE", "Discharge of the single run [empty: not stated]", QgsProcessingParameterNumber.Type.Double,
            optional=True, minValue=0.0))
        self.addParameter(QgsProcessingParameterEnum("DISCHARGE_UNIT", "Discharge unit", list(UNITS), defaultValue=0))
        scenarioinput.add_scenario_parameters(self, optional=True,
                                              label="Scenario table (CSV or table layer) [instead of one run]")
        reachinput.add_reach_parameters(self)
        self.addParameter(QgsProcessingParameterFile(
            su.PARAMETER, "Habitat suitability curves (CSV: variable, value, unit, suitability)",
            QgsProcessingParameterFile.File, fileFilter="CSV files (*.csv *.txt)"))
        self.addParameter(QgsProcessingParameterString(
            "CURVE_SET", "Curve set, e.g. 'example fish / adult' [empty: the only set]", optional=True))
        self.addParameter(QgsProcessingParameterEnum(
            "COMBINATION", "Combine depth and velocity suitability by", list(su.COMBINATIONS), defaultValue=0))
        self.addParameter(QgsProcessingParameterRasterDestination(
            "SUITABILITY", "Composite suitability (one raster run)", optional=True, createByDefault=True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "MESH_SUITABILITY", "Composite suitability per face (one mesh run)",
            QgsProcessing.SourceType.TypeVectorPolygon, optional=True, createByDefault=True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "WUA_TABLE", "Weighted usable area per run and unit", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFileDestination(
            "REPORT", "Report", "HTML files (*.html)", optional=True, createByDefault=True))

    # ------------------------------------------------------------------------------------------
    def compute(self, parameters, context, feedback):
        single = any(parameters.get(k) not in (None, "") for k in RUN_PARAMETERS)
        table_given = scenarioinput.scenarios_given(parameters)
        if single and table_given:
            raise ChannelHabitatError("give either one run (rasters or a mesh) or a scenario table, not both",
                                      scenarioinput.SCENARIOS)
        if not single and not table_given:
            raise ChannelHabitatError("give one run (depth and speed rasters, or a mesh) or a scenario table",
                                      scenarioinput.SCENARIOS)
        curve_path = self.parameterAsFile(parameters, su.PARAMETER, context)
        curve_set = su.select_curve_set(su.read_suitability_csv(curve_path),
                                        self.parameterAsString(parameters, "CURVE_SET", context))
        method = su.COMBINATIONS[self.parameterAsEnum(parameters, "COMBINATION", context)]
        wet = self.parameterAsDouble(parameters, runinput.WET_DEPTH, context)
        sources = ", ".join(curve_set.sources) or "not stated in the file"
        inputs = [("Suitability curves", curve_path), ("Curve set", curve_set.label),
                  ("Variables", ", ".join(curve_set.variables)), ("Combination", method), ("Curve sources", sources),
                  ("Wet-depth threshold", wet, "m")]

        if table_given:
            return self._table(parameters, context, feedback, curve_set, method, wet, inputs, sources)
        return self._single(parameters, context, feedback, curve_set, method, inputs, sources)

    # --- a scenario table ---------------------------------------------------------------------
    def _table(self, parameters, context, feedback, curve_set, method, wet, inputs, sources):
        rows, desc, workers = scenarioinput.read_scenario_parameters(self, parameters, context)
        infos = scenariorun.preflight(rows)
        reach = reachinput.read_reach_parameters(self, parameters, context, feedback, target_crs_wkt=infos[0].crs_wkt)

        def work(run):
            seg, zone = unit_groups(run.reach, run.location)
            csi, _ = usable.element_suitability(run.field.depth, run.field.speed, curve_set, method)
            return usable.wua_per_unit(csi, run.field.area, seg, zone, run.reach.n_segments, run.reach.n_zones)

        tab = scenariorun.run_scenarios(rows, work, wet_depth_m=wet, reach=reach, workers=workers, infos=infos,
                                        progress=self.progress(feedback, 0.0, 0.85), log=feedback.pushInfo)
        units = scope_units(tab.reach)
        runs = [(r.regime, r.q_mld, r.q_m3s, r.label, w) for r, w in zip(tab.rows, tab.results)]
        table = usable.wua_table(units, runs, curve_set.label, method)
        inputs = [("Scenario table", desc), ("Runs", tab.n)] + grid_rows(tab) + inputs
        report_path = self.parameterAsFileOutput(parameters, "REPORT", context)
        report = build_report(curve_set, method, sources, table, tab.reach, inputs, tab.notes,
                              scenario=True) if report_path else None
        given = parameters.get("SUITABILITY")
        if isinstance(given, str) and given not in ("", "TEMPORARY_OUTPUT"):
            feedback.pushInfo("SUITABILITY is written for a single run only; a scenario table gives WUA_TABLE.")
        return self._write(parameters, context, table, report, report_path)

    # --- one run ------------------------------------------------------------------------------
    def _single(self, parameters, context, feedback, curve_set, method, inputs, sources):
        fld, src = runinput.read_run_parameters(self, parameters, context, feedback,
                                                progress=self.progress(feedback, 0.0, 0.4))
        habitat.check_metric_crs(fld.crs_wkt, src.params["mesh" if src.is_mesh else "depth"])
        reach = reachinput.read_reach_parameters(self, parameters, context, feedback, target_crs_wkt=fld.crs_wkt)
        notes = list(fld.notes)
        progress = self.progress(feedback, 0.4, 0.8)
        progress(0.0, "locating the run along the reach")
        loc = locate_field(reach, fld)
        seg, zone = unit_groups(reach, loc)
        notes += usable.outside_notes(seg, fld.area)
        csi, parts = usable.element_suitability(fld.depth, fld.speed, curve_set, method)
        w = usable.wua_per_unit(csi, fld.area, seg, zone, reach.n_segments, reach.n_zones)
        unit = UNITS[self.parameterAsEnum(parameters, "DISCHARGE_UNIT", context)]
        q_raw = parameters.get("DISCHARGE")
        q = None if q_raw in (None, "") else self.parameterAsDouble(parameters, "DISCHARGE", context)
        q_mld = float(to_mld(q, unit)) if q else math.nan
        q_m3s = float(to_m3s(q, unit)) if q else math.nan
        regime = self.parameterAsString(parameters, "REGIME", context).strip() or src.label
        label = regime + (f" {q:g} {unit}" if q else "")
        table = usable.wua_table(scope_units(reach), [(regime, q_mld, q_m3s, label, w)], curve_set.label, method)
        inputs = [("Run", label), ("CRS", habitat.crs_name(fld.crs_wkt)), ("Wet elements", fld.n)] + inputs
        report_path = self.parameterAsFileOutput(parameters, "REPORT", context)
        report = build_report(curve_set, method, sources, table, reach, inputs, notes,
                              hist=usable.suitability_histogram(csi, fld.area)) if report_path else None
        for n in notes:
            feedback.pushInfo(n)
        crs = QgsCoordinateReferenceSystem.fromWkt(fld.crs_wkt)
        results = {}
        if isinstance(fld.support, MeshSupport):
            if parameters.get("MESH_SUITABILITY") is not None:
                cols = usable.face_table(fld, seg, zone, loc.chainage, reach.zone_names, csi, parts)
                results["MESH_SUITABILITY"] = outputs.write_features(
                    self, parameters, context, "MESH_SUITABILITY", cols, face_polygons(fld.support), crs,
                    QgsWkbTypes.Polygon)
                outputs.style_on_load(context, results["MESH_SUITABILITY"], func=suitabilitystyle.face_style,
                                      layer_name="Composite suitability")
        else:
            path = self.parameterAsOutputLayer(parameters, "SUITABILITY", context)
            if path:
                self.will_write(path)
                qml = os.path.splitext(path)[0] + ".qml"
                self.will_write(qml)
                grid = geotiff.scatter_to_grid(csi.astype("float32"), fld.support.index, fld.support.shape,
                                               NODATA, dtype="float32")
                geotiff.write(path, grid, fld.support.transform, fld.crs_wkt, nodata=NODATA,
                              description=f"composite suitability ({method}) - {curve_set.label}",
                              metadata={"curve_set": curve_set.label, "combination": method, "curve_sources": sources,
                                        "run": label})
                suitabilitystyle.save_raster_style(path)
                results["SUITABILITY"] = path
                outputs.style_on_load(context, path, func=suitabilitystyle.raster_style,
                                      layer_name="Composite suitability")
        results.update(self._write(parameters, context, table, report, report_path))
        return results

    def _write(self, parameters, context, table, report, report_path):
        out = {"WUA_TABLE": outputs.write_features(self, parameters, context, "WUA_TABLE", table)}
        if report is not None:
            self.will_write(report_path)
            report.write(report_path)
            out["REPORT"] = report_path
        return out
