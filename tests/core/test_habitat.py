"""core/habitat.py: the per-run pipeline (locate, classify, segment/zone statistics, profile)."""

import numpy as np
import pytest

from plugin.core import habitat, stats
from plugin.core.classes import froude_preset, velocity_preset
from plugin.core.errors import Cancelled, ChannelHabitatError, Progress
from plugin.core.field import GridSupport, HydraulicField, MeshSupport
from plugin.core.reach import Reach, ReachAxis

UTM55 = 'PROJCS["WGS 84 / UTM zone 55S",GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563]],' \
        'PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433]],PROJECTION["Transverse_Mercator"],' \
        'PARAMETER["latitude_of_origin",0],PARAMETER["central_meridian",147],PARAMETER["scale_factor",0.9996],' \
        'PARAMETER["false_easting",500000],PARAMETER["false_northing",10000000],UNIT["metre",1],' \
        'AUTHORITY["EPSG","32755"]]'


def straight_grid(length=3000.0, width=60.0, cell=2.0, seed=1, x0=0.0, dry_fraction=0.3):
    """A straight channel along +x (flow towards +x): chainage equals x - x0 for every cell."""
    rng = np.random.default_rng(seed)
    ncols, nrows = int(length / cell), int(width / cell)
    gt = (x0, cell, 0.0, width, 0.0, -cell)
    idx = np.arange(ncols * nrows)
    keep = rng.random(idx.size) > dry_fraction
    idx = idx[keep]
    rr, cc = np.divmod(idx, ncols)
    x = x0 + (cc + 0.5) * cell
    y = width - (rr + 0.5) * cell
    speed = rng.gamma(2.0, 0.1, idx.size).astype(np.float32)
    depth = rng.uniform(0.05, 3.0, idx.size).astype(np.float32)
    return HydraulicField(x, y, np.full(idx.size, cell * cell), depth, speed, crs_wkt=UTM55,
                          support=GridSupport(gt, (nrows, ncols), idx))


def straight_reach(length=3000.0, width=60.0, seg=500.0, x0=0.0, zones=None):
    from plugin.core.reach import parse_zone_breaks, segment_edges

    axis = ReachAxis(np.linspace(x0, x0 + length, 31), np.full(31, width / 2), UTM55)
    if zones is None:
        zones = "0 upper, 1000 middle, 2200 lower" if length == 3000.0 and x0 == 0.0 else ""
    ze, zn = parse_zone_breaks(zones, axis.start_m, axis.end_m)
    return Reach(axis, segment_edges(axis.start_m, axis.end_m, seg), ze, zn)


@pytest.fixture(scope="module")
def run():
    fld = straight_grid()
    reach = straight_reach()
    return fld, reach, habitat.analyse_run(fld, reach, velocity_preset())


def test_segment_and_class_areas_add_up(run):
    fld, reach, ra = run
    seg = ra.segment_stats
    assert reach.n_segments == 6 and len(seg["segment"]) == 6
    assert seg["segment"].tolist() == [1, 2, 3, 4, 5, 6]
    total = fld.area.sum()
    assert seg["wet_area_m2"].sum() == pytest.approx(total)
    assert ra.zone_stats["wet_area_m2"].sum() == pytest.approx(total)
    assert ra.reach_stats["wet_area_m2"][0] == pytest.approx(total)
    for t in (ra.segment_stats, ra.zone_stats, ra.reach_stats):
        class_sum = sum(t[f"area_{stats.field_key(n)}_m2"] for n in ra.scheme.names)
        np.testing.assert_allclose(class_sum, t["wet_area_m2"], rtol=1e-12)
        np.testing.assert_allclose(sum(t[f"pct_{stats.field_key(n)}"] for n in ra.scheme.names), 100.0)


def test_segment_statistics_against_numpy_on_the_cells_of_each_segment(run):
    fld, reach, ra = run
    for k in range(reach.n_segments):
        a, b = reach.segment_edges[k], reach.segment_edges[k + 1]
        m = (fld.x >= a) & (fld.x < b)  # chainage = x on this straight reach
        ref = np.percentile(fld.speed[m].astype(float), stats.PERCENTILES)
        got = [ra.segment_stats[f"v_{lab}_ms"][k] for lab in stats.PERCENTILE_LABELS]
        np.testing.assert_allclose(got, ref, rtol=0, atol=1e-9)
        dref = np.percentile(fld.depth[m].astype(float), [50, 90])
        np.testing.assert_allclose([ra.segment_stats["d_p50_m"][k], ra.segment_stats["d_p90_m"][k]], dref, atol=1e-9)
        assert ra.segment_stats["v_mean_ms"][k] == pytest.approx(fld.speed[m].mean(), rel=1e-6)
        fast = (fld.speed[m] >= np.float32(0.3)).sum() * 4.0
        assert ra.segment_stats["area_fast_m2"][k] == fast
        fr = fld.speed[m] / np.sqrt(9.80665 * fld.depth[m].astype(float))
        assert ra.segment_stats["fr_mean"][k] == pytest.approx(fr.mean(), rel=1e-5)


def test_zones_follow_the_breaks(run):
    fld, reach, ra = run
    assert ra.zone_stats["zone"] == ["upper", "middle", "lower"]
    m = (fld.x >= 1000) & (fld.x < 2200)
    assert ra.zone_stats["wet_area_m2"][1] == pytest.approx(fld.area[m].sum())
    assert ra.zone_stats["v_p50_ms"][1] == pytest.approx(np.percentile(fld.speed[m].astype(float), 50))
    # each segment names the zone its middle lies in
    assert ra.segment_stats["zone"] == ["upper", "upper", "middle", "middle", "lower", "lower"]


def test_profile_bins_match_numpy(run):
    fld, reach, ra = run
    p = ra.profile
    assert p["chainage_from_m"][0] == 0.0 and p["chainage_to_m"][-1] == 3000.0
    assert p["wet_area_m2"].sum() == pytest.approx(fld.area.sum())
    k = len(p["chainage_from_m"]) // 2
    a, b = p["chainage_from_m"][k], p["chainage_to_m"][k]
    m = (fld.x >= a) & (fld.x < b)
    assert p["v_p25_ms"][k] == pytest.approx(np.percentile(fld.speed[m].astype(float), 25), abs=1e-9)
    standalone = habitat.chainage_profile(fld, reach, ra.chainage, ra.codes, ra.scheme,
                                          bin_m=p["chainage_to_m"][0] - p["chainage_from_m"][0])
    np.testing.assert_allclose(standalone["v_p90_ms"], p["v_p90_ms"])


def test_elements_beyond_the_axis_ends_are_left_out_and_noted():
    fld = straight_grid(length=3000.0)
    reach = straight_reach(length=2000.0, x0=500.0)  # the axis covers x 500..2500 only
    ra = habitat.analyse_run(fld, reach, velocity_preset())
    inside = (fld.x > 500) & (fld.x < 2500)
    assert ra.reach_stats["wet_area_m2"][0] == pytest.approx(fld.area[inside].sum())
    assert ra.outside_area_m2 == pytest.approx(fld.area[~inside].sum())
    assert (ra.segment[~inside] == -1).all() and (ra.zone[~inside] == -1).all()
    assert any("beyond the ends" in n for n in ra.notes)
    # the codes still cover every element (for the class map)
    assert (ra.codes > 0).all()


def test_mesh_with_unequal_faces_weights_by_face_area():
    # One big face (90 m2) of slow water and nine small faces (10 m2 each) of fast water.
    speed = np.array([0.1] + [0.5] * 9, dtype=np.float32)
    area = np.array([90.0] + [10.0] * 9)
    x = np.linspace(100, 900, 10)
    fld = HydraulicField(x, np.zeros(10), area, np.full(10, 1.0, np.float32), speed, crs_wkt=UTM55,
                         support=MeshSupport(np.zeros(3), np.zeros(3), np.zeros((10, 3), int), np.arange(10)))
    axis = ReachAxis([0.0, 1000.0], [0.0, 0.0], UTM55)
    reach = Reach(axis, [0.0, 1000.0], [0.0, 1000.0], ["all"])
    ra = habitat.analyse_run(fld, reach, velocity_preset())
    t = ra.segment_stats
    # weight unit = median face area = 10 m2 -> the big face counts 9 times: 9 x 0.1 and 9 x 0.5
    ref = np.percentile(np.repeat([0.1, 0.5], [9, 9]).astype(np.float32).astype(float), [50, 10])
    assert t["v_p50_ms"][0] == pytest.approx(ref[0], abs=1e-7)  # 0.3; unweighted would be 0.5
    assert t["v_p10_ms"][0] == pytest.approx(ref[1], abs=1e-7)
    assert t["v_mean_ms"][0] == pytest.approx(0.3, abs=1e-7)  # unweighted mean 0.46
    assert t["pct_fast"][0] == pytest.approx(50.0)  # by count it would be 90 %
    assert t["pct_slow"][0] == pytest.approx(50.0)
    assert np.median(speed) != pytest.approx(t["v_p50_ms"][0])


def test_no_overlap_is_refused_naming_the_centreline():
    fld = straight_grid(length=1000.0)
    axis = ReachAxis([5000.0, 8000.0], [30.0, 30.0], UTM55)
    with pytest.raises(ChannelHabitatError) as err:
        habitat.analyse_run(fld, Reach(axis), velocity_preset())
    assert err.value.parameter == "CENTRELINE" and "do not overlap" in str(err.value)


def test_all_dry_is_refused():
    fld = straight_grid(length=100.0).subset(np.zeros(1500, bool)[: straight_grid(length=100.0).n])
    with pytest.raises(ChannelHabitatError, match="dry everywhere"):
        habitat.analyse_run(fld, straight_reach(), velocity_preset())


def test_geographic_or_feet_crs_is_refused():
    fld = straight_grid(length=200.0)
    fld.crs_wkt = 'GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563]],PRIMEM["Greenwich",0],' \
                  'UNIT["degree",0.0174532925199433],AUTHORITY["EPSG","4326"]]'
    with pytest.raises(ChannelHabitatError, match="geographic"):
        habitat.analyse_run(fld, straight_reach(), velocity_preset())
    from pyproj import CRS

    fld.crs_wkt = CRS.from_epsg(2227).to_wkt()  # a US state plane CRS in US survey feet
    with pytest.raises(ChannelHabitatError, match="not metres"):
        habitat.analyse_run(fld, straight_reach(), velocity_preset())


def test_cancel_stops_the_pipeline():
    fld = straight_grid(length=500.0)
    with pytest.raises(Cancelled):
        habitat.analyse_run(fld, straight_reach(), velocity_preset(), progress=Progress(cancelled=lambda: True))


def test_progress_is_reported_in_order():
    seen = []
    fld = straight_grid(length=500.0)
    habitat.analyse_run(fld, straight_reach(length=500.0), velocity_preset(),
                        progress=Progress(lambda f, m: seen.append(f)))
    assert seen[0] == 0.0 and seen[-1] == 1.0 and seen == sorted(seen)


def test_froude_scheme_and_class_fractions(run):
    fld, reach, _ = run
    ra = habitat.analyse_run(fld, reach, froude_preset())
    fr = ra.class_fractions("reach")[0]
    assert fr.sum() == pytest.approx(1.0)
    codes = ra.codes
    assert ra.reach_stats["area_pool_m2"][0] == pytest.approx(fld.area[codes == 1].sum())


def test_without_percentiles_and_profile():
    fld = straight_grid(length=500.0)
    ra = habitat.analyse_run(fld, straight_reach(length=500.0), velocity_preset(), percentiles=False)
    assert ra.profile is None and "v_p50_ms" not in ra.segment_stats and "area_fast_m2" in ra.segment_stats


def test_nice_bin():
    assert habitat.nice_bin(40000) == 200.0
    assert habitat.nice_bin(45000) == 250.0
    assert habitat.nice_bin(3000) == 20.0
    assert habitat.nice_bin(3000, minimum_m=40) == 50.0
