"""driftresidence: particles drifting through the reach -> paths, time in each class and zone, report."""

from __future__ import annotations

import math

from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsProcessing,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFeatureSink,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterFile,
    QgsProcessingParameterFileDestination,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
    QgsWkbTypes,
)

from ..core import drift
from ..core import scenario as scn
from ..core.errors import ChannelHabitatError
from ..core.habitat import check_metric_crs, crs_name, reach_in_crs
from ..core.reach import locate_field
from ..core.units import parse_numbers, to_m3s, to_mld
from ..gis import driftio, outputs, reachinput, runinput, schemeinput
from ..gis.driftreport import build_report
from ..gis.runs import same_crs
from .base import ChannelHabitatAlgorithm

BANK_OPTIONS = (("slide", "Slide along the bank (keeps drifting; contacts counted)"),
                ("strand", "Strand: stop at the first contact with a bank"))


class DriftResidence(ChannelHabitatAlgorithm):
    ALG_ID = "driftresidence"
    DISPLAY_NAME = "Drift and residence time"
    GROUP_ID = "flow"
    HELP = """
<p>Releases particles at the upstream end of the reach (or at given points) and lets them drift with the
depth-averaged velocity until they reach the downstream end: paths with the time since release, and the time
each particle spends in each habitat class and each reach zone - how long drifting eggs, larvae or
cyanobacterial cells stay in slow water under each regime and discharge. Runs with speed only get a 1D
travel-time estimate.</p>
<h3>Parameters</h3>
<ul>
<li>One run: <b>DEPTH</b> with <b>VELOCITY_U</b> and <b>VELOCITY_V</b> rasters (m/s), or a <b>MESH</b> with a
vector group (<b>MESH_VELOCITY_GROUP</b>, or <b>MESH_U_GROUP</b>/<b>MESH_V_GROUP</b>), <b>MESH_TIME_INDEX</b>,
<b>MESH_CRS</b>. With a <b>SPEED</b> raster (or a speed group) only, the run gets the 1D estimate.
<b>REGIME</b>, <b>DISCHARGE</b>, <b>DISCHARGE_UNIT</b> label it. <b>WET_DEPTH</b> (m, default 0.05).</li>
<li>and/or <b>SCENARIOS</b>: a scenario table (CSV: regime, discharge, unit, depth, speed, u, v, or mesh and
groups) to run every row, optionally narrowed with <b>SCENARIO_REGIMES</b> and <b>SCENARIO_DISCHARGES</b>
(in DISCHARGE_UNIT). All runs must share one projected CRS in metres.</li>
<li><b>CENTRELINE</b> (buildreach AXIS or any centreline; its chainage must run with the flow, see
<b>CENTRELINE_DIRECTION</b>), <b>SEGMENT_LENGTH</b> (m, for the 1D estimate), <b>ZONE_BREAKS</b> (or buildreach
<b>SEGMENTS</b>/<b>ZONES</b>): the reach.</li>
<li><b>SCHEME</b>, <b>CLASS_TABLE</b>, <b>CLASS_FILE</b>: the classes (default very slow / slow / moderate /
fast).</li>
<li><b>N_PARTICLES</b> (default 200): released across the wet width of the cross-section at
<b>RELEASE_CHAINAGE</b> (m; empty: one element inside the upstream end of the wet field), at the centres of
equal shares of the wet width. Or <b>SEEDS</b>: a point layer, one particle per point (reprojected to the
run's CRS).</li>
<li><b>END_CHAINAGE</b> (m; empty: the end of the reach axis). When the wet field of a run ends upstream of
it, drift is followed to five elements inside the field's end (and the log says so).</li>
<li><b>MAX_TIME_DAYS</b> (default 30): particles still drifting then stop (fate <i>time_limit</i>; their times
are lower bounds).</li>
<li><b>BANK_CONTACT</b>: <i>slide</i> (default; the rest of a step that meets the wet edge runs along it - a
bank lets no water through) or <i>strand</i> (the particle stops at the bank).</li>
<li>Advanced: <b>COURANT</b> (default 1: about one element per step), <b>MAX_STEP_S</b> (600 s),
<b>MIN_STEP_S</b> (0.1 s), <b>PATH_SPACING</b> (m between stored path vertices, default 20; 0 = every step),
<b>BAND_FRACTION</b> (0.5: the centreline band of the 1D estimate is the central half of the wet width),
<b>WORKERS</b> (scenario tables: 0 = both cores when possible, 1 = one).</li>
</ul>
<h3>Outputs</h3>
<ul>
<li><b>PATHS</b>: one LineStringM per particle (M = seconds since release): <i>run, regime, q_mld, q_m3s,
particle, fate</i> (downstream, upstream, stranded, outside, time_limit), <i>method, t_total_h, t_total_d,
release_offset_m</i> (+ left of the flow), <i>end_chainage_m, path_length_m, bank_contacts</i>. A speed-only
run gives one line along the axis with M = the estimated time (fate <i>estimate</i>).</li>
<li><b>RESIDENCE</b>: one row per particle: <i>run, regime, q_mld, q_m3s, particle, fate, release_x,
release_y, release_chainage_m, release_offset_m, end_chainage_m, path_length_m, n_steps, t_total_h, t_total_d,
t_&lt;class&gt;_h, pct_&lt;class&gt;</i> (% of its travel time), <i>t_zone_&lt;zone&gt;_h,
t_zone_&lt;zone&gt;_&lt;class&gt;_h</i>.</li>
<li><b>RESIDENCE_SUMMARY</b>: per run, one row for the reach and one per zone (<i>scope, unit</i>):
<i>method, release_chainage_m, end_chainage_m, chainage_from_m, chainage_to_m, n_particles, n_tracked,
n_&lt;fate&gt;</i>, the time (in the reach or zone) <i>t_total_{p10,p50,p90,mean}_{h,d}</i>, per class
<i>t_&lt;class&gt;_{p10,p50,p90,mean}_{h,d}</i> and <i>pct_&lt;class&gt;</i> (share of all particle time),
<i>step_rule, t_estimate_h</i> (the 1D estimate for comparison).</li>
<li><b>ESTIMATE</b>: the 1D estimate per run and segment: <i>segment, chainage_from_m, chainage_to_m,
length_m, wet_width_m, band_half_width_m, n_band, v_band_mean_ms, d_band_mean_m, class, t_segment_h,
t_cumulative_h, t_cumulative_d</i>.</li>
<li><b>REPORT</b>: HTML with fates, a chart of the time in each class per run (and against discharge for a
scenario table), zone tables, the estimate and a map of the paths.</li>
</ul>
<h3>Method</h3>
<p>Classical 4th-order Runge-Kutta, one step per particle per iteration, dt = COURANT &times; h / |V| kept between
MIN_STEP_S and MAX_STEP_S, with h the cell size or the square root of the face area and |V| the speed at the
step start (a step that would move further than 2 COURANT h is redone shorter). Rasters: bilinear
interpolation over wet cells only; meshes: face-constant values (as stored), faces found by walking from the
particle's last face. The end crossing is placed on the step's cubic Hermite path. Banks (<i>slide</i>): the
rest of a step that meets the wet edge loses its component into the bank (bank direction from the raster's
wet cells or the mesh face's dry sides) and the particle drifts on; a current straight into the bank strands
it. Time in classes: the class of the water at the four Runge-Kutta stage points, Simpson weights 1/6, 1/3,
1/3, 1/6 - class times add up to the travel time. Percentiles: numpy's linear percentiles over the particles
of a run. 1D estimate: segment length over the area-weighted mean speed of the wet elements with |offset|
&le; BAND_FRACTION &times; W / 2, W = the segment's wet area / length. Details and sources:
docs/algorithms/driftresidence.md.</p>
"""

    def define(self, config):
        runinput.add_run_parameters(self)
        runinput.add_run_label_parameters(self)
        self.addParameter(QgsProcessingParameterFile(
            "SCENARIOS", "Scenario table (CSV) [instead of, or besides, the single run]",
            QgsProcessingParameterFile.File, fileFilter="CSV files (*.csv *.txt)", optional=True))
        self.addParameter(QgsProcessingParameterString(
            "SCENARIO_REGIMES", "Only these regimes of the table (comma-separated) [empty: all]", optional=True))
        self.addParameter(QgsProcessingParameterString(
            "SCENARIO_DISCHARGES", "Only these discharges of the table (comma-separated, DISCHARGE_UNIT) "
            "[empty: all]", optional=True))
        reachinput.add_reach_parameters(self)
        schemeinput.add_scheme_parameters(self, advanced_table=True)
        self.addParameter(QgsProcessingParameterNumber(
            "N_PARTICLES", "Particles released across the wet width", QgsProcessingParameterNumber.Type.Integer,
            200, minValue=1, maxValue=100000))
        self.addParameter(QgsProcessingParameterFeatureSource(
            "SEEDS", "Release points instead [optional point layer]", [QgsProcessing.SourceType.TypeVectorPoint],
            optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            "RELEASE_CHAINAGE", "Release chainage (m) [empty: the upstream end of the wet field]",
            QgsProcessingParameterNumber.Type.Double, optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            "END_CHAINAGE", "End chainage (m) [empty: the end of the reach axis]",
            QgsProcessingParameterNumber.Type.Double, optional=True))
        self.addParameter(QgsProcessingParameterNumber(
            "MAX_TIME_DAYS", "Maximum travel time (days)", QgsProcessingParameterNumber.Type.Double,
            drift.DEFAULT_T_MAX_S / drift.SECONDS_PER_DAY, minValue=1e-6))
        self.addParameter(QgsProcessingParameterEnum(
            "BANK_CONTACT", "At a bank", [t for _, t in BANK_OPTIONS], defaultValue=0))
        adv = [
            QgsProcessingParameterNumber("COURANT", "Courant number of the step (elements per step)",
                                         QgsProcessingParameterNumber.Type.Double, 1.0, minValue=0.01, maxValue=4.0),
            QgsProcessingParameterNumber("MAX_STEP_S", "Maximum time step (s)",
                                         QgsProcessingParameterNumber.Type.Double, 600.0, minValue=0.001),
            QgsProcessingParameterNumber("MIN_STEP_S", "Minimum time step (s)",
                                         QgsProcessingParameterNumber.Type.Double, 0.1, minValue=0.0001),
            QgsProcessingParameterNumber("PATH_SPACING", "Distance between stored path vertices (m; 0 = every step)",
                                         QgsProcessingParameterNumber.Type.Double, drift.DEFAULT_PATH_SPACING_M,
                                         minValue=0.0),
            QgsProcessingParameterNumber("BAND_FRACTION", "1D estimate: centreline band as a share of the wet width",
                                         QgsProcessingParameterNumber.Type.Double, 0.5, minValue=0.01, maxValue=1.0),
            QgsProcessingParameterNumber("WORKERS", "Scenario tables: worker processes (0 = automatic)",
                                         QgsProcessingParameterNumber.Type.Integer, 0, minValue=0, maxValue=64),
        ]
        for p in adv:
            p.setFlags(p.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
            self.addParameter(p)
        self.addParameter(QgsProcessingParameterFeatureSink(
            "PATHS", "Particle paths (M = seconds since release)", QgsProcessing.SourceType.TypeVectorLine,
            optional=True, createByDefault=True))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "RESIDENCE", "Residence time per particle", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "RESIDENCE_SUMMARY", "Residence time per run and zone", QgsProcessing.SourceType.TypeVector))
        self.addParameter(QgsProcessingParameterFeatureSink(
            "ESTIMATE", "1D travel-time estimate per segment", QgsProcessing.SourceType.TypeVector,
            optional=True, createByDefault=True))
        self.addParameter(QgsProcessingParameterFileDestination(
            "REPORT", "Report", "HTML files (*.html)", optional=True, createByDefault=True))

    # ------------------------------------------------------------------------------------------
    def _scenario_rows(self, parameters, context, unit):
        path = self.parameterAsFile(parameters, "SCENARIOS", context)
        if not path:
            return []
        rows = scn.read_scenarios(path)
        regimes = [r.strip() for r in self.parameterAsString(parameters, "SCENARIO_REGIMES", context).split(",")
                   if r.strip()]
        qs = [float(to_mld(v, unit, "SCENARIO_DISCHARGES"))
              for v in parse_numbers(self.parameterAsString(parameters, "SCENARIO_DISCHARGES", context),
                                "SCENARIO_DISCHARGES")]
        unknown = [r for r in regimes if r not in scn.regimes_of(rows)]
        if unknown:
            raise ChannelHabitatError(f"regime(s) {', '.join(unknown)} are not in the scenario table (it has "
                                      f"{', '.join(scn.regimes_of(rows))})", "SCENARIO_REGIMES")
        picked = [r for r in rows if (not regimes or r.regime in regimes)
                  and (not qs or any(abs(r.q_mld - q) <= 1e-6 * q for q in qs))]
        if not picked:
            raise ChannelHabitatError("no row of the scenario table matches SCENARIO_REGIMES and "
                                      "SCENARIO_DISCHARGES", "SCENARIO_DISCHARGES")
        return picked

    def _options(self, parameters, context):
        def opt(name):
            v = parameters.get(name)
            return None if v in (None, "") else self.parameterAsDouble(parameters, name, context)

        step = drift.StepRule(courant=self.parameterAsDouble(parameters, "COURANT", context),
                              dt_min_s=self.parameterAsDouble(parameters, "MIN_STEP_S", context),
                              dt_max_s=self.parameterAsDouble(parameters, "MAX_STEP_S", context))
        return drift.DriftOptions(
            n_particles=self.parameterAsInt(parameters, "N_PARTICLES", context),
            t_max_s=self.parameterAsDouble(parameters, "MAX_TIME_DAYS", context) * drift.SECONDS_PER_DAY,
            step=step, release_m=opt("RELEASE_CHAINAGE"), end_m=opt("END_CHAINAGE"),
            path_spacing_m=self.parameterAsDouble(parameters, "PATH_SPACING", context),
            band_fraction=self.parameterAsDouble(parameters, "BAND_FRACTION", context),
            bank=BANK_OPTIONS[self.parameterAsEnum(parameters, "BANK_CONTACT", context)][0])

    def compute(self, parameters, context, feedback):
        regime_given, q, unit = runinput.read_run_label(self, parameters, context)
        scheme = schemeinput.read_scheme_parameters(self, parameters, context, feedback)
        options = self._options(parameters, context)
        wet = self.parameterAsDouble(parameters, runinput.WET_DEPTH, context)
        rows = self._scenario_rows(parameters, context, unit)
        single = any(parameters.get(k) not in (None, "") for k in ("DEPTH", "SPEED", "VELOCITY_U", "VELOCITY_V",
                                                                     "MESH"))
        if not single and not rows:
            raise ChannelHabitatError("give a run (depth with u and v rasters, or a mesh) or a scenario table",
                                      "SCENARIOS")

        # --- read the single run and the CRS of every run ------------------------------------------
        fld = src = None
        crs_wkt = ""
        if single:
            fld, src = runinput.read_run_parameters(self, parameters, context, feedback,
                                                    progress=self.progress(feedback, 0.0, 0.05))
            check_metric_crs(fld.crs_wkt, "DEPTH")
            crs_wkt = fld.crs_wkt
        if rows:
            wkts = [driftio.source_crs(r.source) for r in rows]
            scn.check_same_crs(rows, wkts, same=same_crs)
            first = next((w for w in wkts if w), "")
            if crs_wkt and first and not same_crs(crs_wkt, first):
                raise ChannelHabitatError(f"the scenario table's runs are in {crs_name(first)} but the single run "
                                          f"is in {crs_name(crs_wkt)}; all runs must share one CRS", "SCENARIOS")
            crs_wkt = crs_wkt or first
            check_metric_crs(crs_wkt, "SCENARIOS")
        reach = reachinput.read_reach_parameters(self, parameters, context, feedback, target_crs_wkt=crs_wkt)
        reach, crs_note = reach_in_crs(reach, crs_wkt)
        notes = [crs_note] if crs_note else []
        seeds = None
        seed_source = self.parameterAsSource(parameters, "SEEDS", context)
        if seed_source is not None:
            seeds = driftio.read_seed_points(seed_source, crs_wkt, context)

        # --- compute --------------------------------------------------------------------------------
        runs = []
        n_runs = int(single) + len(rows)
        if single:
            regime = regime_given or src.label
            q_mld = float(to_mld(q, unit)) if q else math.nan
            label = regime + (f" {q:g} {unit}" if q else "")
            feedback.pushInfo(f"Run 1 of {n_runs}: {label} ({fld.n} wet elements)")
            run = drift.drift_run(fld, reach, scheme, options, location=locate_field(reach, fld), seeds=seeds,
                                  progress=self.progress(feedback, 0.05, 0.05 + 0.8 / n_runs))
            meta = {"run": label, "regime": regime, "q_mld": q_mld, "q_m3s": float(to_m3s(q, unit)) if q else math.nan}
            runs.append((meta, run))
            notes += list(fld.notes)
            del fld
        if rows:
            workers = self.parameterAsInt(parameters, "WORKERS", context)
            done = driftio.drift_rows(rows, reach, scheme, options, wet, seeds=seeds, workers=workers,
                                      progress=self.progress(feedback, 0.05 + 0.8 * int(single) / n_runs, 0.85),
                                      log=feedback.pushInfo)
            for row, (_, row_notes, run) in zip(rows, done):
                runs.append(({"run": row.label, "regime": row.regime, "q_mld": row.q_mld, "q_m3s": row.q_m3s}, run))
                notes += [f"{row.label}: {n}" for n in row_notes]
        for meta, run in runs:
            for n in run.notes:
                notes.append(f"{meta['run']}: {n}" if n_runs > 1 else n)
            if run.result is not None:
                counts = run.result.fate_counts()
                feedback.pushInfo(f"{meta['run']}: " + ", ".join(f"{v} {k}" for k, v in counts.items() if v))
        for n in notes:
            feedback.pushInfo(n)
        self.progress(feedback, 0.85, 0.9)(0.0, "tables and report")
        tables = drift.run_tables(runs, reach.axis)
        path_cols, path_xyz = tables["paths"]
        report_path = self.parameterAsFileOutput(parameters, "REPORT", context)
        report = None
        if report_path:
            by_run = {}
            for i, name in enumerate(path_cols.get("run", [])):
                by_run.setdefault(name, []).append(path_xyz[i])
            report = build_report(tables["summary"], tables["estimate"], runs, scheme,
                                  _settings(runs, scheme, options, wet, seeds, reach), notes, axis=reach.axis,
                                  path_geoms_by_run=by_run)

        # --- write ------------------------------------------------------------------------------------
        progress = self.progress(feedback, 0.9, 1.0)
        progress(0.0, "writing outputs")
        crs = QgsCoordinateReferenceSystem.fromWkt(crs_wkt)
        out = {}
        if parameters.get("PATHS") is not None:
            out["PATHS"] = outputs.write_features(self, parameters, context, "PATHS", path_cols,
                                                  driftio.path_geometries(path_xyz), crs, QgsWkbTypes.LineStringM)
            outputs.style_on_load(context, out["PATHS"], "drift_paths.qml", layer_name="Drift paths")
        progress(0.6)
        out["RESIDENCE"] = outputs.write_features(self, parameters, context, "RESIDENCE", tables["residence"])
        out["RESIDENCE_SUMMARY"] = outputs.write_features(self, parameters, context, "RESIDENCE_SUMMARY",
                                                          tables["summary"])
        if parameters.get("ESTIMATE") is not None:
            out["ESTIMATE"] = outputs.write_features(self, parameters, context, "ESTIMATE", tables["estimate"])
        if report is not None:
            self.will_write(report_path)
            report.write(report_path)
            out["REPORT"] = report_path
        progress(1.0)
        return out


def _settings(runs, scheme, options, wet, seeds, reach) -> list:
    tracked = [r for _, r in runs if r.result is not None]
    items = [("Runs", len(runs)), ("Class scheme", scheme.name),
             ("Method", ", ".join(sorted({r.method for _, r in runs})))]
    if seeds is None:
        items.append(("Particles per run", f"{options.n_particles}, across the wet width at the release chainage"))
    else:
        items.append(("Particles per run", f"{len(seeds[0])} seed points"))
    rel = sorted({round(r.release_m, 1) for _, r in runs})
    end = sorted({round(r.end_m, 1) for _, r in runs})
    items += [("Release chainage", ", ".join(f"{v:g}" for v in rel), "m"),
              ("End chainage", ", ".join(f"{v:g}" for v in end), "m"),
              ("Reach axis", f"{reach.axis.start_m:.0f}-{reach.axis.end_m:.0f} m, zones "
                             + ", ".join(reach.zone_names)),
              ("Maximum travel time", options.t_max_s / drift.SECONDS_PER_DAY, "days"),
              ("At a bank", options.bank), ("Wet-depth threshold", wet, "m")]
    if tracked:
        items.append(("Time step", tracked[0].result.step.describe()))
    items.append(("1D estimate band", f"|offset| <= {options.band_fraction:g} x wet width / 2"))
    return items
