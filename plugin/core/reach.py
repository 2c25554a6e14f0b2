"""The reach axis: an oriented centreline that maps (x, y) to (chainage, signed offset).

Chainage runs from the upstream end (plus a datum) downstream. The signed offset is the distance
from the centreline, positive to the LEFT looking downstream, negative to the right.

This first version locates points by a k-d tree over a densified copy of the centreline and an
exact projection onto the centreline segments next to the nearest densified vertices.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from .errors import ChannelHabitatError


@dataclass
class Location:
    chainage: np.ndarray  # m from the reach origin
    offset: np.ndarray  # m, + left looking downstream
    distance: np.ndarray  # |offset| before clamping effects (distance to the centreline)
    clamped_upstream: int
    clamped_downstream: int


class ReachAxis:
    """Oriented centreline, vertices ordered upstream -> downstream."""

    def __init__(self, x, y, crs_wkt: str = "", datum_m: float = 0.0, method: str = "planar",
                 chainage=None):
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        if x.ndim != 1 or len(x) < 2 or len(x) != len(y):
            raise ChannelHabitatError("the centreline needs at least two vertices", "CENTRELINE")
        keep = np.ones(len(x), dtype=bool)
        keep[1:] = (np.diff(x) != 0) | (np.diff(y) != 0)  # drop repeated vertices
        self.x, self.y = x[keep], y[keep]
        if len(self.x) < 2:
            raise ChannelHabitatError("the centreline has zero length", "CENTRELINE")
        seg = np.hypot(np.diff(self.x), np.diff(self.y))
        if chainage is None:
            chainage = datum_m + np.concatenate([[0.0], np.cumsum(seg)])
        self.chainage = np.asarray(chainage, dtype=np.float64)[keep] if len(chainage) == len(keep) \
            else np.asarray(chainage, dtype=np.float64)
        self.datum_m = float(datum_m)
        self.crs_wkt = crs_wkt
        self.method = method
        self._tree = None
        self._dense = None

    # ----------------------------------------------------------------------------------------
    @property
    def length_m(self) -> float:
        return float(self.chainage[-1] - self.chainage[0])

    @property
    def start_m(self) -> float:
        return float(self.chainage[0])

    @property
    def end_m(self) -> float:
        return float(self.chainage[-1])

    def point_at(self, chainage):
        """(x, y, tangent angle in radians from +x) at the given chainages (clamped to the axis)."""
        c = np.clip(np.asarray(chainage, dtype=np.float64), self.chainage[0], self.chainage[-1])
        i = np.clip(np.searchsorted(self.chainage, c, side="right") - 1, 0, len(self.x) - 2)
        span = self.chainage[i + 1] - self.chainage[i]
        t = np.where(span > 0, (c - self.chainage[i]) / np.where(span > 0, span, 1.0), 0.0)
        dx = self.x[i + 1] - self.x[i]
        dy = self.y[i + 1] - self.y[i]
        return self.x[i] + t * dx, self.y[i] + t * dy, np.arctan2(dy, dx)

    # ----------------------------------------------------------------------------------------
    def _index(self, spacing: float):
        if self._tree is None:
            seg = np.hypot(np.diff(self.x), np.diff(self.y))
            n_sub = np.maximum(np.ceil(seg / spacing).astype(int), 1)
            seg_id = np.repeat(np.arange(len(seg)), n_sub)
            start = np.repeat(np.cumsum(n_sub) - n_sub, n_sub)
            t = (np.arange(len(seg_id)) - start) / n_sub[seg_id]
            px = self.x[seg_id] + t * np.diff(self.x)[seg_id]
            py = self.y[seg_id] + t * np.diff(self.y)[seg_id]
            px = np.append(px, self.x[-1])
            py = np.append(py, self.y[-1])
            seg_id = np.append(seg_id, len(seg) - 1)
            self._dense = seg_id
            self._tree = cKDTree(np.column_stack([px, py]))
        return self._tree, self._dense

    def locate(self, x, y, k: int = 4, spacing: float | None = None) -> Location:
        """(chainage, signed offset) of every point: the nearest point on the centreline."""
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        if spacing is None:
            spacing = max(self.length_m / 200000.0, 1.0)
        tree, seg_of = self._index(spacing)
        _, idx = tree.query(np.column_stack([x, y]), k=k, workers=-1)
        idx = np.atleast_2d(idx).reshape(len(x), -1)
        nseg = len(self.x) - 1
        best_d2 = np.full(len(x), np.inf)
        best_seg = np.zeros(len(x), dtype=np.int64)
        best_t = np.zeros(len(x))
        cand = np.concatenate([seg_of[idx], np.clip(seg_of[idx] - 1, 0, nseg - 1),
                               np.clip(seg_of[idx] + 1, 0, nseg - 1)], axis=1)
        for j in range(cand.shape[1]):
            s = cand[:, j]
            ax, ay = self.x[s], self.y[s]
            dx, dy = self.x[s + 1] - ax, self.y[s + 1] - ay
            L2 = dx * dx + dy * dy
            t = np.clip(((x - ax) * dx + (y - ay) * dy) / L2, 0.0, 1.0)
            qx, qy = ax + t * dx - x, ay + t * dy - y
            d2 = qx * qx + qy * qy
            better = d2 < best_d2
            best_d2 = np.where(better, d2, best_d2)
            best_seg = np.where(better, s, best_seg)
            best_t = np.where(better, t, best_t)
        s = best_seg
        ax, ay = self.x[s], self.y[s]
        dx, dy = self.x[s + 1] - ax, self.y[s + 1] - ay
        ch = self.chainage[s] + best_t * (self.chainage[s + 1] - self.chainage[s])
        cross = dx * (y - ay) - dy * (x - ax)
        dist = np.sqrt(best_d2)
        off = np.where(cross >= 0, dist, -dist)
        up = int(np.count_nonzero((s == 0) & (best_t <= 0.0)))
        down = int(np.count_nonzero((s == nseg - 1) & (best_t >= 1.0)))
        return Location(ch, off, dist, up, down)


# --------------------------------------------------------------------------------------------
# Reach: the axis plus its segmentation and zones (what every summary along the river uses)
# --------------------------------------------------------------------------------------------

DEFAULT_SEGMENT_LENGTH_M = 1000.0
DEFAULT_ZONE_NAMES = ("upper", "middle", "lower")


def segment_edges(start_m: float, end_m: float, length_m: float = DEFAULT_SEGMENT_LENGTH_M) -> np.ndarray:
    """Segment boundaries every ``length_m`` from ``start_m``; the last segment may be shorter."""
    if not length_m > 0:
        raise ChannelHabitatError("the segment length must be positive", "SEGMENT_LENGTH")
    n_full = int(np.floor((end_m - start_m) / length_m + 1e-9))
    edges = start_m + length_m * np.arange(n_full + 1)
    if end_m - edges[-1] > 1e-6 * length_m:
        edges = np.append(edges, end_m)
    return edges


def parse_zone_breaks(text: str, start_m: float, end_m: float):
    """'0 upper, 12000 middle, 25000 lower' -> (edges, names). Empty text: equal thirds named
    upper/middle/lower. Chainages are where each zone starts; the first must be at or before the
    reach start."""
    text = (text or "").strip()
    if not text:
        edges = np.linspace(start_m, end_m, 4)
        return edges, list(DEFAULT_ZONE_NAMES)
    starts, names = [], []
    for part in text.replace(";", ",").split(","):
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
        name = bits[1].strip() if len(bits) > 1 else f"zone {len(names) + 1}"
        starts.append(ch)
        names.append(name)
    if not starts:
        raise ChannelHabitatError("no zone breaks found; write e.g. '0 upper, 12000 middle, 25000 lower'",
                                  "ZONE_BREAKS")
    if any(b <= a for a, b in zip(starts, starts[1:])):
        raise ChannelHabitatError("zone breaks must increase along the reach", "ZONE_BREAKS")
    if len(set(names)) != len(names):
        raise ChannelHabitatError("zone names must differ", "ZONE_BREAKS")
    if starts[-1] >= end_m:
        raise ChannelHabitatError(f"zone '{names[-1]}' starts at {starts[-1]:g} m, at or beyond the "
                                  f"reach end ({end_m:.0f} m)", "ZONE_BREAKS")
    starts[0] = min(starts[0], start_m)
    edges = np.array(starts[1:], dtype=float)
    edges = np.concatenate([[start_m], edges[edges > start_m], [end_m]])
    names = names[len(names) - (len(edges) - 1):]
    return edges, names


class Reach:
    """An axis with segment and zone boundaries (chainages) and, optionally, their polygons."""

    def __init__(self, axis: ReachAxis, seg_edges=None, zone_edges=None, zone_names=None,
                 segment_polygons=None, zone_polygons=None):
        self.axis = axis
        self.segment_edges = np.asarray(seg_edges if seg_edges is not None else
                                        segment_edges(axis.start_m, axis.end_m), dtype=float)
        if zone_edges is None:
            zone_edges, zone_names = parse_zone_breaks("", axis.start_m, axis.end_m)
        self.zone_edges = np.asarray(zone_edges, dtype=float)
        self.zone_names = list(zone_names)
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
        i = np.where(c == edges[-1], len(edges) - 2, i)  # the downstream end belongs to the last
        return np.where((c < edges[0]) | (c > edges[-1]) | ~np.isfinite(c), -1, i).astype(np.int32)

    def segment_of(self, chainage) -> np.ndarray:
        """Segment number (0-based) of each chainage; -1 outside the reach."""
        return self._bin(self.segment_edges, chainage)

    def zone_of(self, chainage) -> np.ndarray:
        """Zone number (0-based) of each chainage; -1 outside the reach."""
        return self._bin(self.zone_edges, chainage)


def locate_field(reach: Reach, fld) -> Location:
    """Chainage and offset of every element of a HydraulicField.

    (To be cached per grid/mesh geometry: repeated runs on the same grid do not pay again.)
    """
    return reach.axis.locate(fld.x, fld.y)
