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
