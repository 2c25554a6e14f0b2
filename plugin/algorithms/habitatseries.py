"""habitatseries: a daily flow series + flow-habitat curves -> habitat through time, spells, and
a comparison of ways to deliver a limited environmental water volume."""

from __future__ import annotations

import os

from qgis.core import (
    QgsProcessing,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterFile,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
)

from ..core import series as core
from ..core.curves import METHOD, FlowHabitatCurves, parse_targets
from ..core.errors import ChannelHabitatError
from ..gis import flowcurves, outputs, reachinput, scenarioinput, schemeinput
from ..gis.seriesinput import read_text_file
from ..gis.seriesreport import build_report
from ..gis.tableinput import table_columns
from .base import ChannelHabitatAlgorithm

FLOW_UNITS = ("", "ML/d", "m3/s")
VOLUME_UNITS = ("ML", "GL")

HELP = f"""
<p>Turns a daily flow series for the reach into habitat through time, using the flow–habitat
curves of <code>flowhabitat</code> (its CURVES table), or computing them from a scenario table the way
flowhabitat does. For every day it interpolates the share of each
class in each zone, tests the targets, finds the <b>spells</b> in which each target is met and the
<b>bloom-risk spells</b> in which very slow water covers more than a stated share of a zone, and
compares ways of delivering a limited <b>environmental water volume</b> on top of the series.</p>
<h3>Parameters</h3>
<ul>
<li><b>CURVES</b> — flowhabitat's CURVES table (layer or CSV): regime, q_mld, q_m3s, scope, unit,
chainage_from_m, chainage_to_m, class, area_m2, wet_area_m2, percent. Give CURVES <i>or</i> SCENARIOS,
not both.</li>
<li><b>SCENARIOS</b> — instead of CURVES: a scenario table (CSV or table layer, as in flowhabitat: regime,
discharge, unit and the run files). Only the runs of REGIME are read; the curves are computed by flowhabitat's
own code (classes, areas per reach, zone and segment). With it: <b>CENTRELINE</b>, <b>SEGMENT_LENGTH</b>,
<b>ZONE_BREAKS</b> (and the advanced CENTRELINE_DIRECTION, SEGMENTS, ZONES: buildreach's segment and zone
polygons), <b>SCHEME</b>, <b>CLASS_TABLE</b>, <b>CLASS_FILE</b>, <b>WET_DEPTH</b> (m, default 0.05) and
<b>PARALLEL_RUNS</b> (advanced), all as in flowhabitat; they are ignored with CURVES. Units, classes and
targets are checked against the reach and the scheme before any run is read.</li>
<li><b>REGIME</b> — the regime the series applies to (case-insensitive; empty: the only regime in CURVES or
the scenario table).</li>
<li><b>FLOWS</b> — daily flow series CSV with a header: <code>date</code> (ISO YYYY-MM-DD),
<code>discharge</code>, <code>unit</code> (ML/d or m3/s per row; or one column <code>q_mld</code> /
<code>q_m3s</code>). Every day once: gaps, duplicate dates, empty or negative flows and unknown units
are refused, naming the first offending dates. Further columns are <i>alternative series</i> (options),
in the row's unit.</li>
<li><b>FLOW_UNIT</b> — unit of the discharge column when the file has no unit column.</li>
<li><b>ALTERNATIVES</b> — which further columns are alternative series (comma-separated; empty = all).</li>
<li><b>REPORT_UNITS</b> — the units reported in DAILY and tested for bloom risk: zone names, <code>reach</code>,
<code>segment N</code> (comma-separated; empty = the reach and every zone).</li>
<li><b>TARGET_STATEMENTS</b> — statements as in flowhabitat, one per line or separated by ';':
<code>lower: moderate+fast &gt;= 50%</code>. They become t1, t2, ... in the outputs.</li>
<li><b>BLOOM_CLASSES</b> — the class(es) counted as stratification-prone very slow water (default
<code>very slow</code>; several joined by '+'; empty = no bloom-risk analysis).</li>
<li><b>BLOOM_SHARE</b> — a day is at bloom risk in a unit when those classes cover <i>more than</i> this
share of its wet area (default 50 %: most of the zone; common practice, no source — set it with local
advice).</li>
<li><b>BLOOM_MIN_DAYS</b> — the shortest run of such days counted as a bloom-risk spell (default 5 days,
after the duration of persistent stratification reported by Mitrovic et al. 2003, Freshwater Biology
48:164–174).</li>
<li><b>ENV_VOLUME</b>, <b>VOLUME_UNIT</b> — the environmental water volume (ML or GL; 1 GL = 1000 ML).</li>
<li><b>DELIVERY</b> — delivery options, one per line: <code>name: pattern key=value ...</code>
<ul>
<li><code>pulse start=DATE duration=DAYS [ramp_up=DAYS] [ramp_down=DAYS] [ramp=DAYS]</code> — linear ramps
(day k of an r-day ramp carries k/(r+1) of the peak) around <i>duration</i> days at the peak; the peak
added flow is solved so the volume is used exactly.</li>
<li><code>peak from=DATE to=DATE duration=DAYS [ramps]</code> — the same pulse centred on the highest base
flow in the window (lifting a natural peak).</li>
<li><code>recession start=DATE [fall=PERCENT] [level=FLOW]</code> — holds the flow up from <i>level</i>
(default the base flow on the start day), falling at most <i>fall</i> % a day (default 0: held flat),
for as many days as the volume allows; the last day takes what is left.</li>
<li><code>constant start=DATE (end=DATE | days=N)</code> — the same added flow every day, volume / days.</li>
</ul>
The added flow summed over the days (ML/d × 1 day) equals the volume to the megalitre (in fact to
rounding error). A pattern that does not fit in the record is refused.</li>
<li><b>WUA</b> — optional weighted usable area table (regime, q_mld or q_m3s, scope, unit, wua_m2,
optional species), interpolated like the curves.</li>
</ul>
<h3>Outputs</h3>
<ul>
<li><b>DAILY</b> — one row per option and day: option, date, q_mld, q_m3s, added_mld, in_ladder,
pct_&lt;unit&gt;_&lt;class&gt; (%), t<i>k</i>_pct and t<i>k</i>_met per target, bloom_&lt;unit&gt;_pct /
_met, wua_…_m2. Days outside the discharge ladder have in_ladder = false, empty shares, and meet nothing.</li>
<li><b>SPELLS</b> — option, criterion, kind (target | bloom), unit, condition, start, end, length_days,
censored_start, censored_end (the spell touches the start or end of the record, or a day outside the
ladder: it may be longer), qualifies (length ≥ the minimum), mean_pct, min_pct, max_pct.</li>
<li><b>OPTIONS</b> — one row per option (base first): pattern, delivery (what was solved), volume_ml,
volume_given_ml, added_peak_mld, delivery_start, delivery_end, record_days, outside_ladder_days,
t<i>k</i>_met_days, t<i>k</i>_gain_days (against the base), t<i>k</i>_spells, t<i>k</i>_longest_days,
bloom_&lt;unit&gt;_spells, bloom_&lt;unit&gt;_days, bloom_&lt;unit&gt;_longest_days, mean_wua_…_m2.</li>
<li><b>CURVES_OUT</b> (optional, with SCENARIOS only) — the computed curves of REGIME as a CURVES table
(flowhabitat's columns), to reuse as CURVES in later runs without reading the runs again.</li>
<li><b>REPORT</b> — HTML: hydrographs, spells through time, class shares through time, the options
side by side.</li>
</ul>
<h3>Method</h3>
<p>With SCENARIOS, every run of the regime goes through flowhabitat's pipeline (wet elements, chainage on the
axis once per grid or mesh, classes, class areas per unit; two runs at a time) and the result is the curves
flowhabitat would write for that regime. A spell is a maximal run of consecutive days meeting a condition.
Class shares are interpolated
between the runs exactly as flowhabitat does: {METHOD}; a class set (moderate+fast) is one curve.
Flows outside the runs are flagged and counted, never extrapolated; a series entirely outside them is
refused. The flow series is taken as the flow through the reach on each day (no routing or losses).</p>
"""


REPORT_UNITS = "REPORT_UNITS"
CURVES_OUT = "CURVES_OUT"
SCENARIO_NOTE = " [with SCENARIOS]"
# Reach and class parameters that mean nothing when the curves come from a CURVES table.
SCENARIO_ONLY = (reachinput.CENTRELINE, reachinput.ZONE_BREAKS, reachinput.SEGMENTS, reachinput.ZONES,
                 schemeinput.CLASS_FILE)


class HabitatSeries(ChannelHabitatAlgorithm):
    ALG_ID = "habitatseries"
    DISPLAY_NAME = "Habitat through time (flow series, spells, delivery options)"
    GROUP_ID = "flow"
    HELP = HELP

    def define(self, config):
        self.addParameter(QgsProcessingParameterFeatureSource(
            "CURVES", "Flow-habitat curves (flowhabitat CURVES table) [or SCENARIOS]",
            [QgsProcessing.SourceType.TypeVector], optional=True))
        # SCENARIOS, the reach, the classes and WET_DEPTH: flowhabitat's own parameters, to compute the curves
        flowcurves.add_curve_parameters(self, optional=True, regimes=False, note=SCENARIO_NOTE)
        self.addParameter(QgsProcessingParameterString(
            "REGIME", "Regime (empty: the only one in CURVES or SCENARIOS)", optional=True))
        self.addParameter(QgsProcessingParameterFile(
            "FLOWS", "Daily flow series (CSV: date, discharge, unit)", extension="csv"))
        self.addParameter(QgsProcessingParameterEnum(
            "FLOW_UNIT", "Discharge unit when the file has no unit column",
            ["(from the file's unit column)", "ML/d", "m3/s"], defaultValue=0))
        self.addParameter(QgsProcessingParameterString(
            "ALTERNATIVES", "Alternative series columns (comma-separated; empty: every further column)",
            optional=True))
        self.addParameter(QgsProcessingParameterString(
            REPORT_UNITS, "Units to report: zone names, 'reach', 'segment N' (empty: reach and every zone)",
            optional=True))
        self.addParameter(QgsProcessingParameterString(
            "TARGET_STATEMENTS", "Targets, e.g. 'lower: moderate+fast >= 50%' (one per line or ';')", multiLine=True,
            optional=True))
        self.addParameter(QgsProcessingParameterString(
            "BLOOM_CLASSES", "Bloom risk: very slow class(es), joined by '+' (empty: no bloom analysis)",
            defaultValue=core.DEFAULT_BLOOM_CLASSES, optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            "BLOOM_SHARE", "Bloom risk: share of the unit's wet area exceeded (%)",
            QgsProcessingParameterNumber.Type.Double, core.DEFAULT_BLOOM_SHARE_PCT, minValue=0.0, maxValue=99.999))
        self.addParameter(QgsProcessingParameterNumber(
            "BLOOM_MIN_DAYS", "Bloom risk: minimum spell length (days; Mitrovic et al. 2003)",
            QgsProcessingParameterNumber.Type.Integer, core.DEFAULT_BLOOM_MIN_DAYS, minValue=1))
        self.addParameter(QgsProcessingParameterNumber(
            "ENV_VOLUME", "Environmental water volume (0: none)", QgsProcessingParameterNumber.Type.Double,
            0.0, minValue=0.0, optional=True))
        self.addParameter(QgsProcessingParameterEnum("VOLUME_UNIT", "Volume unit", list(VOLUME_UNITS),
                                                     defaultValue=0))
        self.addParameter(QgsProcessingParameterString(
            "DELIVERY", "Delivery options, e.g. 'spring pulse: pulse start=2023-10-01 duration=5 ramp=3'",
            multiLine=True, optional=True))
        self.addParameter(QgsProcessingParameterFeatureSource(
            "WUA", "Weighted usable area table (optional)", [QgsProcessing.SourceType.TypeVector], optional=True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "DAILY", "Daily habitat", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "SPELLS", "Spells", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "OPTIONS", "Delivery options compared", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFeatureSink(
            CURVES_OUT, "Computed flow-habitat curves (CURVES table of the regime)" + SCENARIO_NOTE,
            QgsProcessing.SourceType.TypeVector, optional=True, createByDefault=False))
        self.addParameter(QgsProcessingParameterFileDestination(
            "REPORT", "Report", "HTML files (*.html)", optional=True, createByDefault=True))

    # ------------------------------------------------------------------------------------------
    def _curve_source(self, parameters, context, feedback):
        """Exactly one of CURVES and SCENARIOS. Returns (curves view or None, plan or None, regime,
        names: CurveUnits, report rows). With SCENARIOS the plan holds the checked inputs of the runs of
        the regime (nothing read yet beyond the file headers); with CURVES the view is ready."""
        curves_given = parameters.get("CURVES") not in (None, "")
        table_given = scenarioinput.scenarios_given(parameters)
        if curves_given and table_given:
            raise ChannelHabitatError(
                "give either CURVES (flowhabitat's CURVES table) or SCENARIOS (a scenario table to compute the "
                "curves from), not both", "CURVES")
        if not curves_given and not table_given:
            raise ChannelHabitatError(
                "give CURVES (flowhabitat's CURVES table) or SCENARIOS (a scenario table, with the reach "
                "CENTRELINE, to compute the curves from)", "CURVES")
        regime_text = self.parameterAsString(parameters, "REGIME", context)
        if curves_given:
            ignored = [n for n in SCENARIO_ONLY if parameters.get(n) not in (None, "")]
            if ignored:
                feedback.pushWarning(f"{', '.join(ignored)}: used only to compute the curves from SCENARIOS; "
                                     "ignored with a CURVES table.")
            source = self.parameterAsSource(parameters, "CURVES", context)
            curves = FlowHabitatCurves.from_table(table_columns(source, parameter="CURVES"), "CURVES")
            view = core.CurveView(curves, regime_text)
            return view, None, view.regime, view, [("Flow-habitat curves", f"CURVES table {source.sourceName()}")]
        rows, table_desc, workers = scenarioinput.read_scenario_parameters(self, parameters, context)
        regime, regime_rows = flowcurves.rows_of_regime(rows, regime_text)
        plan = flowcurves.read_curve_inputs(self, parameters, context, feedback, regime_rows, workers)
        others = [r for r in dict.fromkeys(r.regime for r in rows) if r != regime]
        feedback.pushInfo(
            f"Curves from the scenario table {table_desc}: only the {len(regime_rows)} runs of regime {regime} are "
            "read" + (f" (the table's {len(rows) - len(regime_rows)} runs of {', '.join(others)} are not needed for "
                      "this flow series)" if others else "") + ".")
        info = [("Flow-habitat curves", f"computed from the scenario table {table_desc}: {len(regime_rows)} runs of "
                 f"regime {regime}"),
                ("Class scheme", f"{plan.scheme.name}: {', '.join(plan.scheme.names)}"),
                ("Wet-depth threshold", f"{plan.wet_depth_m:g}", "m"),
                ("Reach", f"chainage {plan.reach.axis.start_m:,.0f}–{plan.reach.axis.end_m:,.0f} m; "
                 f"{plan.reach.n_zones} zones ({', '.join(plan.reach.zone_names)}), {plan.reach.n_segments} segments")]
        return None, plan, regime, core.CurveUnits(plan.skeleton()), info

    def compute(self, parameters, context, feedback):
        progress = self.progress(feedback)
        # -- the curves (or what computing them needs), the units, targets and bloom criteria: all checked
        #    before a run of a scenario table is read
        view, plan, regime, names, curve_info = self._curve_source(parameters, context, feedback)
        units = names.resolve_units(self.parameterAsString(parameters, REPORT_UNITS, context), REPORT_UNITS)
        targets = parse_targets(self.parameterAsString(parameters, "TARGET_STATEMENTS", context), names.zone_names,
                                names.classes, names.n_segments, parameter="TARGET_STATEMENTS")
        criteria = core.target_criteria(targets)
        bloom_text = self.parameterAsString(parameters, "BLOOM_CLASSES", context).strip()
        bloom_share = self.parameterAsDouble(parameters, "BLOOM_SHARE", context)
        bloom_days = self.parameterAsInt(parameters, "BLOOM_MIN_DAYS", context)
        if bloom_text:
            criteria += core.bloom_criteria(units, names.resolve_classes(
                bloom_text, "BLOOM_CLASSES", "; name the very slow class(es) of these curves, or leave "
                "BLOOM_CLASSES empty to skip the bloom-risk analysis"),
                                            bloom_share, bloom_days)
        # -- the flow series, the volume and the options
        flows_path = self.parameterAsFile(parameters, "FLOWS", context)
        alt_text = self.parameterAsString(parameters, "ALTERNATIVES", context)
        series = core.read_flow_series(
            read_text_file(flows_path, "FLOWS"),
            unit=FLOW_UNITS[self.parameterAsEnum(parameters, "FLOW_UNIT", context)] or None,
            alternatives=[a for a in alt_text.split(",") if a.strip()] or None)
        vol_value = self.parameterAsDouble(parameters, "ENV_VOLUME", context) if parameters.get("ENV_VOLUME") \
            not in (None, "") else 0.0
        vol_unit = VOLUME_UNITS[self.parameterAsEnum(parameters, "VOLUME_UNIT", context)]
        volume = core.volume_to_ml(vol_value, vol_unit)
        options = core.parse_delivery_options(self.parameterAsString(parameters, "DELIVERY", context))
        deliveries = [core.added_flow(o, series, volume) for o in options]
        deliveries += [core.alternative_delivery(n, q, series) for n, q in series.alternatives.items()]
        wua = None
        if parameters.get("WUA"):
            wua = core.WuaCurves.from_table(
                table_columns(self.parameterAsSource(parameters, "WUA", context), parameter="WUA"), regime, units)
        # -- a scenario table: the curves of the regime (every run read and classified on both cores)
        computed = None
        span = 0.0
        if plan is not None:
            span = 0.6
            computed = flowcurves.compute_curves(plan, progress=progress.sub(0.0, span), log=feedback.pushInfo)
            view = core.CurveView(computed.curves, regime)
        # -- compute everything, then the report, then write
        res = core.analyse_series(series, view, units, criteria, deliveries, volume if volume > 0 else None,
                                  wua, progress.sub(span, span + 0.7 * (1.0 - span)))
        for note in res.notes:
            feedback.pushWarning(note)
        inputs = curve_info + [
            ("Flow series", os.path.basename(flows_path)),
            ("Days", f"{series.n_days} ({core.iso(series.start)} to {core.iso(series.end)})"),
            ("Regime", view.regime),
            ("Discharge ladder", f"{len(view.ladder_mld)} runs, {view.ladder_mld[0]:,.0f}–{view.ladder_mld[-1]:,.0f}",
             "ML/d"),
            ("Units reported", ", ".join(units)),
            ("Environmental water volume", f"{volume:,.0f}" if volume > 0 else "none", "ML" if volume > 0 else ""),
            ("Bloom risk", f"{bloom_text} > {bloom_share:g} % of the unit for >= {bloom_days} days"
             if bloom_text else "not analysed"),
        ]
        progress(span + 0.75 * (1.0 - span), "report")
        report = build_report(res, inputs)
        curve_cols = computed.curves.table() if computed is not None else None
        progress(span + 0.85 * (1.0 - span), "writing")
        results = {}
        for name, cols in (("DAILY", res.daily), ("SPELLS", res.spells), ("OPTIONS", res.table)):
            results[name] = outputs.write_features(self, parameters, context, name, cols)
        if parameters.get(CURVES_OUT) not in (None, ""):
            if curve_cols is not None:
                results[CURVES_OUT] = outputs.write_features(self, parameters, context, CURVES_OUT, curve_cols)
            else:
                feedback.pushInfo(f"{CURVES_OUT} is written only when the curves are computed from SCENARIOS; "
                                  "with a CURVES table given it is not written.")
        report_path = self.parameterAsFileOutput(parameters, "REPORT", context)
        if report_path:
            self.will_write(report_path)
            report.write(report_path)
            results["REPORT"] = report_path
        progress(1.0)
        return results
