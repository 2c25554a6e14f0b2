"""Colour-vision-deficiency check of the class colours (used by test_colours.py and resources/COLOURS.md).

Simulation: Machado, Oliveira & Fernandes 2009, "A physiologically-based model for simulation of color
vision deficiency", IEEE TVCG 15(6):1291-1298, severity 1.0 matrices (protanopia, deuteranopia,
tritanopia) applied to linear sRGB, as the authors' supplementary data give them.
Colour difference: CIEDE2000 (CIE 142-2001; formulas as in Sharma, Wu & Dalal 2005, Color Research and
Application 30:21-30) in CIELAB (D65, sRGB per IEC 61966-2-1).

    python tests/reference/colourcheck.py    prints the tables in resources/COLOURS.md
"""

from __future__ import annotations

import itertools
import math

import numpy as np

MACHADO_2009 = {  # severity 1.0, linear RGB
    "protanopia": np.array([[0.152286, 1.052583, -0.204868],
                            [0.114503, 0.786281, 0.099216],
                            [-0.003882, -0.048116, 1.051998]]),
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968],
                              [0.280085, 0.672501, 0.047413],
                              [-0.011820, 0.042940, 0.968881]]),
    "tritanopia": np.array([[1.255528, -0.076749, -0.178779],
                            [-0.078411, 0.930809, 0.147602],
                            [0.004733, 0.691367, 0.303900]]),
}


def hex_to_srgb(colour: str) -> np.ndarray:
    c = colour.lstrip("#")
    return np.array([int(c[i:i + 2], 16) / 255.0 for i in (0, 2, 4)])


def srgb_to_linear(rgb):
    rgb = np.asarray(rgb, dtype=float)
    return np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)


def linear_to_srgb(lin):
    lin = np.clip(np.asarray(lin, dtype=float), 0.0, 1.0)
    return np.where(lin <= 0.0031308, 12.92 * lin, 1.055 * lin ** (1 / 2.4) - 0.055)


def simulate(colour: str, kind: str | None) -> np.ndarray:
    """sRGB (0-1) of ``colour`` as seen with the deficiency ``kind`` (None: normal vision)."""
    rgb = hex_to_srgb(colour)
    if kind is None:
        return rgb
    return linear_to_srgb(MACHADO_2009[kind] @ srgb_to_linear(rgb))


def srgb_to_lab(rgb) -> np.ndarray:
    lin = srgb_to_linear(rgb)
    m = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])
    xyz = m @ lin
    white = np.array([0.95047, 1.0, 1.08883])
    t = xyz / white
    d = 6.0 / 29.0
    f = np.where(t > d ** 3, np.cbrt(t), t / (3 * d * d) + 4.0 / 29.0)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def ciede2000(lab1, lab2) -> float:
    """CIEDE2000 colour difference (kL = kC = kH = 1)."""
    L1, a1, b1 = lab1
    L2, a2, b2 = lab2
    C1, C2 = math.hypot(a1, b1), math.hypot(a2, b2)
    Cb = (C1 + C2) / 2
    G = 0.5 * (1 - math.sqrt(Cb ** 7 / (Cb ** 7 + 25.0 ** 7)))
    a1p, a2p = (1 + G) * a1, (1 + G) * a2
    C1p, C2p = math.hypot(a1p, b1), math.hypot(a2p, b2)
    h1p = math.degrees(math.atan2(b1, a1p)) % 360 if C1p else 0.0
    h2p = math.degrees(math.atan2(b2, a2p)) % 360 if C2p else 0.0
    dLp = L2 - L1
    dCp = C2p - C1p
    if C1p * C2p == 0:
        dhp = 0.0
    elif abs(h2p - h1p) <= 180:
        dhp = h2p - h1p
    elif h2p - h1p > 180:
        dhp = h2p - h1p - 360
    else:
        dhp = h2p - h1p + 360
    dHp = 2 * math.sqrt(C1p * C2p) * math.sin(math.radians(dhp) / 2)
    Lbp = (L1 + L2) / 2
    Cbp = (C1p + C2p) / 2
    if C1p * C2p == 0:
        hbp = h1p + h2p
    elif abs(h1p - h2p) <= 180:
        hbp = (h1p + h2p) / 2
    elif h1p + h2p < 360:
        hbp = (h1p + h2p + 360) / 2
    else:
        hbp = (h1p + h2p - 360) / 2
    T = (1 - 0.17 * math.cos(math.radians(hbp - 30)) + 0.24 * math.cos(math.radians(2 * hbp))
         + 0.32 * math.cos(math.radians(3 * hbp + 6)) - 0.20 * math.cos(math.radians(4 * hbp - 63)))
    dtheta = 30 * math.exp(-(((hbp - 275) / 25) ** 2))
    Rc = 2 * math.sqrt(Cbp ** 7 / (Cbp ** 7 + 25.0 ** 7))
    Sl = 1 + 0.015 * (Lbp - 50) ** 2 / math.sqrt(20 + (Lbp - 50) ** 2)
    Sc = 1 + 0.045 * Cbp
    Sh = 1 + 0.015 * Cbp * T
    Rt = -math.sin(math.radians(2 * dtheta)) * Rc
    return math.sqrt((dLp / Sl) ** 2 + (dCp / Sc) ** 2 + (dHp / Sh) ** 2 + Rt * (dCp / Sc) * (dHp / Sh))


VISIONS = (None, "protanopia", "deuteranopia", "tritanopia")


def min_difference(colours, kind):
    """(smallest CIEDE2000 between any two colours as seen with ``kind``, the pair)."""
    labs = [srgb_to_lab(simulate(c, kind)) for c in colours]
    best = (math.inf, None)
    for i, j in itertools.combinations(range(len(colours)), 2):
        d = ciede2000(labs[i], labs[j])
        if d < best[0]:
            best = (d, (colours[i], colours[j]))
    return best


def lightness(colour, kind=None) -> float:
    return float(srgb_to_lab(simulate(colour, kind))[0])


if __name__ == "__main__":  # pragma: no cover - prints the COLOURS.md tables
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
    from plugin.core.classes import FROUDE_COLOURS, VELOCITY_COLOURS

    for name, cols in (("velocity", VELOCITY_COLOURS), ("froude", FROUDE_COLOURS)):
        print(f"{name}: " + ", ".join(f"{c} L*={lightness(c):.0f}" for c in cols))
        for kind in VISIONS:
            d, pair = min_difference(cols, kind)
            seen = [tuple(int(round(255 * v)) for v in simulate(c, kind)) for c in cols]
            sims = ", ".join("#{:02X}{:02X}{:02X}".format(*rgb) for rgb in seen)
            print(f"  {kind or 'normal vision':<13} min CIEDE2000 {d:5.1f} ({pair[0]} vs {pair[1]})   seen as {sims}")
