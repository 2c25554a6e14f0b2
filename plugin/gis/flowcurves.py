"""Flow-habitat curves computed from a scenario table: the one code path of flowhabitat and habitatseries.

flowhabitat always computes its curves this way; habitatseries does when it is given a scenario table
instead of a CURVES table. Both declare the same parameters and read them the same way::

    flowcurves.add_curve_parameters(self)                  # SCENARIOS (+ REGIMES, PARALLEL_RUNS), the reach
                                                           # (CENTRELINE ...), the classes (SCHEME ...), WET_DEPTH
    rows, desc, workers = scenarioinput.read_scenario_parameters(self, parameters, context)
    inputs = flowcurves.read_curve_inputs(self, parameters, context, feedback, rows, workers)  # headers, reach
    ... check everything else against inputs.skeleton() (units and classes, no runs yet) ...
    run = flowcurves.compute_curves(inputs, progress=..., log=feedback.pushInfo)
    run.curves   # core.curves.FlowHabitatCurves (reach, zones, segments x classes, every run)
    run.table    # scenariorun.TableRun: rows, results[i] = (RunAreas, (n_elements, outside_m2, unclassified_m2))

Every run goes through scenariorun (read on both cores, chainage located once per grid or mesh): the
scheme classifies the wet elements and ``core.curves.class_areas_by_unit`` sums their areas per class in
the whole reach, each zone and each segment.
"""

from __future__ import annotations

from dataclasses import dataclass

from qgis.core import QgsProcessingParameterNumber

from ..core import curves as cv
from ..core.errors import ChannelHabitatError
from ..core.field import DEFAULT_WET_DEPTH_M
from ..core.series import match_regime
from . import reachinput, scenarioinput, scenariorun, schemeinput

WET_DEPTH = "WET_DEPTH"
REGIME = "REGIME"


def add_curve_parameters(alg, optional: bool = False, regimes: bool = True, note: str = "") -> None:
    """Declare the scenario table, reach, class-scheme and wet-depth parameters (in that order).

    ``optional``: SCENARIOS and CENTRELINE are optional (an algorithm that can also take its curves
    from elsewhere). ``regimes``: declare REGIMES (only these regimes of the table). ``note``: text
    appended to the labels of the parameters that matter only with a scenario table."""
    label = "Scenario table (CSV file or table layer)" + note
    scenarioinput.add_scenario_parameters(alg, optional=optional, label=label, regimes=regimes)
    reachinput.add_reach_parameters(alg, optional=optional)
    schemeinput.add_scheme_parameters(alg, advanced_table=True)
    alg.addParameter(QgsProcessingParameterNumber(
        WET_DEPTH, "Wet-depth threshold (m): shallower is dry" + note, QgsProcessingParameterNumber.Type.Double,
        DEFAULT_WET_DEPTH_M, minValue=0.0))
    if note:
        for name in (reachinput.CENTRELINE, reachinput.SEGMENT_LENGTH, reachinput.ZONE_BREAKS,
                     schemeinput.SCHEME):
            p = alg.parameterDefinition(name)
            if p is not None:
                p.setDescription(p.description() + note)


@dataclass
class CurveInputs:
    """Everything a scenario-table curve computation needs, checked from the file headers and the
    parameters before any run is read. ``reach`` is in the runs' CRS when the axis had one."""

    rows: list
    infos: list
    reach: object
    scheme: object
    wet_depth_m: float
    workers: int = scenariorun.DEFAULT_WORKERS

    def units(self) -> list:
        """The scope units of the curves to come (reach, zones, segments)."""
        return cv.scope_units(self.reach)

    def skeleton(self) -> cv.FlowHabitatCurves:
        """Curves with the units and classes of the computation to come and no runs yet: enough to
        check unit, class and target names before the runs are read."""
        return cv.FlowHabitatCurves(self.units(), self.scheme.names, {})


def read_curve_inputs(alg, parameters, context, feedback, rows,
                      workers: int = scenariorun.DEFAULT_WORKERS) -> CurveInputs:
    """The runs' CRS and grids from their file headers (mixed CRS refused), the reach in that CRS,
    the class scheme and the wet-depth threshold. ``workers``: runs worked on at the same time."""
    infos = scenariorun.preflight(rows)  # file headers: CRS and grids, mixed CRS refused
    reach = reachinput.read_reach_parameters(alg, parameters, context, feedback, target_crs_wkt=infos[0].crs_wkt)
    scheme = schemeinput.read_scheme_parameters(alg, parameters, context, feedback)
    wet = alg.parameterAsDouble(parameters, WET_DEPTH, context)
    return CurveInputs(rows, infos, reach, scheme, wet, workers)


def rows_of_regime(rows, regime: str | None, parameter: str = REGIME) -> tuple:
    """(regime, its rows): the regime of the scenario table named by ``regime`` (case-insensitive;
    empty: the table's only regime), so that only its runs are computed."""
    from ..core.scenario import regimes_of

    if not rows:
        raise ChannelHabitatError("the scenario table has no runs", scenarioinput.SCENARIOS)
    name = match_regime(regimes_of(rows), regime, parameter, where="the scenario table")
    return name, [r for r in rows if r.regime == name]


@dataclass
class CurvesRun:
    curves: cv.FlowHabitatCurves
    table: scenariorun.TableRun


def run_class_areas(run: scenariorun.RunInput, scheme) -> tuple:
    """One run's class areas per scope unit: (RunAreas, (wet elements, area beyond the axis ends m2,
    area matching no class m2))."""
    codes = scheme.classify(run.field.depth, run.field.speed)
    ua = cv.class_areas_by_unit(run.reach, run.location, codes, run.field.area, len(scheme.names))
    r = run.row
    areas = cv.RunAreas(r.regime, r.q_mld, ua.class_areas, ua.wet_area, r.q_m3s, r.label)
    return areas, (run.field.n, ua.outside_m2, ua.unclassified_m2)


def compute_curves(inputs: CurveInputs, *, progress=None, log=None) -> CurvesRun:
    """Every row of ``inputs`` run through the scheme (``inputs.workers`` at a time): the flow-habitat
    curves and the TableRun. ``progress``: a core Progress; ``log(text)``: messages."""
    scheme = inputs.scheme

    def work(run):
        return run_class_areas(run, scheme)

    table = scenariorun.run_scenarios(inputs.rows, work, wet_depth_m=inputs.wet_depth_m, reach=inputs.reach,
                                      workers=inputs.workers, infos=inputs.infos, progress=progress, log=log)
    units = cv.scope_units(table.reach)
    curves = cv.FlowHabitatCurves.from_runs([res[0] for res in table.results], units, scheme.names)
    return CurvesRun(curves, table)
