"""vegetationoverlay: vegetation polygons x runs -> wetted area and depth per stand, water beside its edge."""

from __future__ import annotations

import math

import numpy as np
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessing,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
    QgsWkbTypes,
)

from ..core import vegetation as veg
from ..core.errors import ChannelHabitatError
from ..core.habitat import check_metric_crs
from ..core.units import parse_numbers, to_m3s, to_mld
from ..gis import layouts, outputs, runinput, scenarioinput, scenariorun, schemeinput, vegetationio
from ..gis.runs import same_crs
from ..gis.vegetationreport import build_report
from .base import ChannelHabitatAlgorithm

UNITS = runinput.DISCHARGE_UNITS


class VegetationOverlay(ChannelHabitatAlgorithm):
    ALG_ID = "vegetationoverlay"
    DISPLAY_NAME = "Vegetation overlay (wetted stands and water beside them)"
    GROUP_ID = "habitat"
    HELP = """
<p>Overlays bank vegetation on one or more runs: for every vegetation polygon (stand) and run, how much of the
stand is wetted, how deep the water over it is, and what class of water lies along its channel-facing edge;
plus a summary per community. Shows what raising or lowering a pool does to bank vegetation.</p>
<h3>Parameters</h3>
<ul>
<li><b>VEGETATION</b>: polygons; <b>COMMUNITY_FIELD</b> (any field naming the community, e.g. <i>community</i>;
empty: one unnamed community); <b>ID_FIELD</b> (whole-number stand id, e.g. <i>stand_id</i>; empty: the feature
id). Invalid polygons are repaired for the calculation (the layer is not changed); features without geometry
are left out and counted. The polygons are reprojected to the runs' CRS when they differ.</li>
<li>Runs: one run (<b>DEPTH</b> with <b>SPEED</b> or <b>VELOCITY_U</b>/<b>VELOCITY_V</b> rasters, or a
<b>MESH</b> with its groups) labelled with <b>REGIME</b> and <b>DISCHARGE</b>/<b>DISCHARGE_UNIT</b>; and/or a
<b>SCENARIOS</b> table (a CSV file or a table layer: regime, discharge, unit, depth, speed or u and v, or mesh
and groups) for all regimes at once, optionally narrowed with <b>REGIMES</b> (e.g. <code>weir, weir_raised</code>)
and <b>SCENARIO_DISCHARGES</b> (e.g. <code>3000, 5000</code>, in DISCHARGE_UNIT); <b>PARALLEL_RUNS</b>
(advanced, default 2) runs are worked on at the same time. All runs must share one projected CRS in metres.
<b>WET_DEPTH</b> (m, default 0.05): shallower is dry.</li>
<li><b>SCHEME</b>, <b>CLASS_TABLE</b>, <b>CLASS_FILE</b>: the water classes (default: very slow / slow /
moderate / fast velocity classes).</li>
<li><b>EDGE_DISTANCE</b> (m, default 10): how far from a stand's boundary water still counts as beside it.
<b>EDGE_STEP</b> (m, advanced; 0 = a quarter of the cell or face size, at most a quarter of EDGE_DISTANCE).</li>
</ul>
<h3>Outputs</h3>
<ul>
<li><b>VEGETATION_STATS</b>: one polygon per stand and run (the stand's own geometry and CRS): <i>stand_id,
community, regime, q_mld, q_m3s, run, area_m2</i> (stand area), <i>wet_area_m2, wet_pct</i> (wetted share of the
stand), <i>depth_mean_m, depth_max_m</i> (over the wetted part; empty when dry), <i>wet_&lt;class&gt;_m2</i>
(wetted area by class), <i>perimeter_m</i>, <i>edge_m</i> (channel-facing edge), <i>edge_&lt;class&gt;_m</i> (edge
beside each class), <i>edge_main_class</i> (the class beside most of the edge; empty when none).</li>
<li><b>COMMUNITY_SUMMARY</b>: per community and run: <i>n_stands, n_wetted</i> (stands with any wetted area),
<i>area_m2, wet_area_m2, wet_pct, depth_mean_m</i> (area-weighted over the wetted parts), <i>depth_max_m,
perimeter_m, edge_m, edge_&lt;class&gt;_m, edge_&lt;class&gt;_pct</i> (% of the edge).</li>
<li><b>EDGES</b> (optional): the channel-facing edge as lines, one per stretch beside one class: <i>stand_id,
community, regime, q_mld, q_m3s, run, class, length_m</i>; coloured with the class colours.</li>
<li><b>REPORT</b> (optional): HTML with the community table and charts of wetted share and slow-water edge by
run.</li>
</ul>
<h3>Method</h3>
<p><i>Wetted area</i> = area of (stand &cap; union of wet cells or faces), exact: each cell square or face polygon
meeting the stand is intersected with it (GEOS), once per grid or mesh, and each run sums the intersection areas
of its wet elements. <i>Depth</i>: area-weighted mean over those intersections, and their maximum.
<i>Channel-facing edge</i>: the part of the stand's boundary (outer ring and holes) within EDGE_DISTANCE of a wet
cell or face, the distance measured to the element's polygon (0 where the boundary runs through water); each part
takes the class of the nearest wet element. The boundary is cut into pieces no longer than EDGE_STEP and each
piece is judged by its midpoint, so lengths are exact except within one step of the ends of each stretch and of
each change of class.</p>
"""

    def define(self, config):
        self.addParameter(QgsProcessingParameterFeatureSource(
            "VEGETATION", "Vegetation polygons", [QgsProcessing.SourceType.TypeVectorPolygon]))
        self.addParameter(QgsProcessingParameterField(
            "COMMUNITY_FIELD", "Community field", "community", "VEGETATION", optional=True))
        self.addParameter(QgsProcessingParameterField(
            "ID_FIELD", "Stand id field (whole numbers) [empty: feature id]", "stand_id", "VEGETATION",
            QgsProcessingParameterField.DataType.Numeric, optional=True))
        runinput.add_run_parameters(self)
        runinput.add_run_label_parameters(self)
        scenarioinput.add_scenario_parameters(
            self, optional=True, label="Scenario table (CSV file or table layer) [instead of, or with, the single run]")
        self.addParameter(QgsProcessingParameterString(
            "SCENARIO_DISCHARGES", "Only these discharges of the table (comma-separated, DISCHARGE_UNIT) "
            "[empty: all]", optional=True))
        schemeinput.add_scheme_parameters(self, advanced_table=True)
        self.addParameter(QgsProcessingParameterNumber(
            "EDGE_DISTANCE", "Edge distance: water within this distance of a stand is beside it (m)",
            QgsProcessingParameterNumber.Type.Double, veg.DEFAULT_EDGE_DISTANCE_M, minValue=0.001))
        step = QgsProcessingParameterNumber(
            "EDGE_STEP", "Edge step (m; 0 = automatic)", QgsProcessingParameterNumber.Type.Double, 0.0, minValue=0.0)
        step.setFlags(step.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
        self.addParameter(step)
        self.addParameter(QgsProcessingParameterFeatureSink(
            "VEGETATION_STATS", "Vegetation statistics per stand and run", QgsProcessing.SourceType.TypeVectorPolygon))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "COMMUNITY_SUMMARY", "Summary per community and run", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "EDGES", "Channel-facing edges by class", QgsProcessing.SourceType.TypeVectorLine, optional=True,
            createByDefault=True))
        self.addParameter(QgsProcessingParameterFileDestination(
            "REPORT", "Report", "HTML files (*.html)", optional=True, createByDefault=True))

    # ------------------------------------------------------------------------------------------
    def _single(self, parameters, context):
        """Run columns of the single run, or None when no single run is given."""
        if not any(parameters.get(k) not in (None, "") for k in ("DEPTH", "SPEED", "VELOCITY_U", "VELOCITY_V",
                                                                   "MESH")):
            return None
        regime, q, unit = runinput.read_run_label(self, parameters, context)
        return {"regime": regime,
                "q_mld": float(to_mld(q, unit)) if q else math.nan,
                "q_m3s": float(to_m3s(q, unit)) if q else math.nan, "run": ""}

    def _table(self, parameters, context):
        """(rows, parallel runs) of the scenario table after the regime and discharge filters; ([], 0)
        without a table."""
        if not scenarioinput.scenarios_given(parameters):
            return [], 0
        rows, _, workers = scenarioinput.read_scenario_parameters(self, parameters, context)
        unit = UNITS[self.parameterAsEnum(parameters, "DISCHARGE_UNIT", context)]
        qs = [float(to_mld(v, unit, "SCENARIO_DISCHARGES"))
              for v in parse_numbers(self.parameterAsString(parameters, "SCENARIO_DISCHARGES", context),
                                "SCENARIO_DISCHARGES")]
        if qs:
            rows = [r for r in rows if any(abs(r.q_mld - q) <= 1e-6 * q for q in qs)]
        if not rows:
            raise ChannelHabitatError("no row of the scenario table matches REGIMES and SCENARIO_DISCHARGES",
                                      "SCENARIO_DISCHARGES")
        return rows, workers

    def compute(self, parameters, context, feedback):
        source = self.parameterAsSource(parameters, "VEGETATION", context)
        comm_field = (self.parameterAsFields(parameters, "COMMUNITY_FIELD", context) or [""])[0]
        id_field = (self.parameterAsFields(parameters, "ID_FIELD", context) or [""])[0]
        scheme = schemeinput.read_scheme_parameters(self, parameters, context, feedback)
        distance = self.parameterAsDouble(parameters, "EDGE_DISTANCE", context)
        step = self.parameterAsDouble(parameters, "EDGE_STEP", context) or None
        wet = self.parameterAsDouble(parameters, runinput.WET_DEPTH, context)
        single = self._single(parameters, context)
        rows, workers = self._table(parameters, context)
        if single is None and not rows:
            raise ChannelHabitatError("give a run (depth and speed rasters, or a mesh) or a scenario table",
                                      "SCENARIOS")

        # --- read: the single run, the table's CRS, the stands in that CRS ------------------------
        fld = None
        infos = scenariorun.preflight(rows) if rows else []
        if single is not None:
            fld, src = runinput.read_run_parameters(self, parameters, context, feedback,
                                                    progress=self.progress(feedback, 0.0, 0.05))
            check_metric_crs(fld.crs_wkt, "DEPTH")
            single["regime"] = single["regime"] or src.label
            single["run"] = single["regime"] + (f" {single['q_mld']:g} ML/d" if math.isfinite(single["q_mld"]) else "")
            if infos and not same_crs(fld.crs_wkt, infos[0].crs_wkt):
                raise ChannelHabitatError("the single run and the scenario table are in different CRS; reproject "
                                          "one of them", "SCENARIOS")
        crs_wkt = fld.crs_wkt if fld is not None else infos[0].crs_wkt
        stands_src = vegetationio.read_stands(source, comm_field, id_field, crs_wkt, context)
        overlay = veg.VegetationOverlay(stands_src.stands, distance, step)
        notes = list(stands_src.stands.notes)
        if stands_src.skipped:
            notes.append(f"{stands_src.skipped} vegetation feature(s) without geometry were left out.")

        # --- compute --------------------------------------------------------------------------------
        results = []
        if fld is not None:
            feedback.pushInfo(f"{single['run']}: {fld.n:,} wet elements")
            codes = scheme.classify(fld.depth, fld.speed)
            results.append((single, overlay.run(fld, codes, scheme.names, self.progress(feedback, 0.05, 0.3))))
            del fld
        if rows:
            def work(run):
                codes = scheme.classify(run.field.depth, run.field.speed)
                return overlay.run(run.field, codes, scheme.names, run.progress)

            table = scenariorun.run_scenarios(rows, work, wet_depth_m=wet, workers=workers, infos=infos,
                                              progress=self.progress(feedback, 0.3 if single else 0.0, 0.9),
                                              log=feedback.pushInfo)
            notes += table.notes
            for row, res in zip(rows, table.results):
                results.append(({"regime": row.regime, "q_mld": row.q_mld, "q_m3s": row.q_m3s, "run": row.label},
                                res))
        table_cols = veg.stand_table(stands_src.stands, results)
        run_keys = ["regime", "q_mld", "q_m3s", "run"]
        summary = veg.community_summary(table_cols, run_keys)
        edge_cols, edge_geoms = _edge_table(stands_src.stands, results)
        for note in notes:
            feedback.pushInfo(note)
        report_path = self.parameterAsFileOutput(parameters, "REPORT", context)
        report = build_report(table_cols, summary, scheme, distance, notes) if report_path else None

        # --- write ----------------------------------------------------------------------------------
        self.progress(feedback, 0.9, 1.0)(0.0, "writing outputs")
        crs = stands_src.crs if stands_src.crs.isValid() else QgsCoordinateReferenceSystem.fromWkt(crs_wkt)
        geoms = [vegetationio.as_multi(g) for _ in results for g in stands_src.geometries]
        out = {}
        out["VEGETATION_STATS"] = outputs.write_features(self, parameters, context, "VEGETATION_STATS", table_cols,
                                                         geoms, crs, QgsWkbTypes.MultiPolygon)
        outputs.style_on_load(context, out["VEGETATION_STATS"], func=vegetationio.wet_pct_style,
                              layer_name="Vegetation: wetted share")
        out["COMMUNITY_SUMMARY"] = outputs.write_features(self, parameters, context, "COMMUNITY_SUMMARY", summary)
        if parameters.get("EDGES") is not None:
            lines = [vegetationio.as_multi(g) for g in
                     vegetationio.to_source_crs(edge_geoms, crs_wkt, stands_src.crs, context)]
            out["EDGES"] = outputs.write_features(self, parameters, context, "EDGES", edge_cols, lines, crs,
                                                  QgsWkbTypes.MultiLineString)
            outputs.style_on_load(context, out["EDGES"], func=lambda lyr: layouts.style_class_vector(lyr, scheme),
                                  layer_name="Vegetation: water beside the edge")
        if report is not None:
            self.will_write(report_path)
            report.write(report_path)
            out["REPORT"] = report_path
        return out


def _edge_table(stands, results):
    cols = {k: [] for k in ("stand_id", "community", "regime", "q_mld", "q_m3s", "run", "class", "length_m")}
    types = {"stand_id": np.int64, "q_mld": float, "q_m3s": float, "length_m": float}
    geoms = []
    for run_cols, res in results:
        for e in res.edges:
            i = e["stand"]
            cols["stand_id"].append(int(stands.stand_id[i]))
            cols["community"].append(stands.community[i])
            for k in ("regime", "q_mld", "q_m3s", "run"):
                cols[k].append(run_cols[k])
            cols["class"].append(e["class"])
            cols["length_m"].append(e["length_m"])
            geoms.append(e["geometry"])
    out = {k: np.asarray(v, dtype=types.get(k, object)) for k, v in cols.items()}
    return out, geoms
