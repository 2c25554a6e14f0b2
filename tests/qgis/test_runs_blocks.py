"""gis/runs.py: velocity values read only in the raster blocks that hold wet cells equal a whole read."""

import numpy as np
import pytest
from osgeo import gdal

from plugin.gis import runs

RNG = np.random.default_rng(3)


def _tif(path, array, block=64, tiled=True):
    opts = ["COMPRESS=DEFLATE"] + (["TILED=YES", f"BLOCKXSIZE={block}", f"BLOCKYSIZE={block}"] if tiled else [])
    ds = gdal.GetDriverByName("GTiff").Create(str(path), array.shape[1], array.shape[0], 1, gdal.GDT_Float32, opts)
    ds.GetRasterBand(1).WriteArray(array)
    ds = None
    return str(path)


@pytest.mark.parametrize("tiled", [True, False])
@pytest.mark.parametrize("window", [(0, 0, 500, 300), (37, 90, 400, 150)])  # (c0, r0, ncols, nrows)
def test_values_at_wet_cells_equal_a_whole_read(tmp_path, tiled, window):
    full = RNG.uniform(0, 2, (300, 500)).astype(np.float32)
    path = _tif(tmp_path / "v.tif", full, tiled=tiled)
    c0, r0, ncols, nrows = window
    wet = np.zeros((nrows, ncols), bool)
    wet[5:20, 3:60] = True  # a few blocks: one run of blocks in two block rows
    wet[nrows - 3:, ncols - 70:ncols - 65] = True  # the last block row and column
    wet[40, 200] = True  # a single cell in its own block
    flat = np.flatnonzero(wet)
    rr, cc = np.divmod(flat, ncols)
    ds = gdal.Open(path)
    band = ds.GetRasterBand(1)
    got = runs._read_at(band, c0, r0, ncols, nrows, flat, rr, cc)
    del band, ds
    ref = full[r0:r0 + nrows, c0:c0 + ncols].ravel()[flat]
    np.testing.assert_array_equal(got, ref)
