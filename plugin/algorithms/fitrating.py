"""fitrating: paired stage and discharge records -> rating Q = C (h - h0)^b; levels for a ladder."""

from __future__ import annotations

from qgis.core import (
    QgsProcessing,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterField,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
)

from ..core import rating as rt
from ..core.errors import ChannelHabitatError
from ..gis import outputs, tableinput
from ..gis.ratingreport import build_report
from .base import ChannelHabitatAlgorithm

UNITS = ["ML/d", "m3/s"]
SPACES = ["log", "linear", "stage"]


class FitRating(ChannelHabitatAlgorithm):
    ALG_ID = "fitrating"
    DISPLAY_NAME = "Fit stage-discharge rating"
    GROUP_ID = "hydrology"
    HELP = """
<p>Fits the rating <b>Q = C (h &minus; h0)<sup>b</sup></b> to paired stage and discharge records by nonlinear
least squares, and gives the stage for each discharge of a ladder (for example the downstream water level
that the natural-regime model runs need).</p>
<h3>Parameters</h3>
<ul>
<li><b>RECORDS</b>: a table or layer with one record per row (a CSV file may be given directly).</li>
<li><b>STAGE_FIELD</b> (m) and <b>DISCHARGE_FIELD</b>: the two fields; rows where either is empty are left out
and counted; text that is not a number, and zero or negative discharges, are refused with the row named.</li>
<li><b>DISCHARGE_UNIT</b>: ML/d or m3/s, the unit of the discharge field.</li>
<li><b>H0</b> (optional, m): the stage of zero flow. Empty: estimated from the records. Records at or below a
given h0 are refused.</li>
<li><b>FIT_SPACE</b> (advanced): <i>log</i> (default) minimises squared residuals of ln Q, giving equal weight
to relative errors, so low flows are fitted as closely as high ones; <i>linear</i> minimises squared
discharge residuals (the largest flows dominate); <i>stage</i> minimises squared stage residuals
h &minus; (h0 + (Q/C)<sup>1/b</sup>), the rating read as stage for a discharge: choose it when the stage readings
carry the scatter or when the levels are what you need.</li>
<li><b>LADDER</b> with <b>LADDER_UNIT</b>: discharges such as <code>3000, 4000, 5000</code>; or
<b>LADDER_TABLE</b> with <b>LADDER_FIELD</b> (unit from a field name ending in _mld or _m3s, else
LADDER_UNIT).</li>
</ul>
<h3>Outputs</h3>
<ul>
<li><b>RATING</b>: table <i>parameter, value, std_error, ci95_low, ci95_high, unit, description</i>: C_mld and
C_m3s (C for Q in ML/d and in m3/s), b, h0_m, then fit statistics: n_records, n_skipped, dof, r2 (in the
fitting space), r2_discharge, residual_se, rmse_q, bias_q, max_abs_residual_q, rms_residual_pct,
max_abs_residual_pct, rmse_stage_m, bias_stage_m, max_abs_residual_stage_m, recorded ranges, t_975,
corr_b_h0, fit_space.</li>
<li><b>LEVELS</b>: <i>q_mld, q_m3s, stage_m, stage_se_m, within_records</i> (false: the discharge lies outside
the recorded discharges and the stage is extrapolated).</li>
<li><b>REPORT</b>: HTML with the rating chart (records, fitted curve, ladder levels), residual charts and the
tables.</li>
</ul>
<h3>Method</h3>
<p>h0 by a profile search (for each h0 the log-space fit is a straight line), then all parameters by
Levenberg-Marquardt. Standard errors from the Jacobian at the optimum: cov = s&sup2; (J<sup>T</sup>J)<sup>-1</sup>,
s&sup2; = SSR / (n &minus; p); 95 % intervals from Student's t. The standard error of a level is that of the
fitted rating (delta method), not the scatter of one gauging. A rating fitted to pre-regulation records
describes the river without its structures; check that the control has not changed.</p>
"""

    def define(self, config):
        self.addParameter(QgsProcessingParameterFeatureSource(
            "RECORDS", "Stage-discharge records (table, layer or CSV)", [QgsProcessing.SourceType.TypeVector]))
        self.addParameter(QgsProcessingParameterField(
            "STAGE_FIELD", "Stage field (m)", "stage_m", "RECORDS", QgsProcessingParameterField.DataType.Any))
        self.addParameter(QgsProcessingParameterField(
            "DISCHARGE_FIELD", "Discharge field", "discharge_mld", "RECORDS",
            QgsProcessingParameterField.DataType.Any))
        self.addParameter(QgsProcessingParameterEnum("DISCHARGE_UNIT", "Discharge unit of the records", UNITS,
                                                     defaultValue=0))
        self.addParameter(QgsProcessingParameterNumber(
            "H0", "Stage of zero flow h0 (m) [empty: estimated]", QgsProcessingParameterNumber.Type.Double,
            optional=True))
        space = QgsProcessingParameterEnum(
            "FIT_SPACE", "Least squares on", ["ln Q (log space)", "Q (linear space)", "stage h (for levels)"],
            defaultValue=0)
        space.setFlags(space.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
        self.addParameter(space)
        self.addParameter(QgsProcessingParameterString(
            "LADDER", "Discharge ladder, e.g. '3000, 4000, 5000' [or a ladder table]", optional=True))
        self.addParameter(QgsProcessingParameterEnum("LADDER_UNIT", "Unit of the ladder", UNITS, defaultValue=0))
        self.addParameter(QgsProcessingParameterFeatureSource(
            "LADDER_TABLE", "Discharge ladder table [instead of the list]", [QgsProcessing.SourceType.TypeVector],
            optional=True))
        self.addParameter(QgsProcessingParameterField(
            "LADDER_FIELD", "Ladder discharge field", "q_mld", "LADDER_TABLE",
            QgsProcessingParameterField.DataType.Any, optional=True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "RATING", "Rating parameters and statistics", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "LEVELS", "Levels for the ladder", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFileDestination(
            "REPORT", "Report", "HTML files (*.html)", optional=True, createByDefault=True))

    # ------------------------------------------------------------------------------------------
    def _field(self, parameters, context, name, source, src_param):
        fields = self.parameterAsFields(parameters, name, context)
        if not fields or not fields[0]:
            raise ChannelHabitatError("choose the field", name)
        return tableinput.require_field(source, fields[0], name)

    def _ladder(self, parameters, context):
        text = self.parameterAsString(parameters, "LADDER", context).strip()
        table = self.parameterAsSource(parameters, "LADDER_TABLE", context)
        unit = UNITS[self.parameterAsEnum(parameters, "LADDER_UNIT", context)]
        if text and table is not None:
            raise ChannelHabitatError("give the ladder either as a list (LADDER) or as a table (LADDER_TABLE), "
                                      "not both", "LADDER")
        if table is not None:
            fields = self.parameterAsFields(parameters, "LADDER_FIELD", context)
            if not fields or not fields[0]:
                raise ChannelHabitatError("name the discharge field of the ladder table", "LADDER_FIELD")
            fname = tableinput.require_field(table, fields[0], "LADDER_FIELD")
            low = fname.lower()
            if low.endswith("_mld"):
                unit = "ML/d"
            elif low.endswith("_m3s"):
                unit = "m3/s"
            values = tableinput.table_columns(table, [fname], "LADDER_TABLE")[fname]
            return rt.ladder_from_values(values, "LADDER_TABLE"), unit, f"table field {fname} ({unit})"
        if not text:
            raise ChannelHabitatError("give the discharge ladder: a list such as '3000, 4000, 5000' or a table "
                                      "(LADDER_TABLE)", "LADDER")
        return rt.parse_discharge_list(text, "LADDER"), unit, f"list ({unit})"

    def compute(self, parameters, context, feedback):
        source = self.parameterAsSource(parameters, "RECORDS", context)
        if source is None:
            raise ChannelHabitatError("give the stage-discharge records table", "RECORDS")
        stage_f = self._field(parameters, context, "STAGE_FIELD", source, "RECORDS")
        q_f = self._field(parameters, context, "DISCHARGE_FIELD", source, "RECORDS")
        if stage_f == q_f:
            raise ChannelHabitatError("the stage and discharge fields are the same field", "DISCHARGE_FIELD")
        unit = UNITS[self.parameterAsEnum(parameters, "DISCHARGE_UNIT", context)]
        low = q_f.lower()
        if (low.endswith("_m3s") and unit == "ML/d") or (low.endswith("_mld") and unit == "m3/s"):
            feedback.pushWarning(f"the discharge field '{q_f}' is named like another unit than {unit} "
                                 "(DISCHARGE_UNIT); check the unit")
        h0_raw = parameters.get("H0")
        h0 = None if h0_raw in (None, "") else self.parameterAsDouble(parameters, "H0", context)
        space = SPACES[self.parameterAsEnum(parameters, "FIT_SPACE", context)]
        ladder, ladder_unit, ladder_desc = self._ladder(parameters, context)

        cols = tableinput.table_columns(source, [stage_f, q_f], "RECORDS")
        records = rt.records_from_values(cols[stage_f], cols[q_f], unit, stage_param="STAGE_FIELD",
                                         discharge_param="DISCHARGE_FIELD")
        fit = rt.fit_rating(records, h0=h0, fit_space=space)
        lev = rt.levels(fit, ladder, ladder_unit)
        rating_cols = rt.rating_table(fit)

        notes = list(fit.notes)
        if records.skipped_blank:
            notes.append(f"{records.skipped_blank} row(s) with an empty stage or discharge were left out")
        outside = ~lev["within_records"]
        if outside.any():
            qs = ", ".join(f"{v:g}" for v in lev["q_mld"][outside])
            notes.append(f"the ladder discharges {qs} ML/d lie outside the recorded discharges: their levels are "
                         "extrapolated from the rating")
        feedback.pushInfo(fit.equation)
        for n in notes:
            if "extrapolated" in n:
                feedback.pushWarning(n)
            else:
                feedback.pushInfo(n)

        report_path = self.parameterAsFileOutput(parameters, "REPORT", context)
        report = None
        if report_path:
            inputs = [
                ("Records", source.sourceName() or "table"), ("Stage field", stage_f),
                ("Discharge field", f"{q_f} ({unit})"), ("Records used", fit.n),
                ("Rows left out (empty)", records.skipped_blank),
                ("h0", "estimated" if fit.h0_estimated else f"given: {fit.h0:g} m"),
                ("Least squares on", {"log": "ln Q", "linear": "Q", "stage": "stage h"}[space]),
                ("Ladder", ladder_desc),
            ]
            report = build_report(fit, lev, inputs, notes)

        # --- write (everything computed above) --------------------------------------------------
        results = {}
        results["RATING"] = outputs.write_features(self, parameters, context, "RATING", rating_cols)
        results["LEVELS"] = outputs.write_features(self, parameters, context, "LEVELS", lev)
        if report is not None:
            self.will_write(report_path)
            report.write(report_path)
            results["REPORT"] = report_path
        return results
