"""Habitat through time: a daily flow series, spells, and delivery options for a limited volume.

This module is the pure-numpy part of ``habitatseries``:

* :func:`read_flow_series` - a daily flow series CSV (``date, discharge, unit`` plus optional
  further columns holding alternative series) -> :class:`FlowSeries`, refusing gaps, duplicate
  dates, missing or negative flows and unknown units, with the first offending lines named.
* :func:`find_spells` - spells of a daily condition. A *spell* is a maximal run of consecutive days
  on which the condition holds. Days whose state is unknown (flow outside the discharge ladder)
  break a spell and are never counted as meeting it; a spell that touches the start or end of the
  record, or an unknown day, is *censored* on that side: its true length may be longer.
* delivery patterns (:func:`parse_delivery_options`, :func:`added_flow`): ways of delivering an
  environmental volume V (ML) on top of the base series, each scaled so that the added flow
  summed over the days (ML/d x 1 d) is exactly V:

  - ``pulse``: a trapezoid starting on a chosen date: ``ramp_up`` days rising linearly, ``duration``
    days at the peak, ``ramp_down`` days falling linearly. Day k of a ramp of r days carries
    k/(r+1) of the peak, so the added flow is P * w_i with fixed weights w_i; the peak is solved,
    P = V / sum(w_i).
  - ``peak``: the same trapezoid centred on the highest base flow inside a window (lifting a
    natural peak); the peak is solved in the same way.
  - ``recession``: from a start date the flow is held up at a level (default the base flow on
    that day) that falls by at most ``fall`` per cent a day: target_k = level (1 - fall/100)^k.
    The added flow is max(target_k - base_k, 0), day after day, until the volume is spent; the
    last day takes only what is left (a partial day).
  - ``constant``: the same added flow on every day of a window, V / n days.

  Alternative series supplied as further columns are options too; their volume is the sum of
  (alternative - base) and is reported, not forced.

Discharge is in ML/d throughout (core/units.py); one day of 1 ML/d is 1 ML; 1 GL = 1000 ML.
"""

from __future__ import annotations

import csv
import io
import math
import re
from dataclasses import dataclass, field

import numpy as np

from .errors import ChannelHabitatError
from .units import M3S_PER_MLD, normalise_unit

ML_PER_GL = 1000.0
DAY = np.timedelta64(1, "D")

# Default bloom-risk settings (see docs/algorithms/habitatseries.md):
# minimum spell length 5 days after the persistent-stratification duration reported by
# Mitrovic et al. 2003, Freshwater Biology 48:164-174; share 50 % of the zone's wetted area
# (a majority of the zone in the stratification-prone class; common practice, no source).
DEFAULT_BLOOM_CLASSES = "very slow"
DEFAULT_BLOOM_SHARE_PCT = 50.0
DEFAULT_BLOOM_MIN_DAYS = 5

PATTERNS = ("pulse", "peak", "recession", "constant")

_MAX_LISTED = 5


# ------------------------------------------------------------------------------------------
# Dates
# ------------------------------------------------------------------------------------------
_DATE_RE = re.compile(r"^(\d{4}-\d{2}-\d{2})(?:[T ](\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?))?$")


def parse_date(text, what: str = "date", parameter: str | None = None) -> np.datetime64:
    """An ISO date 'YYYY-MM-DD' -> numpy datetime64[D]; anything else is refused."""
    s = str(text).strip()
    m = _DATE_RE.match(s)
    if m is None or m.group(2) is not None:
        raise ChannelHabitatError(f"{what} '{s}' is not an ISO date (YYYY-MM-DD)", parameter)
    try:
        return np.datetime64(m.group(1), "D")
    except ValueError:
        raise ChannelHabitatError(f"{what} '{s}' is not a valid calendar date", parameter) from None


def iso(d) -> str:
    return str(np.datetime64(d, "D"))


# ------------------------------------------------------------------------------------------
# The flow series
# ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class FlowSeries:
    """A daily flow series without gaps: ``dates`` consecutive days (datetime64[D]), ``q_mld``
    the base series, ``alternatives`` further series (name -> ML/d) on the same days."""

    dates: np.ndarray
    q_mld: np.ndarray
    alternatives: dict = field(default_factory=dict)
    units: tuple = ()  # the units found in the file, e.g. ('ML/d',)

    @property
    def n_days(self) -> int:
        return len(self.dates)

    @property
    def start(self) -> np.datetime64:
        return self.dates[0]

    @property
    def end(self) -> np.datetime64:
        return self.dates[-1]

    def index_of(self, day: np.datetime64, what: str, parameter: str | None = None) -> int:
        i = int((np.datetime64(day, "D") - self.dates[0]) / DAY)
        if i < 0 or i >= self.n_days:
            raise ChannelHabitatError(
                f"{what} {iso(day)} is outside the flow series ({iso(self.start)} to {iso(self.end)})",
                parameter)
        return i


def _listing(items) -> str:
    items = list(items)
    text = "; ".join(items[:_MAX_LISTED])
    if len(items) > _MAX_LISTED:
        text += f"; and {len(items) - _MAX_LISTED} more"
    return text


def _number(s: str):
    try:
        v = float(str(s).strip())
    except (TypeError, ValueError):
        return None
    return v


def read_flow_series(text: str, unit: str | None = None, alternatives=None,
                     parameter: str = "FLOWS") -> FlowSeries:
    """Parse a daily flow CSV (see module docstring).

    Columns (header required, case-insensitive, any order): ``date`` (ISO YYYY-MM-DD),
    ``discharge`` and ``unit`` (ML/d or m3/s, per row). Instead of discharge+unit a column named
    ``q_mld`` or ``q_m3s`` may be used; without a unit column ``unit`` (the argument) applies.
    Every further column is an alternative series in the same unit as its row, unless
    ``alternatives`` (a list of column names) says which to use; listed columns must exist.
    Rows may come in any order; the series must then cover every day once, without gaps.
    """
    rows = list(csv.reader(io.StringIO(text.lstrip("\ufeff"))))
    # skip fully blank lines but remember line numbers (1-based, header = 1)
    numbered = [(i + 1, r) for i, r in enumerate(rows) if any(c.strip() for c in r)]
    if not numbered:
        raise ChannelHabitatError("the flow series file is empty", parameter)
    header_line, header = numbered[0]
    return flow_series_from_rows(header, numbered[1:], unit=unit, alternatives=alternatives,
                                 parameter=parameter)


def flow_series_from_rows(header, numbered_rows, unit: str | None = None, alternatives=None,
                          parameter: str = "FLOWS") -> FlowSeries:
    """The parser behind :func:`read_flow_series`; ``numbered_rows`` is [(line, [cells...])]
    (a QGIS table layer gives feature ids as 'lines')."""
    names = [str(h).strip() for h in header]
    low = [h.lower() for h in names]
    if len(set(low)) != len(low):
        dup = sorted({h for h in low if low.count(h) > 1})
        raise ChannelHabitatError(f"the flow series has repeated column(s): {', '.join(dup)}", parameter)
    if "date" not in low:
        raise ChannelHabitatError(
            "the flow series needs a header with columns date, discharge, unit (found: "
            f"{', '.join(names) or 'none'})", parameter)
    i_date = low.index("date")
    fixed_unit = None
    if "discharge" in low:
        i_q = low.index("discharge")
    elif "q_mld" in low:
        i_q, fixed_unit = low.index("q_mld"), "ML/d"
    elif "q_m3s" in low:
        i_q, fixed_unit = low.index("q_m3s"), "m3/s"
    else:
        raise ChannelHabitatError(
            "the flow series has no discharge column: name it 'discharge' (with a 'unit' column) "
            "or 'q_mld' / 'q_m3s'", parameter)
    i_unit = low.index("unit") if "unit" in low and fixed_unit is None else None
    if fixed_unit is None and i_unit is None:
        if not unit:
            raise ChannelHabitatError(
                "the flow series has no 'unit' column: add one (ML/d or m3/s on every row) or "
                "choose the unit of the file", parameter)
        fixed_unit = normalise_unit(unit, parameter)
    used = {i_date, i_q} | ({i_unit} if i_unit is not None else set())
    extra = [j for j in range(len(names)) if j not in used]
    if alternatives:
        wanted = [str(a).strip() for a in alternatives if str(a).strip()]
        idx = []
        for a in wanted:
            if a.lower() not in low:
                raise ChannelHabitatError(
                    f"alternative series column '{a}' is not in the flow series (columns: "
                    f"{', '.join(names)})", parameter)
            j = low.index(a.lower())
            if j in used:
                raise ChannelHabitatError(f"column '{a}' cannot be an alternative series", parameter)
            idx.append(j)
        extra = idx
    for j in extra:
        if not names[j]:
            raise ChannelHabitatError(
                f"column {j + 1} of the flow series has no name; name it (it would be an "
                "alternative series) or remove it", parameter)

    if not numbered_rows:
        raise ChannelHabitatError("the flow series has a header but no data rows", parameter)
    n = len(numbered_rows)
    lines = np.array([ln for ln, _ in numbered_rows], dtype=np.int64)
    dates = np.empty(n, dtype="datetime64[D]")
    q = np.empty((1 + len(extra), n), dtype=np.float64)
    to_mld = np.ones(n)
    units_seen = []
    times = set()
    problems = []
    cols = [i_q] + extra
    for k, (ln, cells) in enumerate(numbered_rows):
        cells = list(cells) + [""] * (len(names) - len(cells))
        ds = str(cells[i_date]).strip()
        m = _DATE_RE.match(ds)
        if m is None:
            raise ChannelHabitatError(f"line {ln}: date '{ds}' is not an ISO date (YYYY-MM-DD)", parameter)
        try:
            dates[k] = np.datetime64(m.group(1), "D")
        except ValueError:
            raise ChannelHabitatError(f"line {ln}: date '{ds}' is not a valid calendar date", parameter) from None
        times.add(m.group(2) or "")
        u = fixed_unit if i_unit is None else normalise_unit(cells[i_unit], parameter) \
            if str(cells[i_unit]).strip() else None
        if u is None:
            raise ChannelHabitatError(f"line {ln} ({ds}): the unit is empty; give ML/d or m3/s", parameter)
        if u not in units_seen:
            units_seen.append(u)
        to_mld[k] = 1.0 if u == "ML/d" else 1.0 / M3S_PER_MLD
        for c, j in enumerate(cols):
            raw = str(cells[j]).strip() if cells[j] is not None else ""
            v = _number(raw) if raw else None
            if v is None or not math.isfinite(v):
                what = "is empty" if not raw else f"is '{raw}', not a number"
                problems.append((ln, f"line {ln} ({ds}): {names[j]} {what}"))
                v = np.nan
            elif v < 0:
                problems.append((ln, f"line {ln} ({ds}): {names[j]} {raw} is negative"))
            q[c, k] = v
    if problems:
        raise ChannelHabitatError(
            "the flow series has missing, non-numeric or negative flows - every day needs a "
            "discharge >= 0 (gaps are never filled): " + _listing(p for _, p in problems), parameter)
    if len(times) > 1:
        raise ChannelHabitatError(
            "the flow series mixes times of day (" + ", ".join(sorted(t or "none" for t in times)) +
            "); give one value per day (date only, or the same time on every row)", parameter)
    q = q * to_mld[None, :]

    order = np.argsort(dates, kind="stable")
    dates, lines, q = dates[order], lines[order], q[:, order]
    step = np.diff(dates) / DAY
    dup = np.nonzero(step == 0)[0]
    if dup.size:
        msgs = [f"{iso(dates[i])} (lines {lines[i]} and {lines[i + 1]})" for i in dup]
        raise ChannelHabitatError(
            "the flow series has duplicate dates: " + _listing(msgs) +
            "; keep one value per day", parameter)
    gaps = np.nonzero(step > 1)[0]
    if gaps.size:
        msgs = [f"nothing between {iso(dates[i])} and {iso(dates[i + 1])} ({int(step[i]) - 1} day"
                f"{'s' if step[i] > 2 else ''} missing)" for i in gaps]
        raise ChannelHabitatError(
            "the flow series has gaps: " + _listing(msgs) +
            "; give every day a value (habitatseries never fills gaps)", parameter)
    alts = {names[j]: q[1 + c] for c, j in enumerate(extra)}
    return FlowSeries(dates, q[0], alts, tuple(units_seen))


# ------------------------------------------------------------------------------------------
# Spells
# ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Spells:
    """Spells as parallel arrays (indices into the series, ``end`` inclusive)."""

    start: np.ndarray
    end: np.ndarray
    censored_start: np.ndarray
    censored_end: np.ndarray

    @property
    def length(self) -> np.ndarray:
        return self.end - self.start + 1

    def __len__(self) -> int:
        return len(self.start)

    def select(self, mask) -> Spells:
        mask = np.asarray(mask, dtype=bool)
        return Spells(self.start[mask], self.end[mask], self.censored_start[mask], self.censored_end[mask])


def find_spells(condition, known=None) -> Spells:
    """Maximal runs of consecutive days where ``condition`` holds (and the state is ``known``).

    Censored at the start when the spell begins on the first day or right after an unknown day;
    censored at the end when it ends on the last day or right before an unknown day.
    """
    cond = np.asarray(condition, dtype=bool)
    n = cond.size
    known = np.ones(n, dtype=bool) if known is None else np.asarray(known, dtype=bool)
    if known.shape != cond.shape:
        raise ValueError("condition and known differ in length")
    c = cond & known
    edges = np.diff(np.concatenate([[0], c.astype(np.int8), [0]]))
    start = np.nonzero(edges == 1)[0]
    end = np.nonzero(edges == -1)[0] - 1
    before_unknown = np.concatenate([[True], ~known])  # index i -> day i-1 unknown (or no day)
    after_unknown = np.concatenate([~known, [True]])  # index i+1 -> day i+1 unknown (or none)
    cs = before_unknown[start]
    ce = after_unknown[end + 1]
    return Spells(start.astype(np.int64), end.astype(np.int64), cs, ce)


# ------------------------------------------------------------------------------------------
# Delivery options
# ------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class DeliveryOption:
    name: str
    pattern: str  # one of PATTERNS, or 'series' (an alternative column), or 'base'
    params: dict = field(default_factory=dict)
    text: str = ""  # the statement as written

    def describe(self) -> str:
        return self.text or self.pattern


_KEYS = {
    "pulse": {"start": "date", "duration": "days1", "ramp_up": "days0", "ramp_down": "days0", "ramp": "days0"},
    "peak": {"from": "date", "to": "date", "duration": "days1", "ramp_up": "days0", "ramp_down": "days0",
             "ramp": "days0"},
    "recession": {"start": "date", "fall": "percent", "level": "flow"},
    "constant": {"start": "date", "end": "date", "days": "days1"},
}
_REQUIRED = {"pulse": ("start", "duration"), "peak": ("from", "to", "duration"),
             "recession": ("start",), "constant": ("start",)}

_FLOW_RE = re.compile(r"^([0-9.eE+-]+)\s*(ml/d|mld|m3/s|m3s)?$", re.IGNORECASE)


def _parse_value(kind: str, key: str, raw: str, where: str, parameter: str):
    if kind == "date":
        return parse_date(raw, f"{where}: {key}", parameter)
    if kind in ("days0", "days1"):
        v = _number(raw)
        if v is None or not float(v).is_integer() or v < (1 if kind == "days1" else 0):
            least = 1 if kind == "days1" else 0
            raise ChannelHabitatError(f"{where}: {key}={raw} must be a whole number of days >= {least}", parameter)
        return int(v)
    if kind == "percent":
        v = _number(raw.rstrip("%"))
        if v is None or not (0.0 <= v < 100.0):
            raise ChannelHabitatError(f"{where}: {key}={raw} must be a percentage per day in [0, 100)", parameter)
        return float(v)
    if kind == "flow":
        m = _FLOW_RE.match(raw.strip())
        v = _number(m.group(1)) if m else None
        if v is None or not math.isfinite(v) or v <= 0:
            raise ChannelHabitatError(f"{where}: {key}={raw} must be a discharge > 0 (ML/d, or add m3/s)",
                                      parameter)
        u = normalise_unit(m.group(2), parameter) if m.group(2) else "ML/d"
        return v if u == "ML/d" else v / M3S_PER_MLD
    raise AssertionError(kind)


def parse_delivery_options(text: str, parameter: str = "DELIVERY") -> list:
    """Options, one per line (or separated by ';'): ``<name>: <pattern> key=value ...``.

    pulse      start=DATE duration=DAYS [ramp_up=DAYS] [ramp_down=DAYS] [ramp=DAYS (both)]
    peak       from=DATE to=DATE duration=DAYS [ramp_up=DAYS] [ramp_down=DAYS] [ramp=DAYS]
    recession  start=DATE [fall=PERCENT per day, default 0 = hold the level] [level=FLOW]
    constant   start=DATE (end=DATE | days=DAYS)
    """
    options = []
    seen = set()
    for raw_line in re.split(r"[;\n]", text or ""):
        line = raw_line.strip()
        if not line or line.startswith("#"):
            continue
        if ":" not in line:
            raise ChannelHabitatError(
                f"delivery option '{line}' has no name: write '<name>: <pattern> key=value ...', e.g. "
                "'spring pulse: pulse start=2023-10-01 duration=5 ramp_up=3 ramp_down=10'", parameter)
        name, body = line.split(":", 1)
        name = name.strip()
        if not name:
            raise ChannelHabitatError(f"delivery option '{line}' has an empty name", parameter)
        if name.lower() in seen or name.lower() == "base":
            raise ChannelHabitatError(
                f"delivery option name '{name}' is used twice (or is 'base', which names the series "
                "without delivery)", parameter)
        seen.add(name.lower())
        tokens = body.split()
        if not tokens:
            raise ChannelHabitatError(f"delivery option '{name}' has no pattern ({', '.join(PATTERNS)})", parameter)
        pattern = tokens[0].lower()
        if pattern not in _KEYS:
            raise ChannelHabitatError(
                f"delivery option '{name}': unknown pattern '{tokens[0]}' (use {', '.join(PATTERNS)})", parameter)
        where = f"delivery option '{name}'"
        params = {}
        for tok in tokens[1:]:
            if "=" not in tok:
                raise ChannelHabitatError(f"{where}: '{tok}' is not key=value", parameter)
            key, val = tok.split("=", 1)
            key = key.strip().lower()
            if key not in _KEYS[pattern]:
                raise ChannelHabitatError(
                    f"{where}: '{key}' is not a setting of a {pattern} (settings: "
                    f"{', '.join(_KEYS[pattern])})", parameter)
            if key in params:
                raise ChannelHabitatError(f"{where}: '{key}' is given twice", parameter)
            params[key] = _parse_value(_KEYS[pattern][key], key, val, where, parameter)
        if "ramp" in params:
            for k in ("ramp_up", "ramp_down"):
                if k in params:
                    raise ChannelHabitatError(f"{where}: give ramp or ramp_up/ramp_down, not both", parameter)
                params[k] = params["ramp"]
            del params["ramp"]
        for k in _REQUIRED[pattern]:
            if k not in params:
                raise ChannelHabitatError(f"{where}: a {pattern} needs {k}=", parameter)
        if pattern == "constant" and ("end" in params) == ("days" in params):
            raise ChannelHabitatError(f"{where}: a constant addition needs end=DATE or days=N (one of them)",
                                      parameter)
        if pattern == "constant" and "end" in params and params["end"] < params["start"]:
            raise ChannelHabitatError(f"{where}: end {iso(params['end'])} is before start {iso(params['start'])}",
                                      parameter)
        if pattern == "peak" and params["to"] < params["from"]:
            raise ChannelHabitatError(f"{where}: to {iso(params['to'])} is before from {iso(params['from'])}",
                                      parameter)
        if pattern in ("pulse", "peak"):
            params.setdefault("ramp_up", 0)
            params.setdefault("ramp_down", 0)
        if pattern == "recession":
            params.setdefault("fall", 0.0)
        options.append(DeliveryOption(name, pattern, params, f"{pattern} " + " ".join(tokens[1:])))
    return options


def trapezoid_weights(ramp_up: int, duration: int, ramp_down: int) -> np.ndarray:
    """Relative added flow of a pulse: linear ramps (day k of r carries k/(r+1)), peak = 1."""
    up = np.arange(1, ramp_up + 1) / (ramp_up + 1.0)
    down = np.arange(ramp_down, 0, -1) / (ramp_down + 1.0)
    return np.concatenate([up, np.ones(duration), down])


@dataclass(frozen=True)
class Delivery:
    """The added flow of one option (ML/d per day of the series) and what was solved."""

    option: DeliveryOption
    added_mld: np.ndarray
    summary: str

    @property
    def volume_ml(self) -> float:
        return volume_ml(self.added_mld)


def volume_ml(added_mld) -> float:
    """Volume of an added flow series: sum of ML/d x 1 day (exactly rounded summation)."""
    return math.fsum(float(v) for v in np.asarray(added_mld, dtype=np.float64))


def _place(series: FlowSeries, start_i: int, weights: np.ndarray, where: str, parameter: str) -> int:
    end_i = start_i + len(weights) - 1
    if start_i < 0:
        raise ChannelHabitatError(f"{where} would start before the flow series begins ({iso(series.start)})",
                                  parameter)
    if end_i >= series.n_days:
        raise ChannelHabitatError(
            f"{where} would run to {iso(series.start + end_i * DAY)}, after the flow series ends "
            f"({iso(series.end)}); start earlier or shorten it", parameter)
    return end_i


def added_flow(option: DeliveryOption, series: FlowSeries, volume: float, parameter: str = "DELIVERY") -> Delivery:
    """The added flow (ML/d) of a generated pattern that uses exactly ``volume`` ML."""
    if not (volume > 0 and math.isfinite(volume)):
        raise ChannelHabitatError(
            "delivery options need an environmental water volume > 0 (ML or GL)", "ENV_VOLUME")
    where = f"delivery option '{option.name}'"
    p = option.params
    n = series.n_days
    added = np.zeros(n)
    base = series.q_mld
    if option.pattern in ("pulse", "peak"):
        w = trapezoid_weights(p["ramp_up"], p["duration"], p["ramp_down"])
        if option.pattern == "pulse":
            start_i = series.index_of(p["start"], f"{where}: start", parameter)
            centre = ""
        else:
            a = series.index_of(p["from"], f"{where}: from", parameter)
            b = series.index_of(p["to"], f"{where}: to", parameter)
            top = a + int(np.argmax(base[a:b + 1]))  # first day of the highest base flow
            # the peak days are centred on that day (the extra day after it when even)
            start_i = top - (p["duration"] - 1) // 2 - p["ramp_up"]
            centre = f", centred on the base peak of {base[top]:.0f} ML/d on {iso(series.dates[top])}"
        end_i = _place(series, start_i, w, where, parameter)
        peak = volume / math.fsum(w)
        added[start_i:end_i + 1] = peak * w
        # put the rounding residue on the peak's first day so the sum is V to the last bit
        added[start_i + p["ramp_up"]] += volume - volume_ml(added)
        summary = (f"{option.pattern}: {p['ramp_up']} d ramp up, {p['duration']} d at +{peak:.1f} ML/d, "
                   f"{p['ramp_down']} d ramp down, {iso(series.dates[start_i])} to "
                   f"{iso(series.dates[end_i])}{centre}")
    elif option.pattern == "constant":
        start_i = series.index_of(p["start"], f"{where}: start", parameter)
        days = p["days"] if "days" in p else int((p["end"] - p["start"]) / DAY) + 1
        w = np.ones(days)
        end_i = _place(series, start_i, w, where, parameter)
        rate = volume / days
        added[start_i:end_i + 1] = rate
        added[start_i] += volume - volume_ml(added)
        summary = (f"constant: +{rate:.1f} ML/d for {days} d, {iso(series.dates[start_i])} to "
                   f"{iso(series.dates[end_i])}")
    elif option.pattern == "recession":
        start_i = series.index_of(p["start"], f"{where}: start", parameter)
        level = p.get("level", float(base[start_i]))
        k = np.arange(n - start_i, dtype=np.float64)
        target = level * (1.0 - p["fall"] / 100.0) ** k
        need = np.maximum(target - base[start_i:], 0.0)
        cum = np.cumsum(need)
        if cum.size == 0 or cum[-1] < volume:
            got = float(cum[-1]) if cum.size else 0.0
            raise ChannelHabitatError(
                f"{where}: holding the flow up from {iso(series.dates[start_i])} (level {level:.0f} ML/d, "
                f"falling {p['fall']:g} % a day) adds only {got:.0f} ML before the series ends on "
                f"{iso(series.end)} (the base flow is at or above the held level), less than the "
                f"{volume:.0f} ML to deliver; give a higher level=, a slower fall=, an earlier start= "
                "or a smaller volume", parameter)
        last = int(np.searchsorted(cum, volume, side="left"))  # first day the volume is reached
        added[start_i:start_i + last + 1] = need[:last + 1]
        used_before = volume_ml(added[start_i:start_i + last])
        added[start_i + last] = volume - used_before  # the last day is partial
        end_i = start_i + last
        days_held = int(np.count_nonzero(added > 0))
        summary = (f"recession: held from {level:.0f} ML/d falling {p['fall']:g} %/d, "
                   f"{iso(series.dates[start_i])} to {iso(series.dates[end_i])} "
                   f"({days_held} d with added flow; the last day partial, +{added[end_i]:.1f} ML/d)")
    else:  # pragma: no cover - parse_delivery_options admits only PATTERNS
        raise ChannelHabitatError(f"{where}: unknown pattern {option.pattern}", parameter)
    used = volume_ml(added)
    if abs(used - volume) > 1e-6 * max(1.0, volume):  # pragma: no cover - guards the arithmetic above
        raise RuntimeError(f"volume accounting failed for {option.name}: {used} != {volume}")
    return Delivery(option, added, summary)


def alternative_delivery(name: str, alt_mld: np.ndarray, series: FlowSeries) -> Delivery:
    """An alternative series supplied as a column: added flow = alternative - base."""
    added = np.asarray(alt_mld, dtype=np.float64) - series.q_mld
    below = int(np.count_nonzero(added < 0))
    summary = "alternative series from the flow file"
    if below:
        summary += f" (below the base series on {below} day{'s' if below > 1 else ''})"
    return Delivery(DeliveryOption(name, "series", {}, f"column '{name}'"), added, summary)


def volume_to_ml(value: float, unit: str, parameter: str = "ENV_VOLUME") -> float:
    """ML or GL -> ML (1 GL = 1000 ML)."""
    u = str(unit).strip().lower()
    if u in ("ml", "megalitre", "megalitres"):
        f = 1.0
    elif u in ("gl", "gigalitre", "gigalitres"):
        f = ML_PER_GL
    else:
        raise ChannelHabitatError(f"unknown volume unit '{unit}': use ML or GL", parameter)
    v = float(value)
    if not math.isfinite(v) or v < 0:
        raise ChannelHabitatError(f"the environmental water volume {value} must be >= 0", parameter)
    return v * f


# ------------------------------------------------------------------------------------------
# Habitat through time: the curves of one regime, criteria, options, the three tables
# ------------------------------------------------------------------------------------------
class CurveUnits:
    """The scope units and classes of flow-habitat curves, without a regime: enough to check the
    units, classes and targets a user names. habitatseries builds one from the reach and class scheme
    (``FlowHabitatCurves(scope_units(reach), scheme.names, {})``) to check them before any run of a
    scenario table is read; :class:`CurveView` adds the regime."""

    def __init__(self, curves):
        self.curves = curves
        self.classes = list(curves.class_names)
        self.unit_keys = [u.key for u in curves.units]

    @property
    def zone_names(self) -> list:
        return [u.unit for u in self.curves.units if u.scope == "zone"]

    @property
    def n_segments(self) -> int:
        return sum(1 for u in self.curves.units if u.scope == "segment")

    def default_units(self) -> list:
        """The reach and every zone (segments only when asked for)."""
        return [u.key for u in self.curves.units if u.scope in ("reach", "zone")]

    def resolve_units(self, text: str, parameter: str = "REPORT_UNITS") -> list:
        """'reach, lower, segment 3' -> unit keys (empty text: the reach and every zone)."""
        names = [t.strip() for t in re.split(r"[,;\n]", text or "") if t.strip()]
        if not names:
            return self.default_units()
        out = []
        for name in names:
            key = self.unit_keys[self.curves.unit_index(name, parameter)]
            if key not in out:
                out.append(key)
        return out

    def resolve_classes(self, text: str, parameter: str, hint: str = "") -> tuple:
        """'very slow+slow' -> canonical class names."""
        parts = [p for p in re.split(r"[+,]", text or "") if p.strip()]
        try:
            idx = self.curves.class_indices(parts, parameter)
        except ChannelHabitatError as err:
            raise ChannelHabitatError(f"{err}{hint}", err.parameter) from None
        return tuple(self.classes[i] for i in idx)


def match_regime(regimes, regime: str | None, parameter: str = "REGIME", where: str = "the curves") -> str:
    """The regime of ``regimes`` named by ``regime`` (case-insensitive); empty: the only one."""
    regimes = list(regimes)
    regime = (regime or "").strip()
    if not regime:
        if len(regimes) != 1:
            raise ChannelHabitatError(
                f"there are several regimes in {where} ({', '.join(regimes)}): name the one the flow series "
                "applies to", parameter)
        return regimes[0]
    if regime in regimes:
        return regime
    match = [r for r in regimes if r.casefold() == regime.casefold()]
    if not match:
        raise ChannelHabitatError(f"no regime '{regime}' in {where} (regimes: {', '.join(regimes)})", parameter)
    return match[0]


class CurveView(CurveUnits):
    """One regime of the flow-habitat curves (``core.curves.FlowHabitatCurves``) as habitatseries
    asks them: class shares at any discharges, interpolated exactly as flowhabitat does (PCHIP on
    ln discharge, exact at the runs, NaN outside the runs - never extrapolated)."""

    def __init__(self, curves, regime: str | None = None, parameter: str = "REGIME"):
        super().__init__(curves)
        self.regime = match_regime(curves.regimes, regime, parameter)
        self.ladder_mld = curves.ladder(self.regime)

    def inside(self, q_mld) -> np.ndarray:
        from .curves import inside_ladder

        q = np.asarray(q_mld, dtype=np.float64)
        return inside_ladder(self.ladder_mld, q) & np.isfinite(q)

    def percent(self, unit: str, classes, q_mld) -> np.ndarray:
        """Share (%) of the summed ``classes`` in ``unit`` at each discharge (a class set is one curve)."""
        return self.curves.percent_at(self.regime, np.asarray(q_mld, dtype=np.float64), unit, list(classes))

    def grid(self, q_mld, units) -> np.ndarray:
        """(n_q, len(units), n_classes) shares of every class in the given units."""
        g = self.curves.percent_grid(self.regime, np.asarray(q_mld, dtype=np.float64))
        idx = [self.curves.unit_index(u) for u in units]
        return g[:, idx, :]


class WuaCurves:
    """Weighted usable area against discharge for one regime (from a suitability results table),
    interpolated in the same way as the class shares (PCHIP on ln q, NaN outside its runs).

    Table columns (case-insensitive): regime, q_mld (or q_m3s), scope, unit, wua_m2, and optionally
    curve_set or species (one curve per value). Only the units reported in DAILY are used."""

    def __init__(self, names, ladders, values):
        self.names = list(names)
        self._ladders = ladders
        self._values = values

    def value(self, name: str, q_mld) -> np.ndarray:
        from .curves import pchip_log_q

        return pchip_log_q(self._ladders[name], self._values[name], np.asarray(q_mld, dtype=np.float64))

    @classmethod
    def from_table(cls, columns: dict, regime: str, units, parameter: str = "WUA") -> WuaCurves:
        cols = {str(k).strip().lower(): list(v) for k, v in columns.items()}
        if "q_mld" not in cols and "q_m3s" not in cols:
            raise ChannelHabitatError("the WUA table needs a q_mld (or q_m3s) column", parameter)
        missing = [c for c in ("regime", "scope", "unit", "wua_m2") if c not in cols]
        if missing:
            raise ChannelHabitatError(
                f"the WUA table has no column {', '.join(missing)} (needs regime, q_mld, scope, unit, wua_m2 "
                "and optionally species)", parameter)
        n = len(cols["regime"])
        label_col = next((c for c in ("curve_set", "species") if c in cols), None)
        wanted = {str(u).casefold(): u for u in units}
        data: dict = {}
        for i in range(n):
            if str(cols["regime"][i] or "").strip().casefold() != regime.casefold():
                continue
            scope = str(cols["scope"][i] or "").strip().lower()
            unit = str(cols["unit"][i] or "").strip()
            if scope == "segment":
                if re.fullmatch(r"\d+(\.0+)?", unit):
                    unit = str(int(float(unit)))
                key = f"segment {unit}"
            elif scope == "reach":
                key = "reach"
            elif scope == "zone":
                key = unit
            else:
                raise ChannelHabitatError(f"WUA table row {i + 1}: scope '{scope}' is not reach, zone or segment",
                                          parameter)
            if key.casefold() not in wanted:
                continue
            key = wanted[key.casefold()]
            q = _number(cols["q_mld"][i]) if "q_mld" in cols else None
            if q is None and "q_m3s" in cols:
                q3 = _number(cols["q_m3s"][i])
                q = None if q3 is None else q3 / M3S_PER_MLD
            w = _number(cols["wua_m2"][i])
            if q is None or not math.isfinite(q) or q <= 0:
                raise ChannelHabitatError(f"WUA table row {i + 1}: the discharge is not a positive number", parameter)
            if w is None or not math.isfinite(w) or w < 0:
                raise ChannelHabitatError(f"WUA table row {i + 1}: wua_m2 '{cols['wua_m2'][i]}' is not a number "
                                          ">= 0", parameter)
            species = str(cols[label_col][i] or "").strip() if label_col else ""
            name = "wua_" + (f"{field_fragment(species)}_" if species else "") + f"{field_fragment(key)}_m2"
            runs = data.setdefault(name, {})
            if q in runs:
                raise ChannelHabitatError(
                    f"WUA table row {i + 1}: two values for {species + ' ' if species else ''}{key} at {q:g} ML/d",
                    parameter)
            runs[q] = w
        if not data:
            raise ChannelHabitatError(
                f"the WUA table has no rows for regime '{regime}' and the reported units ({', '.join(units)})",
                parameter)
        ladders, values = {}, {}
        for name, runs in data.items():
            qs = np.array(sorted(runs), dtype=np.float64)
            ladders[name] = qs
            values[name] = np.array([runs[q] for q in qs], dtype=np.float64)
        return cls(list(data), ladders, values)


@dataclass(frozen=True)
class Criterion:
    """One daily yes/no question: a target (``core.curves.Target``) evaluated on every day.

    ``kind`` is 'target' (a stated target; every spell of days meeting it is reported) or 'bloom'
    (the share of very slow water above a stated share of the unit; spells of at least ``min_days``
    are bloom-risk spells). ``key`` names the fields: 't1', 't2', ... or 'bloom_<unit>'.
    """

    key: str
    kind: str
    target: object  # core.curves.Target: unit, classes, op, threshold_pct, text, met()
    min_days: int = 1

    @property
    def unit(self) -> str:
        return self.target.unit

    @property
    def classes(self) -> tuple:
        return tuple(self.target.classes)

    @property
    def text(self) -> str:
        if self.kind == "bloom":
            return f"{self.target.text} for at least {self.min_days} days"
        return self.target.text

    def evaluate(self, pct: np.ndarray):
        """(met, known) per day from the class-set share (NaN = unknown, outside the ladder)."""
        known = np.isfinite(pct)
        return self.target.met(pct) & known, known


def field_fragment(text: str) -> str:
    """A name as a field-name fragment: 'very slow' -> 'very_slow', 'segment 3' -> 'segment_3'."""
    k = re.sub(r"[^0-9a-zA-Z]+", "_", str(text).strip().lower()).strip("_")
    return k or "x"


def target_criteria(targets) -> list:
    """Targets (core.curves.parse_targets) -> criteria t1, t2, ..."""
    return [Criterion(f"t{i + 1}", "target", t) for i, t in enumerate(targets)]


def bloom_criteria(units, classes, share_pct: float, min_days: int) -> list:
    """One bloom-risk criterion per unit: the share of ``classes`` strictly above ``share_pct``."""
    from .curves import Target

    if not (math.isfinite(share_pct) and 0.0 <= share_pct < 100.0):
        raise ChannelHabitatError(f"the bloom-risk share {share_pct:g} % must lie in [0, 100)", "BLOOM_SHARE")
    if int(min_days) < 1:
        raise ChannelHabitatError("the minimum bloom-risk spell must be at least 1 day", "BLOOM_MIN_DAYS")
    return [Criterion(f"bloom_{field_fragment(u)}", "bloom", Target(u, tuple(classes), ">", float(share_pct)),
                      int(min_days)) for u in units]


@dataclass
class OptionResult:
    """Everything computed for one option (the base series is the option named 'base')."""

    name: str
    pattern: str
    summary: str
    q_mld: np.ndarray
    added_mld: np.ndarray
    volume_ml: float
    in_ladder: np.ndarray
    pct: dict  # (unit, class) -> percent per day (NaN outside the ladder)
    met: dict  # criterion key -> bool per day
    known: dict  # criterion key -> bool per day
    share: dict  # criterion key -> class-set share per day
    spells: dict  # criterion key -> Spells
    wua: dict = field(default_factory=dict)  # wua field name -> m2 per day

    def qualifying(self, crit: Criterion) -> Spells:
        sp = self.spells[crit.key]
        return sp.select(sp.length >= crit.min_days)


@dataclass
class SeriesResult:
    series: FlowSeries
    regime: str
    ladder_mld: np.ndarray
    units: list  # unit keys reported in DAILY
    classes: list
    criteria: list  # [Criterion]: targets first, then bloom
    options: list  # [OptionResult], base first
    volume_given_ml: float | None
    notes: list = field(default_factory=list)
    daily: dict = field(default_factory=dict)
    spells: dict = field(default_factory=dict)
    table: dict = field(default_factory=dict)  # OPTIONS

    @property
    def targets(self) -> list:
        return [c for c in self.criteria if c.kind == "target"]

    @property
    def blooms(self) -> list:
        return [c for c in self.criteria if c.kind == "bloom"]


def analyse_series(series: FlowSeries, view: CurveView, units, criteria, deliveries, volume_given_ml=None,
                   wua: WuaCurves | None = None, progress=None) -> SeriesResult:
    """Evaluate the base series and every delivery (``Delivery``) against one regime's curves.

    Refuses a base series with no day inside the discharge ladder. Days outside the ladder are
    flagged (``in_ladder``), counted, and neither meet nor fail a criterion (they break spells).
    """
    from .errors import as_progress

    progress = as_progress(progress)
    if not np.any(view.inside(series.q_mld)):
        lo, hi = float(view.ladder_mld[0]), float(view.ladder_mld[-1])
        raise ChannelHabitatError(
            f"the flow series ({float(np.min(series.q_mld)):.0f} to {float(np.max(series.q_mld)):.0f} ML/d) lies "
            f"entirely outside the discharge ladder of regime '{view.regime}' ({lo:.0f} to {hi:.0f} ML/d): "
            "no day can be evaluated (habitatseries never extrapolates). Check the unit of the series, or add "
            "runs covering these discharges to the scenario table behind the curves", "FLOWS")
    plan = [("base", "base", "the flow series as given", np.zeros(series.n_days))]
    seen = {"base"}
    for d in deliveries:
        if d.option.name.casefold() in seen:
            raise ChannelHabitatError(
                f"two options are named '{d.option.name}' (delivery options and alternative series columns "
                "share one list, and 'base' names the series as given); rename one", "DELIVERY")
        seen.add(d.option.name.casefold())
        plan.append((d.option.name, d.option.pattern, d.summary, d.added_mld))
    results = []
    for k, (name, pattern, summary, added) in enumerate(plan):
        progress(k / len(plan), f"evaluating option '{name}'")
        q = series.q_mld + added
        if np.any(q < 0):
            raise ChannelHabitatError(f"option '{name}' gives negative flows", "FLOWS")
        inl = view.inside(q)
        g = view.grid(q, units)
        pct = {(u, c): g[:, i, j] for i, u in enumerate(units) for j, c in enumerate(view.classes)}
        met, known, share, spells = {}, {}, {}, {}
        for crit in criteria:
            s = np.asarray(view.percent(crit.unit, crit.classes, q), dtype=np.float64)
            m, kn = crit.evaluate(s)
            share[crit.key], met[crit.key], known[crit.key] = s, m, kn
            spells[crit.key] = find_spells(m, kn)
        wv = {w: np.asarray(wua.value(w, q), dtype=np.float64) for w in wua.names} if wua is not None else {}
        results.append(OptionResult(name, pattern, summary, q, np.asarray(added, dtype=np.float64),
                                    volume_ml(added), inl, pct, met, known, share, spells, wv))
    progress(1.0, "tables")
    res = SeriesResult(series, view.regime, np.asarray(view.ladder_mld, dtype=np.float64), list(units),
                       list(view.classes), list(criteria), results, volume_given_ml)
    _notes(res)
    res.daily = daily_table(res)
    res.spells = spells_table(res)
    res.table = options_table(res)
    return res


def _notes(res: SeriesResult) -> None:
    lo, hi = float(res.ladder_mld[0]), float(res.ladder_mld[-1])
    if res.volume_given_ml and not any(o.pattern in PATTERNS for o in res.options):
        res.notes.append(f"an environmental water volume ({res.volume_given_ml:.0f} ML) was given but no delivery "
                         "option uses it (DELIVERY is empty)")
    outs = {int(np.count_nonzero(~o.in_ladder)) for o in res.options}
    if len(outs) > 1:
        res.notes.append(
            "the options differ in the number of days outside the discharge ladder, so their day counts are "
            "taken over different sets of evaluated days: a day brought into the ladder by added water can "
            "add to the bloom-risk days as well as to the days a target is met (see outside_ladder_days)")
    for o in res.options:
        out = int(np.count_nonzero(~o.in_ladder))
        if out:
            below = int(np.count_nonzero(o.q_mld < lo))
            res.notes.append(
                f"option '{o.name}': {out} of {res.series.n_days} days lie outside the discharge ladder "
                f"({lo:.0f} to {hi:.0f} ML/d; {below} below, {out - below} above); their class shares are "
                "left empty and they count as neither meeting nor failing any criterion (they end spells)")
        given = res.volume_given_ml
        if o.pattern == "series" and given is not None and round(o.volume_ml) != round(given):
            res.notes.append(
                f"alternative series '{o.name}' adds {o.volume_ml:.0f} ML, not the {given:.0f} ML "
                "given as the environmental water volume")
        if o.pattern == "series" and np.any(o.added_mld < 0):
            res.notes.append(f"alternative series '{o.name}' is below the base series on "
                             f"{int(np.count_nonzero(o.added_mld < 0))} days; its volume is the net sum")
        for w, v in o.wua.items():
            bad = int(np.count_nonzero(~np.isfinite(v) & o.in_ladder))
            if bad:
                res.notes.append(f"option '{o.name}': {w} is empty on {bad} days inside the class-share ladder "
                                 "but outside the runs of the WUA table")


def daily_table(res: SeriesResult) -> dict:
    """DAILY: one row per option and day (long form), ordered columns."""
    n = res.series.n_days
    cols = {}
    cols["option"] = [o.name for o in res.options for _ in range(n)]
    cols["date"] = [iso(d) for _ in res.options for d in res.series.dates]
    q = np.concatenate([o.q_mld for o in res.options])
    cols["q_mld"] = q
    cols["q_m3s"] = q * M3S_PER_MLD
    cols["added_mld"] = np.concatenate([o.added_mld for o in res.options])
    cols["in_ladder"] = np.concatenate([o.in_ladder for o in res.options])
    for u in res.units:
        for c in res.classes:
            cols[f"pct_{field_fragment(u)}_{field_fragment(c)}"] = np.concatenate([o.pct[(u, c)] for o in res.options])
    for crit in res.criteria:
        cols[f"{crit.key}_pct"] = np.concatenate([o.share[crit.key] for o in res.options])
        cols[f"{crit.key}_met"] = np.concatenate([o.met[crit.key] for o in res.options])
    for w in (res.options[0].wua if res.options else {}):
        cols[w] = np.concatenate([o.wua[w] for o in res.options])
    return cols


SPELL_COLUMNS = ("option", "criterion", "kind", "unit", "condition", "start", "end", "length_days",
                 "censored_start", "censored_end", "qualifies", "mean_pct", "min_pct", "max_pct")


def spells_table(res: SeriesResult) -> dict:
    """SPELLS: every target spell; every bloom-risk spell of at least the minimum length, plus
    shorter ones that are censored (they may be longer than the record shows; qualifies = False)."""
    rows = {k: [] for k in SPELL_COLUMNS}
    dates = res.series.dates
    for o in res.options:
        for crit in res.criteria:
            sp = o.spells[crit.key]
            keep = (sp.length >= crit.min_days) | sp.censored_start | sp.censored_end
            share = o.share[crit.key]
            for a, b, cs, ce in zip(sp.start[keep], sp.end[keep], sp.censored_start[keep], sp.censored_end[keep]):
                seg = share[a:b + 1]
                rows["option"].append(o.name)
                rows["criterion"].append(crit.key)
                rows["kind"].append(crit.kind)
                rows["unit"].append(crit.unit)
                rows["condition"].append(crit.text)
                rows["start"].append(iso(dates[a]))
                rows["end"].append(iso(dates[b]))
                rows["length_days"].append(int(b - a + 1))
                rows["censored_start"].append(bool(cs))
                rows["censored_end"].append(bool(ce))
                rows["qualifies"].append(bool(b - a + 1 >= crit.min_days))
                rows["mean_pct"].append(float(np.mean(seg)))
                rows["min_pct"].append(float(np.min(seg)))
                rows["max_pct"].append(float(np.max(seg)))
    out = {}
    for k, v in rows.items():
        if k == "length_days":
            out[k] = np.asarray(v, dtype=np.int64)
        elif k in ("censored_start", "censored_end", "qualifies"):
            out[k] = np.asarray(v, dtype=bool)
        elif k.endswith("_pct"):
            out[k] = np.asarray(v, dtype=np.float64)
        else:
            out[k] = v
    return out


def options_table(res: SeriesResult) -> dict:
    """OPTIONS: one row per option (base first): volume, days met, spells, bloom-risk spells."""
    base = res.options[0]
    opts = res.options
    cols = {
        "option": [o.name for o in opts],
        "pattern": [o.pattern for o in opts],
        "delivery": [o.summary for o in opts],
        "volume_ml": np.array([o.volume_ml for o in opts]),
        "volume_given_ml": np.array([np.nan if (o.pattern == "base" or res.volume_given_ml is None)
                                     else res.volume_given_ml for o in opts]),
        "added_peak_mld": np.array([float(np.max(o.added_mld)) if o.added_mld.size else 0.0 for o in opts]),
    }
    first, last = [], []
    for o in opts:
        nz = np.nonzero(o.added_mld != 0)[0]
        first.append(iso(res.series.dates[nz[0]]) if nz.size else "")
        last.append(iso(res.series.dates[nz[-1]]) if nz.size else "")
    cols["delivery_start"] = first
    cols["delivery_end"] = last
    cols["record_days"] = np.full(len(opts), res.series.n_days, dtype=np.int64)
    cols["outside_ladder_days"] = np.array([int(np.count_nonzero(~o.in_ladder)) for o in opts], dtype=np.int64)
    for crit in res.targets:
        met = np.array([int(np.count_nonzero(o.met[crit.key])) for o in opts], dtype=np.int64)
        cols[f"{crit.key}_met_days"] = met
        cols[f"{crit.key}_gain_days"] = met - int(np.count_nonzero(base.met[crit.key]))
        cols[f"{crit.key}_spells"] = np.array([len(o.spells[crit.key]) for o in opts], dtype=np.int64)
        cols[f"{crit.key}_longest_days"] = np.array(
            [int(o.spells[crit.key].length.max()) if len(o.spells[crit.key]) else 0 for o in opts], dtype=np.int64)
    for crit in res.blooms:
        q = [o.qualifying(crit) for o in opts]
        cols[f"{crit.key}_spells"] = np.array([len(s) for s in q], dtype=np.int64)
        cols[f"{crit.key}_days"] = np.array([int(s.length.sum()) for s in q], dtype=np.int64)
        cols[f"{crit.key}_longest_days"] = np.array([int(s.length.max()) if len(s) else 0 for s in q], dtype=np.int64)
    for w in (opts[0].wua if opts else {}):
        cols[f"mean_{w}"] = np.array([float(np.nanmean(o.wua[w])) if np.any(np.isfinite(o.wua[w])) else np.nan
                                      for o in opts])
    return cols
