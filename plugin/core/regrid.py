"""Putting runs on one aligned grid, without interpolating values (pure numpy + pyproj).

Two runs on different grids or meshes are compared cell by cell on a *common grid*: a north-up grid
whose cell is the finer of the two runs' element sizes (or a size the user gives), snapped to the
finer raster's own grid when it has that cell size, and covering the wet extent of both runs.

Values are *sampled*, never interpolated, so a wet/dry edge stays where the run put it and a
velocity class is never invented between two others:

* a raster: **nearest neighbour** -- each common-grid cell takes the value of the source cell that
  contains its centre. On an aligned grid of the same cell size this is an exact re-indexing
  (:func:`reindex`); otherwise GDAL's nearest-neighbour warp does it (``gis/resample.py``).
* a mesh: **face-constant sampling at cell centres** -- each common-grid cell takes the value of the
  wet face that contains its centre (:func:`sample_faces`, a vectorised crossing-number test).
  A centre on an edge shared by two faces belongs to exactly one of them (half-open rule: the face
  to its right, or above it), so no cell is counted twice.

The area a run covers on the common grid differs from its own wet area by the cells cut by its wet
edge: at most about half a cell along every metre of wet edge, and much less on average (cut cells
are as likely to be gained as lost).

Everything here is in one projected CRS in metres; meshes in another CRS are moved with
:func:`transform_xy` (pyproj) first.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import ChannelHabitatError, as_progress
from .field import GridSupport, HydraulicField, MeshSupport

MAX_GRID_CELLS = 400_000_000  # a common grid larger than this is refused (ask for a coarser cell)


@dataclass(frozen=True)
class GridSpec:
    """A north-up grid: GDAL geotransform (x0, dx, 0, y0, 0, dy < 0) and (rows, cols)."""

    transform: tuple
    shape: tuple

    @property
    def dx(self) -> float:
        return float(self.transform[1])

    @property
    def dy(self) -> float:
        return float(self.transform[5])

    @property
    def cell_area(self) -> float:
        return abs(self.dx * self.dy)

    @property
    def n_cells(self) -> int:
        return int(self.shape[0]) * int(self.shape[1])

    @property
    def bounds(self):
        """(xmin, ymin, xmax, ymax) of the grid's outer edges."""
        x0, dx, _, y0, _, dy = self.transform
        rows, cols = self.shape
        return x0, y0 + dy * rows, x0 + dx * cols, y0

    def centres(self, index):
        """(x, y) of the centres of the cells at flat (row-major) ``index``."""
        r, c = np.divmod(np.asarray(index, dtype=np.int64), int(self.shape[1]))
        x0, dx, _, y0, _, dy = self.transform
        return x0 + (c + 0.5) * dx, y0 + (r + 0.5) * dy

    @classmethod
    def of(cls, support: GridSupport) -> GridSpec:
        return cls(tuple(float(v) for v in support.transform), tuple(int(v) for v in support.shape))


# ----------------------------------------------------------------------------------------------
# CRS helpers (pyproj)
# ----------------------------------------------------------------------------------------------

def crs_equal(a: str, b: str) -> bool:
    """True when two WKT strings describe the same CRS (axis order ignored; unknown = equal)."""
    if not a or not b or a == b:
        return True
    try:
        from pyproj import CRS

        return bool(CRS.from_wkt(a).equals(CRS.from_wkt(b), ignore_axis_order=True))
    except Exception:  # pragma: no cover - unreadable CRS: compare the text
        return a.strip() == b.strip()


def transform_xy(x, y, src_wkt: str, dst_wkt: str):
    """(x, y) moved from ``src_wkt`` to ``dst_wkt`` (pyproj, x/y order); refuses points that fail."""
    from pyproj import CRS, Transformer

    tr = Transformer.from_crs(CRS.from_wkt(src_wkt), CRS.from_wkt(dst_wkt), always_xy=True)
    tx, ty = tr.transform(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
    tx, ty = np.asarray(tx, dtype=np.float64), np.asarray(ty, dtype=np.float64)
    if not (np.all(np.isfinite(tx)) and np.all(np.isfinite(ty))):
        raise ChannelHabitatError("some coordinates cannot be reprojected between the two runs' CRS; "
                                  "reproject one run to the other's CRS first", "ALT_DEPTH")
    return tx, ty


# ----------------------------------------------------------------------------------------------
# Sizes and extents of runs
# ----------------------------------------------------------------------------------------------

def element_size_m(fld: HydraulicField) -> float:
    """Typical element size (m): the side of a grid cell (square root of its area), or the square root of
    the median wet face area of a mesh."""
    sup = fld.support
    if isinstance(sup, GridSupport):
        return math.sqrt(sup.cell_area)
    if fld.n == 0:
        raise ChannelHabitatError("the run has no wet element", "DEPTH")
    return math.sqrt(float(np.median(fld.area)))


def mesh_face_areas(node_x, node_y, face_nodes, faces) -> np.ndarray:
    """Shoelace areas of the given faces (any number of nodes, -1 padded)."""
    fn = np.asarray(face_nodes)[np.asarray(faces)]
    valid = fn >= 0
    nn = valid.sum(axis=1)
    safe = np.where(valid, fn, 0)
    col = np.arange(fn.shape[1])[None, :]
    nxt = np.take_along_axis(safe, np.where(col + 1 < nn[:, None], col + 1, 0), axis=1)
    ox, oy = node_x[safe[:, 0]][:, None], node_y[safe[:, 0]][:, None]
    cross = np.where(valid, (node_x[safe] - ox) * (node_y[nxt] - oy) - (node_x[nxt] - ox) * (node_y[safe] - oy), 0.0)
    return np.abs(cross.sum(axis=1)) / 2.0


def wet_bounds(fld: HydraulicField, node_xy=None):
    """(xmin, ymin, xmax, ymax) of the wet elements: outer edges of wet cells, or nodes of wet faces.
    ``node_xy``: mesh node coordinates to use instead of the support's (e.g. reprojected)."""
    sup = fld.support
    if isinstance(sup, GridSupport):
        spec = GridSpec.of(sup)
        r, c = np.divmod(sup.index, spec.shape[1])
        x0, dx, _, y0, _, dy = spec.transform
        xs = x0 + np.array([c.min(), c.max() + 1]) * dx
        ys = y0 + np.array([r.min(), r.max() + 1]) * dy
        return float(xs.min()), float(ys.min()), float(xs.max()), float(ys.max())
    if isinstance(sup, MeshSupport):
        nx, ny = node_xy if node_xy is not None else (sup.node_x, sup.node_y)
        fn = sup.face_nodes[sup.index]
        nodes = np.unique(fn[fn >= 0])
        return float(nx[nodes].min()), float(ny[nodes].min()), float(nx[nodes].max()), float(ny[nodes].max())
    raise TypeError("the run has no grid or mesh support")


def union_bounds(*boxes):
    return (min(b[0] for b in boxes), min(b[1] for b in boxes), max(b[2] for b in boxes), max(b[3] for b in boxes))


def boxes_overlap(a, b) -> bool:
    return a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]


def snap_grid(bounds, cell: float, origin=None, parameter: str = "RESAMPLE_CELL_SIZE") -> GridSpec:
    """The grid of ``cell`` x ``cell`` cells covering ``bounds``, its lines through ``origin`` (x, y)
    (default: multiples of the cell size), snapped outward."""
    if not cell > 0 or not math.isfinite(cell):
        raise ChannelHabitatError(f"the common grid cell size must be positive (got {cell})", parameter)
    ox, oy = origin if origin is not None else (0.0, 0.0)
    xmin, ymin, xmax, ymax = bounds
    eps = 1e-9 * cell
    c0 = math.floor((xmin - ox) / cell + eps)
    c1 = math.ceil((xmax - ox) / cell - eps)
    r_top = math.ceil((ymax - oy) / cell - eps)  # grid line index of the top edge
    r_bot = math.floor((ymin - oy) / cell + eps)
    cols, rows = max(c1 - c0, 1), max(r_top - r_bot, 1)
    if rows * cols > MAX_GRID_CELLS:
        raise ChannelHabitatError(
            f"the common grid would have {rows:,} x {cols:,} cells of {cell:g} m: too many. Give a coarser "
            f"cell size, or clip the runs to the reach first.", parameter)
    return GridSpec((ox + c0 * cell, cell, 0.0, oy + r_top * cell, 0.0, -cell), (rows, cols))


def aligned_offset(src: GridSpec, dst: GridSpec, rtol: float = 1e-6):
    """(row offset, col offset) of ``src`` in ``dst`` when both have the same cell and their lines
    coincide (so cells map one to one), else None."""
    if not (math.isclose(src.dx, dst.dx, rel_tol=rtol) and math.isclose(src.dy, dst.dy, rel_tol=rtol)):
        return None
    fc = (src.transform[0] - dst.transform[0]) / dst.dx
    fr = (src.transform[3] - dst.transform[3]) / dst.dy
    if abs(fc - round(fc)) > 1e-4 or abs(fr - round(fr)) > 1e-4:
        return None
    return int(round(fr)), int(round(fc))


def reindex(index, src: GridSpec, dst: GridSpec):
    """Flat indices in ``dst`` of the cells at flat ``index`` of an aligned ``src`` grid (-1 where a
    cell falls outside ``dst``)."""
    off = aligned_offset(src, dst)
    if off is None:
        raise ValueError("reindex needs aligned grids of the same cell size")
    r, c = np.divmod(np.asarray(index, dtype=np.int64), int(src.shape[1]))
    r = r + off[0]
    c = c + off[1]
    ok = (r >= 0) & (r < dst.shape[0]) & (c >= 0) & (c < dst.shape[1])
    return np.where(ok, r * int(dst.shape[1]) + c, -1)


# ----------------------------------------------------------------------------------------------
# Mesh faces -> grid cells
# ----------------------------------------------------------------------------------------------

def sample_faces(node_x, node_y, face_nodes, spec: GridSpec, faces=None, progress=None,
                 max_pairs: int = 2_000_000):
    """Face-constant sampling at cell centres.

    Returns ``(cells, pos)``: flat indices of the cells of ``spec`` whose centre lies in one of
    ``faces`` (default: every face) and, for each, the position in ``faces`` of the face holding it.
    Faces may have any number of nodes (``face_nodes`` padded with -1) and need not be convex. Cells
    are tested with the crossing-number rule (a ray towards +x; an edge counts when exactly one of its
    ends lies strictly above the centre and the crossing lies strictly right of it), which gives a
    centre on an edge shared by two faces to exactly one of them.
    """
    progress = as_progress(progress)
    node_x = np.asarray(node_x, dtype=np.float64)
    node_y = np.asarray(node_y, dtype=np.float64)
    fn_all = np.asarray(face_nodes)
    faces = np.arange(len(fn_all)) if faces is None else np.asarray(faces)
    x0, dx, _, y0, _, dy = spec.transform
    rows, cols = spec.shape
    # Coordinates relative to the grid origin keep the arithmetic accurate far from (0, 0).
    nx = node_x - x0
    ny = node_y - y0
    fn = fn_all[faces]
    valid = fn >= 0
    nn = valid.sum(axis=1)
    safe = np.where(valid, fn, 0)
    fx = np.where(valid, nx[safe], np.nan)
    fy = np.where(valid, ny[safe], np.nan)
    # Index range of the cell centres inside each face's bounding box (centre of col c: (c + .5) dx).
    c_lo = np.ceil(np.nanmin(fx, axis=1) / dx - 0.5).astype(np.int64)
    c_hi = np.floor(np.nanmax(fx, axis=1) / dx - 0.5).astype(np.int64)
    r_lo = np.ceil(np.nanmax(fy, axis=1) / dy - 0.5).astype(np.int64)  # dy < 0: the top is the lowest row
    r_hi = np.floor(np.nanmin(fy, axis=1) / dy - 0.5).astype(np.int64)
    c_lo, c_hi = np.maximum(c_lo, 0), np.minimum(c_hi, cols - 1)
    r_lo, r_hi = np.maximum(r_lo, 0), np.minimum(r_hi, rows - 1)
    nc = np.maximum(c_hi - c_lo + 1, 0)
    nr = np.maximum(r_hi - r_lo + 1, 0)
    count = nc * nr
    # Edge end points per face: node k -> node k+1 (wrapping inside each face's own node count).
    col = np.arange(fn.shape[1])[None, :]
    nxt = np.take_along_axis(safe, np.where(col + 1 < nn[:, None], col + 1, 0), axis=1)
    ex0, ey0 = fx, fy
    ex1, ey1 = np.where(valid, nx[nxt], np.nan), np.where(valid, ny[nxt], np.nan)
    cells_out, pos_out = [], []
    cum = np.cumsum(count)
    start = 0
    n_faces = len(faces)
    while start < n_faces:
        base = cum[start - 1] if start > 0 else 0
        stop = int(np.searchsorted(cum, base + max_pairs, side="right"))
        stop = max(stop, start + 1)
        sl = slice(start, stop)
        cnt = count[sl]
        total = int(cnt.sum())
        if total:
            f_rel = np.repeat(np.arange(stop - start), cnt)
            first = np.repeat(np.cumsum(cnt) - cnt, cnt)
            k = np.arange(total) - first
            ncf = nc[sl][f_rel]
            rr = r_lo[sl][f_rel] + k // ncf
            cc = c_lo[sl][f_rel] + k % ncf
            px = (cc + 0.5) * dx
            py = (rr + 0.5) * dy
            inside = np.zeros(total, dtype=bool)
            for j in range(fn.shape[1]):
                ax, ay = ex0[sl, j][f_rel], ey0[sl, j][f_rel]
                bx, by = ex1[sl, j][f_rel], ey1[sl, j][f_rel]
                with np.errstate(invalid="ignore", divide="ignore"):
                    straddle = (ay > py) != (by > py)
                    xint = ax + (py - ay) * (bx - ax) / (by - ay)
                    inside ^= straddle & (px < xint)
            cells_out.append(rr[inside] * cols + cc[inside])
            pos_out.append(start + f_rel[inside])
        start = stop
        progress(start / n_faces, "sampling mesh faces at grid cell centres")
    cells = np.concatenate(cells_out) if cells_out else np.zeros(0, np.int64)
    pos = np.concatenate(pos_out) if pos_out else np.zeros(0, np.int64)
    # A centre claimed twice (overlapping faces in a faulty mesh) keeps the first face.
    cells, first = np.unique(cells, return_index=True)
    return cells.astype(np.int64), pos[first].astype(np.int64)


# ----------------------------------------------------------------------------------------------
# Fields on a grid
# ----------------------------------------------------------------------------------------------

def field_on_grid(spec: GridSpec, cells, depth, speed, crs_wkt: str, wet_depth_m: float, name: str = "",
                  notes=None) -> HydraulicField:
    """A HydraulicField of the given cells of ``spec`` (values sampled there); only wet cells kept."""
    cells = np.asarray(cells, dtype=np.int64)
    depth = np.asarray(depth, dtype=np.float32)
    speed = np.asarray(speed, dtype=np.float32)
    keep = np.isfinite(depth) & (depth >= wet_depth_m) & np.isfinite(speed)
    order = np.argsort(cells[keep], kind="stable")
    idx = cells[keep][order]
    x, y = spec.centres(idx)
    return HydraulicField(x=x, y=y, area=np.full(idx.size, spec.cell_area), depth=depth[keep][order],
                          speed=speed[keep][order], crs_wkt=crs_wkt,
                          support=GridSupport(tuple(spec.transform), tuple(spec.shape), idx), name=name,
                          wet_depth_m=wet_depth_m, notes=list(notes or []))


def grid_field_to_spec(fld: HydraulicField, spec: GridSpec):
    """(cells, depth, speed) of a raster run on an *aligned* grid of the same cell (exact re-indexing)."""
    idx = reindex(fld.support.index, GridSpec.of(fld.support), spec)
    ok = idx >= 0
    return idx[ok], fld.depth[ok], fld.speed[ok]


def mesh_field_to_spec(fld: HydraulicField, spec: GridSpec, node_xy=None, progress=None):
    """(cells, depth, speed) of a mesh run on ``spec`` by face-constant sampling at cell centres (only
    the wet faces are sampled: a centre in a dry face stays dry). ``node_xy``: node coordinates in the
    grid's CRS when the mesh was reprojected."""
    sup = fld.support
    nx, ny = node_xy if node_xy is not None else (sup.node_x, sup.node_y)
    cells, pos = sample_faces(nx, ny, sup.face_nodes, spec, faces=sup.index, progress=progress)
    return cells, fld.depth[pos], fld.speed[pos]


def faces_to_grid_values(support: MeshSupport, spec: GridSpec, values: dict, node_xy=None, progress=None):
    """(cells, {name: values at cells}) of per-element arrays of a mesh field's wet faces sampled at the
    cell centres of ``spec`` (face-constant)."""
    nx, ny = node_xy if node_xy is not None else (support.node_x, support.node_y)
    cells, pos = sample_faces(nx, ny, support.face_nodes, spec, faces=support.index, progress=progress)
    return cells, {k: np.asarray(v)[pos] for k, v in values.items()}
