"""GeoTIFF reading and writing with GDAL only (no qgis import).

Written rasters are tiled (256 x 256), DEFLATE-compressed, with an explicit nodata value, and are
written to a temporary name first and renamed into place, so a failed or cancelled run never
leaves a file that looks complete.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass

import numpy as np
from osgeo import gdal, gdal_array, osr

gdal.UseExceptions()

CREATION_OPTIONS = ["TILED=YES", "BLOCKXSIZE=256", "BLOCKYSIZE=256", "COMPRESS=DEFLATE",
                    "PREDICTOR=1", "BIGTIFF=IF_SAFER", "NUM_THREADS=2"]

_GDAL_TYPES = {
    np.dtype(np.uint8): gdal.GDT_Byte,
    np.dtype(np.int16): gdal.GDT_Int16,
    np.dtype(np.uint16): gdal.GDT_UInt16,
    np.dtype(np.int32): gdal.GDT_Int32,
    np.dtype(np.float32): gdal.GDT_Float32,
    np.dtype(np.float64): gdal.GDT_Float64,
}


def hex_to_rgba(colour: str):
    c = colour.lstrip("#")
    return int(c[0:2], 16), int(c[2:4], 16), int(c[4:6], 16), 255


@dataclass
class RasterInfo:
    path: str
    transform: tuple
    shape: tuple  # rows, cols
    crs_wkt: str
    nodata: float | None
    dtype: np.dtype
    bands: int


def info(path: str) -> RasterInfo:
    ds = gdal.Open(str(path))
    band = ds.GetRasterBand(1)
    nd = band.GetNoDataValue()
    dtype = np.dtype(gdal_array.GDALTypeCodeToNumericTypeCode(band.DataType))
    out = RasterInfo(str(path), tuple(ds.GetGeoTransform()), (ds.RasterYSize, ds.RasterXSize),
                     ds.GetProjection() or "", nd, dtype, ds.RasterCount)
    del band, ds
    return out


def read(path: str, band: int = 1, window=None):
    """(array, RasterInfo). ``window`` = (col0, row0, ncols, nrows) reads a part."""
    ds = gdal.Open(str(path))
    b = ds.GetRasterBand(band)
    if window is None:
        arr = b.ReadAsArray()
    else:
        arr = b.ReadAsArray(*window)
    nd = b.GetNoDataValue()
    inf = RasterInfo(str(path), tuple(ds.GetGeoTransform()), (ds.RasterYSize, ds.RasterXSize),
                     ds.GetProjection() or "", nd, arr.dtype, ds.RasterCount)
    del b, ds
    return arr, inf


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _temp_beside(path: str, suffix: str = ".tif") -> str:
    d = os.path.dirname(os.path.abspath(path)) or "."
    os.makedirs(d, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".partial-", suffix=suffix, dir=d)
    os.close(fd)
    return tmp


def write(path: str, array: np.ndarray, transform, crs_wkt: str, nodata=None, colours=None,
          category_names=None, description: str = "", metadata: dict | None = None,
          options=None) -> str:
    """Write a single-band GeoTIFF atomically. ``colours``: {value: '#RRGGBB'} colour table
    (Byte rasters). ``category_names``: list indexed by value. Returns ``path``."""
    array = np.asarray(array)
    if array.dtype not in _GDAL_TYPES:
        array = array.astype(np.float32)
    tmp = _temp_beside(path)
    try:
        drv = gdal.GetDriverByName("GTiff")
        rows, cols = array.shape
        ds = drv.Create(tmp, cols, rows, 1, _GDAL_TYPES[array.dtype], options or CREATION_OPTIONS)
        ds.SetGeoTransform(tuple(transform))
        if crs_wkt:
            srs = osr.SpatialReference()
            try:
                err = srs.ImportFromWkt(crs_wkt)
            except RuntimeError:
                err = 1
            if err != 0:
                raise ValueError(f"not a valid CRS definition: {crs_wkt[:80]!r}")
            ds.SetProjection(srs.ExportToWkt())
        band = ds.GetRasterBand(1)
        if nodata is not None:
            band.SetNoDataValue(float(nodata))
        if description:
            band.SetDescription(description)
        if colours:
            ct = gdal.ColorTable()
            for value, colour in colours.items():
                ct.SetColorEntry(int(value), hex_to_rgba(colour))
            band.SetRasterColorTable(ct)
            band.SetRasterColorInterpretation(gdal.GCI_PaletteIndex)
        if category_names:
            band.SetRasterCategoryNames(list(category_names))
            # GeoTIFF keeps category names only in a PAM .aux.xml side file (and not at all where
            # PAM is off), so they are also stored as band metadata inside the file itself.
            band.SetMetadata({f"CLASS_{i}": str(n) for i, n in enumerate(category_names) if n})
        if metadata:
            ds.SetMetadata({str(k): str(v) for k, v in metadata.items()})
        band.WriteArray(array)
        band.FlushCache()
        del band
        ds.FlushCache()
        ds = None
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600 files; give the usual permissions
        os.replace(tmp, path)
        if os.path.exists(tmp + ".aux.xml"):  # PAM side file (category names, statistics)
            os.replace(tmp + ".aux.xml", path + ".aux.xml")
        elif os.path.exists(path + ".aux.xml"):  # a stale side file of an earlier output
            os.remove(path + ".aux.xml")
    except BaseException:
        for p in (tmp, tmp + ".aux.xml"):
            if os.path.exists(p):
                os.remove(p)
        raise
    return str(path)


def scatter_to_grid(values, index, shape, fill, dtype=None) -> np.ndarray:
    """A full grid with ``values`` at flat ``index`` and ``fill`` elsewhere."""
    dtype = dtype or np.asarray(values).dtype
    grid = np.full(int(shape[0]) * int(shape[1]), fill, dtype=dtype)
    grid[index] = values
    return grid.reshape(shape)


def cell_centres(transform, shape, index):
    """(x, y) of the centres of the cells at flat ``index`` of a north-up grid."""
    rows, cols = np.divmod(np.asarray(index), shape[1])
    x0, dx, _, y0, _, dy = transform
    return x0 + (cols + 0.5) * dx, y0 + (rows + 0.5) * dy


def category_names(path: str, band: int = 1) -> list:
    """Class names of a Byte class raster written by :func:`write` (index = value)."""
    ds = gdal.Open(str(path))
    b = ds.GetRasterBand(band)
    names = list(b.GetRasterCategoryNames() or [])
    if not names:
        md = b.GetMetadata() or {}
        items = {int(k[6:]): v for k, v in md.items() if k.startswith("CLASS_") and k[6:].isdigit()}
        if items:
            names = [""] * (max(items) + 1)
            for i, v in items.items():
                names[i] = v
    del b, ds
    return names
