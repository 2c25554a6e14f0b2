"""Reading one hydraulic model run into a HydraulicField (GDAL and netCDF4 only, no qgis).

A run comes from rasters (depth + speed, or depth + u and v) or from a UGRID NetCDF mesh file
(depth group + velocity vector group, or x/y groups, or a speed group, at one time step).
``RunSource`` describes where a run comes from; scenario tables are lists of RunSources.
Reading QGIS mesh layers of other formats goes through ``gis/meshlayer.py`` (needs QGIS).

Rasters are read in strips of rows so memory stays proportional to the wet cells, not the grid.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np
from osgeo import gdal, osr

from ..core.errors import ChannelHabitatError, as_progress
from ..core.field import (
    DEFAULT_WET_DEPTH_M,
    GridSupport,
    HydraulicField,
    MeshSupport,
    check_values,
    require_wet,
)
from ..core.sources import RunSource

gdal.UseExceptions()

STRIP_CELLS = 8_000_000  # cells per strip read: memory stays bounded on any grid size


def srs_from_wkt(wkt: str) -> osr.SpatialReference | None:
    if not wkt:
        return None
    s = osr.SpatialReference()
    s.ImportFromWkt(wkt)
    s.SetAxisMappingStrategy(osr.OAMS_TRADITIONAL_GIS_ORDER)
    return s


def same_crs(a: str, b: str) -> bool:
    if not a or not b or a == b:
        return True
    sa, sb = srs_from_wkt(a), srs_from_wkt(b)
    return bool(sa.IsSame(sb))


def is_geographic(wkt: str) -> bool:
    s = srs_from_wkt(wkt)
    return bool(s is not None and s.IsGeographic())


def _open(path: str, param: str):
    """Open a raster; GeoTIFFs with multi-threaded block decoding (GDAL >= 3.6, NUM_THREADS)."""
    if not path or not os.path.exists(path.split("|")[0]):
        raise ChannelHabitatError(f"raster '{path}' does not exist; give the path of an existing raster",
                                  param)
    try:
        ds = gdal.Open(str(path))
        if ds.GetDriver().ShortName == "GTiff":
            ds = gdal.OpenEx(str(path), gdal.OF_RASTER, open_options=["NUM_THREADS=ALL_CPUS"])
        return ds
    except RuntimeError as exc:
        raise ChannelHabitatError(f"cannot open raster '{path}': {exc}", param) from None


def _grid_of(ds):
    return tuple(ds.GetGeoTransform()), (ds.RasterYSize, ds.RasterXSize), ds.GetProjection() or ""


def _aligned(ds, ref_ds, param: str, ref_param: str, notes: list):
    """``ds`` on ``ref_ds``'s grid: as is when grids match, else warped (bilinear) into memory,
    with a note saying so. Different CRS are reprojected (and said)."""
    gt, shape, wkt = _grid_of(ds)
    rgt, rshape, rwkt = _grid_of(ref_ds)
    if shape == rshape and np.allclose(gt, rgt, rtol=0, atol=1e-9 * max(1.0, abs(rgt[1]))) and same_crs(wkt, rwkt):
        return ds
    if gt[2] != 0 or gt[4] != 0:
        raise ChannelHabitatError("rotated rasters are not supported; warp it north-up first "
                                  "(Raster > Projections > Warp)", param)
    what = "reprojected from its CRS to" if not same_crs(wkt, rwkt) else "resampled (bilinear) onto"
    notes.append(f"{param} was {what} the grid of {ref_param} (cell {abs(rgt[1]):g} m, "
                 f"{rshape[1]} x {rshape[0]} cells).")
    x0, dx, _, y0, _, dy = rgt
    opts = gdal.WarpOptions(format="MEM", outputBounds=(x0, y0 + dy * rshape[0], x0 + dx * rshape[1], y0),
                            width=rshape[1], height=rshape[0], dstSRS=rwkt or None,
                            srcSRS=wkt or rwkt or None, resampleAlg="bilinear",
                            outputType=gdal.GDT_Float32, dstNodata=np.nan)
    out = gdal.Warp("", ds, options=opts)
    return out


def _read_at(band, c0: int, r0: int, ncols: int, nrows: int, flat, rr, cc) -> np.ndarray:
    """float32 values of ``band`` at the cells ``flat`` (row-major in the window of ``ncols`` x
    ``nrows`` cells from column c0, row r0; ``rr``, ``cc`` = divmod(flat, ncols)).

    A tiled raster is read only in the blocks that hold one of the cells (runs of neighbouring
    blocks read at once): the dry blocks of a meandering reach's grid are never decoded. Other
    layouts (strips, or most blocks needed) are read whole."""
    bx, by = band.GetBlockSize()
    if bx >= ncols or by <= 0 or flat.size == 0:
        return band.ReadAsArray(c0, r0, ncols, nrows).astype(np.float32, copy=False).ravel()[flat]
    nbx = (c0 + ncols - 1) // bx + 1
    nby = (r0 + nrows - 1) // by + 1
    occupied = np.zeros(nby * nbx, dtype=bool)
    occupied[((rr + r0) // by) * nbx + (cc + c0) // bx] = True
    keys = np.flatnonzero(occupied)  # the blocks holding cells, in order
    br, bc = np.divmod(keys, nbx)
    n_blocks = (((r0 + nrows - 1) // by - r0 // by + 1) * ((c0 + ncols - 1) // bx - c0 // bx + 1))
    if len(keys) > 0.7 * n_blocks:
        return band.ReadAsArray(c0, r0, ncols, nrows).astype(np.float32, copy=False).ravel()[flat]
    out = np.empty(flat.size, dtype=np.float32)
    # runs of consecutive blocks in one block row, each read at once; its cells picked from it
    new_run = np.r_[True, (br[1:] != br[:-1]) | (bc[1:] != bc[:-1] + 1)]
    starts = np.flatnonzero(new_run)
    stops = np.r_[starts[1:], len(keys)] - 1
    cell_brow = (rr + r0) // by  # not decreasing: the cells are in row-major order
    for i, j in zip(starts, stops):
        y0 = max(int(br[i]) * by, r0)
        y1 = min((int(br[i]) + 1) * by, r0 + nrows)
        x0 = max(int(bc[i]) * bx, c0)
        x1 = min((int(bc[j]) + 1) * bx, c0 + ncols)
        s0, s1 = np.searchsorted(cell_brow, [br[i], br[i] + 1])
        ccs = cc[s0:s1] + c0
        m = np.flatnonzero((ccs >= x0) & (ccs < x1)) + s0
        win = band.ReadAsArray(x0, y0, x1 - x0, y1 - y0)
        out[m] = win[rr[m] + r0 - y0, cc[m] + c0 - x0]
    return out


def read_raster_run(depth: str, speed: str | None = None, u: str | None = None, v: str | None = None,
                    wet_depth_m: float = DEFAULT_WET_DEPTH_M, name: str = "", params: dict | None = None,
                    progress=None, bbox=None) -> HydraulicField:
    """A HydraulicField from rasters on (or resampled onto) the depth raster's grid."""
    reader = RasterRunReader(depth, speed, u, v, wet_depth_m, name, params, progress, bbox)
    reader.read_depth()
    return reader.read_velocity()


class RasterRunReader:
    """A raster run read in two steps: ``read_depth()`` reads the depth raster in strips and returns the
    wet cells (where they are: x, y, area, depth; speed still NaN), ``read_velocity()`` then reads the
    velocity rasters at those cells (only the blocks that hold them) and returns the run's
    HydraulicField. Between the two, an algorithm can already locate the cells along its reach.
    ``read_raster_run`` does both at once. Rasters are opened (and the inputs checked) on creation."""

    def __init__(self, depth: str, speed: str | None = None, u: str | None = None, v: str | None = None,
                 wet_depth_m: float = DEFAULT_WET_DEPTH_M, name: str = "", params: dict | None = None,
                 progress=None, bbox=None):
        p = params or RunSource().params
        self.params = p
        self.progress = as_progress(progress)
        if not depth:
            raise ChannelHabitatError("give a depth raster (or a mesh layer instead of rasters)", p["depth"])
        if not speed and not (u and v):
            raise ChannelHabitatError("give a speed raster, or both u and v velocity rasters",
                                      p["speed"])
        self.depth_path, self.speed_path = depth, speed
        self.wet_depth_m = wet_depth_m
        self.name = name or os.path.basename(depth)
        self.notes = []
        self._dds = _open(depth, p["depth"])
        self.gt, self.shape, self.crs_wkt = _grid_of(self._dds)
        if self.gt[2] != 0 or self.gt[4] != 0:
            raise ChannelHabitatError("rotated rasters are not supported; warp it north-up first", p["depth"])
        if self.gt[5] > 0:
            raise ChannelHabitatError("south-up rasters are not supported; warp the raster north-up", p["depth"])
        vel = {}
        for key, path in (("speed", speed), ("u", u), ("v", v)):
            if path:
                vel[key] = _aligned(_open(path, p[key]), self._dds, p[key], p["depth"], self.notes)
        if "speed" in vel and not (u and v):
            vel.pop("u", None)
            vel.pop("v", None)
        self._vel = vel
        rows, cols = self.shape
        r0, r1, c0, c1 = 0, rows, 0, cols
        if bbox is not None:  # (xmin, ymin, xmax, ymax) restricts the read window
            x0, dx, _, y0, _, dy = self.gt
            c0 = max(int(np.floor((bbox[0] - x0) / dx)), 0)
            c1 = min(int(np.ceil((bbox[2] - x0) / dx)), cols)
            r0 = max(int(np.floor((bbox[3] - y0) / dy)), 0)
            r1 = min(int(np.ceil((bbox[1] - y0) / dy)), rows)
        self._window = (r0, r1, c0, max(c1 - c0, 0))
        self._strips = []  # (first row, rows, wet cells' flat positions, their rows and columns in the strip)
        self._raw_min = np.inf
        self._cells = None

    def read_depth(self) -> HydraulicField:
        """The wet cells (depth finite, not nodata, >= the wet depth) with x, y, area and depth; their
        speed is NaN until :meth:`read_velocity`. Negative depths are refused here."""
        p, progress = self.params, self.progress
        r0, r1, c0, ncols = self._window
        rows, cols = self.shape
        wet_depth_m = self.wet_depth_m
        idx_parts, d_parts, row_parts, col_parts = [], [], [], []
        raw_min = np.inf
        dband = self._dds.GetRasterBand(1)
        try:
            dnd = dband.GetNoDataValue()
            strip_rows = max(256, (STRIP_CELLS // max(ncols, 1)) // 256 * 256)
            for start in range(r0, r1, strip_rows):
                progress(0.8 * (start - r0) / max(r1 - r0, 1), "reading rasters")
                n = min(strip_rows, r1 - start)
                d = dband.ReadAsArray(c0, start, ncols, n)
                d = d.astype(np.float32, copy=False)
                valid = np.isfinite(d)
                if dnd is not None and np.isfinite(dnd):
                    valid &= d != dnd
                if valid.any():
                    raw_min = min(raw_min, float(d[valid].min()))
                wet = valid & (d >= wet_depth_m)
                flat = np.flatnonzero(wet)
                if flat.size == 0:
                    continue
                rr, cc = np.divmod(flat, ncols)
                self._strips.append((start, n, flat, rr, cc))
                row_parts.append(rr + start)
                col_parts.append(cc + c0)
                idx_parts.append(row_parts[-1] * cols + col_parts[-1])
                d_parts.append(d.ravel()[flat])
                del d, valid, wet
        finally:
            del dband  # GDAL 3.6 bands do not keep their dataset alive: free them first
            self._dds = None  # done with the depth raster: its decoded blocks leave GDAL's cache now
        self._raw_min = raw_min
        index = np.concatenate(idx_parts) if idx_parts else np.zeros(0, np.int64)
        rr = np.concatenate(row_parts) if row_parts else np.zeros(0, np.int64)  # = divmod(index, cols)
        cc = np.concatenate(col_parts) if col_parts else np.zeros(0, np.int64)
        del row_parts, col_parts
        dep = np.concatenate(d_parts) if d_parts else np.zeros(0, np.float32)
        # the depth checks now (the velocity checks follow in read_velocity)
        check_values(dep, np.zeros(0, np.float32), depth_param=p["depth"],
                     raw_depth_min=raw_min if np.isfinite(raw_min) else None)
        x0, dx, _, y0, _, dy = self.gt
        self._cells = HydraulicField(
            x=x0 + (cc + 0.5) * dx, y=y0 + (rr + 0.5) * dy,
            area=np.full(index.size, abs(dx * dy)), depth=dep, speed=np.full(index.size, np.nan, np.float32),
            crs_wkt=self.crs_wkt, support=GridSupport(self.gt, self.shape, index.astype(np.int64)),
            name=self.name, wet_depth_m=wet_depth_m, notes=list(self.notes))
        return self._cells

    def read_velocity(self) -> HydraulicField:
        """The run: the wet cells with their velocities; wet cells without a velocity value (velocity
        nodata where depth is wet) are dropped, and said. Closes the rasters."""
        if self._cells is None:
            self.read_depth()
        p, progress = self.params, self.progress
        r0, r1, c0, ncols = self._window
        bands, b = {}, None
        try:
            bands = {k: ds.GetRasterBand(1) for k, ds in self._vel.items()}
            nds = {k: b.GetNoDataValue() for k, b in bands.items()}
            val_parts = {k: [] for k in bands}
            for i, (start, n, flat, rr, cc) in enumerate(self._strips):
                progress(0.8 + 0.2 * i / max(len(self._strips), 1), "reading rasters")
                for k, b in bands.items():
                    a = _read_at(b, c0, start, ncols, n, flat, rr, cc)
                    nd = nds[k]
                    if nd is not None and np.isfinite(nd):
                        a = np.where(a == nd, np.nan, a)
                    val_parts[k].append(a)
        finally:
            # GDAL 3.6 bands do not keep their dataset alive: free them first, also on an error.
            del bands, b
            self._strips = []
            self._vel = {}
            self._dds = None
        cells = self._cells
        notes = list(self.notes)
        vals = {k: (np.concatenate(v) if v else np.zeros(0, np.float32)) for k, v in val_parts.items()}
        if "speed" in vals:
            spd = vals["speed"]
        else:
            spd = np.hypot(vals["u"], vals["v"]).astype(np.float32)
        index, x, y, area, dep = cells.support.index, cells.x, cells.y, cells.area, cells.depth
        # Wet cells without a velocity value (velocity nodata where depth is wet) are dropped, counted.
        ok = np.isfinite(spd)
        for k in ("u", "v"):
            if k in vals:
                ok &= np.isfinite(vals[k])
        if not ok.all():
            notes.append(f"{int((~ok).sum())} wet cells had no velocity value and were left out.")
            index, x, y, area, dep, spd = index[ok], x[ok], y[ok], area[ok], dep[ok], spd[ok]
            vals = {k: a[ok] for k, a in vals.items()}
        check_values(dep, spd, depth_param=p["depth"], speed_param=p["speed"] if self.speed_path else p["u"],
                     raw_depth_min=self._raw_min if np.isfinite(self._raw_min) else None)
        fld = HydraulicField(
            x=x, y=y, area=area, depth=dep, speed=spd, crs_wkt=self.crs_wkt,
            support=GridSupport(self.gt, self.shape, index), u=vals.get("u"), v=vals.get("v"),
            name=self.name, wet_depth_m=self.wet_depth_m, notes=notes)
        progress(1.0)
        return fld


# ------------------------------------------------------------------------------------------
# UGRID NetCDF meshes (fast path: netCDF4, arrays in milliseconds)
# ------------------------------------------------------------------------------------------

@dataclass
class UgridMesh:
    path: str
    node_x: np.ndarray
    node_y: np.ndarray
    face_nodes: np.ndarray  # (n_faces, max_nodes), 0-based, -1 padded
    crs_wkt: str
    face_x: np.ndarray = None
    face_y: np.ndarray = None
    face_area: np.ndarray = None
    groups: dict = field(default_factory=dict)  # group name -> GroupInfo


@dataclass
class GroupInfo:
    name: str
    location: str  # 'face' or 'node'
    variables: tuple  # one (scalar) or two (vector x, y) variable names
    n_times: int


def face_geometry(node_x, node_y, face_nodes):
    """Centroid (x, y) and area of every polygon face (shoelace, any number of nodes).

    Works column by column of ``face_nodes`` (a few columns, millions of faces): coordinates are
    taken relative to each face's first node for accuracy; a face's last valid node wraps to its
    first."""
    fn = np.asarray(face_nodes)
    n_faces, m = fn.shape
    valid = [fn[:, k] >= 0 for k in range(m)]
    first = fn[:, 0]
    ox, oy = node_x[first], node_y[first]
    xs, ys = [], []
    for k in range(m):
        idx = np.where(valid[k], fn[:, k], first) if k else first
        xs.append(node_x[idx] - ox)
        ys.append(node_y[idx] - oy)
    a2 = np.zeros(n_faces)
    cx = np.zeros(n_faces)
    cy = np.zeros(n_faces)
    for k in range(m):
        if k + 1 < m:  # next node: column k+1 where it is valid, else back to the first node
            x1 = np.where(valid[k + 1], xs[k + 1], xs[0])
            y1 = np.where(valid[k + 1], ys[k + 1], ys[0])
        else:
            x1, y1 = xs[0], ys[0]
        cross = xs[k] * y1 - x1 * ys[k]
        if k:  # invalid columns repeat the first node: their cross product is 0 already
            cross = np.where(valid[k], cross, 0.0)
        a2 += cross
        cx += (xs[k] + x1) * cross
        cy += (ys[k] + y1) * cross
    with np.errstate(invalid="ignore", divide="ignore"):
        fx = ox + cx / (3.0 * a2)
        fy = oy + cy / (3.0 * a2)
    return fx, fy, np.abs(a2) / 2.0


def _crs_of_ugrid(ds, x_var) -> str:
    gm = getattr(x_var, "grid_mapping", None)
    if gm and gm in ds.variables:
        v = ds.variables[gm]
        for attr in ("epsg", "EPSG_code", "epsg_code"):
            code = getattr(v, attr, None)
            if code is not None:
                try:
                    s = osr.SpatialReference()
                    s.ImportFromEPSG(int(str(code).replace("EPSG:", "")))
                    return s.ExportToWkt()
                except (ValueError, RuntimeError):
                    pass
        wkt = getattr(v, "crs_wkt", None) or getattr(v, "spatial_ref", None)
        if wkt:
            return str(wkt)
    return ""


_MESH_CACHE: dict = {}


def open_ugrid(path: str, param: str = "MESH") -> UgridMesh:
    """Mesh topology and the list of dataset groups of a UGRID-1.0 NetCDF file (cached by path
    and modification time)."""
    import netCDF4

    if not os.path.exists(path):
        raise ChannelHabitatError(f"mesh file '{path}' does not exist", param)
    key = (os.path.abspath(path), os.path.getmtime(path))
    if key in _MESH_CACHE:
        return _MESH_CACHE[key]
    with netCDF4.Dataset(path) as ds:
        ds.set_auto_mask(False)
        topo = None
        for var in ds.variables.values():
            if getattr(var, "cf_role", "") == "mesh_topology" and int(getattr(var, "topology_dimension", 2)) == 2:
                topo = var
                break
        if topo is None:
            raise ChannelHabitatError(f"'{path}' has no 2D UGRID mesh_topology variable", param)
        xname, yname = topo.node_coordinates.split()[:2]
        xv, yv = ds.variables[xname], ds.variables[yname]
        node_x = np.asarray(xv[:], dtype=np.float64)
        node_y = np.asarray(yv[:], dtype=np.float64)
        fv = ds.variables[topo.face_node_connectivity]
        fn = np.asarray(fv[:]).astype(np.int64)
        start = int(getattr(fv, "start_index", 0))
        fill = getattr(fv, "_FillValue", None)
        invalid = fn < start
        if fill is not None:
            invalid |= fn == int(fill)
        fn = np.where(invalid, -1, fn - start)
        face_dim = fv.dimensions[0]
        node_dim = xv.dimensions[0]
        crs = _crs_of_ugrid(ds, xv)
        groups = {}
        pending = {}
        coordinate_vars = {xname, yname}
        for attr in ("face_coordinates", "edge_coordinates", "node_coordinates"):
            coordinate_vars.update(str(getattr(topo, attr, "")).split())
        for name, var in ds.variables.items():
            if getattr(var, "mesh", None) != topo.name or name in coordinate_vars:
                continue
            loc = getattr(var, "location", "")
            if loc not in ("face", "node"):
                continue
            spatial = face_dim if loc == "face" else node_dim
            if spatial not in var.dimensions:
                continue
            nt = 1
            for d in var.dimensions:
                if d != spatial:
                    nt *= len(ds.dimensions[d])
            long_name = str(getattr(var, "long_name", name))
            low = long_name.lower()
            for suffix, comp in ((", x-component", 0), (", y-component", 1)):
                if low.endswith(suffix):
                    base = long_name[: -len(suffix)]
                    pending.setdefault(base, [None, None, loc, nt])[comp] = name
                    break
            else:
                groups[long_name] = GroupInfo(long_name, loc, (name,), nt)
        for base, (xn, yn, loc, nt) in pending.items():
            if xn and yn:
                groups[base] = GroupInfo(base, loc, (xn, yn), nt)
    mesh = UgridMesh(path, node_x, node_y, fn, crs, groups=groups)
    mesh.face_x, mesh.face_y, mesh.face_area = face_geometry(node_x, node_y, fn)
    _MESH_CACHE.clear()
    _MESH_CACHE[key] = mesh
    return mesh


def _read_group(path: str, mesh: UgridMesh, group: GroupInfo, time_index: int, param: str):
    import netCDF4

    out = []
    with netCDF4.Dataset(path) as ds:
        ds.set_auto_mask(False)
        for vname in group.variables:
            var = ds.variables[vname]
            nd = len(mesh.face_nodes) if group.location == "face" else len(mesh.node_x)
            if var.ndim == 1:
                a = np.asarray(var[:], dtype=np.float64)
            else:
                nt = group.n_times
                t = time_index if time_index >= 0 else nt + time_index
                if not 0 <= t < nt:
                    raise ChannelHabitatError(
                        f"time-step index {time_index} is outside the {nt} steps of group "
                        f"'{group.name}' (use 0..{nt - 1}, or -1 for the last)", "MESH_TIME_INDEX")
                a = np.asarray(var[t], dtype=np.float64).reshape(-1)
            fill = getattr(var, "_FillValue", None)
            if fill is not None:
                a = np.where(a == fill, np.nan, a)
            a = np.where(np.abs(a) > 1e30, np.nan, a)
            if a.size != nd:
                raise ChannelHabitatError(f"group '{group.name}' has {a.size} values, expected {nd}", param)
            if group.location == "node":  # vertex-based: average the face's nodes
                fn = mesh.face_nodes
                valid = fn >= 0
                vals = np.where(valid, a[np.where(valid, fn, 0)], 0.0)
                a = vals.sum(axis=1) / valid.sum(axis=1)
            out.append(a)
    return out


def find_group(mesh: UgridMesh, name: str | None, kind: str, param: str) -> GroupInfo:
    """The group called ``name``; without a name, the first whose name contains ``kind``."""
    if name:
        if name in mesh.groups:
            return mesh.groups[name]
        low = {k.lower(): k for k in mesh.groups}
        if name.lower() in low:
            return mesh.groups[low[name.lower()]]
        raise ChannelHabitatError(
            f"the mesh has no dataset group '{name}'; its groups are: {', '.join(sorted(mesh.groups))}",
            param)
    words = {"depth": ("depth",), "velocity": ("velocity", "speed", "current")}[kind]
    for gname in mesh.groups:
        if any(w in gname.lower() for w in words):
            return mesh.groups[gname]
    raise ChannelHabitatError(
        f"no {kind} dataset group found automatically; name one (groups: {', '.join(sorted(mesh.groups))})",
        param)


def read_mesh_run(src: RunSource, wet_depth_m: float = DEFAULT_WET_DEPTH_M, progress=None) -> HydraulicField:
    """A HydraulicField from a UGRID NetCDF file: face values as stored (node values averaged)."""
    p = src.params
    progress = as_progress(progress)
    mesh = open_ugrid(src.mesh, p["mesh"])
    progress(0.3, "reading mesh datasets")
    dg = find_group(mesh, src.depth_group, "depth", p["depth_group"])
    depth = _read_group(src.mesh, mesh, dg, src.time_index, p["depth_group"])[0]
    u = v = None
    if src.u_group and src.v_group:
        u = _read_group(src.mesh, mesh, find_group(mesh, src.u_group, "velocity", p["velocity_group"]),
                        src.time_index, p["velocity_group"])[0]
        v = _read_group(src.mesh, mesh, find_group(mesh, src.v_group, "velocity", p["velocity_group"]),
                        src.time_index, p["velocity_group"])[0]
        speed = np.hypot(u, v)
    else:
        vg = find_group(mesh, src.velocity_group, "velocity", p["velocity_group"])
        comps = _read_group(src.mesh, mesh, vg, src.time_index, p["velocity_group"])
        if len(comps) == 2:
            u, v = comps
            speed = np.hypot(u, v)
        else:
            speed = comps[0]
    crs = src.mesh_crs_wkt or mesh.crs_wkt
    return field_from_faces(mesh.node_x, mesh.node_y, mesh.face_nodes, mesh.face_x, mesh.face_y,
                            mesh.face_area, depth, speed, u, v, crs, wet_depth_m,
                            name=src.label or os.path.basename(src.mesh), params=p)


def field_from_faces(node_x, node_y, face_nodes, face_x, face_y, face_area, depth, speed, u, v,
                     crs_wkt, wet_depth_m, name="", params=None) -> HydraulicField:
    p = params or RunSource().params
    finite = np.isfinite(depth)
    raw_min = float(depth[finite].min()) if finite.any() else None
    wet = finite & (depth >= wet_depth_m) & np.isfinite(speed)
    idx = np.flatnonzero(wet)
    dep = depth[idx].astype(np.float32)
    spd = speed[idx].astype(np.float32)
    check_values(dep, spd, depth_param=p["depth_group"], speed_param=p["velocity_group"],
                 raw_depth_min=raw_min)
    return HydraulicField(
        x=face_x[idx], y=face_y[idx], area=face_area[idx], depth=dep, speed=spd, crs_wkt=crs_wkt,
        support=MeshSupport(node_x, node_y, face_nodes, idx),
        u=None if u is None else u[idx].astype(np.float32),
        v=None if v is None else v[idx].astype(np.float32), name=name, wet_depth_m=wet_depth_m)


def read_run(src: RunSource, wet_depth_m: float = DEFAULT_WET_DEPTH_M, progress=None,
             require: bool = True) -> HydraulicField:
    """Read a run from its source (rasters or a UGRID file)."""
    if src.is_mesh:
        fld = read_mesh_run(src, wet_depth_m, progress)
    else:
        fld = read_raster_run(src.depth, src.speed, src.u, src.v, wet_depth_m, src.label,
                              src.params, progress)
    if require:
        require_wet(fld, src.params["depth_group" if src.is_mesh else "depth"])
    return fld
