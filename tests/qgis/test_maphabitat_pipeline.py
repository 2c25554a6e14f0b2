"""The background steps of maphabitat: rasters read while the reach is read (gis/runprefetch), the
class GeoTIFF encoded while statistics are made (gis/classraster), and failures leaving nothing behind."""

from __future__ import annotations

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import QgsProcessingContext, QgsProcessingFeedback

from plugin.core.classes import velocity_preset
from plugin.gis import classraster, runinput, runprefetch
from plugin.gis.runs import read_raster_run
from tests.qgis import habitat_cases as hc


def _alg():
    """maphabitat itself: its run parameters are what the prefetch reads."""
    from qgis.core import QgsApplication

    return QgsApplication.processingRegistry().createAlgorithmById("channelhabitat:maphabitat")


def test_prefetched_run_equals_the_direct_read(provider, tmp_path):
    r = hc.write_rasters(tmp_path)
    alg = _alg()
    params = {"DEPTH": r["depth"], "SPEED": r["speed"], "WET_DEPTH": 0.05}
    ctx, fb = QgsProcessingContext(), QgsProcessingFeedback()
    run = runprefetch.start_run_parameters(alg, params, ctx, fb)
    ds = gdal.Open(r["depth"])
    assert run.crs_wkt == ds.GetProjection() and run.crs_wkt  # known before the values are read
    del ds
    fld, src = run.result()
    ref, ref_src = runinput.read_run_parameters(alg, params, ctx, fb)
    assert src.depth == ref_src.depth and src.speed == ref_src.speed
    for k in ("x", "y", "area", "depth", "speed"):
        np.testing.assert_array_equal(getattr(fld, k), getattr(ref, k))
    np.testing.assert_array_equal(fld.support.index, ref.support.index)


def test_prefetch_reports_reader_errors_with_their_parameter(provider, tmp_path):
    from plugin.core.errors import ChannelHabitatError

    r = hc.write_rasters(tmp_path, speed_scale=100.0)  # cm/s
    alg = _alg()
    run = runprefetch.start_run_parameters(alg, {"DEPTH": r["depth"], "SPEED": r["speed"]}, QgsProcessingContext(),
                                           QgsProcessingFeedback())
    with pytest.raises(ChannelHabitatError) as err:
        run.result()
    assert err.value.parameter == "SPEED"


def test_class_raster_is_moved_into_place_only_when_finished(tmp_path):
    r = hc.write_rasters(tmp_path)
    fld = read_raster_run(r["depth"], r["speed"])
    scheme = velocity_preset()
    codes = scheme.classify(fld.depth, fld.speed)
    out = tmp_path / "out" / "classes.tif"
    job = classraster.start_class_raster(str(out), fld, codes, scheme, "run a")
    assert not out.exists()
    assert job.finish() == str(out)
    assert not any(p.name.startswith(".partial") for p in out.parent.iterdir())
    ds = gdal.Open(str(out))
    band = ds.GetRasterBand(1)
    grid = band.ReadAsArray()
    # independent: the class of every wet cell from numpy's digitize of the speed raster
    s = gdal.Open(r["speed"]).ReadAsArray()
    d = gdal.Open(r["depth"]).ReadAsArray()
    wet = np.isfinite(d) & (d != -9999.0) & (d >= 0.05)
    ref = np.where(wet, np.digitize(s, np.array([0.05, 0.2, 0.3], dtype=np.float32)) + 1, 0)
    np.testing.assert_array_equal(grid, ref)
    assert band.GetNoDataValue() == 0 and "scheme" in ds.GetMetadata() and ds.GetMetadata()["run"] == "run a"
    del band, ds
    # discarded: nothing is left
    job2 = classraster.start_class_raster(str(tmp_path / "out" / "other.tif"), fld, codes, scheme)
    job2.discard()
    assert sorted(p.name for p in out.parent.iterdir()) == ["classes.tif"]


def test_a_failing_run_leaves_no_file_behind(run_alg, tmp_path):
    from qgis.core import QgsProcessingException

    r = hc.write_rasters(tmp_path)
    far = hc.write_centreline(tmp_path / "far.gpkg", x_from=hc.X0 + 5000, x_to=hc.X0 + 6000)
    out = tmp_path / "out"
    out.mkdir()
    with pytest.raises(QgsProcessingException, match="overlap"):
        run_alg("maphabitat", {"DEPTH": r["depth"], "SPEED": r["speed"], "CENTRELINE": far,
                               "CLASSES": str(out / "c.tif"), "PATCHES": str(out / "p.gpkg"),
                               "SEGMENT_STATS": str(out / "s.gpkg"), "ZONE_STATS": str(out / "z.gpkg"),
                               "REPORT": str(out / "r.html")})
    assert list(out.iterdir()) == []


def test_two_step_read_and_locations_of_dropped_cells(provider, tmp_path):
    """Wet cells without a velocity value are dropped after the cells were located: the location of
    every remaining cell is the one computed on the final field directly."""
    from plugin.core.reach import Reach, ReachAxis, clear_locate_cache, locate_field
    from plugin.gis.runs import RasterRunReader

    gt, x, y = hc.grid()
    inside = (x > hc.X0) & (x < hc.X0 + hc.LENGTH) & (y > hc.Y0) & (y < hc.Y0 + hc.WIDTH)
    depth = hc.write_tif(tmp_path / "d.tif", np.where(inside, hc.depth_of(x, y), np.nan), gt)
    s = np.where(inside, hc.speed_of(x, y), np.nan)
    s[::7, ::5] = np.nan  # wet cells without a velocity value
    speed = hc.write_tif(tmp_path / "s.tif", s, gt)
    reader = RasterRunReader(depth, speed)
    cells = reader.read_depth()
    assert np.isnan(cells.speed).all()
    fld = reader.read_velocity()
    ref = read_raster_run(depth, speed)
    for k in ("x", "y", "area", "depth", "speed"):
        np.testing.assert_array_equal(getattr(fld, k), getattr(ref, k))
    assert 0 < fld.n < cells.n and any("no velocity value" in n for n in fld.notes)
    # independent: the cells are the depth raster's wet cells, the field those with a speed too
    d_arr = gdal.Open(depth).ReadAsArray()
    wet = np.isfinite(d_arr) & (d_arr != -9999.0) & (d_arr >= 0.05)
    assert cells.n == int(wet.sum()) and fld.n == int((wet & np.isfinite(s)).sum())
    axis = ReachAxis([hc.X0 - 1.0, hc.X0 + hc.LENGTH + 1.0], [hc.Y0 + hc.WIDTH / 2] * 2, cells.crs_wkt)
    reach = Reach(axis, [axis.start_m, axis.end_m], [axis.start_m, axis.end_m], ["all"])
    clear_locate_cache()
    loc = runprefetch.RunRead.align(locate_field(reach, cells), cells, fld)
    clear_locate_cache()
    direct = locate_field(reach, fld)
    np.testing.assert_array_equal(loc.chainage, direct.chainage)
    np.testing.assert_array_equal(loc.offset, direct.offset)
    np.testing.assert_allclose(loc.chainage, fld.x - (hc.X0 - 1.0), atol=1e-9)  # a straight axis along x


def test_class_raster_from_a_field_being_read(provider, tmp_path):
    from concurrent.futures import Future

    r = hc.write_rasters(tmp_path)
    fld = read_raster_run(r["depth"], r["speed"])
    scheme = velocity_preset()
    pending = Future()
    job = classraster.start_class_raster(str(tmp_path / "c.tif"), pending, None, scheme, None)
    pending.set_result(fld)  # the field arrives later
    np.testing.assert_array_equal(job.codes(), scheme.classify(fld.depth, fld.speed))
    job.finish()
    ds = gdal.Open(str(tmp_path / "c.tif"))
    assert ds.GetMetadata()["run"] == fld.name
    grid = ds.GetRasterBand(1).ReadAsArray()
    assert int((grid > 0).sum()) == fld.n
    # a read that fails: the job fails, discard leaves nothing
    failed = Future()
    job2 = classraster.start_class_raster(str(tmp_path / "x" / "c2.tif"), failed, None, scheme, None)
    failed.set_exception(RuntimeError("read failed"))
    with pytest.raises(RuntimeError):
        job2.codes()
    job2.discard()
    assert list((tmp_path / "x").iterdir()) == []
