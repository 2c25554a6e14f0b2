"""Everything buildreach writes, computed from a drawn centreline: the axis, km posts, segment
and zone tables and polygons, and the notes for the log (pure numpy/shapely/pyproj)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .errors import ChannelHabitatError, as_progress
from .reach import Reach, axis_features, build_axis, crs_name, parse_zone_breaks, same_crs, segment_edges
from .segments import (
    area_m2,
    buffer_extent,
    chainage_polygons,
    interval_table,
    label_decimals,
    post_chainages,
    post_label,
)


@dataclass
class BuiltReach:
    axis: object
    reach: Reach
    notes: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    axis_columns: dict = field(default_factory=dict)
    axis_xym: tuple = ()
    post_columns: dict = field(default_factory=dict)
    post_geometries: list = field(default_factory=list)
    segment_columns: dict = field(default_factory=dict)
    segment_geometries: list = field(default_factory=list)
    zone_columns: dict = field(default_factory=dict)
    zone_geometries: list = field(default_factory=list)


def velocity_for_direction(fld, crs_wkt: str):
    """(x, y, u, v, weight) of a field's wet elements in the centreline CRS (for inferring the
    flow direction). Elements are transformed when the CRS differ; the velocity components keep
    their grid orientation (only their sign along the river matters)."""
    if fld is None or fld.u is None or fld.v is None:
        raise ChannelHabitatError("inferring the direction needs velocity vectors: give RUN_VELOCITY_U and "
                                  "RUN_VELOCITY_V rasters (or a mesh with a velocity vector group)", "DIRECTION")
    x, y = fld.x, fld.y
    if fld.crs_wkt and crs_wkt and not same_crs(fld.crs_wkt, crs_wkt):
        from pyproj import Transformer

        from .reach import parse_crs

        tr = Transformer.from_crs(parse_crs(fld.crs_wkt), parse_crs(crs_wkt), always_xy=True)
        x, y = tr.transform(x, y)
    return np.asarray(x), np.asarray(y), fld.u, fld.v, fld.area


def _multi(geom):
    import shapely

    if geom is None or geom.is_empty:
        return shapely.MultiPolygon()
    if geom.geom_type == "Polygon":
        return shapely.MultiPolygon([geom])
    if geom.geom_type == "MultiPolygon":
        return geom
    polys = [g for g in shapely.get_parts(geom) if g.geom_type == "Polygon"]
    return shapely.MultiPolygon(polys)


def build_outputs(parts, crs_wkt: str, join_tolerance_m: float = 1.0, direction: str = "as digitised",
                  velocity=None, origin: str = "upstream", datum_m: float = 0.0,
                  segment_length_m: float = 1000.0, zone_breaks: str = "", extent=None,
                  extent_crs_wkt: str = "", buffer_half_width_m: float = 100.0, run_field=None,
                  progress=None) -> BuiltReach:
    """Axis, posts, segments and zones from the centreline ``parts`` [(x, y), ...] in ``crs_wkt``.
    ``extent``: a shapely polygon in ``extent_crs_wkt`` (None: a buffer of ``buffer_half_width_m``).
    ``run_field``: a HydraulicField whose wet elements are located on the new axis, to report how
    many have an ambiguous chainage (and to have them cached for the algorithms that follow)."""
    import shapely

    progress = as_progress(progress)
    axis, notes = build_axis(parts, crs_wkt, join_tolerance_m, direction, datum_m, origin, velocity)
    warnings = []
    if axis.is_geographic:
        warnings.append(f"The centreline is in a geographic CRS ({crs_name(crs_wkt)}): chainage is geodesic. "
                        "Reproject it to a projected CRS in metres for planar chainage and areas.")
    edges = segment_edges(axis.start_m, axis.end_m, segment_length_m)
    zedges, znames = parse_zone_breaks(zone_breaks, axis.start_m, axis.end_m, origin)
    reach = Reach(axis, edges, zedges, znames)
    progress(0.1, "preparing the channel extent")
    if extent is None:
        ext = buffer_extent(axis, buffer_half_width_m)
        notes.append(f"Channel extent: a buffer of {buffer_half_width_m:g} m either side of the centreline.")
    else:
        ext = extent
        if extent_crs_wkt and not same_crs(extent_crs_wkt, crs_wkt):
            from pyproj import Transformer

            from .reach import parse_crs

            tr = Transformer.from_crs(parse_crs(extent_crs_wkt), parse_crs(crs_wkt), always_xy=True)
            ext = shapely.transform(ext, lambda c: np.column_stack(tr.transform(c[:, 0], c[:, 1])))
            notes.append(f"The channel extent was transformed from {crs_name(extent_crs_wkt)} to the "
                         f"centreline's {crs_name(crs_wkt)}.")
    seg_polys = chainage_polygons(axis, edges, ext, progress=progress.sub(0.15, 0.7))
    zone_polys = chainage_polygons(axis, zedges, ext, progress=progress.sub(0.7, 0.95))
    reach.segment_polygons = seg_polys
    reach.zone_polygons = zone_polys
    ext_area = area_m2(axis, ext)
    covered = sum(area_m2(axis, p) for p in seg_polys)
    if abs(covered - ext_area) > 1e-6 * max(ext_area, 1.0):  # pragma: no cover - a partition by construction
        warnings.append(f"The segments cover {covered:.1f} m2 of an extent of {ext_area:.1f} m2.")
    line = axis.linestring()
    outside_len = axis.length_m * (1.0 - shapely.length(shapely.intersection(line, ext)) / max(line.length, 1e-12))
    if outside_len > 0.01 * axis.length_m:
        warnings.append(f"About {outside_len:.0f} m of the centreline lies outside the channel extent: check that "
                        "the extent covers the whole reach.")
    # necks and tight bends within the extent's reach of the centreline
    half = _typical_half_width(axis, ext)
    feats = axis_features(axis, half)
    necks = [f for f in feats if f.kind == "neck"]
    bends = [f for f in feats if f.kind == "bend"]
    feature_text = []
    for f in necks:
        feature_text.append(f"neck: chainage {f.chainage_m:.0f} m passes {f.size_m:.0f} m from chainage "
                            f"{f.other_chainage_m:.0f} m")
    for f in bends:
        feature_text.append(f"tight bend: radius about {f.size_m:.0f} m at chainage {f.chainage_m:.0f} m")
    if feature_text:
        notes.append(f"Where points up to {half:.0f} m from the centreline can have an ambiguous chainage: "
                     + "; ".join(feature_text) + ". Segment cuts there stop where the other part of the river "
                     "becomes nearer.")
    if run_field is not None and run_field.n:
        from .reach import locate_field

        run_axis = axis.reprojected(run_field.crs_wkt) if run_field.crs_wkt else axis
        loc = locate_field(run_axis, run_field)
        notes.append("The run on this axis: " + loc.summary("wet elements"))
    # ---- columns ------------------------------------------------------------------------------
    out = BuiltReach(axis, reach, notes, warnings)
    out.axis_xym = (axis.x, axis.y, axis.chainage)
    out.axis_columns = {
        "length_m": np.array([axis.length_m]), "start_m": np.array([axis.start_m]),
        "end_m": np.array([axis.end_m]), "datum_m": np.array([axis.datum_m]),
        "origin": [axis.origin], "direction": [axis.direction], "method": [axis.method_text],
        "segment_length_m": np.array([float(segment_length_m)]),
        "zone_breaks": [", ".join(f"{e:g} {n}" for e, n in zip(zedges[:-1], znames))],
        "necks": np.array([len(necks)], dtype=np.int64), "tight_bends": np.array([len(bends)], dtype=np.int64),
        "notes": ["; ".join(feature_text)],
    }
    pc = post_chainages(axis, segment_length_m)
    px, py, ang = axis.point_at(pc)
    dec = label_decimals(segment_length_m)
    out.post_columns = {"chainage_m": pc, "label": [post_label(c, dec) for c in pc],
                        "bearing_deg": np.mod(90.0 - np.degrees(ang), 360.0)}
    out.post_geometries = list(shapely.points(px, py))
    table = interval_table(edges, segment_length_m)
    seg_zone = reach.segment_zone_names()
    out.segment_columns = {"segment": np.arange(1, len(edges), dtype=np.int64), **table, "zone": seg_zone,
                           "area_m2": np.array([area_m2(axis, p) for p in seg_polys])}
    out.segment_geometries = [_multi(p) for p in seg_polys]
    zt = interval_table(zedges)
    out.zone_columns = {"zone": list(znames), "zone_number": np.arange(1, len(zedges), dtype=np.int64),
                        "chainage_from_m": zt["chainage_from_m"], "chainage_to_m": zt["chainage_to_m"],
                        "length_m": zt["length_m"], "area_m2": np.array([area_m2(axis, p) for p in zone_polys])}
    out.zone_geometries = [_multi(p) for p in zone_polys]
    partial = np.flatnonzero(table["partial"])
    notes.append(f"Reach axis: {axis.length_m:.1f} m ({axis.method_text}); chainage {axis.start_m:.1f} to "
                 f"{axis.end_m:.1f} m from the {axis.origin} end; direction {axis.direction}.")
    zone_text = ", ".join(f"{n} ({a:.0f}-{b:.0f} m)" for n, a, b in zip(znames, zedges[:-1], zedges[1:]))
    notes.append(f"{len(edges) - 1} segments of {segment_length_m:g} m"
                 + (f", the last {table['length_m'][partial[0]]:.1f} m long (partial)" if partial.size else "")
                 + f"; zones: {zone_text}.")
    progress(1.0)
    return out


def _typical_half_width(axis, ext) -> float:
    """Half the typical channel width: extent area / centreline length / 2 (at least 1 m),
    capped at a tenth of the reach length."""
    w = area_m2(axis, ext) / max(axis.length_m, 1e-9) / 2.0
    return float(min(max(w, 1.0), max(axis.length_m / 10.0, 1.0), 5000.0)) if math.isfinite(w) else 50.0
