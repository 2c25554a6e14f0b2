"""Bank vegetation against hydraulic runs: wetted area, depth, and the water beside each stand.

Definitions (docs/algorithms/vegetationoverlay.md repeats them for users)
-------------------------------------------------------------------------
*Stand*: one vegetation polygon (Polygon or MultiPolygon, holes allowed), in the run's projected
CRS. *Element*: a raster cell (its square) or a mesh face (its polygon). *Wet element*: depth
finite and >= the wet-depth threshold (the HydraulicField keeps only those).

Wetted area
    Area of (stand ∩ union of wet elements). Exact: every element polygon that meets the stand is
    intersected with it (GEOS through shapely), once per grid or mesh geometry; a run then sums
    the intersection areas ``a_i`` of its wet elements. Elements the stand covers completely are
    found without an intersection (a quadtree over the grid window, or an STRtree over mesh faces).
Depth over the wetted area
    Mean: sum(a_i d_i) / sum(a_i) (area-weighted); max: the largest d_i among wet elements with
    a_i > 0. No value (NaN) where the stand is dry.
Channel-facing edge (distance D = ``edge_distance_m``)
    The part of the stand's boundary (outer ring and the rings of its holes) that lies within D
    metres of a wet element, the distance measured to the element's polygon (0 where the boundary
    runs through water). Each part takes the class of its nearest wet element ("unclassified" for
    wet elements no class row matched). Computed on the boundary cut into pieces no longer than
    ``step`` (default a quarter of the element size, at most D / 4): a piece belongs to the edge,
    and takes its class, by its midpoint. Lengths are therefore exact except within ``step`` of
    each end of a stretch of edge and of each change of class.
Community summary
    Per community and run: number of stands, stand area, wetted area and percentage, stands with
    any wetted area, area-weighted mean depth and max depth over the wetted parts, boundary
    length, channel-facing edge length in total and beside each class (m and % of the edge).
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass, field

import numpy as np
import shapely

from .errors import ChannelHabitatError, as_progress
from .field import GridSupport, HydraulicField, MeshSupport
from .stats import field_key

DEFAULT_EDGE_DISTANCE_M = 10.0
CLIP_BLOCK = 8  # quadtree blocks of this many cells (or fewer) carry the polygon clipped to them
UNCLASSIFIED = "unclassified"


# --------------------------------------------------------------------------------------------
# Stands
# --------------------------------------------------------------------------------------------

@dataclass
class Stands:
    """The vegetation polygons: shapely geometries with an id and a community each."""

    geometries: np.ndarray  # shapely Polygon/MultiPolygon objects
    stand_id: np.ndarray  # int64
    community: list
    notes: list = field(default_factory=list)

    @property
    def n(self) -> int:
        return len(self.geometries)


def make_stands(geometries, stand_ids=None, communities=None, parameter: str = "VEGETATION") -> Stands:
    """Validate vegetation polygons. Invalid geometries are repaired (shapely.make_valid, polygonal
    parts kept) and counted in ``notes``; empty or non-polygonal ones are refused."""
    geoms = np.asarray(list(geometries), dtype=object)
    n = len(geoms)
    if n == 0:
        raise ChannelHabitatError("the vegetation layer has no polygons", parameter)
    notes = []
    ok_type = np.array([g is not None and g.geom_type in ("Polygon", "MultiPolygon") for g in geoms])
    if not ok_type.all():
        bad = int(np.flatnonzero(~ok_type)[0])
        raise ChannelHabitatError(f"vegetation feature {bad + 1} is not a polygon; give a polygon layer", parameter)
    empty = shapely.is_empty(geoms)
    if empty.any():
        raise ChannelHabitatError(f"{int(empty.sum())} vegetation polygon(s) are empty; remove them first",
                                  parameter)
    invalid = ~shapely.is_valid(geoms)
    if invalid.any():
        fixed = []
        for g in geoms[invalid]:
            parts = [p for p in shapely.get_parts(shapely.make_valid(g)) if p.geom_type in ("Polygon", "MultiPolygon")]
            fixed.append(shapely.union_all(parts) if parts else shapely.Polygon())
        geoms[invalid] = fixed
        notes.append(f"{int(invalid.sum())} invalid vegetation polygon(s) were repaired for the calculation "
                     "(make_valid; the layer itself is unchanged).")
        if shapely.is_empty(geoms).any():
            raise ChannelHabitatError("a vegetation polygon has no area left after repairing it; fix the "
                                      "layer's geometries (Vector > Geometry tools > Fix geometries)", parameter)
    ids = np.arange(1, n + 1, dtype=np.int64) if stand_ids is None else np.asarray(stand_ids, dtype=np.int64)
    comm = ["" for _ in range(n)] if communities is None else ["" if c is None else str(c) for c in communities]
    if len(ids) != n or len(comm) != n:
        raise ValueError("stand ids and communities must match the geometries")
    return Stands(geoms, ids, comm, notes)


# --------------------------------------------------------------------------------------------
# Element polygons of a grid or mesh
# --------------------------------------------------------------------------------------------

class GridElements:
    """Cells of a north-up grid; element id = flat (row-major) index."""

    def __init__(self, transform, shape):
        self.x0, self.dx, _, self.y0, _, self.dy = (float(v) for v in transform)
        self.rows, self.cols = int(shape[0]), int(shape[1])
        self.size = min(abs(self.dx), abs(self.dy))
        self.cell_area = abs(self.dx * self.dy)

    def _boxes(self, r0, r1, c0, c1):
        xa, xb = self.x0 + c0 * self.dx, self.x0 + c1 * self.dx
        ya, yb = self.y0 + r0 * self.dy, self.y0 + r1 * self.dy
        return shapely.box(np.minimum(xa, xb), np.minimum(ya, yb), np.maximum(xa, xb), np.maximum(ya, yb))

    def polygons(self, ids) -> np.ndarray:
        r, c = np.divmod(np.asarray(ids, dtype=np.int64), self.cols)
        return self._boxes(r, r + 1, c, c + 1)

    def _window(self, bounds):
        xmin, ymin, xmax, ymax = bounds
        ca = (xmin - self.x0) / self.dx
        cb = (xmax - self.x0) / self.dx
        ra = (ymax - self.y0) / self.dy
        rb = (ymin - self.y0) / self.dy
        c0 = max(int(math.floor(min(ca, cb))), 0)
        c1 = min(int(math.ceil(max(ca, cb))), self.cols)
        r0 = max(int(math.floor(min(ra, rb))), 0)
        r1 = min(int(math.ceil(max(ra, rb))), self.rows)
        return r0, r1, c0, c1

    def overlap(self, geom, areas: bool = True):
        """(element ids, intersection areas) of the cells that meet ``geom`` with positive area.

        A quadtree over the window of cells: blocks the polygon covers count whole, blocks it
        misses are dropped, the rest are split until single cells, which are intersected. With
        ``areas=False`` single cells are only tested (every cell that meets ``geom``; areas NaN)."""
        r0, r1, c0, c1 = self._window(geom.bounds)
        if r1 <= r0 or c1 <= c0:
            return np.zeros(0, np.int64), np.zeros(0)
        shapely.prepare(geom)
        size = 1 << int(math.ceil(math.log2(max(r1 - r0, c1 - c0, 1))))
        br = np.array([r0], dtype=np.int64)
        bc = np.array([c0], dtype=np.int64)
        ids_parts, area_parts = [], []
        part = None  # per block: geom clipped to the block (from CLIP_BLOCK cells down), for cheap cell cuts
        while True:
            rb1 = np.minimum(br + size, r1)
            cb1 = np.minimum(bc + size, c1)
            keep = (rb1 > br) & (cb1 > bc)
            br, bc, rb1, cb1 = br[keep], bc[keep], rb1[keep], cb1[keep]
            if part is not None:
                part = part[keep]
            if br.size == 0:
                break
            boxes = self._boxes(br, rb1, bc, cb1)
            if size == 1:
                if areas:
                    inter = shapely.area(shapely.intersection(boxes, geom if part is None else part))
                    pos = inter > 0
                else:
                    pos = shapely.intersects(geom, boxes)
                    inter = np.full(pos.shape, np.nan)
                ids_parts.append(br[pos] * self.cols + bc[pos])
                area_parts.append(np.minimum(inter[pos], self.cell_area))
                break
            inside = shapely.covers(geom, boxes)
            touching = ~inside & shapely.intersects(geom, boxes)
            if inside.any():
                ids = _block_cells(br[inside], rb1[inside], bc[inside], cb1[inside], self.cols)
                ids_parts.append(ids)
                area_parts.append(np.full(ids.size, self.cell_area))
            if areas and part is None and size <= CLIP_BLOCK:
                part = shapely.intersection(boxes[touching], geom)
            elif part is not None:
                part = part[touching]
            half = size // 2
            tr, tc = br[touching], bc[touching]
            br = np.concatenate([tr, tr, tr + half, tr + half])
            bc = np.concatenate([tc, tc + half, tc, tc + half])
            if part is not None:
                part = np.concatenate([part, part, part, part])
            size = half
        shapely.destroy_prepared(geom)
        if not ids_parts:
            return np.zeros(0, np.int64), np.zeros(0)
        ids = np.concatenate(ids_parts)
        area = np.concatenate(area_parts)
        order = np.argsort(ids, kind="stable")
        return ids[order], area[order]


def _block_cells(r0, r1, c0, c1, ncols):
    """Flat ids of every cell of the blocks [r0, r1) x [c0, c1)."""
    nr, nc = r1 - r0, c1 - c0
    n = nr * nc
    blk = np.repeat(np.arange(len(n)), n)
    local = np.arange(int(n.sum())) - np.repeat(np.cumsum(n) - n, n)
    rr = r0[blk] + local // nc[blk]
    cc = c0[blk] + local % nc[blk]
    return rr * ncols + cc


class MeshElements:
    """Faces of an unstructured mesh; element id = face number."""

    def __init__(self, node_x, node_y, face_nodes):
        self.node_x = np.asarray(node_x, dtype=np.float64)
        self.node_y = np.asarray(node_y, dtype=np.float64)
        self.face_nodes = np.asarray(face_nodes, dtype=np.int64)
        valid = self.face_nodes >= 0
        safe = np.where(valid, self.face_nodes, 0)
        fx = np.where(valid, self.node_x[safe], np.nan)
        fy = np.where(valid, self.node_y[safe], np.nan)
        self.n_nodes = valid.sum(axis=1)
        self._tree = shapely.STRtree(shapely.box(np.nanmin(fx, axis=1), np.nanmin(fy, axis=1),
                                                 np.nanmax(fx, axis=1), np.nanmax(fy, axis=1)))
        ext = np.nanmax(fx, axis=1) - np.nanmin(fx, axis=1)
        self.size = float(np.median(ext)) if len(ext) else 1.0

    def polygons(self, ids) -> np.ndarray:
        ids = np.asarray(ids, dtype=np.int64)
        out = np.empty(len(ids), dtype=object)
        k_of = self.n_nodes[ids]
        for k in np.unique(k_of):
            sel = np.flatnonzero(k_of == k)
            nodes = self.face_nodes[ids[sel], :k]
            coords = np.stack([self.node_x[nodes], self.node_y[nodes]], axis=-1)
            out[sel] = shapely.polygons(coords)
        return out

    def candidates(self, geom) -> np.ndarray:
        return np.sort(self._tree.query(geom, predicate="intersects")).astype(np.int64)

    def overlap(self, geom, areas: bool = True):
        ids = self.candidates(geom)
        if ids.size == 0:
            return ids, np.zeros(0)
        polys = self.polygons(ids)
        shapely.prepare(geom)
        if not areas:
            hit = shapely.intersects(geom, polys)
            shapely.destroy_prepared(geom)
            return ids[hit], np.full(int(hit.sum()), np.nan)
        inside = shapely.covers(geom, polys)
        area = shapely.area(polys)
        part = ~inside
        if part.any():
            area[part] = shapely.area(shapely.intersection(polys[part], geom))
        shapely.destroy_prepared(geom)
        pos = area > 0
        return ids[pos], area[pos]


def elements_of(support):
    if isinstance(support, GridSupport):
        return GridElements(support.transform, support.shape)
    if isinstance(support, MeshSupport):
        return MeshElements(support.node_x, support.node_y, support.face_nodes)
    raise ChannelHabitatError("the run has no grid or mesh geometry (support) to overlay vegetation on")


# --------------------------------------------------------------------------------------------
# Boundary pieces
# --------------------------------------------------------------------------------------------

@dataclass
class Pieces:
    """The stands' boundaries cut into short pieces, in ring order."""

    stand: np.ndarray  # stand index of each piece
    ring: np.ndarray  # global ring number of each piece
    x0: np.ndarray
    y0: np.ndarray
    x1: np.ndarray
    y1: np.ndarray
    length: np.ndarray

    @property
    def midpoints(self):
        return shapely.points(0.5 * (self.x0 + self.x1), 0.5 * (self.y0 + self.y1))


def boundary_pieces(geoms, step: float) -> Pieces:
    """Every ring of every polygon cut into pieces no longer than ``step`` (original vertices kept)."""
    parts, part_of = shapely.get_parts(np.asarray(geoms, dtype=object), return_index=True)
    rings, ring_of = shapely.get_rings(parts, return_index=True)
    coords, cidx = shapely.get_coordinates(rings, return_index=True)
    # consecutive vertex pairs inside the same ring (rings are closed: last == first)
    same = cidx[1:] == cidx[:-1]
    a = coords[:-1][same]
    b = coords[1:][same]
    rid = cidx[:-1][same]
    seg = np.hypot(b[:, 0] - a[:, 0], b[:, 1] - a[:, 1])
    nz = seg > 0
    a, b, rid, seg = a[nz], b[nz], rid[nz], seg[nz]
    nsub = np.maximum(np.ceil(seg / step - 1e-9).astype(np.int64), 1)
    k = np.repeat(np.arange(len(seg)), nsub)
    j = np.arange(int(nsub.sum())) - np.repeat(np.cumsum(nsub) - nsub, nsub)
    t0 = j / nsub[k]
    t1 = (j + 1) / nsub[k]
    dx, dy = b[k, 0] - a[k, 0], b[k, 1] - a[k, 1]
    stand = part_of[ring_of[rid[k]]]
    return Pieces(stand.astype(np.int64), rid[k].astype(np.int64), a[k, 0] + t0 * dx, a[k, 1] + t0 * dy,
                  a[k, 0] + t1 * dx, a[k, 1] + t1 * dy, seg[k] / nsub[k])


# --------------------------------------------------------------------------------------------
# The overlay
# --------------------------------------------------------------------------------------------

@dataclass
class _GeometryCache:
    elements: object
    pair_stand: np.ndarray
    pair_elem: np.ndarray
    pair_area: np.ndarray
    near_ids: np.ndarray
    near_polys: np.ndarray
    pieces: Pieces
    step: float


@dataclass
class StandResult:
    """The overlay of one run: per-stand columns, the class names used, and edge stretches."""

    columns: dict
    class_names: list
    edges: list  # dicts: stand index, class, length_m, geometry (LineString)


def _lookup(index: np.ndarray, ids: np.ndarray) -> np.ndarray:
    """Position of each id in ``index`` (the run's wet elements), -1 where absent (dry)."""
    index = np.asarray(index)
    if index.size == 0:
        return np.full(len(ids), -1, dtype=np.int64)
    if np.all(index[1:] >= index[:-1]):
        order = None
        srt = index
    else:
        order = np.argsort(index, kind="stable")
        srt = index[order]
    p = np.searchsorted(srt, ids)
    p = np.clip(p, 0, len(srt) - 1)
    hit = srt[p] == ids
    if order is not None:
        p = order[p]
    return np.where(hit, p, -1).astype(np.int64)


class VegetationOverlay:
    """Overlay of a set of stands on runs. Element overlaps are computed once per grid/mesh
    geometry (all regimes on one grid pay once) and reused for every run."""

    def __init__(self, stands: Stands, edge_distance_m: float = DEFAULT_EDGE_DISTANCE_M,
                 step_m: float | None = None):
        if not edge_distance_m > 0:
            raise ChannelHabitatError("the edge distance must be positive (metres)", "EDGE_DISTANCE")
        if step_m is not None and not step_m > 0:
            raise ChannelHabitatError("the edge step must be positive (metres), or 0 for automatic", "EDGE_STEP")
        self.stands = stands
        self.distance = float(edge_distance_m)
        self.step_m = step_m
        self._cache: dict = {}
        self._lock = threading.Lock()  # runs may come from several threads (gis/scenariorun)
        self.area_m2 = shapely.area(stands.geometries)
        self.perimeter_m = shapely.length(shapely.boundary(stands.geometries))

    def _geometry(self, support, progress) -> _GeometryCache:
        key = support.geometry_key()
        with self._lock:  # one thread computes a grid's overlaps; the others wait and reuse them
            if key not in self._cache:
                self._cache[key] = self._compute_geometry(support, progress)
            return self._cache[key]

    def _compute_geometry(self, support, progress) -> _GeometryCache:
        elements = elements_of(support)
        step = self.step_m or min(elements.size / 4.0, self.distance / 4.0)
        geoms = self.stands.geometries
        ps, pe, pa, near = [], [], [], []
        rings = shapely.boundary(geoms)
        # slightly wider than D: the round buffer is a polygon inscribed in the true circle
        zones = shapely.buffer(rings, self.distance * 1.01 + 1e-6 * elements.size, quad_segs=16)
        for i, g in enumerate(geoms):
            progress(i / max(len(geoms), 1), "overlaying vegetation on the grid/mesh")
            ids, area = elements.overlap(g)
            ps.append(np.full(ids.size, i, dtype=np.int64))
            pe.append(ids)
            pa.append(area)
            near.append(elements.overlap(zones[i], areas=False)[0])
        near_ids = np.unique(np.concatenate(near)) if near else np.zeros(0, np.int64)
        return _GeometryCache(elements, np.concatenate(ps), np.concatenate(pe), np.concatenate(pa),
                              near_ids, elements.polygons(near_ids), boundary_pieces(geoms, step), step)

    def run(self, fld: HydraulicField, codes: np.ndarray, class_names, progress=None) -> StandResult:
        """Overlay one run. ``codes``: class code (1..N, 0 = unclassified) of each wet element."""
        progress = as_progress(progress)
        if fld.support is None:
            raise ChannelHabitatError("the run has no grid or mesh geometry to overlay vegetation on")
        codes = np.asarray(codes)
        if len(codes) != fld.n:
            raise ValueError("one class code per wet element is needed")
        geo = self._geometry(fld.support, progress.sub(0.0, 0.8))
        names = list(class_names)
        nc = len(names)
        ci = np.where((codes >= 1) & (codes <= nc), codes.astype(np.int64) - 1, nc)  # nc = unclassified
        has_uncl = bool(np.any(ci == nc))
        labels = names + [UNCLASSIFIED] if has_uncl else names
        nl = nc + 1
        n = self.stands.n
        # --- wetted area and depth
        pos = _lookup(fld.support.index, geo.pair_elem)
        wet = pos >= 0
        s, a = geo.pair_stand[wet], geo.pair_area[wet]
        d = fld.depth[pos[wet]].astype(np.float64)
        wet_area = np.bincount(s, weights=a, minlength=n).astype(np.float64)
        with np.errstate(invalid="ignore", divide="ignore"):
            dmean = np.bincount(s, weights=a * d, minlength=n) / wet_area
        dmax = np.full(n, -np.inf)
        np.maximum.at(dmax, s, d)
        dry = wet_area <= 0
        dmean[dry] = np.nan
        dmax[dry] = np.nan
        class_area = np.bincount(s * nl + ci[pos[wet]], weights=a, minlength=n * nl).astype(np.float64).reshape(n, nl)
        progress(0.85, "channel-facing edges")
        # --- channel-facing edge: nearest wet element within D of each boundary piece
        npos = _lookup(fld.support.index, geo.near_ids)
        wet_near = npos >= 0
        pieces = geo.pieces
        label = np.full(len(pieces.length), -1, dtype=np.int64)
        if wet_near.any() and len(pieces.length):
            tree = shapely.STRtree(geo.near_polys[wet_near])
            (qi, ti), _ = tree.query_nearest(pieces.midpoints, max_distance=self.distance,
                                             return_distance=True, all_matches=False)
            label[qi] = ci[npos[wet_near][ti]]
        facing = label >= 0
        edge = np.bincount(pieces.stand[facing] * nl + label[facing], weights=pieces.length[facing],
                           minlength=n * nl).astype(np.float64).reshape(n, nl)
        edge_total = edge.sum(axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            pct = 100.0 * wet_area / self.area_m2
        cols = {
            "area_m2": self.area_m2.astype(np.float64),
            "wet_area_m2": wet_area,
            "wet_pct": pct,
            "depth_mean_m": dmean,
            "depth_max_m": dmax,
        }
        for j, nm in enumerate(labels):
            cols[f"wet_{field_key(nm)}_m2"] = class_area[:, j]
        cols["perimeter_m"] = self.perimeter_m.astype(np.float64)
        cols["edge_m"] = edge_total
        for j, nm in enumerate(labels):
            cols[f"edge_{field_key(nm)}_m"] = edge[:, j]
        main = np.argmax(edge[:, :len(labels)], axis=1)
        cols["edge_main_class"] = [labels[m] if t > 0 else "" for m, t in zip(main, edge_total)]
        edges = _stretches(pieces, label, labels)
        progress(1.0)
        return StandResult(cols, labels, edges)


def _stretches(pieces: Pieces, label: np.ndarray, labels) -> list:
    """Consecutive boundary pieces with the same class, merged into lines (ring wrap-around joined)."""
    out = []
    if not np.any(label >= 0):
        return out
    ring = pieces.ring
    # start a new stretch where the ring or the label changes
    start = np.ones(len(label), dtype=bool)
    start[1:] = (ring[1:] != ring[:-1]) | (label[1:] != label[:-1])
    first = np.flatnonzero(start)
    last = np.append(first[1:] - 1, len(label) - 1)
    merged_into = {}
    # wrap-around: the last stretch of a ring continues into its first when both share a label
    ring_first = {}
    for k, f in enumerate(first):
        ring_first.setdefault(int(ring[f]), k)
    for k, f in enumerate(first):
        r = int(ring[f])
        k0 = ring_first[r]
        is_last_of_ring = last[k] == len(label) - 1 or ring[last[k] + 1] != r
        if is_last_of_ring and k != k0 and label[f] == label[first[k0]]:
            merged_into[k0] = k
    skip = set(merged_into.values())
    for k, f in enumerate(first):
        if k in skip or label[f] < 0:
            continue
        idx = np.arange(f, last[k] + 1)
        if k in merged_into:
            j = merged_into[k]
            idx = np.concatenate([np.arange(first[j], last[j] + 1), idx])
        xs = np.append(pieces.x0[idx], pieces.x1[idx[-1]])
        ys = np.append(pieces.y0[idx], pieces.y1[idx[-1]])
        out.append({"stand": int(pieces.stand[f]), "class": labels[int(label[f])],
                    "length_m": float(pieces.length[idx].sum()),
                    "geometry": shapely.simplify(shapely.linestrings(np.column_stack([xs, ys])), 0.0)})
    return out


# --------------------------------------------------------------------------------------------
# Many runs and the community summary
# --------------------------------------------------------------------------------------------

def stand_table(stands: Stands, results) -> dict:
    """One row per stand and run. ``results``: list of (run columns dict, StandResult), where the
    run columns (e.g. regime, q_mld, q_m3s, run) are scalars repeated on the run's rows. Class
    columns are the union over runs (0 where a run has no such class)."""
    if not results:
        return {}
    run_keys = list(results[0][0].keys())
    stand_cols = ["stand_id", "community"]
    value_cols = []
    for _, res in results:
        for k in res.columns:
            if k not in value_cols:
                value_cols.append(k)
    value_cols = _order_value_columns(value_cols)
    out = {k: [] for k in stand_cols + run_keys + value_cols}
    for run_cols, res in results:
        n = stands.n
        out["stand_id"].extend(stands.stand_id.tolist())
        out["community"].extend(stands.community)
        for k in run_keys:
            out[k].extend([run_cols[k]] * n)
        for k in value_cols:
            if k in res.columns:
                out[k].extend(list(res.columns[k]))
            else:
                out[k].extend([0.0] * n)
    return {k: (v if v and isinstance(v[0], str) else np.asarray(v)) for k, v in out.items()}


def _order_value_columns(cols):
    head = ["area_m2", "wet_area_m2", "wet_pct", "depth_mean_m", "depth_max_m"]
    wet = [c for c in cols if c.startswith("wet_") and c.endswith("_m2") and c != "wet_area_m2"]
    mid = ["perimeter_m", "edge_m"]
    edge = [c for c in cols if c.startswith("edge_") and c.endswith("_m") and c != "edge_m"]
    tail = ["edge_main_class"]
    ordered = [c for c in head + wet + mid + edge + tail if c in cols]
    return ordered + [c for c in cols if c not in ordered]


def community_summary(table: dict, run_keys) -> dict:
    """Per community and run (``run_keys`` name the run columns of ``table``)."""
    comm = list(table["community"])
    keys = [tuple(table[k][i] for k in run_keys) for i in range(len(comm))]
    groups = {}
    for i, (c, rk) in enumerate(zip(comm, keys)):
        groups.setdefault((rk, c), []).append(i)
    edge_cols = [k for k in table if k.startswith("edge_") and k.endswith("_m") and k != "edge_m"]
    out = {k: [] for k in run_keys}
    for k in ("community", "n_stands", "n_wetted", "area_m2", "wet_area_m2", "wet_pct", "depth_mean_m",
              "depth_max_m", "perimeter_m", "edge_m"):
        out[k] = []
    for k in edge_cols:
        out[k] = []
    for k in edge_cols:
        out[k[:-2] + "_pct"] = []
    area = np.asarray(table["area_m2"], dtype=float)
    wa = np.asarray(table["wet_area_m2"], dtype=float)
    dm = np.asarray(table["depth_mean_m"], dtype=float)
    dx = np.asarray(table["depth_max_m"], dtype=float)
    for (rk, c), rows in groups.items():
        r = np.asarray(rows)
        for k, v in zip(run_keys, rk):
            out[k].append(v)
        out["community"].append(c)
        out["n_stands"].append(len(r))
        out["n_wetted"].append(int(np.count_nonzero(wa[r] > 0)))
        a, w = area[r].sum(), wa[r].sum()
        out["area_m2"].append(a)
        out["wet_area_m2"].append(w)
        out["wet_pct"].append(100.0 * w / a if a > 0 else np.nan)
        wet_rows = r[wa[r] > 0]
        out["depth_mean_m"].append(float(np.sum(wa[wet_rows] * dm[wet_rows]) / w) if w > 0 else np.nan)
        out["depth_max_m"].append(float(np.max(dx[wet_rows])) if wet_rows.size else np.nan)
        out["perimeter_m"].append(float(np.sum(np.asarray(table["perimeter_m"], float)[r])))
        e = float(np.sum(np.asarray(table["edge_m"], float)[r]))
        out["edge_m"].append(e)
        for k in edge_cols:
            ek = float(np.sum(np.asarray(table[k], float)[r]))
            out[k].append(ek)
            out[k[:-2] + "_pct"].append(100.0 * ek / e if e > 0 else np.nan)
    return {k: (v if v and isinstance(v[0], str) else np.asarray(v)) for k, v in out.items()}
