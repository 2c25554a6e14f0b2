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


# ----------------------------------------------------------------------------------------------
# Regimes and discharge axes (flow-habitat and weighted-usable-area charts, matplotlib and SVG)
# ----------------------------------------------------------------------------------------------

# Okabe & Ito (2008): blue, vermillion, bluish green, reddish purple, orange, sky blue, black, yellow.
REGIME_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#000000", "#B8A200")
# matplotlib dash patterns (offset, (on, off, ...)) in multiples of the line width; "-" is solid
REGIME_DASHES = ("-", (0, (5, 2)), (0, (1.2, 1.6)), (0, (6, 2, 1.2, 2)), (0, (3, 1.5)), (0, (8, 2, 1.2, 2, 1.2, 2)))
REGIME_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "h")
Q_LABEL = "discharge (ML/d, log scale)"


def regime_style(i: int) -> dict:
    """Colour, line style and marker of the i-th regime (told apart by all three)."""
    return {"color": REGIME_COLOURS[i % len(REGIME_COLOURS)], "linestyle": REGIME_DASHES[i % len(REGIME_DASHES)],
            "marker": REGIME_MARKERS[i % len(REGIME_MARKERS)]}


def nice_q_ticks(qmin: float, qmax: float, sparse: bool = False) -> list:
    """Round ticks of a log discharge axis inside [qmin, qmax]: 1, 2, 3, 5 (sparse: 1, 3) x 10^k; at
    least three (the ends are added when fewer fall inside)."""
    ticks = []
    mantissas = (1, 3) if sparse else (1, 2, 3, 5)
    lo = math.floor(math.log10(qmin)) - 1
    hi = math.ceil(math.log10(qmax)) + 1
    for k in range(lo, hi + 1):
        for m in mantissas:
            v = m * 10.0 ** k
            if qmin * 0.999 <= v <= qmax * 1.001:
                ticks.append(v)
    if len(ticks) < 3:
        ticks = sorted(set(ticks) | {qmin, qmax})
    return ticks


def fmt_q(v, _pos=None) -> str:
    """A discharge tick label: thousands separated from 100 up, else three significant digits."""
    if v >= 100:
        return f"{v:,.0f}"
    return f"{v:.3g}"


def dense_q(q_runs, n: int = 80):
    """A dense log-spaced discharge grid from the first to the last run (where the interpolant is drawn)."""
    import numpy as np

    q = np.asarray(q_runs, dtype=float)
    if q.size < 2:
        return q.copy()
    return np.exp(np.linspace(np.log(q[0]), np.log(q[-1]), n))
