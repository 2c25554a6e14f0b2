"""A raster run read block by block, decoding only the blocks that can hold wet cells (GDAL, no qgis).

The runs of a scenario table are tiled, compressed GeoTIFFs in which most blocks lie on dry land.
Such blocks hold the same value everywhere (nodata), and a compressor given the same block twice
writes the same bytes twice. So the blocks of the depth raster are grouped by their compressed bytes
(read straight from the file, at the offsets GDAL reports); one block of every group of two or more
is decoded, and when it holds no wet cell (and no negative depth) none of its group does: identical
bytes decode to identical values. Only the other blocks are decoded (``Band.ReadBlock``: straight
into our buffers, not through GDAL's block cache), and the velocity raster only in the blocks that
hold wet cells.

    fld = read_raster_blocks(source, wet_depth_m)     # a HydraulicField, or None

The field is the one ``gis.runs.read_run`` gives -- the same cells in the same (row-major) order,
the same values bit for bit, x, y, area, support, name -- and it is tested to be. Whenever the
shortcut does not apply, ``None`` is returned and the caller reads the run with ``read_run``, which
then also says or refuses what needs saying: not GeoTIFFs, rasters on different grids or block
layouts, rotated or south-up rasters, a read error, negative depths, wet cells without a velocity
value, velocities out of range, a dry run. The time spent before giving up is small (the file
headers, or one decoding of the wet blocks).
"""

from __future__ import annotations

import os

import numpy as np
from osgeo import gdal

from ..core.errors import ChannelHabitatError, as_progress
from ..core.field import DEFAULT_WET_DEPTH_M, GridSupport, HydraulicField, check_values
from ..core.sources import RunSource
from .blockscan import DTYPES as _DTYPES
from .blockscan import any_negative, dry_block_groups, dry_test
from .runs import same_crs

gdal.UseExceptions()

class _Raster:
    """One single-band GeoTIFF, opened for block reads. ``close()`` frees the band before the dataset."""

    def __init__(self, path: str):
        self.path = path
        self.ds = gdal.Open(path)
        self.band = self.ds.GetRasterBand(1) if self.ds.RasterCount >= 1 else None

    def usable(self) -> bool:
        ds, b = self.ds, self.band
        return bool(b is not None and ds.GetDriver().ShortName == "GTiff" and b.DataType in _DTYPES)

    @property
    def grid(self):
        ds = self.ds
        return tuple(ds.GetGeoTransform()), (ds.RasterYSize, ds.RasterXSize), ds.GetProjection() or ""

    def close(self):
        self.band = None
        self.ds = None


def _same_grid(a: _Raster, ref: _Raster) -> bool:
    """As ``gis.runs._aligned`` decides that a raster is read as it is (no resampling)."""
    gt, shape, wkt = a.grid
    rgt, rshape, rwkt = ref.grid
    return (shape == rshape and np.allclose(gt, rgt, rtol=0, atol=1e-9 * max(1.0, abs(rgt[1])))
            and same_crs(wkt, rwkt))


def _velocity_keys(src: RunSource) -> list:
    """The velocity rasters read_raster_run reads for ``src`` (as in gis.runs.RasterRunReader)."""
    keys = [k for k in ("speed", "u", "v") if getattr(src, k)]
    if src.speed and not (src.u and src.v):
        keys = ["speed"]
    return keys


def read_raster_blocks(src: RunSource, wet_depth_m: float = DEFAULT_WET_DEPTH_M, progress=None):
    """The run of ``src`` (rasters) as ``gis.runs.read_run`` reads it, or None when this reader does not
    apply or the run needs a message or a refusal (see the module docstring). ``progress``: 0..1."""
    if src.is_mesh or not src.depth or not (src.speed or (src.u and src.v)):
        return None
    paths = {"depth": src.depth, **{k: getattr(src, k) for k in _velocity_keys(src)}}
    if any("|" in p or not os.path.isfile(p) for p in paths.values()):
        return None
    rasters = {}
    try:
        for key, path in paths.items():
            rasters[key] = _Raster(path)
        return _read(rasters, src, wet_depth_m, as_progress(progress))
    except (RuntimeError, OSError, ChannelHabitatError):
        return None  # read_run reads it again and says what is wrong
    finally:
        for r in rasters.values():
            r.close()


def _read(rasters: dict, src: RunSource, wet_depth_m: float, progress):
    dep = rasters["depth"]
    vel = {k: r for k, r in rasters.items() if k != "depth"}
    if not all(r.usable() for r in rasters.values()):
        return None
    gt, shape, crs_wkt = dep.grid
    if gt[2] != 0 or gt[4] != 0 or gt[5] > 0:
        return None
    bx, by = dep.band.GetBlockSize()
    if any(r.band.GetBlockSize() != [bx, by] or not _same_grid(r, dep) for r in vel.values()):
        return None
    rows, cols = shape
    nbx, nby = (cols + bx - 1) // bx, (rows + by - 1) // by
    dnd = dep.band.GetNoDataValue()
    dnd = dnd if dnd is not None and np.isfinite(dnd) else None
    wet = wet_depth_m
    ddtype = _DTYPES[dep.band.DataType]

    def as_f32(a):
        return a.astype(np.float32, copy=False)

    def negative(d) -> bool:
        return any_negative(d, dnd)

    buf = np.empty((by, bx), dtype=ddtype)
    dry = dry_block_groups(dep.path, dep.band, nbx, nby, dry_test(dnd, wet), buf)

    vdtype = {k: _DTYPES[r.band.DataType] for k, r in vel.items()}
    vnd = {k: r.band.GetNoDataValue() for k, r in vel.items()}
    idx_parts, row_parts, col_parts, d_parts = [], [], [], []
    v_parts = {k: [] for k in vel}
    for j in range(nby):
        progress(j / nby, "reading rasters")
        need = np.flatnonzero(~dry[j])
        if need.size == 0:
            continue
        k = need.size
        raw = np.empty((k, by, bx), dtype=ddtype)
        for w, i in enumerate(need.tolist()):
            dep.band.ReadBlock(i, j, buf_obj=raw[w])
        d = as_f32(raw)
        y0 = j * by
        if y0 + by > rows:  # edge blocks carry padding beyond the raster: never a cell
            d[:, rows - y0:, :] = np.nan
        if need[-1] == nbx - 1 and nbx * bx > cols:
            d[-1, :, cols - (nbx - 1) * bx:] = np.nan
        if negative(d):
            return None
        m = d >= wet  # +inf and a nodata value >= wet are taken out below
        # row-major order within the strip of blocks: rows, then blocks left to right, then columns
        p = np.flatnonzero(np.ascontiguousarray(m.transpose(1, 0, 2)))
        if p.size == 0:
            continue
        r = p // (k * bx)
        rem = p - r * (k * bx)
        w = rem // bx
        c = rem - w * bx
        flat_in = (w * by + r) * bx + c  # position in the (k, by, bx) block stack
        dv = d.reshape(-1)[flat_in]
        ok = np.isfinite(dv)
        if dnd is not None:
            ok &= dv != dnd
        if not ok.all():
            r, w, c, flat_in, dv = r[ok], w[ok], c[ok], flat_in[ok], dv[ok]
            if r.size == 0:
                continue
        has = np.zeros(k, dtype=bool)
        has[w] = True
        for key, ras in vel.items():
            vb = np.empty((k, by, bx), dtype=vdtype[key])
            for ww in np.flatnonzero(has).tolist():
                ras.band.ReadBlock(int(need[ww]), j, buf_obj=vb[ww])
            v_parts[key].append(as_f32(vb.reshape(-1)[flat_in]))
        rr = r.astype(np.int64) + y0
        cc = need[w].astype(np.int64) * bx + c
        row_parts.append(rr)
        col_parts.append(cc)
        idx_parts.append(rr * cols + cc)
        d_parts.append(dv)
    progress(1.0)
    if not idx_parts:
        return None  # a dry run: read_run refuses it
    rr = np.concatenate(row_parts)
    cc = np.concatenate(col_parts)
    index = np.concatenate(idx_parts)
    depth = np.concatenate(d_parts)
    vals = {k: np.concatenate(v) for k, v in v_parts.items()}
    for key, a in vals.items():  # velocity nodata or non-finite at wet cells: read_run drops and says
        nd = vnd[key]
        if not np.isfinite(a).all() or (nd is not None and np.isfinite(nd) and (a == nd).any()):
            return None
    speed = vals["speed"] if "speed" in vals else np.hypot(vals["u"], vals["v"]).astype(np.float32)
    if not np.isfinite(speed).all():
        return None
    p = src.params
    check_values(depth, speed, depth_param=p["depth"], speed_param=p["speed"] if src.speed else p["u"])
    x0, dx, _, y0, _, dy = gt
    return HydraulicField(
        x=x0 + (cc + 0.5) * dx, y=y0 + (rr + 0.5) * dy, area=np.full(index.size, abs(dx * dy)), depth=depth,
        speed=speed, crs_wkt=crs_wkt, support=GridSupport(gt, shape, index), u=vals.get("u"), v=vals.get("v"),
        name=src.label or os.path.basename(src.depth), wet_depth_m=wet_depth_m, notes=[])
