"""Tables of the demo reach: discharge ladder, scenario tables, invented rating records and an invented
daily flow year. All written with fixed number formats so the bytes never change between runs."""

from __future__ import annotations

import csv
import datetime as dt
import io
import os
import tempfile

import numpy as np

from plugin.core.units import mld_to_m3s

# 11 discharges from a low regulated flow to near bank-full (ML/d), roughly evenly spaced in log Q
LADDER_MLD = (3000, 4000, 5000, 6500, 8500, 11000, 14000, 18000, 24000, 31000, 40000)

REGIMES = ("weir", "weir_raised", "weir_lowered", "natural")
REGIME_TITLES = {
    "weir": "Weir F1 pool at its normal level",
    "weir_raised": "Weir F1 pool raised by 0.5 m",
    "weir_lowered": "Weir F1 pool lowered by 0.5 m",
    "natural": "natural river, no weir (level from the pre-regulation rating)",
}


def qtag(q_mld: float) -> str:
    """File tag of a discharge: q03000 for 3000 ML/d (five digits)."""
    return f"q{int(round(q_mld)):05d}"


def write_text(path: str, text: str) -> str:
    """Write a text file atomically with Unix line ends."""
    d = os.path.dirname(os.path.abspath(path)) or "."
    os.makedirs(d, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".partial-", dir=d)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise
    return path


def write_csv(path: str, header: list[str], rows: list[list]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    w.writerows(rows)
    return write_text(path, buf.getvalue())


def ladder_rows():
    return [[q, f"{float(mld_to_m3s(q)):.6f}"] for q in LADDER_MLD]


def raster_scenario_rows(regimes=REGIMES, ladder=LADDER_MLD):
    rows = []
    for reg in regimes:
        for q in ladder:
            base = f"rasters/{reg}/{qtag(q)}"
            rows.append([reg, q, "ML/d", f"{base}_depth.tif", f"{base}_speed.tif", f"{base}_u.tif",
                         f"{base}_v.tif"])
    return rows


def mesh_scenario_rows(regimes, ladder=LADDER_MLD):
    return [[reg, q, "ML/d", f"mesh/{reg}/{qtag(q)}.nc", "depth", "velocity", -1]
            for reg in regimes for q in ladder]


def rating_records(rng: np.random.Generator, c: float, h0: float, b: float, first_year: int = 1921,
                   years: int = 12):
    """Invented monthly pre-regulation gaugings scattered around the rating Q = C (h - h0)^b.

    Discharges follow a seasonal cycle (high in late winter and spring, low in late summer and
    autumn) with seeded variation between years and months; stages scatter around the rating with a
    standard deviation of 0.06 m, plus a few larger departures (gaugings on a rising or falling
    river). Returns rows [date, discharge_mld, stage_m].
    """
    rows = []
    for yi in range(years):
        wet = rng.lognormal(0.0, 0.25)  # wetter and drier years
        for month in range(1, 13):
            season = np.cos(2.0 * np.pi * (month - 9) / 12.0)  # peak in September
            q_mld = 8000.0 * wet * np.exp(0.95 * season + rng.normal(0.0, 0.25))
            q_mld = float(np.clip(q_mld, 1500.0, 60000.0))
            q_m3s = float(mld_to_m3s(q_mld))
            stage = h0 + (q_m3s / c) ** (1.0 / b)
            noise = rng.normal(0.0, 0.06)
            if rng.uniform() < 0.05:
                noise += rng.choice([-1.0, 1.0]) * rng.uniform(0.15, 0.3)
            day = int(rng.integers(3, 27))
            rows.append([dt.date(first_year + yi, month, day).isoformat(), f"{q_mld:.0f}", f"{stage + noise:.3f}"])
    return rows


def daily_flows(rng: np.random.Generator, start: dt.date = dt.date(2001, 7, 1)):
    """One invented water year (1 July - 30 June) of daily flows at the Upper Regulator, ML/d.

    A regulated base near 3,200-4,500 ML/d, a winter-spring rise with three freshes (the largest
    briefly above the top of the ladder), a recession into summer, irrigation-season releases and a
    short late-summer dip below the lowest ladder flow. Returns rows [date, discharge, unit].
    """
    n = 365
    t = np.arange(n, dtype=float)
    base = 3600.0 + 500.0 * np.sin(2.0 * np.pi * (t - 120.0) / 365.0)  # summer releases (Dec-Feb)
    log_q = np.log(base)
    # winter-spring rise: freshes centred on late July, mid September and late October (days)
    for centre, height, rise, fall in ((28.0, 9000.0, 6.0, 14.0), (76.0, 33000.0, 9.0, 22.0),
                                       (118.0, 17000.0, 7.0, 20.0)):
        shape = np.where(t < centre, np.exp(-((t - centre) / rise) ** 2), np.exp(-(t - centre) / fall))
        log_q = np.logaddexp(log_q, np.log(height) + np.log(np.maximum(shape, 1e-12)))
    # a broad seasonal swell under the freshes (August - November)
    swell = 6500.0 * np.exp(-(((t - 85.0) / 45.0) ** 2))
    q = np.exp(log_q) + swell
    # short late-summer dip (early March) below the ladder
    q *= 1.0 - 0.35 * np.exp(-(((t - 245.0) / 4.0) ** 2))
    # day-to-day variation: a smooth AR(1) multiplier
    eps = rng.normal(0.0, 0.03, n)
    ar = np.zeros(n)
    for i in range(1, n):
        ar[i] = 0.8 * ar[i - 1] + eps[i]
    q = q * np.exp(ar)
    days = [start + dt.timedelta(days=int(i)) for i in range(n)]
    return [[d.isoformat(), f"{v:.0f}", "ML/d"] for d, v in zip(days, q)]
