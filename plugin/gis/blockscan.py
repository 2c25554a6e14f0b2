"""Dry blocks of a tiled depth raster, found without decoding them (GDAL, no qgis).

A river grid is mostly dry land, and a compressor given the same block twice writes the same bytes
twice: the dry blocks of a depth raster (nodata everywhere) are identical in the file. So blocks are
grouped by their compressed bytes (read straight from the file at the offsets GDAL reports), one
block of every group of two or more is decoded, and when it holds no wet cell (and no clearly negative
depth, which the reader must see to refuse it) none of its group does: identical bytes decode to
identical values.

    dry = dry_block_groups(path, band, nbx, nby, dry_test(nodata, wet_depth_m), buf)

Used by ``gis/runblocks.py`` (the scenario runner's reader). The plain strip reader of ``gis/runs.py``
does not use it: there, skipping the dry blocks saved under 10 % of the depth read (dry blocks of
nodata decompress quickly), not worth a second code path.
"""

from __future__ import annotations

import numpy as np
from osgeo import gdal

gdal.UseExceptions()

NEGATIVE_DEPTH_M = -1e-3  # depths below this are refused by core.field.check_values: never skipped
DTYPES = {gdal.GDT_Float32: np.float32, gdal.GDT_Float64: np.float64, gdal.GDT_Int16: np.int16,
          gdal.GDT_UInt16: np.uint16, gdal.GDT_Int32: np.int32, gdal.GDT_UInt32: np.uint32,
          gdal.GDT_Byte: np.uint8}


def any_negative(d: np.ndarray, nodata) -> bool:
    """Any valid depth below NEGATIVE_DEPTH_M (the nodata value and -inf are not valid depths)."""
    n = np.count_nonzero(d < NEGATIVE_DEPTH_M)
    if n == 0:
        return False
    if nodata is not None and nodata < NEGATIVE_DEPTH_M:
        n -= np.count_nonzero(d == nodata)
    if n > 0:
        n -= np.count_nonzero(d == -np.inf)
    return n > 0


def dry_test(nodata, wet_depth_m: float):
    """``is_dry(block)``: no wet cell (finite, not nodata, >= the wet depth) and no negative depth."""

    def is_dry(block) -> bool:
        d = block.astype(np.float32, copy=False)
        w = d >= wet_depth_m
        if w.any():
            w &= np.isfinite(d)
            if nodata is not None:
                w &= d != nodata
            if w.any():
                return False
        return not any_negative(d, nodata)

    return is_dry


def dry_block_groups(path: str, band, nbx: int, nby: int, is_dry, buf: np.ndarray) -> np.ndarray:
    """(nby, nbx) bool: blocks known to hold only dry cells, found without decoding them.

    Blocks with identical compressed bytes (groups of two or more) decode to identical values; one of
    each group is decoded into ``buf`` and ``is_dry(values)`` says whether the whole group is dry. Blocks
    whose place in the file GDAL does not report are never skipped."""
    offsets = np.zeros((nby, nbx), np.int64)
    sizes = np.full((nby, nbx), -1, np.int64)
    for j in range(nby):
        for i in range(nbx):
            off = band.GetMetadataItem(f"BLOCK_OFFSET_{i}_{j}", "TIFF")
            size = band.GetMetadataItem(f"BLOCK_SIZE_{i}_{j}", "TIFF")
            if off is not None and size is not None:
                offsets[j, i], sizes[j, i] = int(off), int(size)
    dry = np.zeros((nby, nbx), dtype=bool)
    values, counts = np.unique(sizes[sizes >= 0], return_counts=True)
    if not (counts >= 2).any():
        return dry
    with open(path, "rb") as fh:
        for size in values[counts >= 2].tolist():
            groups: dict = {}
            for j, i in zip(*np.nonzero(sizes == size)):
                fh.seek(int(offsets[j, i]))
                groups.setdefault(fh.read(size), []).append((int(j), int(i)))
            for members in groups.values():
                if len(members) < 2:
                    continue
                j, i = members[0]
                band.ReadBlock(i, j, buf_obj=buf)
                if is_dry(buf):
                    for j, i in members:
                        dry[j, i] = True
    return dry
