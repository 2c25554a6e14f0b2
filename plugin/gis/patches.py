"""Habitat patches: classified elements -> valid polygons dissolved per class and segment.

Rasters: the class grid is optionally sieved (GDAL SieveFilter, 4-connected: patches smaller than the
minimum area merge into their largest neighbouring patch), then every segment's cells are cut into a
small window around that segment and polygonized there (GDAL Polygonize, 4-connected, on both cores:
GDAL releases the GIL). A window holds one segment only, so each polygon belongs to one (segment,
class) and the dissolve is a plain grouping of polygons into a MultiPolygon per class — no geometric
union. Windows keep the work proportional to the wet cells, not the grid (a meandering reach fills a
few percent of its bounding grid).

Meshes: the wet faces become polygons in one vectorised call (shapely.polygons from coordinate
arrays) and are merged per (segment, class) with shapely's coverage union (faces share edges exactly,
so the coverage union is exact and fast). The optional sieve works on the face adjacency graph:
connected same-class patches smaller than the minimum area take the class they share the longest
boundary with.

Statistics (core/habitat) always use the unsieved classes; the sieve only cleans the map polygons.
Elements outside the reach (segment -1) are not part of any patch.

No qgis import: GDAL, OGR, numpy, scipy and shapely only.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np
import shapely
import shapely.errors
from osgeo import gdal, gdal_array, ogr

from ..core.errors import as_progress
from ..core.field import GridSupport, MeshSupport

gdal.UseExceptions()
ogr.UseExceptions()


@dataclass
class Patches:
    """One row per (segment, class): ordered ``columns`` and shapely MultiPolygons ``geometries``."""

    columns: dict
    geometries: list
    notes: list = field(default_factory=list)

    def __len__(self):
        return len(self.geometries)


# ----------------------------------------------------------------------------------------------
# Common
# ----------------------------------------------------------------------------------------------

def _assemble(analysis, rows, notes) -> Patches:
    """rows: (segment 0-based, code, MultiPolygon, area_m2, n_parts) -> Patches, ordered by segment
    then class code."""
    reach = analysis.reach
    names = analysis.scheme.names
    rows = sorted(rows, key=lambda r: (r[0], r[1]))
    inside = analysis.segment >= 0
    seg_wet = np.bincount(analysis.segment[inside], weights=analysis.field.area[inside],
                          minlength=reach.n_segments)
    e = reach.segment_edges
    mid = (e[:-1] + e[1:]) / 2.0
    seg_zone = [reach.zone_names[k] if k >= 0 else "" for k in reach.zone_of(mid)]
    cols = {
        "class": [names[r[1] - 1] for r in rows],
        "class_code": np.array([r[1] for r in rows], dtype=np.int64),
        "segment": np.array([r[0] + 1 for r in rows], dtype=np.int64),
        "zone": [seg_zone[r[0]] for r in rows],
        "chainage_from_m": np.array([e[r[0]] for r in rows], dtype=float),
        "chainage_to_m": np.array([e[r[0] + 1] for r in rows], dtype=float),
        "area_m2": np.array([r[3] for r in rows], dtype=float),
        "pct_segment": np.array([100.0 * r[3] / seg_wet[r[0]] if seg_wet[r[0]] > 0 else np.nan for r in rows]),
        "n_parts": np.array([r[4] for r in rows], dtype=np.int64),
    }
    return Patches(cols, [r[2] for r in rows], notes)


def _dissolve_parts(polys, labels):
    """{label: (MultiPolygon, n_parts)} from polygons that share no edge within a label.

    The polygons of one label are 4-connected components of a raster (GDAL Polygonize): their
    interiors are disjoint and their boundaries meet at cell corners at most, so a MultiPolygon of
    valid polygons is valid. Only the polygons are checked (cheaper than checking the MultiPolygon);
    a label with an invalid polygon gets its MultiPolygon repaired (make_valid)."""
    out = {}
    if len(polys) == 0:
        return out
    order = np.argsort(labels, kind="stable")
    labels = labels[order]
    polys = polys[order]
    valid = shapely.is_valid(polys)
    bounds = np.flatnonzero(np.diff(labels)) + 1
    for chunk, ok, lab in zip(np.split(polys, bounds), np.split(valid, bounds), labels[np.r_[0, bounds]]):
        mp = shapely.multipolygons(chunk)
        if not ok.all() and not shapely.is_valid(mp):
            mp = _polygonal(shapely.make_valid(mp))
        out[int(lab)] = (mp, len(chunk))
    return out


def _polygonal(geom):
    """The polygonal part of a geometry as a MultiPolygon (nested collections flattened)."""
    polys = []
    for p in shapely.get_parts(geom):
        t = shapely.get_type_id(p)
        if t == 3:
            polys.append(p)
        elif t in (6, 7):
            polys.extend(shapely.get_parts(_polygonal(p)))
    return shapely.multipolygons(polys) if polys else shapely.from_wkt("MULTIPOLYGON EMPTY")


# ----------------------------------------------------------------------------------------------
# Rasters
# ----------------------------------------------------------------------------------------------

def class_grid(analysis, inside_only: bool = False) -> np.ndarray:
    """The full (rows, cols) uint8 class grid of a raster run: codes at wet cells, 0 elsewhere."""
    sup = analysis.field.support
    rows, cols = sup.shape
    grid = np.zeros(rows * cols, dtype=np.uint8)
    codes = analysis.codes
    if inside_only:
        codes = np.where(analysis.segment >= 0, codes, 0).astype(np.uint8)
    grid[sup.index] = codes
    return grid.reshape(rows, cols)


def sieve_grid(grid: np.ndarray, min_cells: int) -> np.ndarray:
    """GDAL SieveFilter (4-connected) of a uint8 class grid; 0 cells are no data (never merged into,
    never grow). Patches smaller than ``min_cells`` cells take their largest neighbour's class."""
    if min_cells <= 1:
        return grid
    src = gdal_array.OpenArray(np.ascontiguousarray(grid))
    band = src.GetRasterBand(1)
    dst = gdal.GetDriverByName("MEM").Create("", grid.shape[1], grid.shape[0], 1, gdal.GDT_Byte)
    dband = dst.GetRasterBand(1)
    gdal.SieveFilter(band, band, dband, int(min_cells), 4)
    out = dband.ReadAsArray()
    del band, dband, src, dst
    return out


def _to_world(polys, transform):
    """Polygons in (column, row) grid coordinates -> world coordinates of the grid ``transform``
    (north-up): x = x0 + col dx, y = y0 + row dy, one formula for every window."""
    x0, dx, _, y0, _, dy = transform
    scale = np.array([dx, dy])
    origin = np.array([x0, y0])
    return shapely.transform(polys, lambda xy: origin + xy * scale)


def _polygonize_window(labels: np.ndarray, transform, r0: int = 0, c0: int = 0):
    """Polygons (shapely array) and their labels for the non-zero cells of a small label array
    whose first cell is (r0, c0) of a grid with the given geotransform (north-up); ``transform``
    None: in grid coordinates (column, row; integers, so pieces of different windows join exactly)."""
    ds = gdal_array.OpenArray(labels)
    if transform is None:
        ds.SetGeoTransform((float(c0), 1.0, 0.0, float(r0), 0.0, 1.0))
    else:
        x0, dx, _, y0, _, dy = transform
        ds.SetGeoTransform((x0 + c0 * dx, dx, 0.0, y0 + r0 * dy, 0.0, dy))
    band = ds.GetRasterBand(1)
    ods = ogr.GetDriverByName("Memory").CreateDataSource("patches")
    lyr = ods.CreateLayer("p", geom_type=ogr.wkbPolygon)
    lyr.CreateField(ogr.FieldDefn("label", ogr.OFTInteger))
    gdal.Polygonize(band, band, lyr, 0, [])  # the band is its own mask: 0 = no patch
    wkb, lab = [], []
    for batch in lyr.GetArrowStreamAsNumPy(options=["USE_MASKED_ARRAYS=NO"]):
        wkb.append(batch["wkb_geometry"])
        lab.append(batch["label"])
    del lyr, ods, band, ds
    if not wkb:
        return np.array([], dtype=object), np.array([], dtype=np.int64)
    return shapely.from_wkb(np.concatenate(wkb)), np.concatenate(lab).astype(np.int64)


def raster_patches(analysis, min_area_m2: float = 0.0, progress=None, threads: int = 2) -> Patches:
    """Patches of a raster run: polygons per (segment, class), sieved to ``min_area_m2`` first."""
    return _raster_pass(analysis, min_area_m2, progress, threads, patches=True, footprints=False)[0]


def _sieved_codes(analysis, min_area_m2: float, progress):
    """(codes for PATCHES, notes): the classes sieved to ``min_area_m2`` (GDAL SieveFilter)."""
    sup = analysis.field.support
    cell = sup.cell_area
    codes = analysis.codes
    min_cells = int(np.ceil(min_area_m2 / cell - 1e-9)) if min_area_m2 > 0 else 0
    if min_cells <= 1:
        return codes, []
    progress(0.0, f"removing patches smaller than {min_area_m2:g} m2 ({min_cells} cells)")
    sieved = sieve_grid(class_grid(analysis), min_cells)
    new = sieved.ravel()[sup.index]
    changed = int(np.count_nonzero(new != codes))
    progress.check()
    return new, [f"Patches smaller than {min_area_m2:g} m2 ({min_cells} cells) were merged into their "
                 f"largest neighbour in PATCHES ({changed} cells, {changed * cell:,.0f} m2, changed class); "
                 "the statistics use the unsieved classes."]


def _raster_pass(analysis, min_area_m2: float = 0.0, progress=None, threads: int = 2, patches: bool = True,
                 footprints: bool = True, on_patches=None):
    """(Patches or None, (segment geometries, zone geometries) or None) of a raster run in one pass over
    the segments: every segment's cells are cut into a small window once, and polygonized there per
    class (patches) and per zone (the wet footprint pieces, in grid coordinates), on ``threads`` threads
    (GDAL and GEOS release the GIL); footprint pieces are joined per segment and per zone at the end.
    ``on_patches(Patches)`` is called as soon as the patches are complete, before the joins."""
    progress = as_progress(progress)
    fld = analysis.field
    sup = fld.support
    if not isinstance(sup, GridSupport):
        raise TypeError("raster patches need a raster run")
    notes = []
    cell = sup.cell_area
    codes = analysis.codes
    if patches:
        codes, notes = _sieved_codes(analysis, min_area_m2, progress)
    seg, zone = analysis.segment, analysis.zone
    n_seg, n_zone = analysis.reach.n_segments, analysis.reach.n_zones
    order = np.argsort(np.where(seg >= 0, seg, n_seg).astype(np.int16 if n_seg < 32767 else np.int32),
                       kind="stable")
    counts = np.bincount(seg[seg >= 0], minlength=n_seg)
    ends = np.cumsum(counts)
    starts = ends - counts
    rows_, cols_ = np.divmod(sup.index, sup.shape[1])
    zone_type = np.uint8 if n_zone < 255 else np.uint16

    def window(sel, values, dtype):
        r, c = rows_[sel], cols_[sel]
        r0, c0 = int(r.min()), int(c.min())
        lab = np.zeros((int(r.max()) - r0 + 1, int(c.max()) - c0 + 1), dtype=dtype)
        lab[r - r0, c - c0] = values
        return lab, r0, c0

    def one(k):
        cells = order[starts[k]:ends[k]]
        res_p, res_f = {}, {}
        if patches:
            sel = cells[codes[cells] > 0]
            if sel.size:
                lab, r0, c0 = window(sel, codes[sel], np.uint8)
                polys, labels = _polygonize_window(lab, sup.transform, r0, c0)
                area = np.bincount(codes[sel], minlength=256) * cell
                res_p = {code: (mp, float(area[code]), n) for code, (mp, n) in _dissolve_parts(polys, labels).items()}
        if footprints:  # pieces in grid coordinates: joined exactly, turned into world coordinates last
            lab, r0, c0 = window(cells, (zone[cells] + 1).astype(zone_type), zone_type)
            polys, labels = _polygonize_window(lab, None, r0, c0)
            res_f = {z - 1: mp for z, (mp, _) in _dissolve_parts(polys, labels).items()}
        return k, res_p, res_f

    rows, pieces = [], {}
    todo = [k for k in range(n_seg) if counts[k] > 0]
    done = 0
    with ThreadPoolExecutor(max_workers=max(1, threads)) as pool:
        for k, res_p, res_f in pool.map(one, todo):
            for code, (mp, area, n) in res_p.items():
                rows.append((k, code, mp, area, n))
            for z, mp in res_f.items():
                pieces[(k, z)] = mp
            done += 1
            progress(0.2 + 0.8 * done / max(len(todo), 1), "polygonizing habitat patches")
        ptc = _assemble(analysis, rows, notes) if patches else None
        if on_patches is not None:
            on_patches(ptc)
        fp = None
        if footprints:
            seg_geoms = _union_pieces(pieces, n_seg, _grid_union, pool)
            zone_geoms = _union_pieces({(z, k): g for (k, z), g in pieces.items()}, n_zone, _grid_union, pool)
            world = list(pool.map(lambda g: None if g is None else _to_world(g, sup.transform),
                                  seg_geoms + zone_geoms))
            fp = (world[:n_seg], world[n_seg:])
    return ptc, fp


# ----------------------------------------------------------------------------------------------
# Meshes
# ----------------------------------------------------------------------------------------------

def face_polygons(support: MeshSupport, faces=None) -> np.ndarray:
    """Shapely polygons of mesh faces (default: the wet faces in ``support.index``), vectorised."""
    faces = support.index if faces is None else np.asarray(faces)
    fn = support.face_nodes[faces]
    valid = fn >= 0
    nodes = fn[valid]
    ring = np.repeat(np.arange(len(faces)), valid.sum(axis=1))
    coords = np.column_stack([support.node_x[nodes], support.node_y[nodes]])
    rings = shapely.linearrings(coords, indices=ring)
    polys = shapely.polygons(rings)
    # Faces stored clockwise are fine for area and union; orient counter-clockwise for tidy output.
    return shapely.orient_polygons(polys) if hasattr(shapely, "orient_polygons") else polys


def face_adjacency(support: MeshSupport):
    """(face_a, face_b, edge_length) for every edge shared by two wet elements (element numbers,
    i.e. positions in ``support.index``)."""
    fn = support.face_nodes[support.index]
    n_el, width = fn.shape
    valid = fn >= 0
    nn = valid.sum(axis=1)
    col = np.arange(width)[None, :]
    nxt = np.take_along_axis(np.where(valid, fn, 0), np.where(col + 1 < nn[:, None], col + 1, 0), axis=1)
    a = fn[valid]
    b = nxt[valid]
    el = np.repeat(np.arange(n_el), nn)
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    key = lo.astype(np.int64) * (int(max(hi.max(initial=0), 0)) + 1) + hi
    order = np.argsort(key, kind="stable")
    ks = key[order]
    same = np.flatnonzero(ks[1:] == ks[:-1])
    fa, fb = el[order[same]], el[order[same + 1]]
    la, ha = lo[order[same]], hi[order[same]]
    length = np.hypot(support.node_x[la] - support.node_x[ha], support.node_y[la] - support.node_y[ha])
    return fa, fb, length


def sieve_mesh(codes, area, support: MeshSupport, min_area_m2: float, max_passes: int = 5) -> np.ndarray:
    """Merge connected same-class patches of faces smaller than ``min_area_m2`` into the class they
    share the longest boundary with (repeated until nothing changes, at most ``max_passes``)."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    codes = np.asarray(codes).copy()
    n = len(codes)
    fa, fb, length = face_adjacency(support)
    for _ in range(max_passes):
        same = codes[fa] == codes[fb]
        g = coo_matrix((np.ones(int(same.sum())), (fa[same], fb[same])), shape=(n, n))
        n_comp, comp = connected_components(g, directed=False)
        comp_area = np.bincount(comp, weights=area, minlength=n_comp)
        small = comp_area < min_area_m2
        diff = ~same
        # boundary length between each small component and each neighbouring class
        pairs_c = np.concatenate([comp[fa[diff]], comp[fb[diff]]])
        pairs_k = np.concatenate([codes[fb[diff]], codes[fa[diff]]]).astype(np.int64)
        plen = np.concatenate([length[diff], length[diff]])
        keep = small[pairs_c]
        if not keep.any():
            break
        key = pairs_c[keep].astype(np.int64) * 256 + pairs_k[keep]
        uk, inv = np.unique(key, return_inverse=True)
        tot = np.bincount(inv, weights=plen[keep])
        kc, kk = uk // 256, uk % 256
        order = np.lexsort((-tot, kc))  # per component, longest boundary first
        first = np.r_[True, kc[order][1:] != kc[order][:-1]]
        target = np.zeros(n_comp, dtype=np.int64)
        target[kc[order][first]] = kk[order][first]
        move = small[comp] & (target[comp] > 0)
        if not move.any():
            break
        codes[move] = target[comp[move]].astype(codes.dtype)
    return codes


def merge_faces(polys, areas=None):
    """Union of mesh face polygons as a valid MultiPolygon. Coverage union first (exact and fast when
    faces meet edge to edge); meshes with hanging nodes (quadtree refinement) are not a valid coverage,
    so when GEOS refuses, or the result loses area, the general (slower) union is used instead."""
    polys = np.asarray(polys, dtype=object)
    expected = float(np.sum(areas)) if areas is not None else float(shapely.area(polys).sum())
    try:
        merged = shapely.coverage_union_all(polys)
        ok = shapely.is_valid(merged) and abs(shapely.area(merged) - expected) <= 1e-9 * max(expected, 1.0)
    except shapely.errors.GEOSException:
        ok = False
    if not ok:
        merged = shapely.union_all(polys)
    mp = merged if shapely.get_type_id(merged) == 6 else _polygonal(merged)
    if not shapely.is_valid(mp):
        mp = _polygonal(shapely.make_valid(mp))
    return mp


def mesh_patches(analysis, min_area_m2: float = 0.0, progress=None, polygons=None) -> Patches:
    """Patches of a mesh run: wet faces merged per (segment, class) by coverage union."""
    progress = as_progress(progress)
    fld = analysis.field
    sup = fld.support
    if not isinstance(sup, MeshSupport):
        raise TypeError("mesh_patches needs a mesh run")
    notes = []
    codes = analysis.codes
    if min_area_m2 > 0:
        progress(0.0, f"removing patches smaller than {min_area_m2:g} m2")
        new = sieve_mesh(codes, fld.area, sup, min_area_m2)
        changed = new != codes
        if changed.any():
            notes.append(f"Patches smaller than {min_area_m2:g} m2 were merged into the neighbouring class "
                         f"they share the longest boundary with in PATCHES ({int(changed.sum())} faces, "
                         f"{fld.area[changed].sum():,.0f} m2); the statistics use the unsieved classes.")
        codes = new
    progress(0.2, "building face polygons")
    polys = face_polygons(sup) if polygons is None else polygons
    seg = analysis.segment
    ok = (seg >= 0) & (codes > 0)
    key = seg.astype(np.int64) * 256 + codes
    sel = np.flatnonzero(ok)
    order = sel[np.argsort(key[sel], kind="stable")]
    ks = key[order]
    bounds = np.flatnonzero(np.diff(ks)) + 1
    rows = []
    groups = np.split(order, bounds)
    for i, grp in enumerate(groups):
        if grp.size == 0:
            continue
        k, code = divmod(int(key[grp[0]]), 256)
        mp = merge_faces(polys[grp], fld.area[grp])
        rows.append((k, code, mp, float(fld.area[grp].sum()), int(shapely.get_num_geometries(mp))))
        if i % 8 == 0:
            progress(0.3 + 0.7 * i / max(len(groups), 1), "merging faces into habitat patches")
    return _assemble(analysis, rows, notes)


class PatchJob:
    """Patches and wet footprints being computed in a background thread (:func:`start_patch_job`).

    ``patches()`` waits for the patches only (the footprints may still be joined meanwhile),
    ``footprints()`` for the footprints (None when not asked for), ``result()`` for both, as
    (Patches, footprints)."""

    def __init__(self, future, patches_future):
        self._future = future
        self._patches = patches_future

    def patches(self) -> Patches:
        return self._patches.result()

    def footprints(self):
        return self._future.result()[1]

    def result(self):
        return self._future.result()

    def done(self) -> bool:
        return self._future.done()


def start_patch_job(analysis, min_area_m2: float = 0.0, polygons=None, footprints: bool = True,
                    threads: int = 2, progress=None) -> PatchJob:
    """Patches (and the wet footprints of segments and zones when ``footprints``) of a classified run,
    computed in a background thread -- GDAL polygonizing and GEOS unions release the GIL, so they run
    while the statistics and the report are made. Returns a :class:`PatchJob` (``result()`` gives
    (Patches, (segment geometries, zone geometries) or None); ``patches()`` is ready before the
    footprints are joined). ``progress`` is only asked whether to stop (no progress reports from the
    background thread)."""
    from concurrent.futures import Future, ThreadPoolExecutor

    from ..core.errors import Progress

    stop = Progress(None, getattr(progress, "_cancelled", None)) if progress is not None else None
    patches_ready = Future()

    def job():
        try:
            if isinstance(analysis.field.support, GridSupport):  # one pass over the segment windows
                return _raster_pass(analysis, min_area_m2, stop, threads, patches=True, footprints=footprints,
                                    on_patches=patches_ready.set_result)
            ptc = habitat_patches(analysis, min_area_m2, stop, threads, polygons)
            patches_ready.set_result(ptc)
            if stop is not None:
                stop.check()
            fp = wet_footprints(analysis, threads, polygons) if footprints else None
            return ptc, fp
        except BaseException as exc:
            if not patches_ready.done():
                patches_ready.set_exception(exc)
            raise

    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="patches")
    future = pool.submit(job)
    pool.shutdown(wait=False)
    return PatchJob(future, patches_ready)


def habitat_patches(analysis, min_area_m2: float = 0.0, progress=None, threads: int = 2,
                    polygons=None) -> Patches:
    """Patches for a raster or mesh run (dispatch on the field's support). ``polygons``: the wet
    face polygons of a mesh run when already built (:func:`face_polygons`)."""
    if isinstance(analysis.field.support, GridSupport):
        return raster_patches(analysis, min_area_m2, progress, threads)
    if isinstance(analysis.field.support, MeshSupport):
        return mesh_patches(analysis, min_area_m2, progress, polygons=polygons)
    raise TypeError("the run has no grid or mesh support")


# ----------------------------------------------------------------------------------------------
# Wet footprints of segments and zones (their polygons when the reach brings none)
# ----------------------------------------------------------------------------------------------

def _union_pieces(pieces, n, merge=None, pool=None):
    """{(group, sub): MultiPolygon} -> list of n geometries (None where empty); pieces of one group
    joined by ``merge`` (default: :func:`merge_faces`, coverage union first), on ``pool`` if given."""
    merge = merge or merge_faces
    out = [None] * n
    by = {}
    for (g, _), geom in pieces.items():
        by.setdefault(g, []).append(geom)
    todo = []
    for g, geoms in by.items():
        if not 0 <= g < n:
            continue
        if len(geoms) == 1:
            out[g] = geoms[0]
        else:
            todo.append((g, geoms))
    merged = pool.map(merge, [geoms for _, geoms in todo]) if pool is not None else map(merge, [t[1] for t in todo])
    for (g, _), m in zip(todo, merged):
        out[g] = m
    return out


def _grid_union(geoms):
    """Union of polygonized pieces in grid coordinates as a valid MultiPolygon. Pieces of different
    windows share edges but not their vertices (each window keeps only its own corners), which GEOS's
    coverage union refuses; the general union is exact here (integer coordinates)."""
    merged = shapely.union_all(np.asarray(geoms, dtype=object))
    mp = merged if shapely.get_type_id(merged) == 6 else _polygonal(merged)
    if not shapely.is_valid(mp):
        mp = _polygonal(shapely.make_valid(mp))
    return mp


def wet_footprints(analysis, threads: int = 2, polygons=None):
    """(segment geometries, zone geometries): the wet area of every segment and zone as
    MultiPolygons (None where dry), from pieces per (segment, zone) -- rasters by windowed
    polygonizing, meshes by coverage union of faces."""
    fld = analysis.field
    sup = fld.support
    if isinstance(sup, GridSupport):
        return _raster_pass(analysis, threads=threads, patches=False, footprints=True)[1]
    seg, zone = analysis.segment, analysis.zone
    n_seg, n_zone = analysis.reach.n_segments, analysis.reach.n_zones
    inside = np.flatnonzero(seg >= 0)
    pieces = {}
    if isinstance(sup, MeshSupport):
        polys = face_polygons(sup) if polygons is None else polygons
        key = seg[inside].astype(np.int64) * 65536 + zone[inside]
        order = np.argsort(key, kind="stable")
        ks = key[order]
        bounds = np.flatnonzero(np.diff(ks)) + 1
        for grp in np.split(inside[order], bounds):
            if grp.size == 0:
                continue
            k, z = int(seg[grp[0]]), int(zone[grp[0]])
            pieces[(k, z)] = merge_faces(polys[grp], fld.area[grp])
    else:
        raise TypeError("the run has no grid or mesh support")
    seg_geoms = _union_pieces(pieces, n_seg)
    zone_geoms = _union_pieces({(z, k): g for (k, z), g in pieces.items()}, n_zone)
    return seg_geoms, zone_geoms
