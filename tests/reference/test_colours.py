"""The project's class colours stay distinct for colour-blind readers (resources/COLOURS.md)."""

import numpy as np
import pytest

from plugin.core.classes import FALLBACK_COLOURS, FROUDE_COLOURS, VELOCITY_COLOURS
from tests.reference import colourcheck as cc

# Value from memory: Sharma, Wu & Dalal 2005, Color Research and Application 30:21-30, Table 1
# (CIEDE2000 test data), pairs 1, 7, 17 and 25.
SHARMA_2005 = [
    ((50.0, 2.6772, -79.7751), (50.0, 0.0, -82.7485), 2.0425),
    ((50.0, 0.0, 0.0), (50.0, -1.0, 2.0), 2.3669),
    ((50.0, 2.5, 0.0), (73.0, 25.0, -18.0), 27.1492),
    ((60.2574, -34.0099, 36.2677), (60.4626, -34.1751, 39.4387), 1.2644),
]


@pytest.mark.parametrize("lab1,lab2,expected", SHARMA_2005)
def test_ciede2000_against_sharma_2005(lab1, lab2, expected):
    assert cc.ciede2000(lab1, lab2) == pytest.approx(expected, abs=1e-4)
    assert cc.ciede2000(lab2, lab1) == pytest.approx(expected, abs=1e-4)


def test_machado_2009_matrices_keep_greys_grey():
    # Machado et al. 2009: every simulation matrix maps white to white (rows sum to 1), so greys stay grey.
    for m in cc.MACHADO_2009.values():
        np.testing.assert_allclose(m.sum(axis=1), 1.0, atol=2e-6)
    np.testing.assert_allclose(cc.simulate("#808080", "deuteranopia"), cc.hex_to_srgb("#808080"), atol=1e-3)


def test_srgb_to_lab_white_and_black():
    # CIE 1976 L*a*b* with the D65 white of sRGB (IEC 61966-2-1): white is L* = 100, a* = b* = 0.
    np.testing.assert_allclose(cc.srgb_to_lab([1.0, 1.0, 1.0]), [100.0, 0.0, 0.0], atol=0.05)
    np.testing.assert_allclose(cc.srgb_to_lab([0.0, 0.0, 0.0]), [0.0, 0.0, 0.0], atol=1e-9)


@pytest.mark.parametrize("colours", [VELOCITY_COLOURS, FROUDE_COLOURS], ids=["velocity", "froude"])
@pytest.mark.parametrize("kind", cc.VISIONS, ids=["normal", "protanopia", "deuteranopia", "tritanopia"])
def test_preset_colours_stay_distinct(colours, kind):
    # Common practice, no source: a CIEDE2000 difference above about 20 reads as clearly different
    # colours side by side on a map legend.
    d, pair = cc.min_difference(colours, kind)
    assert d >= 20.0, f"{pair} differ by only {d:.1f} for {kind}"


def test_fallback_colours_are_distinct_for_normal_vision():
    d, pair = cc.min_difference(FALLBACK_COLOURS, None)
    assert d >= 8.0, pair
