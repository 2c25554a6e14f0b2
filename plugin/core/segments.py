"""Polygons of the channel extent between chainage boundaries (segments and zones).

The extent is cut into one polygon per chainage interval [edge_i, edge_i+1) so that a point of
the extent falls in the polygon of the interval holding its chainage (its nearest point on the
centreline, as ``ReachAxis.locate`` measures it). The polygons partition the extent: no gaps, no
overlaps.

Method. The centreline is sampled densely (every vertex, points every ``sample_m``, and a pair of
points at c - e and c + e either side of every boundary chainage c). The Voronoi cells of those
samples (scipy.spatial.Voronoi, bounded by a far frame) approximate the regions of points that are
nearest to each stretch of the centreline; the cells of one interval's samples are merged
(coverage union) and intersected with the extent. Where a boundary falls on a straight part of the
centreline, the cell edge between the pair of samples is exactly the perpendicular at c: the
boundary is the cross-section there, clipped to the extent, bank to bank. Away from the line the
cells follow the set of points equidistant from two parts of the centreline, so a cross-section
stops where another loop of the river becomes nearer (it never cuts across a neighbouring loop),
and on the inside of a bend tighter than the channel half-width the boundaries meet instead of
crossing each other. Everything is computed in the axis's metric frame (the local azimuthal
equidistant projection for a geographic CRS) and returned in the axis CRS.
"""

from __future__ import annotations

import numpy as np

from .errors import ChannelHabitatError, as_progress


def _xy_fn(fn):
    def apply(coords):
        x, y = fn(coords[:, 0], coords[:, 1])
        return np.column_stack([x, y])
    return apply


def to_local_geometry(axis, geom):
    import shapely

    if not axis.is_geographic:
        return geom
    return shapely.transform(geom, _xy_fn(axis.to_local))


def from_local_geometry(axis, geom):
    import shapely

    if not axis.is_geographic:
        return geom
    return shapely.transform(geom, _xy_fn(axis.from_local))


def area_m2(axis, geom) -> float:
    """Area of a geometry in the axis CRS: planar, or geodesic (pyproj.Geod) in a geographic CRS."""
    if geom is None or geom.is_empty:
        return 0.0
    if axis.is_geographic:
        return abs(float(axis._geod.geometry_area_perimeter(geom)[0]))
    return float(geom.area)


def buffer_extent(axis, half_width_m: float):
    """A channel extent: the centreline buffered by ``half_width_m`` either side, flat at the ends."""
    import shapely

    if not (np.isfinite(half_width_m) and half_width_m > 0):
        raise ChannelHabitatError("the buffer half-width must be a positive number of metres", "BUFFER_HALF_WIDTH")
    poly = shapely.buffer(axis.local_linestring(), half_width_m, cap_style="flat", join_style="round",
                          quad_segs=16)
    return from_local_geometry(axis, poly)


def _samples(axis, edges, sample_m):
    """Chainage of the samples: vertices, a regular spacing, and pairs around interior edges."""
    start, end = axis.start_m, axis.end_m
    inner = np.asarray(edges[1:-1], dtype=float)
    n_reg = max(int(np.ceil((end - start) / sample_m)), 1)
    ch = np.concatenate([axis.chainage, np.linspace(start, end, n_reg + 1)])
    if inner.size:
        gaps = np.diff(np.concatenate([[start], inner, [end]]))
        eps = float(min(0.05, 0.25 * gaps.min(), 0.25 * sample_m))
        # drop samples within eps of a boundary, then add the straddling pair
        near = np.zeros(len(ch), dtype=bool)
        pos = np.searchsorted(inner, ch)
        for k in (pos - 1, pos):
            ok = (k >= 0) & (k < len(inner))
            near[ok] |= np.abs(ch[ok] - inner[k[ok]]) < eps * 1.5
        ch = np.concatenate([ch[~near], inner - eps, inner + eps])
    ch = np.unique(np.clip(ch, start, end))
    keep = np.r_[True, np.diff(ch) > 1e-9]
    return ch[keep]


def chainage_polygons(axis, edges, extent, sample_m: float | None = None, progress=None):
    """One polygon (shapely, axis CRS; possibly empty or multi-part) per interval of ``edges``:
    the part of ``extent`` (shapely polygon/multipolygon in the axis CRS) whose nearest centreline
    point has a chainage in that interval. Parts of the extent beyond the ends of the centreline
    go to the first or last interval (their chainage is clamped to the end)."""
    import shapely
    from scipy.spatial import QhullError, Voronoi

    progress = as_progress(progress)
    edges = np.asarray(edges, dtype=float)
    if len(edges) < 2 or np.any(np.diff(edges) <= 0):
        raise ValueError("edges must increase")
    if extent is None or extent.is_empty:
        raise ChannelHabitatError("the channel extent is empty", "EXTENT")
    ext = to_local_geometry(axis, shapely.make_valid(extent))
    ext = shapely.union_all([g for g in shapely.get_parts(ext) if g.geom_type in ("Polygon", "MultiPolygon")])
    if ext.is_empty or ext.area <= 0:
        raise ChannelHabitatError("the channel extent has no area (no polygon in it)", "EXTENT")
    line = axis.local_linestring()
    if not ext.intersects(line):
        dist = ext.distance(line)
        raise ChannelHabitatError(
            f"the channel extent does not overlap the centreline (they are {dist:.0f} m apart at the closest): "
            "check that they are the same reach and in the same CRS", "EXTENT")
    if sample_m is None:
        sample_m = float(np.clip(axis.length_m / 20000.0, 1.0, 5.0))
        sample_m = min(sample_m, max(float(np.diff(edges).min()) / 10.0, 0.1))
    ch = _samples(axis, edges, sample_m)
    X, Y, _ = axis.local_point_at(ch)
    progress(0.1, "cutting the channel into segments")
    # frame far outside everything, so every sample's Voronoi cell is bounded
    x0, y0, x1, y1 = shapely.bounds(shapely.union_all([ext, line]))
    cx, cy = 0.5 * (x0 + x1), 0.5 * (y0 + y1)
    span = max(x1 - x0, y1 - y0, 1.0)
    ang = np.linspace(0, 2 * np.pi, 16, endpoint=False)
    fx = 20.0 * span * np.cos(ang)
    fy = 20.0 * span * np.sin(ang)
    pts = np.column_stack([np.concatenate([X - cx, fx]), np.concatenate([Y - cy, fy])])
    try:
        vor = Voronoi(pts)
    except QhullError as exc:  # pragma: no cover - degenerate input (all samples collinear is fine)
        raise ChannelHabitatError(f"the centreline could not be partitioned ({exc})", "CENTRELINE") from None
    progress(0.4, None)
    n = len(ch)
    interval = np.clip(np.searchsorted(edges, ch, side="right") - 1, 0, len(edges) - 2)
    # the cuts: Voronoi edges between samples of different intervals
    rp = vor.ridge_points
    rv = np.asarray(vor.ridge_vertices)
    cut = (rp[:, 0] < n) & (rp[:, 1] < n)
    cut[cut] = interval[rp[cut, 0]] != interval[rp[cut, 1]]
    cut &= (rv[:, 0] >= 0) & (rv[:, 1] >= 0)
    segs = np.stack([vor.vertices[rv[cut, 0]], vor.vertices[rv[cut, 1]]], axis=1) + np.array([cx, cy])
    lines = shapely.linestrings(segs) if len(segs) else np.array([], dtype=object)
    if len(lines):
        # cut segments that touch the extent, clipped to a box a little larger than it (not to the
        # extent itself: clipped ends would land a rounding error off the outline, unnoded)
        shapely.prepare(ext)
        lines = lines[shapely.intersects(ext, lines)]
        ex0, ey0, ex1, ey1 = shapely.bounds(ext)
        m = 0.01 * max(ex1 - ex0, ey1 - ey0) + 1.0
        lines = shapely.clip_by_rect(lines, ex0 - m, ey0 - m, ex1 + m, ey1 + m)
    noded = shapely.union_all(np.concatenate([[shapely.boundary(ext)], lines]))
    faces = shapely.get_parts(shapely.polygonize(shapely.get_parts(noded)))
    faces = faces[shapely.area(faces) > 0]
    rep = shapely.point_on_surface(faces)
    keep = shapely.contains(ext, rep)  # ext is prepared
    faces, rep = faces[keep], rep[keep]
    progress(0.7, None)
    # each face lies in one interval: that of the sample whose Voronoi cell holds its inner point
    from scipy.spatial import cKDTree

    rxy = shapely.get_coordinates(rep)
    _, near = cKDTree(np.column_stack([X, Y])).query(rxy)
    face_interval = interval[near]
    out = []
    for k in range(len(edges) - 1):
        sel = faces[face_interval == k]
        if len(sel) == 0:
            out.append(shapely.Polygon())
            continue
        try:
            piece = shapely.coverage_union_all(sel)
        except shapely.errors.GEOSException:  # pragma: no cover - faces of one noding form a coverage
            piece = shapely.union_all(sel)
        out.append(from_local_geometry(axis, piece))
    progress(1.0)
    return out


def interval_table(edges, full_length_m: float | None = None):
    """Columns for intervals: chainage_from_m, chainage_to_m, length_m, partial (shorter than the
    nominal length ``full_length_m``)."""
    e = np.asarray(edges, dtype=float)
    length = np.diff(e)
    partial = np.zeros(len(length), dtype=bool)
    if full_length_m is not None:
        partial = length < full_length_m * (1 - 1e-9)
    return {"chainage_from_m": e[:-1], "chainage_to_m": e[1:], "length_m": length, "partial": partial}


def post_chainages(axis, spacing_m: float):
    """Chainages of the posts: the reach start and every ``spacing_m`` after it (the segment
    boundaries), plus the reach end."""
    from .reach import segment_edges

    return segment_edges(axis.start_m, axis.end_m, spacing_m)


def label_decimals(spacing_m: float) -> int:
    """Decimals of km needed to write posts every ``spacing_m`` (1000 -> 0, 500 -> 1, 250 -> 2)."""
    for d in range(4):
        v = spacing_m / 1000.0 * 10 ** d
        if abs(v - round(v)) < 1e-6:
            return d
    return 3


def post_label(chainage_m: float, decimals: int | None = None) -> str:
    """'km 12'; a post off the whole kilometre gets ``decimals`` decimals (at least one; by
    default as many as it needs, up to three): 'km 12.5', 'km 34.999' (decimals=None),
    'km 35.0' (decimals=1)."""
    km = chainage_m / 1000.0
    if abs(km - round(km)) < 5e-7:
        return f"km {int(round(km))}"
    if decimals is None:
        return f"km {round(km, 3):.3f}".rstrip("0")
    return f"km {km:.{max(decimals, 1)}f}"
