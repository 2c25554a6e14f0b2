"""core/compare: two runs element by element -- zero change for identical runs, the transition matrix
against independent numpy counts, wet/dry change, per-segment changes, class-scheme checks, bad input."""

from __future__ import annotations

import numpy as np
import pytest

from plugin.core import compare
from plugin.core.classes import scheme_from_rows, velocity_preset
from plugin.core.errors import ChannelHabitatError
from plugin.core.field import GridSupport, HydraulicField, MeshSupport
from plugin.core.reach import Reach, ReachAxis, parse_zone_breaks, segment_edges

CELL, ROWS, COLS = 2.0, 20, 300  # a straight channel 600 m long (+x = downstream) and 40 m wide
T = (0.0, CELL, 0.0, ROWS * CELL, 0.0, -CELL)
BOUNDS = np.array([0.05, 0.2, 0.3], dtype=np.float32)  # velocity preset thresholds (DESIGN.md section 4)


def reach():
    zedges, znames = parse_zone_breaks("0 upper, 200 middle, 400 lower", 0.0, 600.0)
    return Reach(ReachAxis([0.0, 600.0], [20.0, 20.0]), segment_edges(0.0, 600.0, 100.0), zedges, znames)


def centres():
    r, c = np.divmod(np.arange(ROWS * COLS), COLS)
    return ((c + 0.5) * CELL).reshape(ROWS, COLS), (ROWS * CELL - (r + 0.5) * CELL).reshape(ROWS, COLS)


def base_grids():
    x, y = centres()
    across = 1.0 - ((y - 20.0) / 20.0) ** 2
    speed = (0.45 * (1.0 - x / 600.0) * np.sqrt(np.clip(across, 0, 1))).astype(np.float32)
    depth = (3.0 * across + 0.1).astype(np.float32)
    return depth, speed


def grid_field(depth, speed):
    wet = np.isfinite(depth) & (depth >= 0.05)
    idx = np.flatnonzero(wet)
    r, c = np.divmod(idx, COLS)
    return HydraulicField(x=(c + 0.5) * CELL, y=ROWS * CELL - (r + 0.5) * CELL, area=np.full(idx.size, CELL * CELL),
                          depth=depth.ravel()[idx], speed=speed.ravel()[idx], support=GridSupport(T, (ROWS, COLS), idx))


def codes_of(speed):
    return np.digitize(speed, BOUNDS) + 1  # 1..4, independent of ClassScheme.classify


def test_identical_runs_give_zero_change_and_a_diagonal_matrix():
    d, s = base_grids()
    f = grid_field(d, s)
    c = compare.compare_runs(f, f, reach(), velocity_preset())
    assert np.all(c.speed_change == 0) and np.all(c.depth_change == 0)
    assert np.all(c.wet_dry == compare.WET_BOTH)
    m = c.matrix_reach
    assert np.count_nonzero(m - np.diag(np.diag(m))) == 0
    expected = np.bincount(codes_of(f.speed), minlength=5) * CELL * CELL  # [dry, very slow, ..., fast]
    np.testing.assert_allclose(np.diag(m), expected)
    assert m.sum() == pytest.approx(f.n * CELL * CELL)
    for table in (c.segment_change, c.zone_change, c.reach_change):
        for k, v in table.items():
            if k.startswith("chg_"):
                assert np.all(np.nan_to_num(np.asarray(v, dtype=float)) == 0), k
        assert np.all(np.asarray(table["changed_m2"]) == 0)
    t = compare.transition_table(c)
    np.testing.assert_allclose(t["kept_m2"], t["total_m2"])


def test_matrix_sums_to_the_union_and_wet_dry_areas():
    d, s = base_grids()
    db = d.copy()
    db[:2] = np.nan  # base dry in rows 0-1 (the left bank), wet in rows 2-19
    da = d.copy()
    da[-3:] = np.nan  # alternative dry in rows 17-19
    sa = (s * 0.6).astype(np.float32)
    fb, fa = grid_field(db, s), grid_field(da, sa)
    c = compare.compare_runs(fb, fa, reach(), velocity_preset())
    union = np.union1d(fb.support.index, fa.support.index)
    both = np.intersect1d(fb.support.index, fa.support.index)
    assert c.matrix_reach.sum() == pytest.approx(union.size * 4.0)
    assert c.reach_change["union_wet_m2"][0] == pytest.approx(union.size * 4.0)
    assert c.reach_change["wet_both_m2"][0] == pytest.approx(both.size * 4.0)
    assert c.reach_change["wet_base_only_m2"][0] == pytest.approx(3 * COLS * 4.0)
    assert c.reach_change["wet_alt_only_m2"][0] == pytest.approx(2 * COLS * 4.0)
    # rows of the matrix: each base class's area (and 'dry': what becomes wet); columns: the alternative's
    m = c.matrix_reach
    np.testing.assert_allclose(m.sum(axis=1)[1:], np.bincount(codes_of(fb.speed), minlength=5)[1:] * 4.0)
    np.testing.assert_allclose(m.sum(axis=0)[1:], np.bincount(codes_of(fa.speed), minlength=5)[1:] * 4.0)
    assert m[0, 0] == 0
    assert m[0].sum() == pytest.approx(2 * COLS * 4.0)  # dry -> wet
    assert m[:, 0].sum() == pytest.approx(3 * COLS * 4.0)  # wet -> dry
    # zone matrices add up to the reach matrix
    np.testing.assert_allclose(c.matrix_zone.sum(axis=0), m)
    np.testing.assert_allclose(c.matrix_segment.sum(axis=0), m)


def test_known_shift_gives_the_known_transitions():
    d, s = base_grids()
    fb = grid_field(d, s)
    fa = grid_field(d, (s * 0.7).astype(np.float32))
    c = compare.compare_runs(fb, fa, reach(), velocity_preset())
    frm = codes_of(fb.speed)
    to = codes_of(fa.speed)
    zone = np.digitize(fb.x, [200.0, 400.0])
    expected = np.zeros((3, 5, 5))
    np.add.at(expected, (zone, frm, to), 4.0)
    np.testing.assert_allclose(c.matrix_zone, expected)
    # slowing down by 30 % never makes water faster
    assert np.all(np.triu(c.matrix_reach, 1) == 0)
    np.testing.assert_allclose(c.speed_change[c.pairing.pos_alt], fa.speed.astype(float) - fb.speed.astype(float))
    codes, info = compare.transition_codes(c)
    labels = {lab for _, _, lab in info}
    present = {(f, t) for f, t in zip(frm, to)}
    assert labels == {f"{c.states[f]} -> {c.states[t]}" for f, t in present}
    assert codes.min() >= 1 and codes.max() == len(info)


def test_dry_counts_as_still_and_zero_deep():
    d, s = base_grids()
    da = d.copy()
    da[:, :50] = np.nan  # the alternative is dry over the first 100 m
    fb, fa = grid_field(d, s), grid_field(da, s)
    c = compare.compare_runs(fb, fa, reach(), velocity_preset())
    only_base = c.wet_dry == compare.WET_BASE_ONLY
    assert only_base.sum() == 50 * ROWS
    ux = c.union.x[only_base]
    assert np.all(ux < 100.0)
    np.testing.assert_allclose(c.speed_change[only_base], -c.pairing.base_speed[only_base].astype(float))
    np.testing.assert_allclose(c.depth_change[only_base], -c.pairing.base_depth[only_base].astype(float))
    assert np.all(c.base_state[only_base] > 0) and np.all(c.alt_state[only_base] == 0)
    assert c.segment_change["wet_base_only_m2"][0] == pytest.approx(50 * ROWS * 4.0)
    assert c.segment_change["chg_wet_area_m2"][0] == pytest.approx(-50 * ROWS * 4.0)
    e = compare.element_table(c)
    assert set(e["wet_change"][only_base]) == {"wet only in base"}
    assert set(e["to_class"][only_base]) == {"dry"}


def test_segment_change_against_numpy():
    d, s = base_grids()
    fb = grid_field(d, s)
    fa = grid_field(d, (s * 0.7).astype(np.float32))
    c = compare.compare_runs(fb, fa, reach(), velocity_preset())
    seg_b = (fb.x // 100).astype(int)
    for k, name in enumerate(("very_slow", "slow", "moderate", "fast")):
        pb = np.array([np.mean(codes_of(fb.speed)[seg_b == i] == k + 1) * 100 for i in range(6)])
        pa = np.array([np.mean(codes_of(fa.speed)[seg_b == i] == k + 1) * 100 for i in range(6)])
        np.testing.assert_allclose(c.segment_change[f"base_pct_{name}"], pb, atol=1e-9)
        np.testing.assert_allclose(c.segment_change[f"chg_pct_{name}"], pa - pb, atol=1e-9)
        ab = np.array([np.sum(codes_of(fb.speed)[seg_b == i] == k + 1) * 4.0 for i in range(6)])
        aa = np.array([np.sum(codes_of(fa.speed)[seg_b == i] == k + 1) * 4.0 for i in range(6)])
        np.testing.assert_allclose(c.segment_change[f"chg_area_{name}_m2"], aa - ab)
    med_b = np.array([np.percentile(fb.speed[seg_b == i], 50) for i in range(6)])
    med_a = np.array([np.percentile(fa.speed[seg_b == i], 50) for i in range(6)])
    np.testing.assert_allclose(c.segment_change["chg_v_p50_ms"], med_a - med_b, atol=1e-6)
    p90_b = np.array([np.percentile(fb.speed[seg_b == i], 90) for i in range(6)])
    np.testing.assert_allclose(c.segment_change["base_v_p90_ms"], p90_b, atol=1e-6)
    # Shannon diversity of the class shares, independently
    for i in range(6):
        for f, key in ((fb, "base_shannon"), (fa, "alt_shannon")):
            p = np.bincount(codes_of(f.speed)[seg_b == i], minlength=5)[1:] / np.sum(seg_b == i)
            p = p[p > 0]
            assert c.segment_change[key][i] == pytest.approx(-(p * np.log(p)).sum())


def test_statistics_of_each_run_on_its_own_support():
    d, s = base_grids()
    fb, fa = grid_field(d, s), grid_field(d, s)
    d_own = d.copy()
    d_own[:, 150:] = np.nan  # pretend the base run on its own support covers the first 300 m only
    own = grid_field(d_own, s)
    c = compare.compare_runs(fb, fa, reach(), velocity_preset(), base_stats=own)
    np.testing.assert_allclose(c.segment_change["base_wet_area_m2"], [ROWS * 50 * 4.0] * 3 + [0.0] * 3)
    np.testing.assert_allclose(c.segment_change["alt_wet_area_m2"], [ROWS * 50 * 4.0] * 6)
    # the element-by-element products use the paired runs: no change at all
    assert c.matrix_reach.sum() == pytest.approx(fb.n * 4.0) and np.all(c.speed_change == 0)


def test_unclassified_values_have_their_own_state():
    d, s = base_grids()
    f = grid_field(d, s)
    gappy = scheme_from_rows([["slow", "", "0.1"], ["fast", "0.3", ""]], name="gappy")
    c = compare.compare_runs(f, f, reach(), gappy)
    assert c.states == ["dry", "slow", "fast", "no class"]
    gap = (f.speed >= np.float32(0.1)) & (f.speed < np.float32(0.3))
    assert c.matrix_reach[3, 3] == pytest.approx(gap.sum() * 4.0)
    assert c.matrix_reach.sum() == pytest.approx(f.n * 4.0)
    assert any("no class" in n for n in c.notes)


def test_a_class_named_dry_is_refused():
    d, s = base_grids()
    f = grid_field(d, s)
    bad = scheme_from_rows([["Dry", "", "0.1"], ["wet", "0.1", ""]])
    with pytest.raises(ChannelHabitatError, match="rename") as err:
        compare.compare_runs(f, f, reach(), bad)
    assert err.value.parameter == "CLASS_TABLE"


def test_runs_sharing_no_element_are_refused():
    d, s = base_grids()
    da, db = d.copy(), d.copy()
    da[:, 150:] = np.nan
    db[:, :150] = np.nan
    with pytest.raises(ChannelHabitatError, match="do not overlap") as err:
        compare.compare_runs(grid_field(da, s), grid_field(db, s), reach(), velocity_preset())
    assert err.value.parameter == "ALT_DEPTH"


def test_check_same_scheme():
    v = velocity_preset()
    assert compare.check_same_scheme(v, velocity_preset()) == []
    rows = [r[:9] + [""] for r in v.to_rows()]
    other_colours = scheme_from_rows([r[:9] + [c] for r, c in zip(rows, ("#000000", "#222222", "#444444",
                                                                          "#666666"))])
    assert compare.check_same_scheme(v, other_colours)  # a note only
    shifted = [list(r) for r in rows]
    shifted[2][1], shifted[1][2] = "0.25", "0.25"  # moderate starts at 0.25 instead of 0.2
    msg = "class 'slow': the upper speed bound is 0.2 in the scheme but 0.25"
    with pytest.raises(ChannelHabitatError, match=msg) as e:
        compare.check_same_scheme(v, scheme_from_rows(shifted))
    assert e.value.parameter == "ALT_CLASS_FILE"
    renamed = [list(r) for r in rows]
    renamed[3][0] = "swift"
    with pytest.raises(ChannelHabitatError, match="class 4 is 'fast' in the scheme but 'swift'"):
        compare.check_same_scheme(v, scheme_from_rows(renamed))
    with pytest.raises(ChannelHabitatError, match="3 classes"):
        compare.check_same_scheme(v, scheme_from_rows(rows[:3]))


def _mesh_field(support_nodes, faces_wet, depth, speed):
    node_x, node_y, fn = support_nodes
    fx = node_x[fn].mean(axis=1)[faces_wet]
    fy = node_y[fn].mean(axis=1)[faces_wet]
    return HydraulicField(x=fx, y=fy, area=np.full(len(faces_wet), 16.0), depth=np.asarray(depth, np.float32),
                          speed=np.asarray(speed, np.float32), support=MeshSupport(node_x, node_y, fn, faces_wet))


def test_same_mesh_faces_are_compared_face_by_face():
    nx_, ny_ = np.meshgrid(np.arange(151) * 4.0, np.arange(11) * 4.0)
    node_x, node_y = nx_.ravel(), ny_.ravel()
    i, j = np.meshgrid(np.arange(150), np.arange(10))
    n0 = (j * 151 + i).ravel()
    fn = np.column_stack([n0, n0 + 1, n0 + 152, n0 + 151])
    nodes = (node_x, node_y, fn)
    all_faces = np.arange(len(fn))
    fx = node_x[fn].mean(axis=1)
    sb = 0.4 * (1 - fx / 600.0)
    fb = _mesh_field(nodes, all_faces, np.full(len(fn), 2.0), sb)
    wet_a = all_faces[fx > 100.0]
    fa = _mesh_field(nodes, wet_a, np.full(len(wet_a), 2.5), sb[wet_a] * 0.5)
    assert compare.same_support(fb, fa)
    other = _mesh_field((node_x + 1.0, node_y, fn), all_faces, np.full(len(fn), 2.0), sb)
    assert not compare.same_support(fb, other)
    c = compare.compare_runs(fb, fa, reach(), velocity_preset())
    np.testing.assert_array_equal(c.pairing.index, all_faces)
    assert c.reach_change["wet_base_only_m2"][0] == pytest.approx(16.0 * np.sum(fx <= 100.0))
    np.testing.assert_allclose(c.depth_change[wet_a], 0.5)
    np.testing.assert_allclose(c.speed_change[wet_a], -0.5 * sb[wet_a].astype(np.float32), rtol=1e-6)
    e = compare.element_table(c)
    np.testing.assert_array_equal(e["face"], all_faces)
    assert e["area_m2"].sum() == pytest.approx(c.matrix_reach.sum())
