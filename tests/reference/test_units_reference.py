"""Discharge units: 1 ML/d = 1000 m3 / 86 400 s.

Source: the SI definitions of the litre (1 L = 1 dm3, 12th CGPM 1964, so 1 ML = 1000 m3) and of
the day as 86 400 s (SI Brochure, 9th edition 2019, Table 8); exact rational arithmetic from the
Python standard library (fractions) is the reference for the floating-point conversions.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np

from plugin.core.units import M3S_PER_MLD, m3s_to_mld, mld_to_m3s, to_m3s, to_mld

LADDER_MLD = [3000, 4000, 5000, 6000, 8000, 10000, 13000, 17000, 22000, 30000, 40000]


def test_factor_is_1000_over_86400():
    # Source: SI (see module docstring); Fraction gives the exact value 5/432.
    exact = Fraction(1000, 86400)
    assert exact == Fraction(5, 432)
    assert M3S_PER_MLD == float(exact)  # the correctly rounded double of 5/432
    assert float(mld_to_m3s(1.0)) == float(exact)
    assert float(m3s_to_mld(1.0)) == 86.4


def test_whole_ml_per_day_convert_correctly_rounded():
    # Source: exact rational arithmetic (fractions). For whole ML/d the conversion is one exact
    # product and one correctly rounded division, so it equals the exact value rounded once.
    q = np.arange(1, 100001, dtype=float)
    got = mld_to_m3s(q)
    ref = np.array([float(Fraction(int(v) * 1000, 86400)) for v in q])
    assert np.array_equal(got, ref)


def test_ladder_round_trips_exactly():
    # Source: exact rational arithmetic (fractions); the demo ladder of interfaces.md.
    q = np.array(LADDER_MLD, dtype=float)
    assert np.array_equal(m3s_to_mld(mld_to_m3s(q)), q)
    back = mld_to_m3s(m3s_to_mld(mld_to_m3s(q)))
    assert np.array_equal(back, mld_to_m3s(q))
    assert np.array_equal(to_mld(to_m3s(q, "ML/d"), "m3/s"), q)


def test_round_trip_of_arbitrary_values_is_within_two_ulp():
    # Source: exact rational arithmetic (fractions). A factor that is not a power of two cannot
    # round-trip every double exactly; the conversion keeps the error at the last bits.
    rng = np.random.default_rng(0)
    q = rng.uniform(0.01, 1e6, 200000)
    assert np.all(np.abs(m3s_to_mld(mld_to_m3s(q)) - q) <= 2 * np.spacing(q))
    assert np.all(np.abs(mld_to_m3s(m3s_to_mld(q)) - q) <= 2 * np.spacing(q))
    x = float(q[0])
    assert abs(Fraction(float(mld_to_m3s(x))) - Fraction(x) * Fraction(5, 432)) <= Fraction(np.spacing(x * 5 / 432))
