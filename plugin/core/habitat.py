"""Habitat statistics of one run: the per-run pipeline every algorithm reuses.

    field (wet elements) -> locate on the reach axis (chainage, offset) -> classify (scheme)
    -> segment / zone of every element -> area-weighted statistics per segment, zone and the whole
    reach (core/stats.summarise) -> a chainage profile of speed percentiles for charts.

``analyse_run(field, reach, scheme)`` returns a :class:`RunAnalysis` holding the per-element arrays
(``codes``, ``chainage``, ``offset``, ``segment``, ``zone``, ``froude``) and the statistics tables as
ordered column dicts (``segment_stats``, ``zone_stats``, ``reach_stats``, ``profile``), ready for
``gis/outputs.write_features`` and ``gis/report.Report.table``.

Elements whose nearest centreline point is beyond either end of the axis (chainage clamped to the
ends) lie outside the reach: they are classified (``codes``) but belong to no segment or zone
(``segment == zone == -1``), are left out of every statistic, and their area is reported in
``notes`` and ``outside_area_m2``.

The CRS must be projected with metre units: areas and chainages are in metres (DESIGN.md section 5).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import stats
from .classes import ClassScheme
from .errors import ChannelHabitatError, as_progress
from .field import GridSupport, HydraulicField
from .reach import Reach, locate_field

PROFILE_BIN_CHOICES_M = (10.0, 20.0, 25.0, 50.0, 100.0, 200.0, 250.0, 500.0, 1000.0, 2000.0, 2500.0, 5000.0)


@dataclass
class RunAnalysis:
    """Everything one run gives along the reach. Per-element arrays align with ``field``."""

    field: HydraulicField
    reach: Reach
    scheme: ClassScheme
    codes: np.ndarray  # uint8 class code per element (0 = no class matched)
    chainage: np.ndarray  # m
    offset: np.ndarray  # m, + left looking downstream
    segment: np.ndarray  # int32, 0-based, -1 outside the reach
    zone: np.ndarray  # int32, 0-based, -1 outside the reach
    froude: np.ndarray  # Fr = V / sqrt(g D)
    segment_stats: dict  # ordered columns, one row per segment
    zone_stats: dict  # one row per zone
    reach_stats: dict  # one row: the whole reach
    profile: dict | None = None  # speed percentiles per chainage bin (charts)
    outside_area_m2: float = 0.0
    unclassified_area_m2: float = 0.0
    notes: list = field(default_factory=list)
    outside: np.ndarray | None = None  # bool: beyond the ends of the axis (in no segment or zone)

    @property
    def inside(self) -> np.ndarray:
        """Mask of elements inside the reach (in a segment)."""
        return self.segment >= 0

    @property
    def class_names(self) -> list:
        return self.scheme.names

    def class_fractions(self, table: str = "zone") -> np.ndarray:
        """(rows, classes) class share of wet area (0..1) of ``segment``/``zone``/``reach`` stats."""
        t = {"segment": self.segment_stats, "zone": self.zone_stats, "reach": self.reach_stats}[table]
        wet = np.asarray(t["wet_area_m2"], dtype=float)
        a = np.column_stack([t[f"area_{stats.field_key(n)}_m2"] for n in self.scheme.names])
        with np.errstate(invalid="ignore", divide="ignore"):
            return a / wet[:, None]


def check_metric_crs(crs_wkt: str, parameter: str = "DEPTH") -> None:
    """Refuse a geographic CRS or one not in metres (areas and chainages must be metric)."""
    if not crs_wkt:
        return
    try:
        from pyproj import CRS

        crs = CRS.from_wkt(crs_wkt)
    except Exception:  # pragma: no cover - an unreadable CRS is left to the reader's checks
        return
    if crs.is_geographic:
        raise ChannelHabitatError(
            f"the run's CRS ({crs.name}) is geographic (degrees): cell areas and chainages would not be "
            "in metres. Reproject the layers to a projected CRS in metres (e.g. the local UTM zone) "
            "first (Raster > Projections > Warp, or Mesh > Reproject).", parameter)
    units = {a.unit_name.lower() for a in crs.axis_info if a.unit_name}
    if units and not units <= {"metre", "meter", "m"}:
        raise ChannelHabitatError(
            f"the run's CRS ({crs.name}) has units {', '.join(sorted(units))}, not metres; reproject the "
            "layers to a projected CRS in metres first.", parameter)


def nice_bin(length_m: float, target_bins: int = 200, minimum_m: float = 0.0) -> float:
    """A round chainage bin width giving at most about ``target_bins`` bins over ``length_m``."""
    for b in PROFILE_BIN_CHOICES_M:
        if b >= minimum_m and length_m / b <= target_bins:
            return b
    return float(np.ceil(length_m / target_bins / 1000.0) * 1000.0)


def segment_table_keys(reach: Reach) -> dict:
    """The identifying columns of the segment table: 1-based number, chainages, zone of the middle."""
    e = reach.segment_edges
    mid = (e[:-1] + e[1:]) / 2.0
    z = reach.zone_of(mid)
    return {
        "segment": np.arange(1, reach.n_segments + 1, dtype=np.int64),
        "chainage_from_m": e[:-1].astype(float),
        "chainage_to_m": e[1:].astype(float),
        "zone": [reach.zone_names[i] if i >= 0 else "" for i in z],
    }


def zone_table_keys(reach: Reach) -> dict:
    e = reach.zone_edges
    return {"zone": list(reach.zone_names), "chainage_from_m": e[:-1].astype(float),
            "chainage_to_m": e[1:].astype(float)}


def reach_table_keys(reach: Reach) -> dict:
    return {"scope": ["reach"], "chainage_from_m": np.array([reach.axis.start_m]),
            "chainage_to_m": np.array([reach.axis.end_m])}


def _outside_mask(reach: Reach, loc) -> np.ndarray:
    """Elements whose nearest axis point is clamped to an end of the axis (beyond the reach)."""
    for name in ("outside", "clamped"):
        m = getattr(loc, name, None)
        if isinstance(m, np.ndarray) and m.dtype == bool and m.shape == loc.chainage.shape:
            return m
    ch = loc.chainage
    return (ch <= reach.axis.start_m) | (ch >= reach.axis.end_m) | ~np.isfinite(ch)


def analyse_run(fld: HydraulicField, reach: Reach, scheme: ClassScheme, location=None, progress=None,
                profile_bin_m: float | None = None, percentiles: bool = True, threads: int = 2,
                check_crs: bool = True) -> RunAnalysis:
    """Classify one run and summarise it per segment, zone and the whole reach.

    ``location``: a ``core.reach.Location`` for ``fld`` if already known (otherwise
    ``reach.locate_field`` is called, which caches per grid/mesh geometry). ``profile_bin_m``: width
    of the chainage bins of the speed profile (default: a round width giving <= 200 bins; 0 = no
    profile). ``percentiles=False`` leaves out the percentile columns (faster; class areas only).
    The same as :func:`classify_run` followed by :func:`summarise_run`.
    """
    progress = as_progress(progress)
    analysis = classify_run(fld, reach, scheme, location, progress.sub(0.0, 0.5), check_crs)
    return summarise_run(analysis, progress.sub(0.5, 1.0), profile_bin_m, percentiles, threads)


def classify_run(fld: HydraulicField, reach: Reach, scheme: ClassScheme, location=None, progress=None,
                 check_crs: bool = True, codes=None) -> RunAnalysis:
    """Locate, classify and assign segments and zones (no statistics yet: the tables are empty until
    :func:`summarise_run`). Lets patches be drawn while the statistics are computed. ``codes``: the
    elements' classes when already known (``scheme.classify(fld.depth, fld.speed)``)."""
    progress = as_progress(progress)
    if check_crs:
        check_metric_crs(fld.crs_wkt)
    if fld.n == 0:
        raise ChannelHabitatError(
            f"the run is dry everywhere: no element has depth >= {fld.wet_depth_m} m. Check the depth "
            "layer (units, band, time step) or lower the wet-depth threshold.", "DEPTH")
    progress(0.0, "locating elements along the reach")
    loc = location if location is not None else locate_field(reach, fld)
    progress.check()
    chainage = np.asarray(loc.chainage, dtype=np.float64)
    outside = _outside_mask(reach, loc)
    n_out = int(np.count_nonzero(outside))
    if n_out == fld.n:
        raise ChannelHabitatError(
            "no wet element lies along the reach: the run and the centreline do not overlap. Check that "
            "they are the same river and in the same CRS (the centreline is reprojected to the run's CRS "
            "when they differ), and that the centreline covers the modelled reach.", "CENTRELINE")
    seg = reach.segment_of(chainage)
    zone = reach.zone_of(chainage)
    if n_out:
        seg = np.where(outside, -1, seg).astype(np.int32)
        zone = np.where(outside, -1, zone).astype(np.int32)
    progress(0.8, "classifying")
    codes = scheme.classify(fld.depth, fld.speed) if codes is None else np.asarray(codes, dtype=np.uint8)
    fr = fld.froude()
    notes = []
    outside_area = float(fld.area[outside].sum()) if n_out else 0.0
    if n_out:
        total = fld.wet_area_m2
        notes.append(f"{n_out} wet elements ({outside_area:,.0f} m2, {100 * outside_area / total:.1f}% of the "
                     "wet area) lie beyond the ends of the reach axis and are left out of the statistics.")
    unclassified = (codes == 0) & ~outside
    unclassified_area = float(fld.area[unclassified].sum()) if unclassified.any() else 0.0
    if unclassified_area > 0:
        notes.append(f"{int(unclassified.sum())} wet elements ({unclassified_area:,.0f} m2) match no class of "
                     f"the scheme '{scheme.name}'; class areas add up to less than the wet area.")
    progress(1.0)
    return RunAnalysis(fld, reach, scheme, codes, chainage, np.asarray(loc.offset, dtype=np.float64), seg, zone,
                       fr, {}, {}, {}, None, outside_area, unclassified_area, notes, outside)


def summarise_run(analysis: RunAnalysis, progress=None, profile_bin_m: float | None = None,
                  percentiles: bool = True, threads: int = 2) -> RunAnalysis:
    """Fill the statistics tables (segments, zones, whole reach) and the chainage profile of a
    classified run; returns the same object."""
    progress = as_progress(progress)
    fld, reach, scheme = analysis.field, analysis.reach, analysis.scheme
    seg, zone = analysis.segment, analysis.zone
    outside = analysis.outside if analysis.outside is not None else (analysis.zone < 0)
    progress(0.0, "statistics per segment, zone and chainage bin")
    groupings = [(seg, reach.n_segments), (zone, reach.n_zones),
                 (np.where(outside, -1, 0).astype(np.int32), 1)]
    bins = None
    if percentiles and profile_bin_m != 0:
        bins = profile_bins(reach, fld.weight_unit_m2, profile_bin_m)
        groupings.append((bin_of(bins, analysis.chainage, outside), len(bins) - 1))
    # the profile needs speed percentiles only
    wish = [percentiles] * 3 + ([("v",)] if bins is not None else [])
    tables = stats.summarise_groupings(fld.speed, fld.depth, fld.area, analysis.codes, groupings, scheme.names,
                                       fld.weight_unit_m2, froude=analysis.froude, percentiles=wish,
                                       threads=threads)
    progress.check()
    analysis.segment_stats = {**segment_table_keys(reach), **tables[0]}
    analysis.zone_stats = {**zone_table_keys(reach), **tables[1]}
    analysis.reach_stats = {**reach_table_keys(reach), **tables[2]}
    analysis.profile = profile_table(bins, tables[3], scheme) if bins is not None else None
    progress(1.0)
    return analysis


def profile_bins(reach: Reach, weight_unit_m2: float = 1.0, bin_m: float | None = None) -> np.ndarray:
    """Edges of the chainage bins of the speed profile: ``bin_m`` wide from the reach start (the last
    may be shorter); by default a round width giving <= 200 bins and >= 4 cells."""
    start, end = reach.axis.start_m, reach.axis.end_m
    if bin_m is None:
        bin_m = nice_bin(end - start, minimum_m=4.0 * float(np.sqrt(weight_unit_m2)))
    edges = np.arange(start, end, bin_m, dtype=float)
    if len(edges) == 0 or edges[-1] < end:
        edges = np.append(edges, end)
    if len(edges) < 2:
        edges = np.array([start, end], dtype=float)
    return edges


def bin_of(edges, chainage, outside=None) -> np.ndarray:
    """Bin number (0-based) of each chainage; -1 outside the edges or where ``outside``."""
    c = np.asarray(chainage)
    nb = len(edges) - 1
    b = np.clip(np.searchsorted(edges, c, side="right") - 1, 0, nb - 1).astype(np.int32)
    bad = (c < edges[0]) | (c > edges[-1]) | ~np.isfinite(c)
    if outside is not None:
        bad |= np.asarray(outside)
    b[bad] = -1
    return b


def profile_table(edges, table: dict, scheme: ClassScheme) -> dict:
    """The profile columns (chainage_from_m, chainage_to_m, wet_area_m2, v_min_ms ... v_max_ms,
    v_mean_ms, pct_<class>) from a summarise table over chainage bins."""
    cols = {"chainage_from_m": np.asarray(edges[:-1], dtype=float),
            "chainage_to_m": np.asarray(edges[1:], dtype=float), "wet_area_m2": table["wet_area_m2"]}
    for lab in stats.PERCENTILE_LABELS:
        cols[f"v_{lab}_ms"] = table[f"v_{lab}_ms"]
    cols["v_mean_ms"] = table["v_mean_ms"]
    for name in scheme.names:
        cols[f"pct_{stats.field_key(name)}"] = table[f"pct_{stats.field_key(name)}"]
    return cols


def chainage_profile(fld: HydraulicField, reach: Reach, chainage, codes, scheme: ClassScheme,
                     bin_m: float | None = None, outside=None) -> dict:
    """Speed percentiles and class shares per chainage bin (for a longitudinal chart), standalone.

    Columns: chainage_from_m, chainage_to_m, wet_area_m2, v_min_ms, v_p10_ms, v_p25_ms, v_p50_ms,
    v_p75_ms, v_p90_ms, v_max_ms, v_mean_ms, pct_<class>; dry bins hold NaN.
    """
    edges = profile_bins(reach, fld.weight_unit_m2, bin_m)
    b = bin_of(edges, chainage, outside)
    t = stats.summarise_groupings(fld.speed, fld.depth, fld.area, codes, [(b, len(edges) - 1)], scheme.names,
                                  fld.weight_unit_m2)[0]
    return profile_table(edges, t, scheme)


# ----------------------------------------------------------------------------------------------
# Helpers for algorithms that map one run (kept here so algorithm files stay recipes)
# ----------------------------------------------------------------------------------------------

def _crs(wkt: str):
    from pyproj import CRS

    return CRS.from_wkt(wkt)


def crs_name(wkt: str) -> str:
    if not wkt:
        return "unknown"
    try:
        c = _crs(wkt)
        code = c.to_epsg(min_confidence=70)
        return f"{c.name} (EPSG:{code})" if code else c.name
    except Exception:  # pragma: no cover - unreadable CRS
        return "unreadable CRS"


def crs_differ(a: str, b: str) -> bool:
    """True when both CRS are known and differ (axis order ignored)."""
    if not a or not b:
        return False
    return not _crs(a).equals(_crs(b), ignore_axis_order=True)


def reprojection_note(line_crs_wkt: str, run_crs_wkt: str) -> str | None:
    """The note for logs and reports when the centreline's layer is in another CRS than the run."""
    if not crs_differ(line_crs_wkt, run_crs_wkt):
        return None
    return (f"The centreline is in {crs_name(line_crs_wkt)} and the run in {crs_name(run_crs_wkt)}: the "
            "centreline (and any segment/zone polygons) was reprojected to the run's CRS; its chainages "
            "were kept.")


def reach_in_crs(reach: Reach, crs_wkt: str):
    """(reach, note): the reach in ``crs_wkt`` -- the same object when the CRS already match (or one
    is unknown), else a copy with the axis vertices and any segment/zone polygons reprojected (pyproj,
    x/y order). Vertex chainages are kept: they define the reach."""
    axis = reach.axis
    if not crs_differ(axis.crs_wkt, crs_wkt):
        return reach, None
    import copy

    import shapely
    from pyproj import Transformer

    tr = Transformer.from_crs(_crs(axis.crs_wkt), _crs(crs_wkt), always_xy=True)
    new_axis = axis.reprojected(crs_wkt)  # keeps chainage, origin and direction
    out = copy.copy(reach)
    out.axis = new_axis

    def move(geoms):
        if geoms is None:
            return None
        return [None if g is None else shapely.transform(g, lambda xy: np.column_stack(
            tr.transform(xy[:, 0], xy[:, 1]))) for g in geoms]

    out.segment_polygons = move(getattr(reach, "segment_polygons", None))
    out.zone_polygons = move(getattr(reach, "zone_polygons", None))
    return out, reprojection_note(axis.crs_wkt, crs_wkt)


def reach_polygons(reach: Reach):
    """(segment polygons, zone polygons) the reach brings (e.g. from buildreach), each None when absent
    or not one per segment/zone."""
    seg = getattr(reach, "segment_polygons", None)
    zone = getattr(reach, "zone_polygons", None)
    if seg is not None and len(seg) != reach.n_segments:
        seg = None
    if zone is not None and len(zone) != reach.n_zones:
        zone = None
    return seg, zone


def geometry_notes(reach: Reach) -> list:
    seg, zone = reach_polygons(reach)
    notes = []
    if seg is None:
        notes.append("SEGMENT_STATS polygons are the wet area of each segment in this run (give the buildreach "
                     "SEGMENTS layer for fixed segment polygons).")
    if zone is None:
        notes.append("ZONE_STATS polygons are the wet area of each zone in this run.")
    return notes


def face_table(analysis: RunAnalysis) -> dict:
    """Per-element columns for a face layer (mesh runs): face, class, class_code, segment (1-based,
    0 outside the reach), chainage_m, offset_m, depth_m, speed_ms, froude, area_m2."""
    fld = analysis.field
    names = np.array([""] + list(analysis.scheme.names), dtype=object)
    face = getattr(fld.support, "index", np.arange(fld.n))
    return {
        "face": np.asarray(face, dtype=np.int64),
        "class": names[analysis.codes],
        "class_code": analysis.codes.astype(np.int64),
        "segment": (analysis.segment + 1).astype(np.int64),
        "chainage_m": analysis.chainage,
        "offset_m": analysis.offset,
        "depth_m": fld.depth.astype(np.float64),
        "speed_ms": fld.speed.astype(np.float64),
        "froude": analysis.froude.astype(np.float64),
        "area_m2": fld.area.astype(np.float64),
    }


def run_summary(analysis: RunAnalysis, src=None, min_patch_area_m2: float = 0.0) -> list:
    """(label, value[, unit]) rows describing the run for a report."""
    fld, reach, scheme = analysis.field, analysis.reach, analysis.scheme
    rows = [("Run", fld.name or (src.label if src is not None else ""))]
    if src is not None:
        if src.mesh or fld.support.__class__.__name__ == "MeshSupport":
            rows.append(("Mesh", src.mesh or "QGIS mesh layer"))
            rows.append(("Depth group", src.depth_group or "found by name"))
            if src.u_group:
                rows.append(("Velocity groups (x, y)", f"{src.u_group}, {src.v_group}"))
            else:
                rows.append(("Velocity group", src.velocity_group or "found by name"))
            rows.append(("Time-step index", src.time_index))
        else:
            rows.append(("Depth raster", src.depth))
            if src.speed:
                rows.append(("Speed raster", src.speed))
            else:
                rows.append(("Velocity rasters (u, v)", f"{src.u}, {src.v}"))
    rows.append(("CRS", crs_name(fld.crs_wkt)))
    sup = fld.support
    if isinstance(sup, GridSupport):
        rows.append(("Grid", f"{sup.shape[1]} x {sup.shape[0]} cells of {abs(sup.transform[1]):g} x "
                             f"{abs(sup.transform[5]):g} m"))
    elif sup is not None:
        rows.append(("Mesh faces", f"{len(sup.face_nodes)} ({fld.n} wet)"))
    rows += [("Wet-depth threshold", fld.wet_depth_m, "m"), ("Wet elements", fld.n),
             ("Wet area inside the reach", float(analysis.reach_stats["wet_area_m2"][0]), "m2")]
    if analysis.outside_area_m2 > 0:
        rows.append(("Wet area beyond the axis ends (left out)", analysis.outside_area_m2, "m2"))
    ax = reach.axis
    rows.append(("Reach", f"chainage {ax.start_m:,.0f} to {ax.end_m:,.0f} m ({ax.length_m / 1000:.2f} km), "
                          f"chainage {ax.method}"))
    e = reach.segment_edges
    rows.append(("Segments", f"{reach.n_segments} (length {e[1] - e[0]:g} m)" if reach.n_segments else "none"))
    rows.append(("Zones", ", ".join(f"{n} {a:,.0f}–{b:,.0f} m" for n, a, b in
                                    zip(reach.zone_names, reach.zone_edges[:-1], reach.zone_edges[1:]))))
    rows.append(("Class scheme", f"{scheme.name}: {', '.join(scheme.names)}"))
    rows.append(("Minimum patch area (PATCHES)", min_patch_area_m2 if min_patch_area_m2 > 0 else "none",
                 "m2" if min_patch_area_m2 > 0 else ""))
    return rows
