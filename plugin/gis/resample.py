"""Two runs onto the same elements: as they are (same grid / same mesh) or on one common grid.

``align_runs(base, alt)`` returns an :class:`AlignedRuns`: the two runs on the same support, how that
was done (``method``: 'same grid', 'same mesh' or 'common grid'), a sentence saying so for the raster
metadata and the report, and notes (reprojection, coverage). Methods (see ``core/regrid.py``):

* rasters on the common grid: nearest neighbour -- an exact re-indexing when the grid is aligned with
  the same cell and CRS, else GDAL's warp (``resampleAlg='near'``), which also reprojects;
* meshes: face-constant sampling at cell centres (``core/regrid.sample_faces``); a mesh in another CRS
  has its node coordinates transformed with PROJ (pyproj) first.

The alternative run is always brought into the base run's CRS.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from osgeo import gdal, gdal_array

from ..core import regrid
from ..core.errors import ChannelHabitatError, as_progress
from ..core.field import GridSupport, HydraulicField, MeshSupport
from ..core.habitat import check_metric_crs, crs_name

gdal.UseExceptions()

NEAREST_TEXT = ("rasters by nearest neighbour (each grid cell takes the value of the run's cell that contains its "
                "centre)")
FACE_TEXT = "meshes by face-constant sampling at cell centres (each grid cell takes the value of the wet face " \
            "that contains its centre)"


@dataclass
class AlignedRuns:
    base: HydraulicField  # on the shared support
    alt: HydraulicField
    method: str  # 'same grid' | 'same mesh' | 'common grid'
    method_text: str  # one or two sentences for metadata and the report
    base_stats: HydraulicField | None = None  # the run on its own support when ``base`` was resampled
    alt_stats: HydraulicField | None = None
    cell_m: float | None = None  # cell of the common grid
    reprojected: bool = False
    notes: list = field(default_factory=list)  # information (resampled wet areas, ...)
    warnings: list = field(default_factory=list)  # what the user must know (reprojection)


def _kind(fld: HydraulicField) -> str:
    sup = fld.support
    if isinstance(sup, GridSupport):
        return f"{abs(sup.transform[1]):g} m grid"
    if isinstance(sup, MeshSupport):
        return f"mesh (typical face size {regrid.element_size_m(fld):.3g} m)"
    return "run"


def warp_grid_field(fld: HydraulicField, spec: regrid.GridSpec, dst_wkt: str):
    """(cells, depth, speed) of a raster run sampled by nearest neighbour at the cell centres of ``spec``
    (in ``dst_wkt``): only the window of its wet cells is warped."""
    sup = fld.support
    src = regrid.GridSpec.of(sup)
    rows, cols = np.divmod(sup.index, src.shape[1])
    r0, r1 = int(rows.min()), int(rows.max()) + 1
    c0, c1 = int(cols.min()), int(cols.max()) + 1
    h, w = r1 - r0, c1 - c0
    x0, dx, _, y0, _, dy = src.transform
    win = np.full((2, h * w), np.nan, dtype=np.float32)
    flat = (rows - r0) * w + (cols - c0)
    win[0, flat] = fld.depth
    win[1, flat] = fld.speed
    mem = gdal_array.OpenArray(win.reshape(2, h, w))
    mem.SetGeoTransform((x0 + c0 * dx, dx, 0.0, y0 + r0 * dy, 0.0, dy))
    mem.SetProjection(fld.crs_wkt)
    for b in (1, 2):
        mem.GetRasterBand(b).SetNoDataValue(float("nan"))
    xmin, ymin, xmax, ymax = spec.bounds
    opts = gdal.WarpOptions(format="MEM", outputBounds=(xmin, ymin, xmax, ymax), width=spec.shape[1],
                            height=spec.shape[0], srcSRS=fld.crs_wkt, dstSRS=dst_wkt, resampleAlg="near",
                            srcNodata=float("nan"), dstNodata=float("nan"), outputType=gdal.GDT_Float32,
                            multithread=True, warpOptions=["NUM_THREADS=2"])
    out = gdal.Warp("", mem, options=opts)
    d = out.GetRasterBand(1).ReadAsArray().ravel()
    s = out.GetRasterBand(2).ReadAsArray().ravel()
    del out, mem
    cells = np.flatnonzero(np.isfinite(d) & np.isfinite(s))
    return cells, d[cells], s[cells]


def _reprojected_size(fld: HydraulicField, dst_wkt: str) -> float:
    """The run's typical element size measured in ``dst_wkt`` (metres)."""
    sup = fld.support
    if isinstance(sup, MeshSupport):
        nx, ny = regrid.transform_xy(sup.node_x, sup.node_y, fld.crs_wkt, dst_wkt)
        return float(np.sqrt(np.median(regrid.mesh_face_areas(nx, ny, sup.face_nodes, sup.index))))
    # a grid: the image of one cell at a few wet cells (median of the parallelogram areas)
    pick = sup.index[np.linspace(0, sup.index.size - 1, min(sup.index.size, 101)).astype(np.int64)]
    src = regrid.GridSpec.of(sup)
    x, y = src.centres(pick)
    pts_x = np.concatenate([x, x + src.dx, x])
    pts_y = np.concatenate([y, y, y + src.dy])
    tx, ty = regrid.transform_xy(pts_x, pts_y, fld.crs_wkt, dst_wkt)
    n = len(pick)
    ax, ay = tx[n:2 * n] - tx[:n], ty[n:2 * n] - ty[:n]
    bx, by = tx[2 * n:] - tx[:n], ty[2 * n:] - ty[:n]
    return float(np.sqrt(np.median(np.abs(ax * by - ay * bx))))


def _bounds_in(fld: HydraulicField, dst_wkt: str, node_xy=None):
    """Wet bounds of a run in ``dst_wkt`` (edges densified when reprojected)."""
    if node_xy is not None or regrid.crs_equal(fld.crs_wkt, dst_wkt):
        return regrid.wet_bounds(fld, node_xy)
    xmin, ymin, xmax, ymax = regrid.wet_bounds(fld)
    t = np.linspace(0.0, 1.0, 21)
    xs = np.concatenate([xmin + (xmax - xmin) * t, np.full(21, xmax), xmax - (xmax - xmin) * t, np.full(21, xmin)])
    ys = np.concatenate([np.full(21, ymin), ymin + (ymax - ymin) * t, np.full(21, ymax), ymax - (ymax - ymin) * t])
    tx, ty = regrid.transform_xy(xs, ys, fld.crs_wkt, dst_wkt)
    return float(tx.min()), float(ty.min()), float(tx.max()), float(ty.max())


def align_runs(base: HydraulicField, alt: HydraulicField, cell_m: float = 0.0, progress=None,
               alt_parameter: str = "ALT_DEPTH") -> AlignedRuns:
    """The two runs on the same support (see the module docstring). ``cell_m`` > 0 sets the common grid's
    cell; it also forces the common grid when the runs share a grid or mesh."""
    progress = as_progress(progress)
    notes, warnings = [], []
    dst = base.crs_wkt
    reproj = not regrid.crs_equal(base.crs_wkt, alt.crs_wkt)
    if reproj:
        warnings.append(f"The alternative run is in {crs_name(alt.crs_wkt)} and the base run in {crs_name(dst)}: the "
                     "alternative was reprojected to the base run's CRS (rasters by GDAL warp, nearest neighbour; "
                     "meshes by transforming their node coordinates with PROJ).")
    from ..core.compare import same_support

    if not reproj and not cell_m and same_support(base, alt):
        if isinstance(base.support, GridSupport):
            text = (f"Both runs are on the same {abs(base.support.transform[1]):g} m grid: compared cell by cell, "
                    "without resampling.")
            return AlignedRuns(base, alt, "same grid", text, notes=notes, warnings=warnings)
        text = (f"Both runs are on the same mesh ({len(base.support.face_nodes):,} faces): compared face by face, "
                "without resampling.")
        return AlignedRuns(base, alt, "same mesh", text, notes=notes, warnings=warnings)

    # --- the common grid ---------------------------------------------------------------------------
    alt_nodes = None
    if reproj and isinstance(alt.support, MeshSupport):
        alt_nodes = regrid.transform_xy(alt.support.node_x, alt.support.node_y, alt.crs_wkt, dst)
    size_b = regrid.element_size_m(base)
    size_a = _reprojected_size(alt, dst) if reproj else regrid.element_size_m(alt)
    bb = _bounds_in(base, dst)
    ba = _bounds_in(alt, dst, alt_nodes)
    if not regrid.boxes_overlap(bb, ba):
        raise ChannelHabitatError(
            "the base and alternative runs do not overlap: their wet areas lie apart "
            f"(base x {bb[0]:,.0f}-{bb[2]:,.0f}, y {bb[1]:,.0f}-{bb[3]:,.0f}; alternative x {ba[0]:,.0f}-{ba[2]:,.0f}, "
            f"y {ba[1]:,.0f}-{ba[3]:,.0f} in the base's CRS). Give two runs of the same reach, and check the "
            "alternative's CRS.", alt_parameter)
    cell = float(cell_m) if cell_m else min(size_b, size_a)
    origin = None
    for fld, moved in ((base, False), (alt, reproj)):  # snap to the finer raster's own lines (base first)
        if origin is None and not moved and isinstance(fld.support, GridSupport) and \
                abs(abs(fld.support.transform[1]) - cell) <= 1e-6 * cell and \
                abs(abs(fld.support.transform[5]) - cell) <= 1e-6 * cell:
            origin = (fld.support.transform[0], fld.support.transform[3])
    spec = regrid.snap_grid(regrid.union_bounds(bb, ba), cell, origin)
    progress(0.05, f"resampling both runs onto a common {cell:g} m grid")

    def on_grid(fld, moved, nodes, part):
        sup = fld.support
        sub = progress.sub(part, part + 0.45)
        if isinstance(sup, MeshSupport):
            cells, d, s = regrid.mesh_field_to_spec(fld, spec, nodes, progress=sub)
            how = "mesh"
        elif not moved and regrid.aligned_offset(regrid.GridSpec.of(sup), spec) is not None:
            cells, d, s = regrid.grid_field_to_spec(fld, spec)
            how = "exact"
        else:
            cells, d, s = warp_grid_field(fld, spec, dst)
            how = "warp"
        g = regrid.field_on_grid(spec, cells, d, s, dst, fld.wet_depth_m, name=fld.name)
        same_elements = how == "exact" and g.n == fld.n
        return g, how, same_elements

    gb, how_b, same_b = on_grid(base, False, None, 0.05)
    ga, how_a, same_a = on_grid(alt, reproj, alt_nodes, 0.5)
    for g, label, param in ((gb, "base", "BASE_DEPTH"), (ga, "alternative", alt_parameter)):
        if g.n == 0:
            raise ChannelHabitatError(f"the {label} run has no wet cell on the common {cell:g} m grid: its wet "
                                      "elements are smaller than the cells. Give a smaller RESAMPLE_CELL_SIZE.", param)
    hows = {"exact": "re-indexed exactly (the grid is its own)", "warp": "nearest neighbour",
            "mesh": "face-constant sampling at cell centres"}
    why = "the cell size given" if cell_m else "the finer of the two runs"
    differ = "grids/meshes" if not reproj else "grids/meshes or CRS"
    text = (f"The runs are on different {differ} (base: {_kind(base)}; "
            f"alternative: {_kind(alt)}), so both were put on one aligned grid of {cell:g} m cells ({why}) covering "
            f"the wet extent of both, in the base run's CRS: base {hows[how_b]}; alternative {hows[how_a]}. "
            "Values are sampled, never interpolated, so wet/dry edges and classes stay as each run has them; "
            "areas on the grid differ from each run's own by the cells cut by its wet edge. Segment and zone "
            "statistics are those of each run on its own grid or mesh.")
    for g, fld, label in ((gb, base, "base"), (ga, alt, "alternative")):
        own = fld.wet_area_m2 if not (label == "alternative" and reproj) else None
        if own:
            diff = 100.0 * (g.wet_area_m2 - own) / own
            notes.append(f"Wet area of the {label} run: {own:,.0f} m2 on its own {_kind(fld)}, {g.wet_area_m2:,.0f} m2 "
                         f"on the common grid ({diff:+.2f} %, resampling).")
    # Statistics: each run on its own support, unless that is the grid (same elements) or the run had to be
    # reprojected from a geographic CRS (no metric areas of its own).
    base_stats = None if same_b else base
    alt_stats = None if same_a else alt
    if alt_stats is not None and reproj and not _metric(alt.crs_wkt):
        alt_stats = None
        notes.append("The alternative run's CRS is not in metres: its statistics are taken from the common grid "
                     "(in the base run's CRS).")
    progress(1.0)
    return AlignedRuns(gb, ga, "common grid", text, base_stats, alt_stats, cell, reproj, notes, warnings)


def _metric(wkt: str) -> bool:
    try:
        check_metric_crs(wkt)
    except ChannelHabitatError:
        return False
    return True


def coverage_notes(base: HydraulicField, alt: HydraulicField) -> list:
    """Notes when one run's wet area lies outside the other's extent (raster extent; mesh node bounding
    box): there, 'wet only in' may mean 'not modelled', not 'dried'."""
    notes = []
    for a, b, la, lb in ((base, alt, "base", "alternative"), (alt, base, "alternative", "base")):
        sup = b.support
        if isinstance(sup, GridSupport):
            ext = regrid.GridSpec.of(sup).bounds
            what = "raster extent"
        elif isinstance(sup, MeshSupport):
            ext = (sup.node_x.min(), sup.node_y.min(), sup.node_x.max(), sup.node_y.max())
            what = "mesh bounding box"
        else:
            continue
        x, y = a.x, a.y
        if not regrid.crs_equal(a.crs_wkt, b.crs_wkt):
            x, y = regrid.transform_xy(x, y, a.crs_wkt, b.crs_wkt)
        out = (x < ext[0]) | (x > ext[2]) | (y < ext[1]) | (y > ext[3])
        if out.any():
            area = float(a.area[out].sum())
            notes.append(f"{area:,.0f} m2 of the {la} run's wet area lies outside the {lb} run's {what}: it counts as "
                         f"'wet only in {la}' although the {lb} run may simply not cover it. Check that both runs "
                         "cover the same reach.")
    return notes
