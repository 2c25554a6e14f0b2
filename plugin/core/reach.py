"""The reach axis: an oriented centreline that maps (x, y) to (chainage, signed offset).

Chainage
    Runs along the axis vertices, which are ordered so that chainage increases along them: from
    the upstream end downstream (``origin="upstream"``, the default), or from the downstream end
    upstream (``origin="downstream"``). The chainage of the first vertex is the datum
    (``datum_m``, default 0). In a projected CRS the chainage is planar length; in a geographic
    CRS it is the geodesic length of each vertex-to-vertex segment on the CRS's ellipsoid
    (pyproj.Geod, Karney 2013, J. Geodesy 87:43-55), with ``method`` saying which.
Offset
    Signed distance from the centreline, positive to the LEFT of the flow looking downstream
    (so with a downstream origin, positive is to the left of the vertex order reversed).
Location
    ``axis.locate(x, y)`` finds the nearest point on the centreline of every point, exactly
    (core/locate.py: buckets, a clearance certificate, an exact tree search for the rest). Points
    beyond either end are clamped to the end (chainage = the end's) and flagged; points whose
    nearest part of the centreline is ambiguous (a neck between two loops, a bend tighter than the
    point's offset) are flagged with the reason. In a geographic CRS points are located in a local
    azimuthal equidistant projection centred on the reach (same ellipsoid); the fraction along
    the segment found is applied to that segment's geodesic length.

``locate_field(reach, field)`` caches the result per grid or mesh geometry and axis: a second
run on the same grid locates only the cells the first did not have.
"""

from __future__ import annotations

import hashlib
import math
import os
from collections import OrderedDict
from dataclasses import dataclass, field

import numpy as np

from .errors import ChannelHabitatError
from .locate import AMBIGUITY_BEND, AMBIGUITY_NECK, AMBIGUITY_NONE, PolylineIndex

LOCATE_THREADS = max(1, min(2, os.cpu_count() or 1))  # threads sharing the located points

ORIGINS = ("upstream", "downstream")


# ------------------------------------------------------------------------------------------------
# CRS helpers (pyproj)
# ------------------------------------------------------------------------------------------------

_CRS_CACHE: dict = {}


def parse_crs(wkt: str):
    """pyproj CRS of a WKT (cached); None for an empty string."""
    if not wkt:
        return None
    crs = _CRS_CACHE.get(wkt)
    if crs is None:
        from pyproj import CRS

        try:
            crs = CRS.from_wkt(wkt) if "[" in wkt else CRS.from_user_input(wkt)
        except Exception as exc:  # pyproj raises CRSError
            raise ChannelHabitatError(f"the centreline CRS cannot be read ({exc})", "CENTRELINE") from None
        _CRS_CACHE[wkt] = crs
    return crs


def crs_is_geographic(wkt: str) -> bool:
    crs = parse_crs(wkt)
    return bool(crs is not None and crs.is_geographic)


def same_crs(a: str, b: str) -> bool:
    """True when either is unknown or both describe the same CRS (axis order ignored)."""
    if not a or not b or a == b:
        return True
    return bool(parse_crs(a).equals(parse_crs(b), ignore_axis_order=True))


def crs_name(wkt: str) -> str:
    crs = parse_crs(wkt)
    if crs is None:
        return "unknown CRS"
    epsg = crs.to_epsg(min_confidence=70)
    return f"{crs.name} (EPSG:{epsg})" if epsg else crs.name


# ------------------------------------------------------------------------------------------------
# Location
# ------------------------------------------------------------------------------------------------

@dataclass
class Location:
    """Where each point lies along the reach (arrays aligned with the points)."""

    chainage: np.ndarray  # m from the reach origin (plus datum)
    offset: np.ndarray  # m, + left looking downstream
    distance: np.ndarray  # m, distance to the centreline (= |offset|)
    clamped_upstream: int  # points beyond the upstream end (chainage clamped to that end)
    clamped_downstream: int  # points beyond the downstream end
    ambiguous: np.ndarray | None = None  # bool: the nearest part of the centreline is ambiguous
    ambiguity: np.ndarray | None = None  # uint8: 0 none, 1 neck between loops, 2 tight bend
    end: np.ndarray | None = None  # int8: -1 beyond the upstream end, +1 beyond the downstream end
    outside: np.ndarray | None = None  # bool: beyond either end (end != 0)
    method: str = ""

    def __post_init__(self):
        n = len(self.chainage)
        if self.ambiguity is None:
            self.ambiguity = np.zeros(n, dtype=np.uint8)
        if self.ambiguous is None:
            self.ambiguous = self.ambiguity != AMBIGUITY_NONE
        if self.end is None:
            self.end = np.zeros(n, dtype=np.int8)
        if self.outside is None:
            self.outside = self.end != 0

    @property
    def n(self) -> int:
        return len(self.chainage)

    @property
    def n_ambiguous(self) -> int:
        return int(np.count_nonzero(self.ambiguous))

    @property
    def n_neck(self) -> int:
        return int(np.count_nonzero(self.ambiguity == AMBIGUITY_NECK))

    @property
    def n_bend(self) -> int:
        return int(np.count_nonzero(self.ambiguity == AMBIGUITY_BEND))

    def take(self, index) -> Location:
        """The location of a subset of the points (positions or a boolean mask)."""
        c = self.chainage[index]
        e = self.end[index]
        return Location(c, self.offset[index], self.distance[index], int(np.count_nonzero(e < 0)),
                        int(np.count_nonzero(e > 0)), self.ambiguous[index], self.ambiguity[index], e,
                        self.outside[index], self.method)

    def summary(self, what: str = "elements") -> str:
        """One paragraph for a log: counts of clamped and ambiguous points."""
        n = self.n
        parts = [f"{n} {what} located along the centreline ({self.method})."]
        if self.clamped_upstream or self.clamped_downstream:
            parts.append(f"{self.clamped_upstream} lie beyond the upstream end and "
                         f"{self.clamped_downstream} beyond the downstream end: their chainage is "
                         "clamped to that end.")
        if self.n_ambiguous:
            share = 100.0 * self.n_ambiguous / max(n, 1)
            parts.append(f"{self.n_ambiguous} ({share:.2f} %) have an ambiguous nearest part of the "
                         f"centreline ({self.n_neck} at a neck between loops, {self.n_bend} on the "
                         "inside of a bend tighter than their distance from the centreline): another "
                         "part of the line is almost as near, so their chainage could be far off.")
        return " ".join(parts)


# ------------------------------------------------------------------------------------------------
# The axis
# ------------------------------------------------------------------------------------------------

class ReachAxis:
    """Oriented centreline; vertices ordered so that chainage increases along them.

    ``x, y`` in the CRS ``crs_wkt``. ``method``: None chooses 'planar' (projected or unknown CRS)
    or 'geodesic' (geographic CRS); with explicit ``chainage`` per vertex (e.g. M values of a
    buildreach AXIS) those are used as they are. ``origin``: 'upstream' (vertices run downstream)
    or 'downstream' (vertices run upstream). ``direction``: how the orientation was decided (text).
    """

    def __init__(self, x, y, crs_wkt: str = "", datum_m: float = 0.0, method: str | None = None,
                 chainage=None, origin: str = "upstream", direction: str = "as digitised"):
        x = np.asarray(x, dtype=np.float64).ravel()
        y = np.asarray(y, dtype=np.float64).ravel()
        if len(x) != len(y) or len(x) < 2:
            raise ChannelHabitatError("the centreline needs at least two vertices", "CENTRELINE")
        if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
            raise ChannelHabitatError("the centreline has vertices without finite coordinates", "CENTRELINE")
        if origin not in ORIGINS:
            raise ChannelHabitatError(f"origin must be 'upstream' or 'downstream', not {origin!r}", "ORIGIN")
        keep = np.ones(len(x), dtype=bool)
        keep[1:] = (np.diff(x) != 0) | (np.diff(y) != 0)  # drop repeated vertices
        self.x, self.y = x[keep], y[keep]
        if len(self.x) < 2:
            raise ChannelHabitatError("the centreline has zero length (all its vertices coincide)",
                                      "CENTRELINE")
        self.crs_wkt = crs_wkt or ""
        self.datum_m = float(datum_m)
        self.origin = origin
        self.direction = direction
        self.is_geographic = crs_is_geographic(self.crs_wkt)
        self._geod = parse_crs(self.crs_wkt).get_geod() if self.is_geographic else None
        if self.is_geographic:
            az, _, seg = self._geod.inv(self.x[:-1], self.y[:-1], self.x[1:], self.y[1:])
            self._az = np.asarray(az, dtype=np.float64)
            seg = np.asarray(seg, dtype=np.float64)
        else:
            self._az = None
            seg = np.hypot(np.diff(self.x), np.diff(self.y))
        if chainage is not None:
            ch = np.asarray(chainage, dtype=np.float64).ravel()
            if len(ch) == len(keep):
                ch = ch[keep]
            if len(ch) != len(self.x) or not np.all(np.isfinite(ch)) or np.any(np.diff(ch) <= 0):
                raise ChannelHabitatError("the centreline's chainage (M) values must be finite and increase "
                                          "strictly from vertex to vertex", "CENTRELINE")
            self.chainage = ch
            self.datum_m = float(ch[0]) if datum_m == 0.0 else self.datum_m
            self.method = method or "from M values"
        else:
            self.chainage = self.datum_m + np.concatenate([[0.0], np.cumsum(seg)])
            if method is None:
                method = "geodesic" if self.is_geographic else "planar"
            self.method = method
        self._segment_m = seg  # measured length of each segment (planar or geodesic)
        self._local = None  # (forward, inverse) transformers for a geographic CRS
        self._lx = self._ly = None
        self._index: PolylineIndex | None = None
        self._key: str | None = None

    # --------------------------------------------------------------------------------------------
    @property
    def length_m(self) -> float:
        return float(self.chainage[-1] - self.chainage[0])

    @property
    def start_m(self) -> float:
        return float(self.chainage[0])

    @property
    def end_m(self) -> float:
        return float(self.chainage[-1])

    @property
    def flow_sign(self) -> int:
        """+1 when the vertices run downstream (upstream origin), -1 otherwise."""
        return 1 if self.origin == "upstream" else -1

    @property
    def upstream_m(self) -> float:
        """Chainage of the upstream end."""
        return self.start_m if self.origin == "upstream" else self.end_m

    @property
    def downstream_m(self) -> float:
        return self.end_m if self.origin == "upstream" else self.start_m

    @property
    def method_text(self) -> str:
        """How chainage and offsets are measured, in words (written into outputs)."""
        if self.is_geographic:
            ell = parse_crs(self.crs_wkt).ellipsoid
            name = ell.name if ell is not None else "the CRS's"
            text = (f"{self.method}: chainage along the geodesic between vertices on the {name} ellipsoid; "
                    "points located in a local azimuthal equidistant projection centred on the reach")
            return text
        return f"{self.method}: chainage as planar length in {crs_name(self.crs_wkt)}"

    @property
    def key(self) -> str:
        """Identifies the axis (vertices, chainage, CRS, origin) for caches."""
        if self._key is None:
            h = hashlib.sha1()
            for a in (self.x, self.y, self.chainage):
                h.update(np.ascontiguousarray(a).tobytes())
            h.update(f"{self.crs_wkt}|{self.origin}".encode())
            self._key = h.hexdigest()
        return self._key

    # --------------------------------------------------------------------------------------------
    # local planar frame
    # --------------------------------------------------------------------------------------------
    def _local_transformers(self):
        if self._local is None:
            from pyproj import Transformer
            from pyproj.crs import ProjectedCRS
            from pyproj.crs.coordinate_operation import AzimuthalEquidistantConversion

            geo = parse_crs(self.crs_wkt)
            mid = 0.5 * (self.chainage[0] + self.chainage[-1])
            lon0, lat0, _ = self._geodesic_point(np.array([mid]))
            conv = AzimuthalEquidistantConversion(latitude_natural_origin=float(lat0[0]),
                                                  longitude_natural_origin=float(lon0[0]))
            local = ProjectedCRS(conversion=conv, geodetic_crs=geo.geodetic_crs)
            fwd = Transformer.from_crs(geo, local, always_xy=True)
            inv = Transformer.from_crs(local, geo, always_xy=True)
            self._local = (fwd, inv)
        return self._local

    def to_local(self, x, y):
        """Coordinates in the metric frame used for locating (the CRS itself when projected)."""
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        if not self.is_geographic:
            return x, y
        fwd, _ = self._local_transformers()
        X, Y = fwd.transform(x, y)
        return np.asarray(X, dtype=np.float64), np.asarray(Y, dtype=np.float64)

    def from_local(self, X, Y):
        X = np.asarray(X, dtype=np.float64)
        Y = np.asarray(Y, dtype=np.float64)
        if not self.is_geographic:
            return X, Y
        _, inv = self._local_transformers()
        x, y = inv.transform(X, Y)
        return np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)

    @property
    def local_vertices(self):
        if self._lx is None:
            self._lx, self._ly = self.to_local(self.x, self.y)
        return self._lx, self._ly

    def index(self) -> PolylineIndex:
        if self._index is None:
            lx, ly = self.local_vertices
            keep = np.ones(len(lx), dtype=bool)
            keep[1:] = (np.diff(lx) != 0) | (np.diff(ly) != 0)
            if not keep.all():  # vertices distinct in the CRS but equal after projection
                raise ChannelHabitatError("the centreline has vertices closer than the projection can "
                                          "separate; remove duplicate vertices", "CENTRELINE")
            # two threads share the point chunks (numpy releases the GIL in its loops): measured
            # ~25 % less wall time for 1.3 M cells on an otherwise idle 2-core machine, same results
            self._index = PolylineIndex(lx, ly, threads=LOCATE_THREADS)
        return self._index

    # --------------------------------------------------------------------------------------------
    def _segment_of(self, c):
        return np.clip(np.searchsorted(self.chainage, c, side="right") - 1, 0, len(self.x) - 2)

    def _geodesic_point(self, c):
        i = self._segment_of(c)
        frac = (c - self.chainage[i]) / (self.chainage[i + 1] - self.chainage[i])
        lon, lat, _ = self._geod.fwd(self.x[i], self.y[i], self._az[i], frac * self._segment_m[i])
        return np.asarray(lon, dtype=np.float64), np.asarray(lat, dtype=np.float64), i

    def point_at(self, chainage):
        """(x, y, tangent angle) at the given chainages, clamped to the axis. The angle (radians,
        counter-clockwise from +x) points the way chainage increases, in the CRS's plane (in the
        local projection for a geographic CRS). In a geographic CRS positions follow the geodesic
        between vertices."""
        c = np.clip(np.asarray(chainage, dtype=np.float64), self.chainage[0], self.chainage[-1])
        if self.is_geographic:
            lon, lat, i = self._geodesic_point(c)
            lx, ly = self.local_vertices
            ang = np.arctan2(ly[i + 1] - ly[i], lx[i + 1] - lx[i])
            return lon, lat, ang
        i = self._segment_of(c)
        t = (c - self.chainage[i]) / (self.chainage[i + 1] - self.chainage[i])
        dx = self.x[i + 1] - self.x[i]
        dy = self.y[i + 1] - self.y[i]
        return self.x[i] + t * dx, self.y[i] + t * dy, np.arctan2(dy, dx)

    def local_point_at(self, chainage):
        """(X, Y, tangent angle) in the local metric frame."""
        c = np.clip(np.asarray(chainage, dtype=np.float64), self.chainage[0], self.chainage[-1])
        lx, ly = self.local_vertices
        i = self._segment_of(c)
        t = (c - self.chainage[i]) / (self.chainage[i + 1] - self.chainage[i])
        dx = lx[i + 1] - lx[i]
        dy = ly[i + 1] - ly[i]
        return lx[i] + t * dx, ly[i] + t * dy, np.arctan2(dy, dx)

    def reprojected(self, crs_wkt: str) -> ReachAxis:
        """The same axis in another CRS: vertices transformed, vertex chainages kept."""
        if same_crs(self.crs_wkt, crs_wkt):
            return self
        from pyproj import Transformer

        tr = Transformer.from_crs(parse_crs(self.crs_wkt), parse_crs(crs_wkt), always_xy=True)
        x, y = tr.transform(self.x, self.y)
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
            raise ChannelHabitatError(f"the centreline cannot be transformed from {crs_name(self.crs_wkt)} "
                                      f"to {crs_name(crs_wkt)}", "CENTRELINE")
        return ReachAxis(x, y, crs_wkt, self.datum_m, self.method, self.chainage, self.origin, self.direction)

    # --------------------------------------------------------------------------------------------
    def locate(self, x, y, spacing: float | None = None, progress=None) -> Location:
        """(chainage, signed offset, flags) of every point: its nearest point on the centreline.

        ``spacing``: typical distance between the points (a grid's cell size) when known."""
        x = np.asarray(x, dtype=np.float64).ravel()
        y = np.asarray(y, dtype=np.float64).ravel()
        if len(x) != len(y):
            raise ValueError("x and y differ in length")
        X, Y = self.to_local(x, y)
        if not (np.all(np.isfinite(X)) and np.all(np.isfinite(Y))):
            raise ChannelHabitatError("some points have no finite coordinates in the reach's frame", "CENTRELINE")
        idx = self.index()
        near = idx.nearest(X, Y, spacing=spacing, progress=progress)
        s = near.segment
        frac = near.along / idx.L[s]
        ch = self.chainage[s] + frac * (self.chainage[s + 1] - self.chainage[s])
        ch = np.clip(ch, self.chainage[0], self.chainage[-1])
        off = near.offset * self.flow_sign
        end = (near.end * self.flow_sign).astype(np.int8)
        return Location(ch, off, np.abs(off), int(np.count_nonzero(end < 0)), int(np.count_nonzero(end > 0)),
                        near.ambiguity != AMBIGUITY_NONE, near.ambiguity, end, end != 0,
                        "geodesic chainage, points located in a local azimuthal equidistant projection"
                        if self.is_geographic else f"{self.method} chainage, nearest point on the centreline")

    def tangent_at(self, chainage):
        """Unit tangent (tx, ty) in the local frame, pointing the way chainage increases."""
        _, _, ang = self.local_point_at(chainage)
        return np.cos(ang), np.sin(ang)

    def linestring(self):
        import shapely

        return shapely.linestrings(np.column_stack([self.x, self.y]))

    def local_linestring(self):
        import shapely

        lx, ly = self.local_vertices
        return shapely.linestrings(np.column_stack([lx, ly]))


# ------------------------------------------------------------------------------------------------
# Building an axis from a drawn centreline: join parts, check, orient
# ------------------------------------------------------------------------------------------------

def _distance_fn(crs_wkt: str):
    if crs_is_geographic(crs_wkt):
        geod = parse_crs(crs_wkt).get_geod()

        def dist(x1, y1, x2, y2):
            return float(geod.inv(x1, y1, x2, y2)[2])
        return dist
    return lambda x1, y1, x2, y2: math.hypot(x2 - x1, y2 - y1)


def _fmt_xy(x, y, geographic):
    return f"({x:.6f}, {y:.6f})" if geographic else f"({x:.1f}, {y:.1f})"


def join_parts(parts, tolerance_m: float = 1.0, crs_wkt: str = ""):
    """Join line parts [(x, y), ...] end to end into one line. Parts may be in any order and
    direction; an end joins the nearest other free end within ``tolerance_m`` (a gap is bridged by
    a straight segment, coincident ends are merged). Returns (x, y, notes).

    Errors: no parts; a gap wider than the tolerance (the message gives the gap and where it is);
    ends shared by more than two parts (a branch)."""
    parts = [(np.asarray(px, float), np.asarray(py, float)) for px, py in parts if len(px) >= 2]
    if not parts:
        raise ChannelHabitatError("the centreline layer has no line with at least two vertices", "CENTRELINE")
    geographic = crs_is_geographic(crs_wkt)
    dist = _distance_fn(crs_wkt)
    notes = []
    if len(parts) == 1:
        return parts[0][0], parts[0][1], notes
    n = len(parts)
    ends = [(p[0][0], p[1][0], p[0][-1], p[1][-1]) for p in parts]

    def end_xy(i, which):
        e = ends[i]
        return (e[0], e[1]) if which == 0 else (e[2], e[3])

    # count, for every end, the other ends within the tolerance (branches and free ends)
    near = {}
    for i in range(n):
        for a in (0, 1):
            xa, ya = end_xy(i, a)
            near[(i, a)] = [(j, b) for j in range(n) for b in (0, 1) if j != i
                            and dist(xa, ya, *end_xy(j, b)) <= tolerance_m]
            if len(near[(i, a)]) > 1:
                raise ChannelHabitatError(
                    f"the centreline branches at {_fmt_xy(xa, ya, geographic)}: {len(near[(i, a)]) + 1} part "
                    "ends meet there. Give one line without side branches.", "CENTRELINE")
    free = [(i, a) for (i, a), v in near.items() if not v]
    start = free[0] if free else (0, 0)
    order, used = [], set()
    cur, cur_end = start[0], start[1]
    while True:
        used.add(cur)
        order.append((cur, cur_end == 1))  # reversed when we enter at its last vertex
        out_end = 1 - cur_end
        link = near[(cur, out_end)]
        if not link or link[0][0] in used:
            break
        cur, cur_end = link[0]
    if len(order) < n:
        # the chain stopped: report the smallest gap between the chain's end and a part not used
        ci, crev = order[-1]
        xa, ya = end_xy(ci, 0 if crev else 1)
        best = None
        for j in range(n):
            if j in used:
                continue
            for b in (0, 1):
                d = dist(xa, ya, *end_xy(j, b))
                if best is None or d < best[0]:
                    best = (d, end_xy(j, b))
        d, (xb, yb) = best
        raise ChannelHabitatError(
            f"the centreline has {n} parts that do not join into one line: a gap of {d:.2f} m between "
            f"{_fmt_xy(xa, ya, geographic)} and {_fmt_xy(xb, yb, geographic)} (join tolerance "
            f"{tolerance_m:g} m). Close the gap in the layer, or raise the join tolerance.", "CENTRELINE")
    xs, ys = [], []
    bridged = 0
    for i, rev in order:
        px, py = parts[i]
        if rev:
            px, py = px[::-1], py[::-1]
        if xs:
            if px[0] == xs[-1][-1] and py[0] == ys[-1][-1]:
                px, py = px[1:], py[1:]
            else:
                bridged += 1
        xs.append(px)
        ys.append(py)
    notes.append(f"The centreline's {n} parts were joined end to end"
                 + (f" ({bridged} gap(s) within {tolerance_m:g} m bridged by straight segments)." if bridged
                    else "."))
    return np.concatenate(xs), np.concatenate(ys), notes


def check_simple(x, y, crs_wkt: str = "") -> None:
    """Refuse a centreline that crosses or touches itself (chainage would be ambiguous there)."""
    import shapely

    pts = np.column_stack([x, y])
    # one GEOS call for the usual, simple line; the segment-by-segment search below only to say where
    if len(pts) >= 2 and not np.array_equal(pts[0], pts[-1]) and shapely.is_simple(shapely.linestrings(pts)):
        return
    segs = shapely.linestrings(np.stack([pts[:-1], pts[1:]], axis=1))
    tree = shapely.STRtree(segs)
    i, j = tree.query(segs, predicate="intersects")
    bad = j > i + 1
    adj = np.flatnonzero(j == i + 1)  # neighbours share a vertex; more than that is a fold-back
    if adj.size:
        folded = shapely.length(shapely.intersection(segs[i[adj]], segs[j[adj]])) > 0
        bad[adj[folded]] = True
    if not bad.any():
        return
    a, b = int(i[bad][0]), int(j[bad][0])
    p = shapely.intersection(segs[a], segs[b])
    c = shapely.get_point(p, 0) if p.geom_type == "LineString" else shapely.centroid(p)
    seg_len = np.hypot(np.diff(x), np.diff(y))
    cum = np.concatenate([[0.0], np.cumsum(seg_len)])
    ca = cum[a] + math.hypot(c.x - x[a], c.y - y[a])
    cb = cum[b] + math.hypot(c.x - x[b], c.y - y[b])
    geographic = crs_is_geographic(crs_wkt)
    unit = "degrees" if geographic else "m"
    raise ChannelHabitatError(
        f"the centreline crosses or touches itself at {_fmt_xy(c.x, c.y, geographic)} (about {ca:.1f} and "
        f"{cb:.1f} {unit} along the line as digitised). A centreline must not cross itself: fix the "
        "digitising there.", "CENTRELINE")


def infer_direction(axis: ReachAxis, x, y, u, v, weight=None):
    """Which way the water flows along ``axis`` (vertices as given), from velocity vectors at
    points (x, y). Returns (reverse, score, n_used): score = sum(w u.t) / sum(w |u|) over points
    alongside the axis (not beyond its ends, not ambiguous), t the axis tangent at each point's
    foot; +1 all flow along the vertex order, -1 all against it."""
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    u = np.asarray(u, float)
    v = np.asarray(v, float)
    w = np.ones(len(x)) if weight is None else np.asarray(weight, float)
    ok = np.isfinite(u) & np.isfinite(v) & np.isfinite(w)
    if not ok.any():
        raise ChannelHabitatError("no velocity vectors to infer the flow direction from", "DIRECTION")
    loc = axis.locate(x[ok], y[ok])
    use = ~loc.outside & ~loc.ambiguous
    if np.count_nonzero(use) < 10:
        raise ChannelHabitatError("too few velocity vectors lie alongside the centreline to infer the flow "
                                  "direction; choose the direction instead", "DIRECTION")
    tx, ty = axis.tangent_at(loc.chainage[use])
    uu, vv, ww = u[ok][use], v[ok][use], w[ok][use]  # east/north against the local frame's tangent
    along = ww * (uu * tx + vv * ty)
    mag = ww * np.hypot(uu, vv)
    if not mag.sum() > 0:
        raise ChannelHabitatError("the velocity field is still water (all speeds zero): the flow direction "
                                  "cannot be inferred; choose the direction instead", "DIRECTION")
    score = float(along.sum() / mag.sum()) * axis.flow_sign
    if abs(score) < 0.2:
        raise ChannelHabitatError(
            f"the velocities do not show which way the river flows along the centreline (agreement "
            f"{score:+.2f}; needs at least +-0.20). Check that the run and centreline match, or choose "
            "the direction instead.", "DIRECTION")
    return score < 0, score, int(np.count_nonzero(use))


def build_axis(parts, crs_wkt: str = "", join_tolerance_m: float = 1.0, direction: str = "as digitised",
               datum_m: float = 0.0, origin: str = "upstream", velocity=None):
    """A ReachAxis from drawn line parts. ``direction``: 'as digitised' (the first vertex is the
    upstream end), 'reversed', or 'infer' (from ``velocity`` = (x, y, u, v, weight) in the same
    CRS). ``origin``: chainage zero (plus datum) at the 'upstream' or 'downstream' end.
    Returns (axis, notes)."""
    if not np.isfinite(datum_m):
        raise ChannelHabitatError("the chainage datum must be a finite number of metres", "DATUM")
    x, y, notes = join_parts(parts, join_tolerance_m, crs_wkt)
    keep = np.ones(len(x), dtype=bool)
    keep[1:] = (np.diff(x) != 0) | (np.diff(y) != 0)
    x, y = x[keep], y[keep]
    if len(x) < 2:
        raise ChannelHabitatError("the centreline has zero length (its vertices coincide)", "CENTRELINE")
    check_simple(x, y, crs_wkt)
    if crs_is_geographic(crs_wkt):
        notes.append(f"The centreline is in a geographic CRS ({crs_name(crs_wkt)}): chainage is measured "
                     "along the geodesic between vertices on its ellipsoid and points are located in a "
                     "local azimuthal equidistant projection. A projected CRS in metres is preferred.")
    if direction == "as digitised":
        text = "as digitised"
    elif direction == "reversed":
        x, y = x[::-1], y[::-1]
        text = "reversed"
    elif direction == "infer":
        if velocity is None:
            raise ChannelHabitatError("inferring the direction needs a run with velocity vectors", "DIRECTION")
        probe = ReachAxis(x, y, crs_wkt)
        rev, score, used = infer_direction(probe, *velocity)
        if rev:
            x, y = x[::-1], y[::-1]
        text = (f"inferred from velocity ({'reversed' if rev else 'as digitised'}; agreement "
                f"{abs(score):.2f} over {used} elements)")
        notes.append(f"Flow direction {text}.")
    else:
        raise ChannelHabitatError(f"unknown direction option {direction!r}", "DIRECTION")
    if origin == "downstream":
        x, y = x[::-1], y[::-1]
    axis = ReachAxis(x, y, crs_wkt, datum_m=datum_m, origin=origin, direction=text)
    return axis, notes


# ------------------------------------------------------------------------------------------------
# Axis features: necks and tight bends (for reports)
# ------------------------------------------------------------------------------------------------

@dataclass
class AxisFeature:
    kind: str  # 'neck' or 'bend'
    chainage_m: float  # where it is
    other_chainage_m: float  # neck: the chainage of the other part; bend: nan
    size_m: float  # neck: distance between the two parts; bend: radius of curvature


def axis_features(axis: ReachAxis, within_m: float, detour: float = 3.0, step_m: float | None = None):
    """Necks (the centreline passes within 2 x ``within_m`` of a part that is at least ``detour``
    times further along the line) and bends whose radius of curvature is below ``within_m``: the
    places where points up to ``within_m`` from the centreline can have an ambiguous chainage.
    One feature per place (local minimum), sorted by chainage."""
    from scipy.spatial import cKDTree

    length = axis.length_m
    step = step_m or float(min(max(within_m / 4.0, 1.0), max(length / 200.0, 1.0)))
    n = max(int(math.ceil(length / step)), 2)
    c = axis.start_m + np.linspace(0.0, length, n + 1)
    X, Y, ang = axis.local_point_at(c)
    feats = []
    # necks: nearest remote sample
    tree = cKDTree(np.column_stack([X, Y]))
    pairs = tree.query_pairs(2.0 * within_m, output_type="ndarray")
    if len(pairs):
        i, j = pairs[:, 0], pairs[:, 1]
        d = np.hypot(X[i] - X[j], Y[i] - Y[j])
        far = np.abs(c[j] - c[i]) >= detour * np.maximum(d, step)
        i, j, d = i[far], j[far], d[far]
        if len(i):
            best = np.full(n + 1, np.inf)
            other = np.zeros(n + 1, dtype=np.int64)
            for a, b in ((i, j), (j, i)):
                order = np.lexsort((d, a))
                a_s, b_s, d_s = a[order], b[order], d[order]
                first = np.r_[True, a_s[1:] != a_s[:-1]]
                upd = d_s[first] < best[a_s[first]]
                best[a_s[first][upd]] = d_s[first][upd]
                other[a_s[first][upd]] = b_s[first][upd]
            # one neck per stretch of consecutive samples with a remote part near: its narrowest
            fin = np.isfinite(best)
            lab = np.cumsum(np.r_[True, ~fin[:-1] | ~fin[1:]] & fin)
            for g in np.unique(lab[fin]):
                k_run = np.flatnonzero((lab == g) & fin)
                k = k_run[np.argmin(best[k_run])]
                if c[k] < c[other[k]]:  # each neck once, from its upstream side
                    feats.append(AxisFeature("neck", float(c[k]), float(c[other[k]]), float(best[k])))
    # bends: radius from the turn of the tangent over +-(within_m / 4) along the line
    w = max(int(round(0.25 * within_m / step)), 1)
    if n > 2 * w:
        a1 = ang[: n + 1 - 2 * w]
        a2 = ang[2 * w:]
        turn = np.abs(np.angle(np.exp(1j * (a2 - a1))))
        with np.errstate(divide="ignore"):
            radius = np.where(turn > 0, (2 * w * step) / turn, np.inf)
        mid = c[w: n + 1 - w]
        tight = radius < within_m
        if tight.any():
            lab = np.cumsum(np.r_[True, ~tight[:-1] | ~tight[1:]] & tight)
            for g in np.unique(lab[tight]):
                k = np.flatnonzero((lab == g) & tight)
                kk = k[np.argmin(radius[k])]
                feats.append(AxisFeature("bend", float(mid[kk]), float("nan"), float(radius[kk])))
    feats.sort(key=lambda f: f.chainage_m)
    return feats


# ------------------------------------------------------------------------------------------------
# Reach: the axis plus its segmentation and zones (what every summary along the river uses)
# ------------------------------------------------------------------------------------------------

DEFAULT_SEGMENT_LENGTH_M = 1000.0
DEFAULT_ZONE_NAMES = ("upper", "middle", "lower")


def segment_edges(start_m: float, end_m: float, length_m: float = DEFAULT_SEGMENT_LENGTH_M) -> np.ndarray:
    """Segment boundaries every ``length_m`` from ``start_m``; the last segment may be shorter."""
    if not (np.isfinite(length_m) and length_m > 0):
        raise ChannelHabitatError("the segment length must be a positive number of metres", "SEGMENT_LENGTH")
    if (end_m - start_m) / length_m > 1_000_000:
        raise ChannelHabitatError(f"a segment length of {length_m:g} m makes more than a million segments; "
                                  "use a longer segment length", "SEGMENT_LENGTH")
    n_full = int(np.floor((end_m - start_m) / length_m + 1e-9))
    edges = start_m + length_m * np.arange(n_full + 1)
    if end_m - edges[-1] > 1e-6 * length_m:
        edges = np.append(edges, end_m)
    return edges


def parse_zone_breaks(text: str, start_m: float, end_m: float, origin: str = "upstream"):
    """'0 upper, 12000 middle, 25000 lower' -> (edges, names). Chainages are where each zone
    starts, increasing; the first must be at or before the reach start (it is moved to it).
    Empty text: equal thirds named upper/middle/lower in the direction of flow (with a downstream
    origin chainage runs upstream, so the first third is 'lower')."""
    text = (text or "").strip()
    if not text:
        edges = np.linspace(start_m, end_m, 4)
        names = list(DEFAULT_ZONE_NAMES)
        return edges, (names if origin == "upstream" else names[::-1])
    starts, names = [], []
    for part in text.replace(";", ",").replace("\n", ",").split(","):
        part = part.strip()
        if not part:
            continue
        bits = part.split(None, 1)
        try:
            ch = float(bits[0])
        except ValueError:
            raise ChannelHabitatError(
                f"zone break '{part}' must start with a chainage in metres, e.g. '12000 middle'",
                "ZONE_BREAKS") from None
        if not np.isfinite(ch):
            raise ChannelHabitatError(f"zone break '{part}' has no finite chainage", "ZONE_BREAKS")
        name = bits[1].strip() if len(bits) > 1 else f"zone {len(names) + 1}"
        starts.append(ch)
        names.append(name)
    if not starts:
        raise ChannelHabitatError("no zone breaks found; write e.g. '0 upper, 12000 middle, 25000 lower'",
                                  "ZONE_BREAKS")
    if any(b <= a for a, b in zip(starts, starts[1:])):
        raise ChannelHabitatError("zone breaks must increase along the reach (chainage of each zone's start)",
                                  "ZONE_BREAKS")
    if len(set(names)) != len(names):
        raise ChannelHabitatError("zone names must differ", "ZONE_BREAKS")
    if starts[-1] >= end_m:
        raise ChannelHabitatError(f"zone '{names[-1]}' starts at {starts[-1]:g} m, at or beyond the "
                                  f"reach end ({end_m:.0f} m)", "ZONE_BREAKS")
    if starts[0] > start_m + 1e-6:
        raise ChannelHabitatError(f"the first zone ('{names[0]}') starts at {starts[0]:g} m, after the reach "
                                  f"start ({start_m:.0f} m): the first break must be at or before the start",
                                  "ZONE_BREAKS")
    edges = np.array(starts, dtype=float)
    inside = edges > start_m
    first = int(np.count_nonzero(~inside)) - 1  # the last zone starting at or before the reach start
    edges = np.concatenate([[start_m], edges[inside], [end_m]])
    return edges, names[first:]


class Reach:
    """An axis with segment and zone boundaries (chainages) and, optionally, their polygons.

    ``segment_of`` / ``zone_of`` number segments and zones in the order of increasing chainage
    (0-based; -1 outside). With a downstream origin, segment 0 is therefore the most downstream
    one and the zones run from downstream to upstream too."""

    def __init__(self, axis: ReachAxis, seg_edges=None, zone_edges=None, zone_names=None,
                 segment_polygons=None, zone_polygons=None):
        self.axis = axis
        self.segment_edges = np.asarray(seg_edges if seg_edges is not None else
                                        segment_edges(axis.start_m, axis.end_m), dtype=float)
        if zone_edges is None:
            zone_edges, zone_names = parse_zone_breaks("", axis.start_m, axis.end_m,
                                                       getattr(axis, "origin", "upstream"))
        self.zone_edges = np.asarray(zone_edges, dtype=float)
        self.zone_names = list(zone_names)
        if len(self.zone_names) != len(self.zone_edges) - 1:
            raise ValueError("one zone name per zone is needed")
        self.segment_polygons = segment_polygons
        self.zone_polygons = zone_polygons

    @property
    def n_segments(self) -> int:
        return len(self.segment_edges) - 1

    @property
    def n_zones(self) -> int:
        return len(self.zone_edges) - 1

    @staticmethod
    def _bin(edges, chainage):
        c = np.asarray(chainage)
        i = np.searchsorted(edges, c, side="right") - 1
        i = np.where(c == edges[-1], len(edges) - 2, i)  # the last edge belongs to the last bin
        return np.where((c < edges[0]) | (c > edges[-1]) | ~np.isfinite(c), -1, i).astype(np.int32)

    def segment_of(self, chainage) -> np.ndarray:
        """Segment number (0-based, increasing chainage) of each chainage; -1 outside the reach."""
        return self._bin(self.segment_edges, chainage)

    def zone_of(self, chainage) -> np.ndarray:
        """Zone number (0-based, increasing chainage) of each chainage; -1 outside the reach."""
        return self._bin(self.zone_edges, chainage)

    def segment_zone_names(self) -> list:
        """The zone of each segment: the zone holding the segment's middle."""
        mid = 0.5 * (self.segment_edges[:-1] + self.segment_edges[1:])
        z = self.zone_of(mid)
        return [self.zone_names[k] if k >= 0 else "" for k in z]


# ------------------------------------------------------------------------------------------------
# Locating a HydraulicField, cached per grid/mesh geometry and axis
# ------------------------------------------------------------------------------------------------

CACHE_MAX_ELEMENTS = 12_000_000  # about 40 bytes each: ~0.5 GB at most


@dataclass
class _CacheEntry:
    index: np.ndarray  # sorted element ids (flat cell index or face number)
    chainage: np.ndarray
    offset: np.ndarray
    ambiguity: np.ndarray
    end: np.ndarray
    method: str = ""
    hits: int = field(default=0)


_LOCATE_CACHE: OrderedDict = OrderedDict()


def clear_locate_cache() -> None:
    _LOCATE_CACHE.clear()


def _support_spacing(sup):
    if hasattr(sup, "cell_area"):
        return math.sqrt(sup.cell_area)
    return None


def _check_field(axis: ReachAxis, fld) -> None:
    if fld.crs_wkt and axis.crs_wkt and not same_crs(fld.crs_wkt, axis.crs_wkt):
        raise ChannelHabitatError(
            f"the reach axis is in {crs_name(axis.crs_wkt)} but the run is in {crs_name(fld.crs_wkt)}; "
            "transform the axis into the run's CRS first (the reach parameters do this when reading)",
            "CENTRELINE")


def _overlap_check(loc: Location, axis: ReachAxis) -> None:
    if loc.n and np.all(loc.outside):
        raise ChannelHabitatError(
            "no element of the run lies alongside the centreline (all are beyond its ends): the run and "
            "the centreline do not overlap. Check that they are the same reach and in the same CRS.",
            "CENTRELINE")


def locate_field(reach, fld, progress=None) -> Location:
    """Chainage, offset and flags of every element of a HydraulicField (``reach``: a Reach or a
    ReachAxis). Cached per grid/mesh geometry and axis: elements located for an earlier run on the
    same grid are reused, only new ones are located. The cache keeps at most
    ``CACHE_MAX_ELEMENTS`` elements, dropping the least recently used grids first."""
    axis = reach.axis if isinstance(reach, Reach) else reach
    _check_field(axis, fld)
    sup = getattr(fld, "support", None)
    ids = getattr(sup, "index", None)
    if sup is None or ids is None or not hasattr(sup, "geometry_key") or len(ids) != fld.n:
        loc = axis.locate(fld.x, fld.y, progress=progress)
        _overlap_check(loc, axis)
        return loc
    key = (axis.key, sup.geometry_key())
    entry = _LOCATE_CACHE.get(key)
    ids = np.asarray(ids, dtype=np.int64)
    if entry is not None:
        _LOCATE_CACHE.move_to_end(key)
        pos = np.searchsorted(entry.index, ids)
        pos_c = np.minimum(pos, len(entry.index) - 1)
        hit = (pos < len(entry.index)) & (entry.index[pos_c] == ids)
    else:
        pos_c = np.zeros(len(ids), dtype=np.int64)
        hit = np.zeros(len(ids), dtype=bool)
    miss = np.flatnonzero(~hit)
    if miss.size == len(ids):  # nothing cached for these elements: locate them all, then remember
        loc = axis.locate(fld.x, fld.y, spacing=_support_spacing(sup), progress=progress)
        _overlap_check(loc, axis)
        ascending = len(ids) < 2 or bool(np.all(ids[1:] > ids[:-1]))
        order = slice(None) if ascending else np.argsort(ids, kind="stable")
        new_entry = _CacheEntry(ids[order].copy(), loc.chainage[order].copy(), loc.offset[order].copy(),
                                loc.ambiguity[order].copy(), loc.end[order].copy(), loc.method)
        if entry is not None:  # other elements of this grid were located before: keep them too
            allid = np.concatenate([entry.index, new_entry.index])
            o = np.argsort(allid, kind="stable")
            new_entry = _CacheEntry(allid[o], np.concatenate([entry.chainage, new_entry.chainage])[o],
                                    np.concatenate([entry.offset, new_entry.offset])[o],
                                    np.concatenate([entry.ambiguity, new_entry.ambiguity])[o],
                                    np.concatenate([entry.end, new_entry.end])[o], entry.method)
        _LOCATE_CACHE[key] = new_entry
        _LOCATE_CACHE.move_to_end(key)
        _evict(keep=key)
        return loc
    if miss.size:
        new = axis.locate(fld.x[miss], fld.y[miss], spacing=_support_spacing(sup), progress=progress)
        nid = ids[miss]
        allid = np.concatenate([entry.index, nid])
        order = np.argsort(allid, kind="stable")
        entry = _CacheEntry(allid[order], np.concatenate([entry.chainage, new.chainage])[order],
                            np.concatenate([entry.offset, new.offset])[order],
                            np.concatenate([entry.ambiguity, new.ambiguity])[order],
                            np.concatenate([entry.end, new.end])[order], entry.method)
        _LOCATE_CACHE[key] = entry
        _LOCATE_CACHE.move_to_end(key)
        pos_c = np.searchsorted(entry.index, ids)
        _evict(keep=key)
    ch = entry.chainage[pos_c]
    off = entry.offset[pos_c]
    amb = entry.ambiguity[pos_c]
    end = entry.end[pos_c]
    loc = Location(ch, off, np.abs(off), int(np.count_nonzero(end < 0)), int(np.count_nonzero(end > 0)),
                   amb != AMBIGUITY_NONE, amb, end, end != 0, entry.method)
    _overlap_check(loc, axis)
    return loc


def _evict(keep) -> None:
    total = sum(len(e.index) for e in _LOCATE_CACHE.values())
    while total > CACHE_MAX_ELEMENTS and len(_LOCATE_CACHE) > 1:
        k, e = next(iter(_LOCATE_CACHE.items()))
        if k == keep:
            _LOCATE_CACHE.move_to_end(k)
            continue
        del _LOCATE_CACHE[k]
        total -= len(e.index)
