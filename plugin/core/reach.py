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
