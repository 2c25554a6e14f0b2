"""Discharge units. 1 ML/d = 1000 m3 / 86 400 s, exactly (SI definitions of litre and day)."""

from __future__ import annotations

import re

import numpy as np

from .errors import ChannelHabitatError

M3_PER_ML = 1000.0
SECONDS_PER_DAY = 86400.0
M3S_PER_MLD = M3_PER_ML / SECONDS_PER_DAY  # 0.011574074... m3/s per ML/d

_UNIT_ALIASES = {
    "ml/d": "ML/d",
    "mld": "ML/d",
    "ml/day": "ML/d",
    "megalitres per day": "ML/d",
    "m3/s": "m3/s",
    "m3s": "m3/s",
    "m^3/s": "m3/s",
    "cumec": "m3/s",
    "cumecs": "m3/s",
    "m³/s": "m3/s",
}


def normalise_unit(unit: str, parameter: str | None = None) -> str:
    """'ML/d' or 'm3/s' from the spellings people use; anything else is refused."""
    key = str(unit).strip().lower()
    if key in _UNIT_ALIASES:
        return _UNIT_ALIASES[key]
    raise ChannelHabitatError(
        f"unknown discharge unit '{unit}': use ML/d (megalitres per day) or m3/s", parameter
    )


def mld_to_m3s(q_mld):
    """ML/d -> m3/s (exact factor 1000/86400)."""
    return np.asarray(q_mld, dtype=float) * M3_PER_ML / SECONDS_PER_DAY


def m3s_to_mld(q_m3s):
    """m3/s -> ML/d (exact factor 86400/1000)."""
    return np.asarray(q_m3s, dtype=float) * SECONDS_PER_DAY / M3_PER_ML


def to_mld(q, unit: str, parameter: str | None = None):
    u = normalise_unit(unit, parameter)
    return np.asarray(q, dtype=float) if u == "ML/d" else m3s_to_mld(q)


def to_m3s(q, unit: str, parameter: str | None = None):
    u = normalise_unit(unit, parameter)
    return np.asarray(q, dtype=float) if u == "m3/s" else mld_to_m3s(q)


def parse_numbers(text: str, parameter: str | None = None) -> list:
    """'3000, 4000; 5000 6000' -> [3000.0, 4000.0, 5000.0, 6000.0] (commas, semicolons or spaces).
    Empty text gives an empty list; anything that is not a number is refused by name."""
    vals = []
    for part in (p for p in re.split(r"[,;\s]+", str(text or "").strip()) if p):
        try:
            vals.append(float(part))
        except ValueError:
            raise ChannelHabitatError(f"'{part}' is not a number; list numbers like '3000, 4000, 5000' "
                                      "(no units, no thousands separators)", parameter) from None
    return vals
