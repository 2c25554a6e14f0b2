"""Scenario tables: which hydraulic model run (regime, discharge) comes from which files.

A scenario table is a CSV file (or any QGIS table layer, read into rows by ``gis/``) with a header
row. Column names are case-insensitive, their order is free, unused columns may be absent or empty:

    regime, discharge, unit, depth, speed, u, v, mesh, depth_group, velocity_group, u_group,
    v_group, time_index

* ``regime``: text, e.g. ``weir``; ``discharge``: a number > 0; ``unit``: ML/d or m3/s (the
  spellings of :func:`core.units.normalise_unit`).
* Raster rows give ``depth`` and ``speed`` (or ``u`` and ``v``). Mesh rows give ``mesh`` and,
  optionally, dataset group names and ``time_index`` (default -1 = the last time step).
* Paths are relative to the table's folder (absolute paths are allowed; ``~`` is expanded;
  Windows back-slashes are accepted when the file is not found as written).
* Completely empty rows, and rows whose regime starts with ``#`` (comments), are skipped.
* Other columns (notes, run ids) are allowed and ignored.

Every problem raises :class:`ChannelHabitatError` with parameter ``SCENARIOS`` and a message that
names the row, e.g. ``row 7 (regime weir, 3000 ML/d): depth file 'rasters/weir/q03000_depth.tif'
does not exist (looked for /data/rasters/weir/q03000_depth.tif)``. Row numbers are spreadsheet row
numbers for CSV files (the header is row 1) and 1-based feature numbers for table layers.

Errors found later, while a run is read (a missing dataset group, a dry run), carry the parameter
names of ``ScenarioRow.source.params`` (all ``SCENARIOS``); wrap the reading in
``with row_errors(row):`` so their message names the row too. Mixed CRS are found when the runs
are read: :func:`check_same_crs` turns the CRS of every run into a message that names the rows.
"""

from __future__ import annotations

import contextlib
import csv
import io
import math
import os
import re
from dataclasses import dataclass, field

from .errors import ChannelHabitatError
from .sources import DEFAULT_PARAMS, RunSource
from .units import m3s_to_mld, mld_to_m3s, normalise_unit

PARAMETER = "SCENARIOS"
COLUMNS = ("regime", "discharge", "unit", "depth", "speed", "u", "v", "mesh", "depth_group",
           "velocity_group", "u_group", "v_group", "time_index")
PATH_COLUMNS = ("depth", "speed", "u", "v", "mesh")
RASTER_COLUMNS = ("depth", "speed", "u", "v")
MESH_COLUMNS = ("mesh", "depth_group", "velocity_group", "u_group", "v_group", "time_index")
# Two discharges of one regime closer than this (relative) are the same run.
DUPLICATE_RTOL = 1e-6


@dataclass
class ScenarioRow:
    """One run of a scenario table.

    ``q_mld`` and ``q_m3s`` are both given: the one in the table's own unit is the number as
    written, the other is converted (1 ML/d = 1000/86400 m3/s exactly). ``line`` is the row number
    used in messages. ``unit`` and ``discharge`` are the unit and number as written.
    """

    regime: str
    q_mld: float
    q_m3s: float
    source: RunSource
    line: int
    unit: str = "ML/d"
    discharge: float = math.nan
    extra: dict = field(default_factory=dict)

    @property
    def where(self) -> str:
        """'row 7 (regime weir, 3000 ML/d)' for messages."""
        return f"row {self.line} (regime {self.regime}, {_fmt(self.discharge)} {self.unit})"

    @property
    def label(self) -> str:
        """'weir 3000 ML/d': a short run name for logs and reports."""
        return f"{self.regime} {_fmt(self.discharge)} {self.unit}"


def _fmt(q: float) -> str:
    return f"{q:g}" if abs(q) < 1e6 else f"{q:.6g}"


@contextlib.contextmanager
def row_errors(row: ScenarioRow, parameter: str = PARAMETER):
    """Re-raise core errors met while reading ``row``'s run with the row named in the message::

        with row_errors(row):
            fld = read_run(row.source, wet_depth)

    The error's parameter becomes ``parameter`` (SCENARIOS)."""
    try:
        yield
    except ChannelHabitatError as err:
        msg = str(err)
        if not msg.startswith(row.where):
            msg = f"{row.where}: {msg}"
        raise ChannelHabitatError(msg, parameter) from None


# --------------------------------------------------------------------------------------------
def read_scenarios(path, parameter: str = PARAMETER, check_files: bool = True) -> list[ScenarioRow]:
    """Read and validate a scenario table CSV file (UTF-8, with or without BOM; comma, semicolon
    or tab separated). Paths in it are relative to its folder."""
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise ChannelHabitatError(f"the scenario table '{path}' does not exist; give the path of a CSV "
                                  "file with columns regime, discharge, unit and the run files", parameter)
    try:
        with open(path, encoding="utf-8-sig", newline="") as fh:
            text = fh.read()
    except UnicodeDecodeError:
        raise ChannelHabitatError(f"the scenario table '{path}' is not UTF-8 text; save it as CSV (UTF-8)",
                                  parameter) from None
    rows, lines = _csv_rows(text, path, parameter)
    return scenarios_from_rows(rows, os.path.dirname(os.path.abspath(path)), parameter=parameter,
                               lines=lines, check_files=check_files, table_name=os.path.basename(path))


def _csv_rows(text: str, path: str, parameter: str):
    if not text.strip():
        raise ChannelHabitatError(f"the scenario table '{path}' is empty; it needs a header row and one "
                                  "row per run", parameter)
    first = text.splitlines()[0]
    delim = max((",", ";", "\t"), key=first.count)
    reader = csv.reader(io.StringIO(text), delimiter=delim)
    try:
        header = next(reader)
    except (StopIteration, csv.Error) as exc:  # pragma: no cover - defensive
        raise ChannelHabitatError(f"cannot read the scenario table '{path}': {exc}", parameter) from None
    names = [h.strip().lower() for h in header]
    rows, lines = [], []
    line_no = reader.line_num
    try:
        for rec in reader:
            start = line_no + 1
            line_no = reader.line_num
            if len(rec) > len(names) and any(v.strip() for v in rec[len(names):]):
                raise ChannelHabitatError(
                    f"row {start} of the scenario table has {len(rec)} values but the header has "
                    f"{len(names)} columns; check for a stray '{delim}' in a file name", parameter)
            rows.append({names[i]: rec[i] for i in range(min(len(rec), len(names)))})
            lines.append(start)
    except csv.Error as exc:
        raise ChannelHabitatError(f"cannot read the scenario table '{path}' near row {line_no}: {exc}",
                                  parameter) from None
    return rows, lines


def _blank(v) -> bool:
    if v is None:
        return True
    if isinstance(v, float) and math.isnan(v):
        return True
    return isinstance(v, str) and v.strip() == ""


def _text(v) -> str:
    return "" if _blank(v) else str(v).strip()


def _resolve(value: str, base_dir: str) -> str:
    """An absolute path for a table entry (relative to base_dir); GDAL virtual paths as they are."""
    p = os.path.expanduser(value)
    if p.startswith("/vsi") or re.match(r"^[A-Za-z0-9_]+:", p) and not re.match(r"^[A-Za-z]:[\\/]", p):
        return p  # /vsizip/..., NETCDF:"file":var and similar GDAL syntaxes
    if not os.path.isabs(p) and not re.match(r"^[A-Za-z]:[\\/]", p):
        p = os.path.join(base_dir, p)
    p = os.path.normpath(p)
    if not os.path.exists(p.split("|")[0]) and "\\" in p and os.sep == "/":
        alt = os.path.normpath(p.replace("\\", "/"))
        if os.path.exists(alt.split("|")[0]):
            return alt
    return p


def _exists(p: str) -> bool:
    if p.startswith("/vsi") or re.match(r"^[A-Za-z0-9_]+:", p) and not os.path.isabs(p):
        return True  # cannot check without GDAL; the reader will say if it cannot open it
    return os.path.exists(p.split("|")[0])


def scenarios_from_rows(rows, base_dir, parameter: str = PARAMETER, lines=None, check_files: bool = True,
                        table_name: str = "the scenario table") -> list[ScenarioRow]:
    """Validate rows (dicts of column -> value; keys case-insensitive; values text, numbers or None)
    into ScenarioRows. ``base_dir`` is where relative paths start; ``lines`` the row numbers used
    in messages (default 1, 2, ... as in a QGIS attribute table)."""
    rows = list(rows)
    lines = list(lines) if lines is not None else list(range(1, len(rows) + 1))
    base_dir = os.fspath(base_dir) if base_dir is not None else os.getcwd()
    if rows:
        keys = {str(k).strip().lower() for r in rows for k in r.keys() if k is not None}
    else:
        keys = set()
    missing = [c for c in ("regime", "discharge", "unit") if c not in keys]
    if missing:
        raise ChannelHabitatError(
            f"{table_name} has no column {', '.join(repr(m) for m in missing)}. It needs a header row "
            f"with regime, discharge, unit and the run files (depth + speed or u and v, or mesh); "
            f"known columns: {', '.join(COLUMNS)}" if rows else
            f"{table_name} has no rows: give one row per run (regime, discharge, unit, files)", parameter)
    out: list[ScenarioRow] = []
    for raw, line in zip(rows, lines):
        rec = {str(k).strip().lower(): v for k, v in raw.items() if k is not None}
        if all(_blank(v) for v in rec.values()):
            continue
        regime = _text(rec.get("regime"))
        if regime.startswith("#"):
            continue
        out.append(_row(rec, regime, line, base_dir, parameter, check_files))
    if not out:
        raise ChannelHabitatError(f"{table_name} has no runs: give one row per run (regime, discharge, "
                                  "unit, files)", parameter)
    _check_duplicates(out, parameter)
    return out


def _row(rec: dict, regime: str, line: int, base_dir: str, parameter: str, check_files: bool) -> ScenarioRow:
    if not regime:
        raise ChannelHabitatError(f"row {line}: the regime is empty; name the regime of every run "
                                  "(e.g. weir, natural)", parameter)
    qtext = rec.get("discharge")
    where0 = f"row {line} (regime {regime})"
    if _blank(qtext):
        raise ChannelHabitatError(f"{where0}: the discharge is empty; give the run's discharge", parameter)
    try:
        q = float(str(qtext).strip()) if not isinstance(qtext, (int, float)) else float(qtext)
    except ValueError:
        raise ChannelHabitatError(
            f"{where0}: discharge '{qtext}' is not a number; write it without thousands separators or "
            "units, e.g. 3000 (the unit goes in the unit column)", parameter) from None
    if not math.isfinite(q) or q <= 0:
        raise ChannelHabitatError(f"{where0}: discharge {qtext} is not a positive number; every run "
                                  "needs a discharge greater than zero", parameter)
    try:
        unit = normalise_unit(_text(rec.get("unit")), parameter)
    except ChannelHabitatError as err:
        raise ChannelHabitatError(f"{where0}, discharge {qtext}: {err}", parameter) from None
    if unit == "ML/d":
        q_mld, q_m3s = q, float(mld_to_m3s(q))
    else:
        q_mld, q_m3s = float(m3s_to_mld(q)), q
    params = {k: parameter for k in DEFAULT_PARAMS}
    src = RunSource(params=params)
    row = ScenarioRow(regime, q_mld, q_m3s, src, line, unit, q,
                      {k: v for k, v in rec.items() if k not in COLUMNS})
    src.label = row.label
    where = row.where
    given = {c: _text(rec.get(c)) for c in COLUMNS[3:]}
    has_raster = any(given[c] for c in RASTER_COLUMNS)
    has_mesh = bool(given["mesh"])
    if has_raster and has_mesh:
        raise ChannelHabitatError(f"{where}: give either raster files (depth, speed or u/v) or a mesh "
                                  "file, not both, on one row", parameter)
    if not has_raster and not has_mesh:
        raise ChannelHabitatError(f"{where}: no run files: give depth and speed (or u and v) rasters, "
                                  "or a mesh file", parameter)
    for c in PATH_COLUMNS:
        if given[c]:
            p = _resolve(given[c], base_dir)
            if check_files and not _exists(p):
                raise ChannelHabitatError(f"{where}: {c} file '{given[c]}' does not exist (looked for {p}); "
                                          "paths are relative to the scenario table's folder", parameter)
            setattr(src, c, p)
    if has_raster:
        stray = [c for c in MESH_COLUMNS[1:] if given[c] and c != "time_index"]
        if stray:
            raise ChannelHabitatError(f"{where}: {', '.join(stray)} belong to mesh rows; this row gives "
                                      "rasters", parameter)
        if not src.depth:
            raise ChannelHabitatError(f"{where}: a depth raster is needed with the velocity rasters", parameter)
        if bool(src.u) != bool(src.v):
            raise ChannelHabitatError(f"{where}: give both u and v velocity rasters, or neither", parameter)
        if not src.speed and not src.u:
            raise ChannelHabitatError(f"{where}: give a speed raster or u and v velocity rasters", parameter)
    else:
        for c in ("depth_group", "velocity_group", "u_group", "v_group"):
            setattr(src, c, given[c] or None)
        if bool(src.u_group) != bool(src.v_group):
            raise ChannelHabitatError(f"{where}: give both u_group and v_group, or neither", parameter)
        if given["time_index"]:
            try:
                t = float(given["time_index"])
                if t != int(t):
                    raise ValueError
            except ValueError:
                raise ChannelHabitatError(f"{where}: time_index '{given['time_index']}' is not a whole "
                                          "number (0 = first step, -1 = last)", parameter) from None
            src.time_index = int(t)
    return row


def _check_duplicates(rows: list[ScenarioRow], parameter: str) -> None:
    spelled: dict[str, ScenarioRow] = {}
    for r in rows:
        k = r.regime.casefold()
        first = spelled.setdefault(k, r)
        if first.regime != r.regime:
            raise ChannelHabitatError(
                f"{r.where}: regime '{r.regime}' and '{first.regime}' ({first.where}) differ only in "
                "upper/lower case; write each regime name the same way on every row", parameter)
    by_regime: dict[str, list[ScenarioRow]] = {}
    for r in rows:
        by_regime.setdefault(r.regime, []).append(r)
    for runs in by_regime.values():
        runs = sorted(runs, key=lambda r: r.q_mld)
        for a, b in zip(runs, runs[1:]):
            if b.q_mld - a.q_mld <= DUPLICATE_RTOL * b.q_mld:
                first, second = sorted((a, b), key=lambda r: r.line)
                raise ChannelHabitatError(
                    f"{second.where} repeats the regime and discharge of {first.where}; each regime "
                    "needs one run per discharge (remove or correct one of them)", parameter)


# --------------------------------------------------------------------------------------------
def regimes_of(rows: list[ScenarioRow]) -> list[str]:
    """Regime names in the order they first appear in the table."""
    seen = []
    for r in rows:
        if r.regime not in seen:
            seen.append(r.regime)
    return seen


def crs_name(wkt: str) -> str:
    """The CRS name in a WKT string (its first quoted name), for messages."""
    m = re.search(r'^\s*[A-Z_0-9]+\s*\[\s*"([^"]*)"', wkt or "")
    return m.group(1) if m else "an unnamed CRS"


def check_same_crs(rows: list[ScenarioRow], crs_wkts: list[str], same=None,
                   parameter: str = PARAMETER) -> None:
    """Refuse a table whose runs are in different CRS. ``crs_wkts[i]`` is the CRS of ``rows[i]``
    (empty when unknown: not compared); ``same(a, b)`` decides equality (gis passes its own; the
    default compares the WKT text)."""
    same = same or (lambda a, b: a == b)
    ref = None
    for row, wkt in zip(rows, crs_wkts):
        if not wkt:
            continue
        if ref is None:
            ref = (row, wkt)
            continue
        if not same(ref[1], wkt):
            raise ChannelHabitatError(
                f"{row.where} is in {crs_name(wkt)} but {ref[0].where} is in {crs_name(ref[1])}. All runs "
                "of a scenario table must share one CRS: reproject the odd files (Raster > Projections "
                "> Warp, or re-export the mesh) and point the table at them", parameter)
