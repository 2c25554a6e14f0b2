"""The scenario-table runner (gis/scenariorun.py) on small hand-made runs: order, threads, callbacks on
the calling thread, errors that name the row, cancel, CRS checks, chainage per grid."""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest
from osgeo import gdal

from plugin.core.errors import Cancelled, ChannelHabitatError, Progress
from plugin.core.reach import Reach, ReachAxis, parse_zone_breaks, segment_edges
from plugin.core.scenario import read_scenarios
from plugin.gis import scenariorun
from tests.qgis import habitat_cases as hc

SCALES = (0.4, 0.7, 1.0, 1.3, 1.6, 2.0)


def _write_table(tmp_path, scales=SCALES, epsg_of=None, extra=""):
    lines = ["regime,discharge,unit,depth,speed"]
    for k, s in enumerate(scales):
        folder = tmp_path / f"run{k}"
        folder.mkdir(exist_ok=True)
        epsg = (epsg_of or {}).get(k, hc.EPSG)
        r = hc.write_rasters(folder, speed_scale=s, depth_offset=0.05 * k, epsg=epsg)
        lines.append(f"a,{1000 * (k + 1)},ML/d,run{k}/depth.tif,run{k}/speed.tif")
    p = tmp_path / "scenarios.csv"
    p.write_text("\n".join(lines) + extra + "\n", encoding="utf-8")
    return p, r


def _reach():
    x = np.linspace(hc.X0 - 5, hc.X0 + hc.LENGTH + 5, 20)
    axis = ReachAxis(x, np.full(x.size, hc.Y0 + hc.WIDTH / 2), hc.srs().ExportToWkt())
    ze, zn = parse_zone_breaks("", axis.start_m, axis.end_m)
    return Reach(axis, segment_edges(axis.start_m, axis.end_m, 200.0), ze, zn)


def _summary(run):
    seg = run.reach.segment_of(run.location.chainage)
    areas = np.bincount(np.where(seg >= 0, seg, run.reach.n_segments), weights=run.field.area,
                        minlength=run.reach.n_segments + 1)[:-1]
    return run.row.q_mld, run.field.n, float(np.sum(run.field.speed * run.field.area)), areas


def test_results_in_table_order_and_same_as_one_at_a_time(tmp_path):
    p, _ = _write_table(tmp_path)
    rows = read_scenarios(p)
    two = scenariorun.run_scenarios(rows, _summary, wet_depth_m=0.05, reach=_reach(), workers=2)
    one = scenariorun.run_scenarios(rows, _summary, wet_depth_m=0.05, reach=_reach(), workers=1)
    assert [r[0] for r in two.results] == [r.q_mld for r in rows]  # table order, whatever the work order
    for a, b in zip(two.results, one.results):
        assert a[0] == b[0] and a[1] == b[1]
        assert a[2] == pytest.approx(b[2], rel=1e-12)
        np.testing.assert_array_equal(a[3], b[3])
    # independent: the wet cells of each run counted with numpy from the files
    for row, res in zip(rows, two.results):
        ds = gdal.Open(row.source.depth)
        d = ds.GetRasterBand(1).ReadAsArray()
        nd = ds.GetRasterBand(1).GetNoDataValue()
        del ds
        assert res[1] == int(np.count_nonzero(np.isfinite(d) & (d != nd) & (d >= 0.05)))
        # speed-weighted sum: speed grows with the run's scale
    sums = [r[2] for r in two.results]
    assert all(b > a for a, b in zip(sums, sums[1:]))
    assert two.timings["workers"] == 2 and one.timings["workers"] == 1


def test_callbacks_on_the_calling_thread_and_progress_reaches_one(tmp_path):
    p, _ = _write_table(tmp_path)
    rows = read_scenarios(p)
    me = threading.get_ident()
    seen, fracs, logs = set(), [], []

    def cb(f, msg):
        seen.add(threading.get_ident())
        fracs.append(f)

    def log(text):
        seen.add(threading.get_ident())
        logs.append(text)

    scenariorun.run_scenarios(rows, _summary, wet_depth_m=0.05, reach=_reach(), progress=Progress(cb), log=log)
    assert seen == {me}
    assert fracs == sorted(fracs) and fracs[-1] == 1.0  # never goes back; ends complete
    assert sum("wet elements" in t for t in logs) == len(rows)
    assert any(t.startswith("chainage on") for t in logs)


def test_one_grid_chainage_looked_up_once_per_run(tmp_path):
    p, _ = _write_table(tmp_path)
    rows = read_scenarios(p)
    tab = scenariorun.run_scenarios(rows, _summary, wet_depth_m=0.05, reach=_reach())
    assert len(tab.grids) == 1
    g = tab.grids[0]
    assert g.runs == len(rows) and len(g.locate_seconds) == len(rows)
    assert "cells of 2 x 2 m" in g.describe()


def test_dry_row_is_named(tmp_path):
    p, _ = _write_table(tmp_path, scales=(1.0, 1.0, 1.0))
    # row 3 of the CSV (the second run) becomes dry everywhere
    path = tmp_path / "run1" / "depth.tif"
    ds = gdal.Open(str(path), gdal.GA_Update)
    b = ds.GetRasterBand(1)
    a = b.ReadAsArray()
    b.WriteArray(np.where(np.isfinite(a) & (a != -9999), 0.01, a).astype(np.float32))
    del b, ds
    rows = read_scenarios(p)
    with pytest.raises(ChannelHabitatError) as e:
        scenariorun.run_scenarios(rows, _summary, wet_depth_m=0.05, reach=_reach())
    assert str(e.value).startswith("row 3 (regime a, 2000 ML/d): the run is dry everywhere")
    assert e.value.parameter == "SCENARIOS"


def test_work_error_is_raised_with_its_row_and_keeps_its_parameter(tmp_path):
    p, _ = _write_table(tmp_path)
    rows = read_scenarios(p)

    def work(run):
        if run.row.q_mld == 4000:
            raise ChannelHabitatError("no such class", "CLASS_TABLE")
        return 1

    with pytest.raises(ChannelHabitatError) as e:
        scenariorun.run_scenarios(rows, work, wet_depth_m=0.05, reach=_reach())
    assert str(e.value) == "row 5 (regime a, 4000 ML/d): no such class"
    assert e.value.parameter == "CLASS_TABLE"


def test_cancel_stops_promptly_and_leaves_no_worker(tmp_path):
    p, _ = _write_table(tmp_path, scales=SCALES * 3)
    rows = read_scenarios(p)
    calls = []

    def slow(run):
        calls.append(run.row.line)
        for _ in range(50):
            time.sleep(0.01)
            run.progress(0.5)
        return 1

    state = {"n": 0}

    def cancelled():
        state["n"] += 1
        return state["n"] > 3  # cancel at the third progress check on this thread

    t0 = time.perf_counter()
    with pytest.raises(Cancelled):
        scenariorun.run_scenarios(rows, slow, wet_depth_m=0.05, reach=_reach(), progress=Progress(None, cancelled))
    assert time.perf_counter() - t0 < 5.0
    assert len(calls) < len(rows)  # not every row was worked on
    assert not [t for t in threading.enumerate() if t.name.startswith("scenario-run")]


def test_mixed_crs_refused_naming_both_rows(tmp_path):
    p, _ = _write_table(tmp_path, scales=(1.0, 1.2, 1.4), epsg_of={2: 28355})
    rows = read_scenarios(p)
    with pytest.raises(ChannelHabitatError) as e:
        scenariorun.preflight(rows)
    msg = str(e.value)
    assert msg.startswith("row 4 (regime a, 3000 ML/d) is in GDA94 / MGA zone 55")
    assert "row 2 (regime a, 1000 ML/d) is in WGS 84 / UTM zone 55S" in msg
    assert "reproject" in msg and e.value.parameter == "SCENARIOS"


def test_raster_without_crs_refused(tmp_path):
    p, _ = _write_table(tmp_path, scales=(1.0, 1.2))
    ds = gdal.Open(str(tmp_path / "run1" / "depth.tif"), gdal.GA_Update)
    ds.SetProjection("")
    del ds
    rows = read_scenarios(p)
    with pytest.raises(ChannelHabitatError, match=r"^row 3 \(regime a, 2000 ML/d\): the depth raster has no CRS"):
        scenariorun.preflight(rows)


def test_geographic_crs_refused(tmp_path):
    p, _ = _write_table(tmp_path, scales=(1.0,))
    ds = gdal.Open(str(tmp_path / "run0" / "depth.tif"), gdal.GA_Update)
    ds.SetProjection(hc.srs(4326).ExportToWkt())
    del ds
    ds = gdal.Open(str(tmp_path / "run0" / "speed.tif"), gdal.GA_Update)
    ds.SetProjection(hc.srs(4326).ExportToWkt())
    del ds
    with pytest.raises(ChannelHabitatError, match="geographic"):
        scenariorun.preflight(read_scenarios(p))


def test_speed_raster_alone_is_read_unless_vectors_are_needed(tmp_path):
    folder = tmp_path / "run"
    folder.mkdir()
    hc.write_rasters(folder)
    hc.write_rasters(folder, uv=True)
    (tmp_path / "s.csv").write_text("regime,discharge,unit,depth,speed,u,v\n"
                                    "a,10,m3/s,run/depth.tif,run/speed.tif,run/u.tif,run/v.tif\n", encoding="utf-8")
    rows = read_scenarios(tmp_path / "s.csv")
    got = scenariorun.run_scenarios(rows, lambda run: (run.field.u is None, float(run.field.speed.max())),
                                    wet_depth_m=0.05)
    assert got.results[0][0] is True
    got = scenariorun.run_scenarios(rows, lambda run: (run.field.u is None, float(run.field.speed.max())),
                                    wet_depth_m=0.05, need_vectors=True)
    assert got.results[0][0] is False
    assert got.grids[0].locate_seconds == []  # no reach: no chainage


def test_unreadable_tiles_name_the_row(tmp_path):
    p, _ = _write_table(tmp_path, scales=(1.0, 1.2))
    # the second run's speed raster cut short: its header opens, its tiles cannot be read
    path = tmp_path / "run1" / "speed.tif"
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 3])
    rows = read_scenarios(p)
    with pytest.raises(ChannelHabitatError) as e:
        scenariorun.run_scenarios(rows, _summary, wet_depth_m=0.05, reach=_reach())
    assert str(e.value).startswith("row 3 (regime a, 2000 ML/d): ")
    assert e.value.parameter == "SCENARIOS"


def test_chainage_computed_once_per_grid(tmp_path, monkeypatch):
    # Every cell is located once for the whole table: the runs after the first on a grid are served
    # from core/reach's cache (only cells no earlier run had are located). Counted at the locator.
    from plugin.core import reach as reach_mod

    p, _ = _write_table(tmp_path)
    rows = read_scenarios(p)
    located = []
    real = reach_mod.ReachAxis.locate

    def counting(self, x, y, *args, **kw):
        located.append(len(x))
        return real(self, x, y, *args, **kw)

    reach_mod.clear_locate_cache()
    monkeypatch.setattr(reach_mod.ReachAxis, "locate", counting)
    tab = scenariorun.run_scenarios(rows, _summary, wet_depth_m=0.05, reach=_reach(), workers=2)
    union = set()
    for row in rows:
        ds = gdal.Open(row.source.depth)
        d = ds.GetRasterBand(1).ReadAsArray()
        del ds
        union |= set(np.flatnonzero(np.isfinite(d) & (d != -9999) & (d >= 0.05)).tolist())
    n_runs = [r[1] for r in tab.results]
    assert sum(located) == len(union) < sum(n_runs)
    assert located[0] == max(n_runs)  # the largest run first: the later ones find their cells located
    reach_mod.clear_locate_cache()
