"""The shared class-scheme Processing parameters, and reading them into a ClassScheme.

SCHEME        enum: velocity preset (DESIGN.md section 4) | Froude mesohabitat preset (Jowett 1993) |
              custom table
CLASS_TABLE   matrix with the columns of ``core.classes.TABLE_COLUMNS`` (class, speed_min, speed_max,
              depth_min, depth_max, froude_min, froude_max, vd_min, vd_max, colour), pre-filled with
              the velocity preset so users edit it; used when SCHEME = custom table
CLASS_FILE    optional CSV with a header naming some of those columns; used instead of CLASS_TABLE
              when SCHEME = custom table

Algorithms call ``add_scheme_parameters(self)`` in ``define`` and
``read_scheme_parameters(self, parameters, context, feedback)`` in ``run``. A ``prefix`` lets one
algorithm declare two schemes (e.g. ``BASE_``); messages name the prefixed parameters.
"""

from __future__ import annotations

import os

from qgis.core import (
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterFile,
    QgsProcessingParameterMatrix,
)

from ..core.classes import (
    TABLE_COLUMNS,
    ClassScheme,
    froude_preset,
    scheme_from_csv,
    scheme_from_matrix,
    velocity_preset,
)
from ..core.errors import ChannelHabitatError

SCHEME = "SCHEME"
CLASS_TABLE = "CLASS_TABLE"
CLASS_FILE = "CLASS_FILE"

SCHEME_OPTIONS = (
    ("velocity", "Velocity classes: very slow / slow / moderate / fast (DESIGN section 4)"),
    ("froude", "Froude mesohabitat: pool / riffle / run (Jowett 1993)"),
    ("table", "Custom table (CLASS_TABLE below, or CLASS_FILE), e.g. a depth x velocity matrix"),
)
SCHEME_KEYS = tuple(k for k, _ in SCHEME_OPTIONS)


def default_table() -> list:
    """The CLASS_TABLE default: the velocity preset as a flat, row-major list of strings."""
    return [cell for row in velocity_preset().to_rows() for cell in row]


def _names(prefix: str) -> dict:
    return {"scheme": f"{prefix}{SCHEME}", "table": f"{prefix}{CLASS_TABLE}", "file": f"{prefix}{CLASS_FILE}"}


def add_scheme_parameters(alg, prefix: str = "", label: str = "", default: str = "velocity",
                          advanced_table: bool = False) -> None:
    """Declare SCHEME, CLASS_TABLE and CLASS_FILE (with ``prefix``) on ``alg``."""
    n = _names(prefix)
    lab = f"{label}: " if label else ""
    alg.addParameter(QgsProcessingParameterEnum(
        n["scheme"], f"{lab}Habitat class scheme", [text for _, text in SCHEME_OPTIONS],
        defaultValue=SCHEME_KEYS.index(default)))
    table = QgsProcessingParameterMatrix(
        n["table"], f"{lab}Class table (used with 'Custom table'; bounds lower-inclusive, upper-exclusive; "
                    "blank = unbounded; first matching row wins)",
        numberRows=4, hasFixedNumberRows=False, headers=list(TABLE_COLUMNS), defaultValue=default_table(),
        optional=True)
    file_param = QgsProcessingParameterFile(
        n["file"], f"{lab}Class table file (CSV, same columns; used with 'Custom table' instead of the table)",
        QgsProcessingParameterFile.File, fileFilter="CSV files (*.csv *.txt)", optional=True)
    for p in (table, file_param):
        if advanced_table:
            p.setFlags(p.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
        alg.addParameter(p)


def _table_is_default(flat) -> bool:
    ref = default_table()
    vals = ["" if v is None else str(v).strip() for v in (flat or [])]
    return len(vals) == len(ref) and all(a == b for a, b in zip(vals, ref))


def read_scheme_parameters(alg, parameters, context, feedback=None, prefix: str = "") -> ClassScheme:
    """The ClassScheme the parameters describe. Presets ignore the table; a class file given with a
    preset is refused (the user clearly meant the file), an edited table with a preset gets a warning."""
    n = _names(prefix)
    key = SCHEME_KEYS[alg.parameterAsEnum(parameters, n["scheme"], context)] \
        if alg.parameterDefinition(n["scheme"]) is not None else "velocity"
    path = alg.parameterAsFile(parameters, n["file"], context) if alg.parameterDefinition(n["file"]) else ""
    flat = alg.parameterAsMatrix(parameters, n["table"], context) if alg.parameterDefinition(n["table"]) else []
    if key in ("velocity", "froude"):
        if path:
            raise ChannelHabitatError(
                f"a class table file was given but the scheme is the {key} preset; choose "
                f"'Custom table' in {n['scheme']} to use the file, or clear {n['file']}", n["file"])
        if flat and not _table_is_default(flat) and feedback is not None:
            feedback.pushWarning(f"{n['table']} was edited but {n['scheme']} is the {key} preset, so the "
                                 f"table is not used; choose 'Custom table' to use it.")
        return velocity_preset() if key == "velocity" else froude_preset()
    if path:
        return read_scheme_file(path, n["file"])
    if not flat:
        raise ChannelHabitatError("the scheme is 'Custom table' but the class table is empty; fill "
                                  f"{n['table']} or give {n['file']}", n["table"])
    return scheme_from_matrix(flat, parameter=n["table"], name="custom table")


def read_scheme_file(path: str, parameter: str = CLASS_FILE) -> ClassScheme:
    """A ClassScheme from a CSV file (UTF-8, with or without a byte-order mark)."""
    if not os.path.isfile(path):
        raise ChannelHabitatError(f"class table file '{path}' does not exist", parameter)
    with open(path, encoding="utf-8-sig") as fh:
        text = fh.read()
    return scheme_from_csv(text, name=os.path.splitext(os.path.basename(path))[0], parameter=parameter)


def scheme_summary(scheme: ClassScheme) -> list:
    """[(code, name, rule text, colour)] for reports and logs."""
    return [(i + 1, c.name, c.describe(), c.colour) for i, c in enumerate(scheme.classes)]
