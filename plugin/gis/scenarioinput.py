"""Processing parameters for a scenario table, and reading it into ScenarioRows.

SCENARIOS       the scenario table: a CSV file (read directly: row numbers in messages are the
                spreadsheet's, the header being row 1) or any table layer (delimited text, GeoPackage
                table, ...; row numbers are feature numbers from 1). Paths in it are relative to the
                table's folder (for a layer without a file: the project's folder).
REGIMES         optional: only these regimes, comma-separated (e.g. 'weir, natural')
PARALLEL_RUNS   advanced: runs worked on at the same time (threads; default 2, both cores)

The table format is ``core.scenario``'s (columns regime, discharge, unit, depth, speed, u, v, mesh,
depth_group, velocity_group, u_group, v_group, time_index).
"""

from __future__ import annotations

import os
from urllib.parse import unquote, urlparse

from qgis.core import (
    QgsProcessing,
    QgsProcessingFeatureSourceDefinition,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterFeatureSource,
    QgsProcessingParameterNumber,
    QgsProcessingParameterString,
    QgsProject,
    QgsProviderRegistry,
)

from ..core import scenario as scn
from ..core.errors import ChannelHabitatError
from . import tableinput
from .scenariorun import DEFAULT_WORKERS

SCENARIOS = "SCENARIOS"
REGIMES = "REGIMES"
PARALLEL_RUNS = "PARALLEL_RUNS"
_CSV_SUFFIXES = (".csv", ".txt", ".tsv")


def add_scenario_parameters(alg, optional: bool = False, label: str = "Scenario table (CSV file or table layer)",
                            regimes: bool = True) -> None:
    alg.addParameter(QgsProcessingParameterFeatureSource(
        SCENARIOS, label, [QgsProcessing.SourceType.TypeVector], optional=optional))
    if regimes:
        alg.addParameter(QgsProcessingParameterString(
            REGIMES, "Only these regimes of the table, comma-separated [empty: all]", optional=True))
    p = QgsProcessingParameterNumber(
        PARALLEL_RUNS, "Runs worked on at the same time (threads; each holds one run in memory)",
        QgsProcessingParameterNumber.Type.Integer, DEFAULT_WORKERS, minValue=1, maxValue=32)
    p.setFlags(p.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
    alg.addParameter(p)


def scenarios_given(parameters) -> bool:
    return parameters.get(SCENARIOS) not in (None, "")


def _csv_path(raw) -> str | None:
    if isinstance(raw, QgsProcessingFeatureSourceDefinition):
        raw = raw.source.staticValue()
    if not isinstance(raw, str):
        return None
    path = raw.split("|")[0]
    if path.lower().startswith("file://"):
        path = unquote(urlparse(path).path)
    if path.lower().endswith(_CSV_SUFFIXES) and os.path.isfile(path):
        return path
    return None


def _layer_file(layer) -> str | None:
    """The file behind a layer (ogr or delimited text), if any."""
    provider = layer.providerType()
    try:
        parts = QgsProviderRegistry.instance().decodeUri(provider, layer.source())
    except Exception:  # pragma: no cover - provider without URI decoding
        parts = {}
    path = parts.get("path") or ""
    if not path and provider == "delimitedtext":
        path = unquote(urlparse(layer.source()).path)
    return path if path and os.path.isfile(path) else None


def read_scenario_rows(alg, parameters, context) -> tuple[list, str]:
    """(rows, description) from the SCENARIOS parameter, validated by core.scenario."""
    raw = parameters.get(SCENARIOS)
    path = _csv_path(raw)
    if path is None:
        layer = alg.parameterAsVectorLayer(parameters, SCENARIOS, context)
        if layer is not None:
            file = _layer_file(layer)
            if file and file.lower().endswith(_CSV_SUFFIXES) and layer.providerType() == "delimitedtext":
                path = file  # read the file itself: spreadsheet row numbers, text as written
            else:
                base = os.path.dirname(file) if file else (QgsProject.instance().homePath() or os.getcwd())
                rows = tableinput.table_rows(layer, SCENARIOS)
                out = scn.scenarios_from_rows(rows, base, parameter=SCENARIOS, table_name=f"table '{layer.name()}'")
                return out, f"layer {layer.name()}" + (f" ({file})" if file else "")
        if path is None:
            source = alg.parameterAsSource(parameters, SCENARIOS, context)
            if source is None:
                raise ChannelHabitatError("give the scenario table: a CSV file or a table layer with columns regime, "
                                          "discharge, unit and the run files", SCENARIOS)
            rows = tableinput.table_rows(source, SCENARIOS)
            out = scn.scenarios_from_rows(rows, QgsProject.instance().homePath() or os.getcwd(), parameter=SCENARIOS,
                                          table_name="the scenario table")
            return out, source.sourceName() or "table"
    return scn.read_scenarios(path, SCENARIOS), path


def select_regimes(rows: list, text: str, parameter: str = REGIMES) -> list:
    """Rows of the regimes named in ``text`` (comma/semicolon separated; empty = all)."""
    want = [r.strip() for r in (text or "").replace(";", ",").split(",") if r.strip()]
    if not want:
        return rows
    have = scn.regimes_of(rows)
    lookup = {h.casefold(): h for h in have}
    unknown = [w for w in want if w.casefold() not in lookup]
    if unknown:
        raise ChannelHabitatError(f"regime(s) {', '.join(unknown)} are not in the scenario table (it has "
                                  f"{', '.join(have)})", parameter)
    keep = {lookup[w.casefold()] for w in want}
    return [r for r in rows if r.regime in keep]


def read_scenario_parameters(alg, parameters, context) -> tuple[list, str, int]:
    """(rows, table description, parallel runs) from SCENARIOS, REGIMES and PARALLEL_RUNS."""
    rows, desc = read_scenario_rows(alg, parameters, context)
    if alg.parameterDefinition(REGIMES) is not None:
        rows = select_regimes(rows, alg.parameterAsString(parameters, REGIMES, context))
    workers = DEFAULT_WORKERS
    if alg.parameterDefinition(PARALLEL_RUNS) is not None:
        workers = alg.parameterAsInt(parameters, PARALLEL_RUNS, context) or DEFAULT_WORKERS
    return rows, desc, workers
