"""gis/runblocks.py: a raster run read block by block (dry blocks skipped by their compressed bytes) is
the run gis.runs.read_run reads, bit for bit; wherever it does not apply it gives None (the caller then
reads with read_run, which says what needs saying)."""

import numpy as np
import pytest
from osgeo import gdal, osr

from plugin.core.errors import ChannelHabitatError
from plugin.core.sources import RunSource
from plugin.gis import runblocks, runs

gdal.UseExceptions()
RNG = np.random.default_rng(11)
ND = -9999.0


def _tif(path, array, block=64, tiled=True, nodata=ND, gt=(500000.0, 2.0, 0.0, 6000000.0, 0.0, -2.0),
         dtype=gdal.GDT_Float32):
    opts = ["COMPRESS=DEFLATE"] + (["TILED=YES", f"BLOCKXSIZE={block}", f"BLOCKYSIZE={block}"] if tiled else [])
    ds = gdal.GetDriverByName("GTiff").Create(str(path), array.shape[1], array.shape[0], 1, dtype, opts)
    ds.SetGeoTransform(gt)
    srs = osr.SpatialReference()
    srs.ImportFromEPSG(32755)
    ds.SetProjection(srs.ExportToWkt())
    band = ds.GetRasterBand(1)
    if nodata is not None:
        band.SetNoDataValue(nodata)
    band.WriteArray(array)
    del band
    ds = None
    return str(path)


def _run(shape=(300, 520)):
    """A channel across a dry grid: most blocks hold nodata only (identical compressed bytes)."""
    rows, cols = shape
    depth = np.full(shape, ND, np.float32)
    yy, xx = np.mgrid[0:rows, 0:cols]
    centre = rows / 2 + 40 * np.sin(xx / 60.0)
    inside = np.abs(yy - centre) < 25
    depth[inside] = RNG.uniform(0.0, 3.0, inside.sum()).astype(np.float32)  # some below the wet depth
    u = np.where(inside, RNG.uniform(-1, 1, shape), ND).astype(np.float32)
    v = np.where(inside, RNG.uniform(-1, 1, shape), ND).astype(np.float32)
    speed = np.where(inside, np.hypot(u, v), ND).astype(np.float32)
    return depth, speed, u, v


def _write(tmp_path, depth, speed, u, v, **kw):
    return {k: _tif(tmp_path / f"{k}.tif", a, **kw) for k, a in
            (("depth", depth), ("speed", speed), ("u", u), ("v", v))}


def _same(a, b):
    assert b is not None
    for k in ("x", "y", "area", "depth", "speed"):
        np.testing.assert_array_equal(getattr(a, k), getattr(b, k), err_msg=k)
    np.testing.assert_array_equal(a.support.index, b.support.index)
    assert a.support.shape == b.support.shape and tuple(a.support.transform) == tuple(b.support.transform)
    for k in ("u", "v"):
        if getattr(a, k) is None:
            assert getattr(b, k) is None
        else:
            np.testing.assert_array_equal(getattr(a, k), getattr(b, k), err_msg=k)
    assert a.crs_wkt == b.crs_wkt and a.name == b.name


def _naive(paths, keys, wet=0.05):
    """The wet cells from whole-array reads (numpy only): the reference for both readers."""
    arrays = {}
    for k in ("depth",) + tuple(keys):
        ds = gdal.Open(paths[k])
        band = ds.GetRasterBand(1)
        arrays[k] = band.ReadAsArray().astype(np.float32)
        del band, ds
    d = arrays["depth"]
    index = np.flatnonzero(np.isfinite(d) & (d != ND) & (d >= wet))
    spd = arrays["speed"] if "speed" in keys else np.hypot(arrays["u"], arrays["v"]).astype(np.float32)
    return index, d.ravel()[index], spd.ravel()[index]


@pytest.mark.parametrize("keys", [("speed",), ("u", "v"), ("speed", "u", "v")])
@pytest.mark.parametrize("shape", [(300, 520), (256, 256), (65, 700)])  # edge blocks padded or not
def test_equals_read_run(tmp_path, keys, shape):
    paths = _write(tmp_path, *_run(shape))
    src = RunSource(depth=paths["depth"], **{k: paths[k] for k in keys})
    want = runs.read_run(src, 0.05)
    got = runblocks.read_raster_blocks(src, 0.05)
    _same(want, got)
    index, depth, speed = _naive(paths, keys)
    np.testing.assert_array_equal(want.support.index, index)
    np.testing.assert_array_equal(want.depth, depth)
    np.testing.assert_array_equal(want.speed, speed)


def test_dry_blocks_are_skipped_not_decoded(tmp_path, monkeypatch):
    """Only blocks that may hold wet cells are decoded (plus one of each group of identical blocks)."""
    paths = _write(tmp_path, *_run())
    calls = []
    real = gdal.Band.ReadBlock

    def counting(self, i, j, *a, **kw):
        calls.append((i, j))
        return real(self, i, j, *a, **kw)

    monkeypatch.setattr(gdal.Band, "ReadBlock", counting)
    src = RunSource(depth=paths["depth"], speed=paths["speed"])
    got = runblocks.read_raster_blocks(src, 0.05)
    monkeypatch.undo()
    _same(runs.read_run(src, 0.05), got)
    n_blocks = 5 * 9  # 300 x 520 cells in 64 x 64 blocks
    depth_calls = len(calls) - len({c for c in calls})  # velocity blocks are a subset, read once more
    assert len(set(calls)) < n_blocks
    assert depth_calls >= 1


def test_wet_blocks_with_identical_bytes_are_read(tmp_path):
    """A lake of one constant depth: its full blocks compress to the same bytes but are wet."""
    depth = np.full((256, 256), 1.5, np.float32)
    depth[:, :40] = ND
    speed = np.full(depth.shape, 0.2, np.float32)
    paths = {k: _tif(tmp_path / f"{k}.tif", a) for k, a in (("depth", depth), ("speed", speed))}
    src = RunSource(depth=paths["depth"], speed=paths["speed"])
    got = runblocks.read_raster_blocks(src, 0.05)
    _same(runs.read_run(src, 0.05), got)
    assert got.n == 256 * 216


def test_nan_nodata_and_no_nodata(tmp_path):
    d, s, u, v = _run()
    d = np.where(d == ND, np.nan, d).astype(np.float32)
    s = np.where(s == ND, np.nan, s).astype(np.float32)
    paths = {"depth": _tif(tmp_path / "d.tif", d, nodata=None), "speed": _tif(tmp_path / "s.tif", s, nodata=None)}
    src = RunSource(depth=paths["depth"], speed=paths["speed"])
    _same(runs.read_run(src, 0.05), runblocks.read_raster_blocks(src, 0.05))


def test_striped_tiff(tmp_path):
    paths = _write(tmp_path, *_run(), tiled=False)
    src = RunSource(depth=paths["depth"], speed=paths["speed"])
    want = runs.read_run(src, 0.05)
    got = runblocks.read_raster_blocks(src, 0.05)
    if got is not None:  # one-row strips: a valid layout, read the same
        _same(want, got)


def _declines(tmp_path, src):
    assert runblocks.read_raster_blocks(src, 0.05) is None


def test_declines_what_read_run_must_say_or_refuse(tmp_path):
    d, s, u, v = _run()
    # wet cells without a velocity value: read_run drops and says so
    s2 = s.copy()
    s2[np.flatnonzero((d >= 0.05).ravel())[:5] // s.shape[1], np.flatnonzero((d >= 0.05).ravel())[:5] % s.shape[1]] = ND
    p = {"depth": _tif(tmp_path / "d.tif", d), "speed": _tif(tmp_path / "s2.tif", s2)}
    _declines(tmp_path, RunSource(depth=p["depth"], speed=p["speed"]))
    assert runs.read_run(RunSource(depth=p["depth"], speed=p["speed"]), 0.05).notes
    # negative depths: read_run refuses
    dn = d.copy()
    dn[150, 100] = -0.5
    pn = _tif(tmp_path / "dn.tif", dn)
    ps = _tif(tmp_path / "s.tif", s)
    _declines(tmp_path, RunSource(depth=pn, speed=ps))
    with pytest.raises(ChannelHabitatError):
        runs.read_run(RunSource(depth=pn, speed=ps), 0.05)
    # a dry run
    pd = _tif(tmp_path / "dry.tif", np.full(d.shape, ND, np.float32))
    _declines(tmp_path, RunSource(depth=pd, speed=ps))
    # another grid (read_run resamples and says so), another block size, a south-up raster
    shifted = _tif(tmp_path / "sg.tif", s, gt=(500001.0, 2, 0, 6e6, 0, -2))
    _declines(tmp_path, RunSource(depth=p["depth"], speed=shifted))
    _declines(tmp_path, RunSource(depth=p["depth"], speed=_tif(tmp_path / "sb.tif", s, block=128)))
    _declines(tmp_path, RunSource(depth=_tif(tmp_path / "su.tif", d[::-1], gt=(5e5, 2, 0, 6e6 - 600, 0, 2)),
                                  speed=ps))
    # not a GeoTIFF, a missing file
    vrt = str(tmp_path / "d.vrt")
    gdal.Translate(vrt, p["depth"], format="VRT")
    _declines(tmp_path, RunSource(depth=vrt, speed=ps))
    _declines(tmp_path, RunSource(depth=str(tmp_path / "missing.tif"), speed=ps))
