"""Habitat suitability curves, composite suitability and weighted usable area (WUA).

Suitability curves (CSV)
------------------------
One row per curve point, with a header (column names case-insensitive, order free)::

    species,life_stage,variable,value,unit,suitability,source
    example fish,adult,depth,0.0,m,0.0,workshop 2024
    example fish,adult,depth,0.5,m,1.0,workshop 2024
    example fish,adult,velocity,0.0,m/s,0.6,workshop 2024
    ...

* ``variable``: ``depth`` or ``velocity`` (``speed`` is accepted for velocity).
* ``value``: the variable's value; increasing down the rows of each curve; not negative.
* ``unit`` (optional): depth in m (default), cm, mm or ft; velocity in m/s (default), cm/s, mm/s or
  ft/s (1 ft = 0.3048 m exactly). Values are converted to SI when read.
* ``suitability``: in [0, 1].
* ``source``, ``note(s)``, ``comment(s)``: kept as text, not used.
* Any other column (``species``, ``life_stage``, ``season``, ...) names a *curve set*: the rows
  with the same values in those columns form one set, labelled by those values joined with
  " / " (``example fish / adult``). A file may hold many sets; :func:`select_curve_set` picks one.

Between points a curve is piecewise linear; beyond its first and last point it is clamped (the end
suitability holds). A set may have a depth curve, a velocity curve or both.

Composite suitability and WUA
-----------------------------
Per element, the composite suitability combines the set's curves by

* ``product``: the product of the suitabilities - the composite probability-of-use of Hyra 1978
  (Instream Flow Information Paper No. 6, "Composite Probabilities-of-Use": depth suitability x
  velocity suitability, e.g. 0.9 x 0.24 = 0.216);
* ``geometric mean``: the n-th root of that product (n = number of curves in the set);
* ``minimum``: the smallest suitability (the limiting factor).
The geometric mean and the minimum are the two other composites described for the instream flow
incremental methodology by Bovee 1982 (Instream Flow Information Paper 12) - from memory.

Weighted usable area of a group of elements = sum(area x composite suitability), in m2 (Hyra 1978,
Table 3: cell areas weighted by their composite probability-of-use and summed). The same divided by
the group's wet area is the area-weighted mean composite suitability (0-1).
"""

from __future__ import annotations

import csv
import io
import math
import os
import re
from dataclasses import dataclass, field

import numpy as np

from .errors import ChannelHabitatError

PARAMETER = "SUITABILITY_CURVES"
VARIABLES = ("depth", "velocity")
VARIABLE_UNITS = {"depth": "m", "velocity": "m/s"}
_VARIABLE_SPELLINGS = {"depth": "depth", "velocity": "velocity", "speed": "velocity"}
UNIT_FACTORS = {
    "depth": {"m": 1.0, "cm": 0.01, "mm": 0.001, "ft": 0.3048},
    "velocity": {"m/s": 1.0, "cm/s": 0.01, "mm/s": 0.001, "ft/s": 0.3048},
}
_UNIT_SPELLINGS = {"m s-1": "m/s", "m/sec": "m/s", "ms-1": "m/s", "cm s-1": "cm/s", "ft s-1": "ft/s",
                   "fps": "ft/s", "feet": "ft", "foot": "ft", "metre": "m", "meter": "m", "metres": "m",
                   "meters": "m"}
TEXT_COLUMNS = ("source", "note", "notes", "comment", "comments")
CORE_COLUMNS = ("variable", "value", "unit", "suitability")
COMBINATIONS = ("product", "geometric mean", "minimum")


@dataclass(frozen=True)
class SuitabilityCurve:
    """Piecewise-linear suitability of one variable; ``values`` in SI (m, m/s), increasing."""

    variable: str
    values: np.ndarray
    suitability: np.ndarray

    def __call__(self, x) -> np.ndarray:
        """Suitability at ``x`` (SI units; clamped beyond the ends; NaN stays NaN)."""
        return np.interp(np.asarray(x, dtype=np.float64), self.values, self.suitability)

    def describe(self) -> str:
        unit = VARIABLE_UNITS[self.variable]
        pts = ", ".join(f"{v:g} {unit}: {s:g}" for v, s in zip(self.values, self.suitability))
        return f"{self.variable} ({pts})"


@dataclass(frozen=True)
class CurveSet:
    """The curves of one species / life stage (or whatever the key columns say)."""

    label: str
    curves: dict  # variable -> SuitabilityCurve
    keys: dict = field(default_factory=dict)  # key column -> value
    sources: tuple = ()

    @property
    def variables(self) -> list[str]:
        return [v for v in VARIABLES if v in self.curves]

    def suitabilities(self, depth=None, velocity=None) -> dict:
        """{variable: suitability per element} for the set's variables (depth m, velocity m/s)."""
        given = {"depth": depth, "velocity": velocity}
        out = {}
        for var in self.variables:
            if given[var] is None:
                raise ChannelHabitatError(f"curve set '{self.label}' has a {var} curve but no {var} values "
                                          "were given", PARAMETER)
            out[var] = self.curves[var](given[var])
        return out

    def composite(self, depth=None, velocity=None, method: str = "product") -> np.ndarray:
        """Composite suitability per element (see :func:`combine`)."""
        return combine(list(self.suitabilities(depth, velocity).values()), method)


def combine(parts, method: str = "product", parameter: str = "COMBINATION") -> np.ndarray:
    """Combine per-variable suitabilities (list of equal-shape arrays) by ``product``,
    ``geometric mean`` or ``minimum``. NaN in any part gives NaN."""
    m = str(method).strip().lower().replace("_", " ")
    if m not in COMBINATIONS:
        raise ChannelHabitatError(f"unknown combination '{method}': use {', '.join(COMBINATIONS)}", parameter)
    if not parts:
        raise ChannelHabitatError("no suitability curves to combine", parameter)
    arrs = [np.asarray(p, dtype=np.float64) for p in parts]
    if m == "minimum":
        out = arrs[0].copy()
        for a in arrs[1:]:
            out = np.fmin(out, a)
        bad = np.zeros(out.shape, dtype=bool)
        for a in arrs:
            bad |= np.isnan(a)
        return np.where(bad, np.nan, out)
    prod = arrs[0].copy()
    for a in arrs[1:]:
        prod = prod * a
    if m == "product" or len(arrs) == 1:
        return prod
    return prod ** (1.0 / len(arrs))


def weighted_usable_area(csi, area, groups=None, n_groups: int = 1) -> dict:
    """WUA per group: {'wua_m2': sum(area x csi), 'wet_area_m2': sum(area), 'wua_fraction':
    wua / wet area (NaN for a group with no area)}. ``groups``: int per element (0-based; -1 or
    out of range = left out); None = one group. Elements whose suitability is not finite add their
    area to the wet area and nothing to the WUA."""
    csi = np.asarray(csi, dtype=np.float64)
    area = np.asarray(area, dtype=np.float64)
    if csi.shape != area.shape:
        raise ValueError("csi and area must have the same shape")
    g = np.zeros(csi.shape, dtype=np.int64) if groups is None else np.asarray(groups).astype(np.int64)
    keep = (g >= 0) & (g < n_groups)
    w = np.where(np.isfinite(csi), csi, 0.0)
    wua = np.bincount(g[keep], weights=(area * w)[keep], minlength=n_groups)
    wet = np.bincount(g[keep], weights=area[keep], minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(wet > 0, wua / wet, np.nan)
    return {"wua_m2": wua, "wet_area_m2": wet, "wua_fraction": frac}


# --------------------------------------------------------------------------------------------
# Reading curve tables
# --------------------------------------------------------------------------------------------

def read_suitability_csv(path, parameter: str = PARAMETER) -> list[CurveSet]:
    """Read a suitability curve CSV file (see the module docstring) into curve sets, file order."""
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise ChannelHabitatError(f"the suitability curve file '{path}' does not exist", parameter)
    try:
        with open(path, encoding="utf-8-sig", newline="") as fh:
            text = fh.read()
    except UnicodeDecodeError:
        raise ChannelHabitatError(f"'{path}' is not UTF-8 text; save it as CSV (UTF-8)", parameter) from None
    return suitability_from_csv_text(text, parameter, os.path.basename(path))


def suitability_from_csv_text(text: str, parameter: str = PARAMETER, name: str = "the curve table") -> list[CurveSet]:
    if not text.strip():
        raise ChannelHabitatError(f"{name} is empty", parameter)
    first = text.splitlines()[0]
    delim = max((",", ";", "\t"), key=first.count)
    reader = csv.reader(io.StringIO(text), delimiter=delim)
    header = [h.strip().lower() for h in next(reader)]
    rows, lines = [], []
    prev = reader.line_num
    for rec in reader:
        start = prev + 1
        prev = reader.line_num
        rows.append({header[i]: rec[i] for i in range(min(len(rec), len(header)))})
        lines.append(start)
    return suitability_from_rows(rows, parameter, lines, name)


def _num(v, what: str, where: str, parameter: str) -> float:
    try:
        x = float(v) if isinstance(v, (int, float)) else float(str(v).strip())
    except (TypeError, ValueError):
        raise ChannelHabitatError(f"{where}: {what} '{v}' is not a number", parameter) from None
    if not math.isfinite(x):
        raise ChannelHabitatError(f"{where}: {what} '{v}' is not a finite number", parameter)
    return x


def _blank(v) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v)) or (isinstance(v, str) and not v.strip())


def suitability_from_rows(rows, parameter: str = PARAMETER, lines=None,
                          name: str = "the curve table") -> list[CurveSet]:
    """Curve sets from rows (dicts of column -> value; a QGIS table layer read by gis, or CSV rows).
    ``lines`` are the row numbers for messages (default 2, 3, ...: a CSV with its header on row 1)."""
    rows = [{str(k).strip().lower(): v for k, v in r.items() if k is not None} for r in rows]
    lines = list(lines) if lines is not None else list(range(2, len(rows) + 2))
    cols = []
    for r in rows:
        for k in r:
            if k not in cols:
                cols.append(k)
    missing = [c for c in ("variable", "value", "suitability") if c not in cols]
    if missing:
        raise ChannelHabitatError(
            f"{name} has no column {', '.join(missing)}: it needs variable (depth or velocity), value and "
            "suitability columns (optional: unit, source, and columns naming curve sets such as species, "
            "life_stage)", parameter)
    key_cols = [c for c in cols if c not in CORE_COLUMNS and c not in TEXT_COLUMNS and c]
    points: dict = {}  # (set label) -> {variable: [(value, suit, line, unit)]}
    set_keys: dict = {}
    sources: dict = {}
    for r, line in zip(rows, lines):
        if all(_blank(v) for v in r.values()):
            continue
        where = f"{name} row {line}"
        var_txt = "" if _blank(r.get("variable")) else str(r["variable"]).strip().lower()
        var = _VARIABLE_SPELLINGS.get(var_txt)
        if var is None:
            raise ChannelHabitatError(f"{where}: unknown variable '{r.get('variable')}'; use depth (m) or "
                                      "velocity (m/s)", parameter)
        unit_txt = "" if _blank(r.get("unit")) else str(r["unit"]).strip().lower()
        unit_txt = _UNIT_SPELLINGS.get(unit_txt, unit_txt) or VARIABLE_UNITS[var]
        factor = UNIT_FACTORS[var].get(unit_txt)
        if factor is None:
            raise ChannelHabitatError(f"{where}: unit '{r.get('unit')}' is not a {var} unit; use "
                                      f"{', '.join(UNIT_FACTORS[var])}", parameter)
        value = _num(r.get("value"), "value", where, parameter)
        if value < 0:
            raise ChannelHabitatError(f"{where}: {var} value {value:g} is negative", parameter)
        s = _num(r.get("suitability"), "suitability", where, parameter)
        if not 0.0 <= s <= 1.0:
            raise ChannelHabitatError(f"{where}: suitability {s:g} is outside [0, 1]; suitabilities are "
                                      "fractions (write 0.8, not 80)", parameter)
        keys = {c: ("" if _blank(r.get(c)) else str(r.get(c)).strip()) for c in key_cols}
        label = " / ".join(v for v in keys.values() if v) or "curves"
        set_keys.setdefault(label, keys)
        pts = points.setdefault(label, {}).setdefault(var, [])
        if pts and pts[-1][3] != unit_txt:
            raise ChannelHabitatError(f"{where}: the {var} curve of '{label}' changes unit from {pts[-1][3]} to "
                                      f"{unit_txt}; use one unit per curve", parameter)
        pts.append((value * factor, s, line, unit_txt, value))
        src = "" if _blank(r.get("source")) else str(r.get("source")).strip()
        if src:
            sources.setdefault(label, [])
            if src not in sources[label]:
                sources[label].append(src)
    if not points:
        raise ChannelHabitatError(f"{name} has no curve points", parameter)
    sets = []
    for label, by_var in points.items():
        curves = {}
        for var, pts in by_var.items():
            for a, b in zip(pts, pts[1:]):
                if not b[0] > a[0]:
                    raise ChannelHabitatError(
                        f"{name} row {b[2]}: {var} value {b[4]:g} is not above the previous point's {a[4]:g} "
                        f"(row {a[2]}) in curve set '{label}'; values must increase: list each curve's points by "
                        "increasing value (for a step, use two close values such as 0.30 and 0.301)", parameter)
            curves[var] = SuitabilityCurve(var, np.array([p[0] for p in pts]), np.array([p[1] for p in pts]))
        sets.append(CurveSet(label, curves, set_keys[label], tuple(sources.get(label, ()))))
    return sets


def _label_norm(s: str) -> str:
    return re.sub(r"\s*/\s*", "/", re.sub(r"\s+", " ", str(s).strip().casefold()))


def select_curve_set(sets: list[CurveSet], name: str | None, parameter: str = "CURVE_SET") -> CurveSet:
    """The set labelled ``name`` (case-insensitive; ' / ' spacing free). Empty ``name`` is allowed
    when the file holds one set only."""
    if not name or not str(name).strip():
        if len(sets) == 1:
            return sets[0]
        raise ChannelHabitatError("the curve file holds several curve sets; name one of: "
                                  + "; ".join(s.label for s in sets), parameter)
    want = _label_norm(name)
    for s in sets:
        if _label_norm(s.label) == want:
            return s
    raise ChannelHabitatError(f"no curve set '{name}' in the curve file; sets: " + "; ".join(s.label for s in sets),
                              parameter)
