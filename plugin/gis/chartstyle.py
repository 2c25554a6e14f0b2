"""The house style of report charts, shared by ``charts.py`` (matplotlib) and ``svgcharts.py`` (SVG
written directly): colours, the chainage axis label, text colour on a filled background, and the speed
thresholds and intervals of a class scheme. No plotting library is imported here.
"""

from __future__ import annotations

import math

INK = "#1f2328"
MUTED = "#5b6470"
GRID = "#e3e7ec"
BAND_OUTER = "#9aa5b1"  # p10-p90
BAND_INNER = "#56626f"  # p25-p75


def text_colour_for(colour: str) -> str:
    """'#000000' or '#ffffff', whichever reads better on ``colour`` (WCAG relative luminance)."""
    c = colour.lstrip("#")
    rgb = [int(c[i:i + 2], 16) / 255.0 for i in (0, 2, 4)]
    lin = [v / 12.92 if v <= 0.04045 else ((v + 0.055) / 1.055) ** 2.4 for v in rgb]
    lum = 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]
    return "#000000" if (lum + 0.05) / 0.05 >= 1.05 / (lum + 0.05) else "#ffffff"


def chainage_label(origin: str = "upstream", km: bool = True) -> str:
    """Axis label for chainage: where it is measured from and which way the river flows along it
    (``origin`` = ReachAxis.origin: 'upstream' or 'downstream')."""
    unit = "km" if km else "m"
    towards = "downstream" if origin != "downstream" else "upstream"
    return f"chainage ({unit} from the {origin} end)  →  {towards}"


def speed_thresholds(scheme) -> list:
    """Sorted distinct finite speed bounds of a scheme (m/s): what the profile chart marks."""
    vals = set()
    for c in scheme.classes:
        lo, hi = c.bounds.get("speed", (None, None))
        for v in (lo, hi):
            if v is not None and math.isfinite(v):
                vals.add(float(v))
    return sorted(vals)


def _speed_intervals(scheme):
    """[(lo, hi, colour, name)] when the scheme is contiguous speed intervals only, else None."""
    edges = scheme._interval_edges() if hasattr(scheme, "_interval_edges") else None
    if edges is None or edges[0] != "speed":
        return None
    _, lows, highs = edges
    return [(lo, hi, c.colour, c.name) for lo, hi, c in zip(lows, highs, scheme.classes)]
