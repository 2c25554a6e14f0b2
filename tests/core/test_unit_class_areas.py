"""Class areas per reach, zone and segment (core/curves.class_areas_by_unit) and WUA per unit
(core/usable.wua_per_unit) against plain loops over the elements."""

from __future__ import annotations

import numpy as np
import pytest

from plugin.core.curves import class_areas_by_unit, scope_units, unit_groups
from plugin.core.reach import Location, Reach, ReachAxis
from plugin.core.usable import maximum_table, wua_per_unit, wua_table


def _case(seed=3, n=5000):
    rng = np.random.default_rng(seed)
    axis = ReachAxis(np.array([0.0, 1000.0, 2500.0]), np.array([0.0, 0.0, 0.0]))
    reach = Reach(axis, np.array([0.0, 700.0, 1400.0, 2100.0, 2500.0]), np.array([0.0, 1000.0, 2500.0]),
                  ["up", "down"])
    ch = rng.uniform(-100, 2600, n)
    end = np.where(ch < 0, -1, np.where(ch > 2500, 1, 0)).astype(np.int8)
    ch = np.clip(ch, 0, 2500)
    loc = Location(ch, np.zeros(n), np.zeros(n), int((end < 0).sum()), int((end > 0).sum()), end=end)
    codes = rng.integers(0, 4, n)  # 0 = matches no class
    area = rng.uniform(1, 30, n)
    return reach, loc, codes, area


def test_class_areas_by_unit_against_a_loop():
    reach, loc, codes, area = _case()
    got = class_areas_by_unit(reach, loc, codes, area, 3)
    units = scope_units(reach)
    assert got.class_areas.shape == (len(units), 3) and got.wet_area.shape == (len(units),)
    ref = np.zeros((len(units), 3))
    wet = np.zeros(len(units))
    outside = uncl = 0.0
    for c, k, a, e in zip(loc.chainage, codes, area, loc.end):
        if e != 0:
            outside += a
            continue
        rows = [0]
        rows.append(1 + (0 if c < 1000 else 1))
        s = 0 if c < 700 else 1 if c < 1400 else 2 if c < 2100 else 3
        rows.append(3 + s)
        for r in rows:
            wet[r] += a
            if k > 0:
                ref[r, k - 1] += a
        if k == 0:
            uncl += a
    np.testing.assert_allclose(got.class_areas, ref, rtol=1e-12)
    np.testing.assert_allclose(got.wet_area, wet, rtol=1e-12)
    assert got.outside_m2 == pytest.approx(outside, rel=1e-12)
    assert got.unclassified_m2 == pytest.approx(uncl, rel=1e-12)
    seg, zone = unit_groups(reach, loc)
    assert np.all(seg[loc.end != 0] == -1) and np.all(zone[loc.end != 0] == -1)
    # the downstream end belongs to the last segment and zone
    one = Location(np.array([2500.0]), np.zeros(1), np.zeros(1), 0, 0)
    s1, z1 = unit_groups(reach, one)
    assert (s1[0], z1[0]) == (3, 1)


def test_wua_per_unit_and_table_against_a_loop():
    reach, loc, codes, area = _case(seed=8)
    csi = np.random.default_rng(2).uniform(0, 1, area.size)
    csi[::97] = np.nan  # no value: counts as wet area, adds no WUA
    seg, zone = unit_groups(reach, loc)
    w = wua_per_unit(csi, area, seg, zone, reach.n_segments, reach.n_zones)
    n_units = 1 + reach.n_zones + reach.n_segments
    wua = np.zeros(n_units)
    wet = np.zeros(n_units)
    for s, z, a, c in zip(seg, zone, area, csi):
        if s < 0:
            continue
        for r in (0, 1 + z, 1 + reach.n_zones + s):
            wet[r] += a
            wua[r] += a * c if np.isfinite(c) else 0.0
    np.testing.assert_allclose(w["wua_m2"], wua, rtol=1e-12)
    np.testing.assert_allclose(w["wet_area_m2"], wet, rtol=1e-12)
    np.testing.assert_allclose(w["wua_fraction"], wua / wet, rtol=1e-12)
    runs = [("a", 100.0, 100 / 86.4, "a 100", w), ("a", 300.0, 300 / 86.4, "a 300",
                                                   {k: v * 2 for k, v in w.items()})]
    t = wua_table(scope_units(reach), runs, "fish / adult", "product")
    assert len(t["regime"]) == 2 * n_units
    assert list(t["unit"][:4]) == ["reach", "up", "down", "1"]
    mx = maximum_table(t, ["reach", "up"])
    assert list(mx["q_mld_at_max"]) == [300.0, 300.0]
    assert mx["wua_max_m2"][0] == pytest.approx(2 * wua[0], rel=1e-12)
    assert list(mx["at_end_of_runs"]) == [True, True]
