"""Habitat class schemes: an ordered table of rules over speed, depth, Froude number and V/D.

One general form covers every scheme the product offers:

* each class is a row with optional bounds on speed (m/s), depth (m), Froude number and the
  velocity/depth ratio V/D (1/s); a blank bound is unbounded;
* bounds are lower-inclusive and upper-exclusive (lower <= value < upper);
* an element takes the *first* row whose bounds all hold; a row with no bounds catches the rest.

Presets (DESIGN.md section 4):

* ``velocity`` - very slow < 0.05 <= slow < 0.20 <= moderate < 0.30 <= fast (m/s). Sources:
  very slow: critical velocity for persistent stratification and cyanobacterial growth,
  Mitrovic et al. 2003, Freshwater Biology 48:164-174, and Davis et al. 2025, Harmful Algae
  149:102962; slow: adult large-bodied native fish used water slower than about 0.2 m/s, Koehn &
  Nicol 2014, Marine and Freshwater Research 65:164-174; moderate: between the two; fast: common
  practice for flowing (lotic) water in lowland rivers, not verified against a source.
* ``froude`` - mesohabitat after Jowett 1993, New Zealand Journal of Marine and Freshwater
  Research 27:241-248: pool Fr < 0.18 and V/D < 1.24 1/s; riffle Fr > 0.41 and V/D > 3.20 1/s;
  run otherwise. Jowett's riffle bounds are strict (>); here, as everywhere in Channel Habitat,
  lower bounds are inclusive, which differs only for values exactly at 0.41 or 3.20.
* a depth x velocity matrix: any table of rows with depth and speed bounds.

Codes: 0 is dry/no data; classes are numbered 1..N in table order.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field

import numpy as np

from .errors import ChannelHabitatError
from .field import G

VARIABLES = ("speed", "depth", "froude", "vd")
VARIABLE_UNITS = {"speed": "m/s", "depth": "m", "froude": "-", "vd": "1/s"}
TABLE_COLUMNS = (
    "class", "speed_min", "speed_max", "depth_min", "depth_max",
    "froude_min", "froude_max", "vd_min", "vd_max", "colour",
)

# The project's own colours (resources/COLOURS.md explains the choice; colour-blind safe).
VELOCITY_COLOURS = ("#8E4A1C", "#E3B35F", "#5FB3C8", "#1F4E8C")
FROUDE_COLOURS = ("#2F5597", "#7CC7BE", "#E8A33D")
FALLBACK_COLOURS = (
    "#8E4A1C", "#E3B35F", "#5FB3C8", "#1F4E8C", "#6B8E3D", "#B46AA8", "#9C9C9C", "#D9645A",
    "#3C8D7F", "#C7B6E0",
)


@dataclass(frozen=True)
class HabitatClass:
    name: str
    bounds: dict = field(default_factory=dict)  # variable -> (lower|None, upper|None)
    colour: str = ""

    def describe(self) -> str:
        parts = []
        for var in VARIABLES:
            lo, hi = self.bounds.get(var, (None, None))
            if lo is None and hi is None:
                continue
            unit = VARIABLE_UNITS[var]
            label = {"speed": "V", "depth": "D", "froude": "Fr", "vd": "V/D"}[var]
            if lo is not None and hi is not None:
                parts.append(f"{lo:g} <= {label} < {hi:g} {unit}")
            elif lo is not None:
                parts.append(f"{label} >= {lo:g} {unit}")
            else:
                parts.append(f"{label} < {hi:g} {unit}")
        return " and ".join(parts) if parts else "all other wet water"


@dataclass(frozen=True)
class ClassScheme:
    """An ordered rule table. ``name`` says which preset or table it came from."""

    name: str
    classes: tuple
    source: str = ""

    @property
    def names(self) -> list:
        return [c.name for c in self.classes]

    @property
    def colours(self) -> list:
        return [c.colour for c in self.classes]

    def code_of(self, name: str) -> int:
        for i, c in enumerate(self.classes):
            if c.name == name:
                return i + 1
        raise ChannelHabitatError(f"no class named '{name}' in scheme '{self.name}' "
                                  f"(classes: {', '.join(self.names)})", "CLASS_TABLE")

    def variables(self) -> set:
        return {v for c in self.classes for v, b in c.bounds.items() if b != (None, None)}

    def classify(self, depth: np.ndarray, speed: np.ndarray) -> np.ndarray:
        """Class code (uint8, 1..N) per element; 0 where no row matches or values are not finite."""
        depth = np.asarray(depth)
        speed = np.asarray(speed)
        need = self.variables()
        values = {"speed": speed, "depth": depth}
        if "froude" in need:
            values["froude"] = speed / np.sqrt(G * depth.astype(np.float64))
        if "vd" in need:
            with np.errstate(divide="ignore", invalid="ignore"):
                values["vd"] = speed / depth.astype(np.float64)
        out = np.zeros(speed.shape, dtype=np.uint8)
        unassigned = np.isfinite(speed) & np.isfinite(depth)
        # Fast path: a pure interval table on one variable with contiguous bounds -> digitize.
        edges = self._interval_edges()
        if edges is not None:
            var, lows, highs = edges
            vals = values[var]
            # Bounds are cast to the values' dtype so a value stored exactly at a threshold
            # (e.g. float32 0.41) falls in the class above it.
            t = vals.dtype.type
            codes = np.searchsorted(np.asarray(lows[1:], dtype=vals.dtype), vals, side="right") + 1
            ok = unassigned.copy()
            if np.isfinite(lows[0]):
                ok &= vals >= t(lows[0])
            if np.isfinite(highs[-1]):
                ok &= vals < t(highs[-1])
            out[ok] = codes[ok].astype(np.uint8)
            return out
        for code, cls in enumerate(self.classes, start=1):
            m = unassigned.copy()
            for var, (lo, hi) in cls.bounds.items():
                vals = values[var]
                t = vals.dtype.type
                with np.errstate(invalid="ignore"):
                    if lo is not None:
                        m &= vals >= t(lo)
                    if hi is not None:
                        m &= vals < t(hi)
            out[m] = code
            unassigned &= ~m
        return out

    def _interval_edges(self):
        """(variable, lows, highs) when the table is contiguous intervals on one variable."""
        vars_used = self.variables()
        if len(vars_used) != 1:
            return None
        var = next(iter(vars_used))
        lows, highs = [], []
        for c in self.classes:
            lo, hi = c.bounds.get(var, (None, None))
            lows.append(-math.inf if lo is None else lo)
            highs.append(math.inf if hi is None else hi)
        for a, b in zip(highs[:-1], lows[1:]):
            if a != b:
                return None
        if any(lo >= hi for lo, hi in zip(lows, highs)):
            return None
        return var, lows, highs

    def to_rows(self) -> list:
        """The scheme as table rows (TABLE_COLUMNS), blanks for unbounded."""
        rows = []
        for c in self.classes:
            row = [c.name]
            for var in VARIABLES:
                lo, hi = c.bounds.get(var, (None, None))
                row += ["" if lo is None else f"{lo:g}", "" if hi is None else f"{hi:g}"]
            row.append(c.colour)
            rows.append(row)
        return rows


def _num(text, column: str, row_name: str, parameter: str):
    if text is None:
        return None
    s = str(text).strip()
    if s == "" or s.lower() in ("none", "null", "-", "nan"):
        return None
    try:
        v = float(s)
    except ValueError:
        raise ChannelHabitatError(
            f"class '{row_name}': {column} is '{s}', not a number (leave it blank for unbounded)",
            parameter) from None
    if not math.isfinite(v):
        return None
    return v


def scheme_from_rows(rows, name: str = "custom table", parameter: str = "CLASS_TABLE",
                     source: str = "user table") -> ClassScheme:
    """Build a scheme from rows of TABLE_COLUMNS (strings or numbers); validates every row."""
    classes = []
    seen = set()
    for i, row in enumerate(rows):
        row = list(row) + [""] * (len(TABLE_COLUMNS) - len(row))
        cname = str(row[0]).strip()
        if not cname:
            raise ChannelHabitatError(f"row {i + 1} of the class table has no class name", parameter)
        if cname in seen:
            raise ChannelHabitatError(f"class '{cname}' appears twice in the class table", parameter)
        seen.add(cname)
        bounds = {}
        for j, var in enumerate(VARIABLES):
            lo = _num(row[1 + 2 * j], TABLE_COLUMNS[1 + 2 * j], cname, parameter)
            hi = _num(row[2 + 2 * j], TABLE_COLUMNS[2 + 2 * j], cname, parameter)
            if lo is not None and hi is not None and lo >= hi:
                raise ChannelHabitatError(
                    f"class '{cname}': {var} lower bound {lo:g} is not below upper bound {hi:g}",
                    parameter)
            if lo is not None or hi is not None:
                bounds[var] = (lo, hi)
        colour = str(row[9]).strip() if row[9] is not None else ""
        if colour and not _is_colour(colour):
            raise ChannelHabitatError(f"class '{cname}': colour '{colour}' is not #RRGGBB", parameter)
        if not colour:
            colour = FALLBACK_COLOURS[i % len(FALLBACK_COLOURS)]
        classes.append(HabitatClass(cname, bounds, colour))
    if not classes:
        raise ChannelHabitatError("the class table is empty: give at least one class", parameter)
    keys = {}
    for c in classes:
        k = _field_key(c.name)
        if k in keys:
            raise ChannelHabitatError(
                f"classes '{keys[k]}' and '{c.name}' give the same field name '{k}' (area_{k}_m2); "
                "rename one so they differ in letters or digits", parameter)
        keys[k] = c.name
    if len(classes) > 254:
        raise ChannelHabitatError("at most 254 classes fit a Byte raster", parameter)
    return ClassScheme(name, tuple(classes), source)


def scheme_from_matrix(flat, ncols: int = len(TABLE_COLUMNS), **kw) -> ClassScheme:
    """From a QGIS matrix parameter value (a flat list, row-major)."""
    flat = list(flat or [])
    if len(flat) % ncols:
        raise ChannelHabitatError(
            f"the class table has {len(flat)} cells, not a multiple of its {ncols} columns",
            kw.get("parameter", "CLASS_TABLE"))
    rows = [flat[i:i + ncols] for i in range(0, len(flat), ncols)]
    return scheme_from_rows(rows, **kw)


def scheme_from_csv(text: str, name: str = "class table file", parameter: str = "CLASS_FILE") -> ClassScheme:
    """CSV with a header naming some of TABLE_COLUMNS (``class`` required)."""
    reader = csv.DictReader(io.StringIO(text))
    if reader.fieldnames is None or "class" not in [f.strip().lower() for f in reader.fieldnames]:
        raise ChannelHabitatError(
            "the class table file needs a header with a 'class' column and bounds columns such as "
            "speed_min, speed_max, depth_min, depth_max, froude_min, froude_max, vd_min, vd_max, colour",
            parameter)
    norm = {f: f.strip().lower() for f in reader.fieldnames}
    unknown = [f for f in norm.values() if f not in TABLE_COLUMNS]
    if unknown:
        raise ChannelHabitatError(
            f"unknown column(s) {', '.join(unknown)} in the class table file; allowed: "
            f"{', '.join(TABLE_COLUMNS)}", parameter)
    rows = []
    for rec in reader:
        r = {norm[k]: v for k, v in rec.items() if k is not None}
        rows.append([r.get(c, "") for c in TABLE_COLUMNS])
    return scheme_from_rows(rows, name=name, parameter=parameter, source="class table file")


def _field_key(name: str) -> str:
    from .stats import field_key

    return field_key(name)


def _is_colour(s: str) -> bool:
    return len(s) == 7 and s[0] == "#" and all(ch in "0123456789abcdefABCDEF" for ch in s[1:])


def velocity_preset(bounds=(0.05, 0.20, 0.30)) -> ClassScheme:
    """DESIGN.md section 4 velocity classes (m/s); sources in the module docstring."""
    b1, b2, b3 = bounds
    classes = (
        HabitatClass("very slow", {"speed": (None, b1)}, VELOCITY_COLOURS[0]),
        HabitatClass("slow", {"speed": (b1, b2)}, VELOCITY_COLOURS[1]),
        HabitatClass("moderate", {"speed": (b2, b3)}, VELOCITY_COLOURS[2]),
        HabitatClass("fast", {"speed": (b3, None)}, VELOCITY_COLOURS[3]),
    )
    return ClassScheme("velocity", classes,
                       "very slow: Mitrovic et al. 2003; Davis et al. 2025. slow: Koehn & Nicol "
                       "2014. moderate: between. fast: common practice, no source.")


def froude_preset(pool_fr=0.18, pool_vd=1.24, riffle_fr=0.41, riffle_vd=3.20) -> ClassScheme:
    """Jowett 1993 mesohabitat: pool, riffle, run (run = otherwise)."""
    classes = (
        HabitatClass("pool", {"froude": (None, pool_fr), "vd": (None, pool_vd)}, FROUDE_COLOURS[0]),
        HabitatClass("riffle", {"froude": (riffle_fr, None), "vd": (riffle_vd, None)}, FROUDE_COLOURS[2]),
        HabitatClass("run", {}, FROUDE_COLOURS[1]),
    )
    # Display order pool, run, riffle is kept by names; the rule order must put run last.
    return ClassScheme("froude", classes, "Jowett 1993, NZ J. Marine and Freshwater Research 27:241-248")


def depth_velocity_matrix(depth_breaks, speed_breaks, depth_names=None, speed_names=None,
                          colours=None, name: str = "depth x velocity") -> ClassScheme:
    """A depth x velocity matrix scheme: one class per (depth band, speed band), named
    '<depth name> <speed name>' (e.g. 'shallow slow'), rows ordered depth-major.

    ``depth_breaks`` / ``speed_breaks``: inner class boundaries (m, m/s), increasing. Bands are
    lower-inclusive, upper-exclusive; the first band of each variable is open below, the last open
    above. Default names: 'd1', 'd2', ... and 'v1', 'v2', ...
    """
    db = [float(b) for b in depth_breaks]
    vb = [float(b) for b in speed_breaks]
    for label, br, param in (("depth", db, "CLASS_TABLE"), ("speed", vb, "CLASS_TABLE")):
        if any(b2 <= b1 for b1, b2 in zip(br, br[1:])):
            raise ChannelHabitatError(f"{label} breaks must increase: {br}", param)
    dn = list(depth_names or [f"d{i + 1}" for i in range(len(db) + 1)])
    vn = list(speed_names or [f"v{i + 1}" for i in range(len(vb) + 1)])
    if len(dn) != len(db) + 1 or len(vn) != len(vb) + 1:
        raise ChannelHabitatError("give one name per band: breaks + 1 names for depth and for speed",
                                  "CLASS_TABLE")
    dlo, dhi = [None] + db, db + [None]
    vlo, vhi = [None] + vb, vb + [None]
    rows = []
    k = 0
    for i in range(len(dn)):
        for j in range(len(vn)):
            colour = (colours[k] if colours else "")
            rows.append([f"{dn[i]} {vn[j]}", vlo[j], vhi[j], dlo[i], dhi[i], None, None, None, None, colour])
            k += 1
    return scheme_from_rows([["" if v is None else v for v in r] for r in rows], name=name,
                            source="depth x velocity matrix")


PRESETS = {"velocity": velocity_preset, "froude": froude_preset}


def preset(name: str) -> ClassScheme:
    try:
        return PRESETS[name]()
    except KeyError:
        raise ChannelHabitatError(f"unknown class preset '{name}' (known: {', '.join(PRESETS)})",
                                  "SCHEME") from None
