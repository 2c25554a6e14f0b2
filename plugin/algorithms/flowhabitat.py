"""flowhabitat: a scenario table (regime, discharge, run files) -> class areas of every run, zone and
segment; flow-habitat curves; the smallest discharge that meets stated targets."""

from __future__ import annotations

from qgis.core import (
    QgsProcessing,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterString,
)

from ..core import curves as cv
from ..gis import flowcurves, outputs, scenarioinput
from ..gis.flowreport import build_report, runs_table
from .base import ChannelHabitatAlgorithm

WET_DEPTH = flowcurves.WET_DEPTH
TARGET_STATEMENTS = "TARGET_STATEMENTS"


class FlowHabitat(ChannelHabitatAlgorithm):
    ALG_ID = "flowhabitat"
    DISPLAY_NAME = "Flow-habitat curves and target discharges (scenario table)"
    GROUP_ID = "flow"
    HELP = f"""
<p>Runs the habitat classes and their areas for every run of a <b>scenario table</b> (each regime at each
discharge of its ladder), for the whole reach, every zone and every chainage segment; writes the
<b>flow&ndash;habitat curves</b> (how much of each class each regime gives as discharge rises) and answers the
inverse question: <b>what discharge meets a target</b> such as <code>lower: moderate+fast &gt;= 50%</code>.</p>
<h3>Parameters</h3>
<ul>
<li><b>SCENARIOS</b>: the scenario table, a CSV file or any table layer, with a header and one row per run:
<code>regime, discharge, unit</code> (ML/d or m3/s) and the run files: <code>depth</code> and <code>speed</code>
(or <code>u</code> and <code>v</code>) rasters, or a UGRID <code>mesh</code> with optional
<code>depth_group, velocity_group</code> (or <code>u_group, v_group</code>) and <code>time_index</code> (-1 = last).
Paths are relative to the table's folder. Refused with the row named: missing files, duplicate regime and
discharge, non-numeric or non-positive discharges, unknown units, rows without run files, runs in different
CRS, a geographic or non-metre CRS. <b>REGIMES</b> (optional): only these regimes, comma-separated.
<b>PARALLEL_RUNS</b> (advanced, default 2): runs worked on at the same time.</li>
<li><b>CENTRELINE</b>, <b>SEGMENT_LENGTH</b> (m, default 1000), <b>ZONE_BREAKS</b> (e.g.
<code>0 upper, 12000 middle, 25000 lower</code>; empty: equal thirds): the reach, as in maphabitat.</li>
<li><b>SCHEME</b>, <b>CLASS_TABLE</b>, <b>CLASS_FILE</b>: the habitat classes (default: very slow &lt; 0.05
&le; slow &lt; 0.20 &le; moderate &lt; 0.30 &le; fast, m/s).</li>
<li><b>WET_DEPTH</b> (m, default 0.05): shallower elements are dry.</li>
<li><b>TARGET_STATEMENTS</b> (optional): one per line or separated by ';':
<code>&lt;unit&gt;: &lt;class&gt;[+&lt;class&gt;...] &lt;op&gt; &lt;number&gt;%</code> with op one of &gt;=, &gt;,
&lt;=, &lt; and unit a zone name, <code>reach</code> or <code>segment N</code>; the percentage is of the unit's
wet area. Checked before any run is read.</li>
</ul>
<h3>Outputs</h3>
<ul>
<li><b>CURVES</b>: one row per regime &times; discharge &times; scope unit &times; class: <i>regime</i>,
<i>q_mld</i>, <i>q_m3s</i> (the one in the table's unit as written, the other converted: 1 ML/d = 1000/86400
m&sup3;/s exactly), <i>scope</i> (reach, zone, segment), <i>unit</i> ('reach', the zone name or the segment
number), <i>chainage_from_m</i>, <i>chainage_to_m</i>, <i>class</i>, <i>area_m2</i>, <i>wet_area_m2</i> (the
unit's wet area in that run), <i>percent</i> (area / wet area; empty where the unit is dry). It is the input of
<code>habitatseries</code>.</li>
<li><b>TARGETS</b>: one row per regime &times; target: <i>regime, target, unit, classes, op, threshold_pct,
status</i> ("met at the lowest run", "interpolated", "not reached within the runs"), <i>q_mld, q_m3s</i> (the
smallest discharge that meets it; empty when not reached), <i>pct_at_lowest, pct_at_highest, q_lowest_mld,
q_highest_mld, met_at_highest, lost_above_q_mld</i> (when the target is met and lost again at higher flows),
<i>note, method</i>.</li>
<li><b>REPORT</b>: HTML: the targets with a chart per target, the percentage of each class against discharge
for every unit with the regimes side by side, the class make-up per zone and regime, the share along the reach
per segment, the runs, tables (CSV links hold every column).</li>
</ul>
<h3>Method</h3>
<p>Every run goes through the same pipeline as maphabitat: wet elements (depth &ge; WET_DEPTH), chainage on the
axis (computed once per grid or mesh and reused by every run on it), classes, area-weighted class areas per
segment, zone and reach (elements beyond the axis ends are left out and said). Runs are read two at a time (both
cores). Between the runs of a regime the percentage of a class or class set is interpolated by {cv.METHOD}. A
target's discharge is the first crossing of the threshold in increasing discharge: exactly a run's discharge when
that run meets it with equality; "met at the lowest run" means the runs cannot show a lower requirement;
nothing is extrapolated beyond the runs.</p>
"""

    def define(self, config):
        flowcurves.add_curve_parameters(self)  # SCENARIOS, the reach, the classes, WET_DEPTH
        self.addParameter(QgsProcessingParameterString(
            TARGET_STATEMENTS, "Targets, e.g. 'lower: moderate+fast >= 50%' (one per line or ';')", multiLine=True,
            optional=True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "CURVES", "Flow-habitat curves (class areas per run and unit)", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "TARGETS", "Discharge needed for each target", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFileDestination(
            "REPORT", "Report", "HTML files (*.html)", optional=True, createByDefault=True))

    def compute(self, parameters, context, feedback):
        # --- inputs (everything checked before a run is read) --------------------------------------
        rows, table_desc, workers = scenarioinput.read_scenario_parameters(self, parameters, context)
        inputs = flowcurves.read_curve_inputs(self, parameters, context, feedback, rows, workers)
        reach, scheme, wet = inputs.reach, inputs.scheme, inputs.wet_depth_m
        targets = cv.parse_targets(self.parameterAsString(parameters, TARGET_STATEMENTS, context), reach.zone_names,
                                   scheme.names, reach.n_segments, parameter=TARGET_STATEMENTS)
        feedback.pushInfo(f"{len(rows)} runs of {len(set(r.regime for r in rows))} regime(s) from {table_desc}")

        # --- every run: classes and class areas per reach, zone and segment -----------------------
        run = flowcurves.compute_curves(inputs, progress=self.progress(feedback, 0.0, 0.85), log=feedback.pushInfo)
        curves, table = run.curves, run.table
        results = cv.required_discharge(curves, targets)
        curve_cols = curves.table()
        target_cols = cv.targets_table(results)
        for r in results:
            q = f"{r.q_mld:,.0f} ML/d ({r.q_m3s:.1f} m3/s)" if r.q_mld == r.q_mld else "-"
            feedback.pushInfo(f"target {r.target.text} | {r.regime}: {r.status} {q}")
        report_path = self.parameterAsFileOutput(parameters, "REPORT", context)
        report = None
        if report_path:
            self.progress(feedback, 0.85, 0.95)(0.0, "report")
            report = build_report(curves, results, table, scheme, wet, table_desc, runs_table(table))

        # --- write ------------------------------------------------------------------------------
        self.progress(feedback, 0.95, 1.0)(0.0, "writing outputs")
        out = {"CURVES": outputs.write_features(self, parameters, context, "CURVES", curve_cols),
               "TARGETS": outputs.write_features(self, parameters, context, "TARGETS", target_cols)}
        if report is not None:
            self.will_write(report_path)
            report.write(report_path)
            out["REPORT"] = report_path
        return out
