"""Exact nearest point on a polyline for millions of points, with a certificate and ambiguity flags.

``PolylineIndex(x, y)`` holds a planar polyline (metres). ``index.nearest(px, py)`` returns, for
every point, the segment that holds its nearest point on the polyline, the distance along that
segment, the signed distance (+ left of the vertex order), whether the point lies beyond an end,
and whether its nearest *part* of the line is ambiguous.

How it is fast and still exact
------------------------------
1. **Buckets.** The points' bounding box is cut into square buckets two to eight point spacings
   wide (at most six median segment lengths; eight spacings measured fastest on 2-5 m grids). The
   corners of the occupied buckets are located first (by the same method one level coarser, or by
   the exact search when few). Each point's segment is guessed from the chainage
   interpolated between its bucket's corners; the point is projected onto every segment of that
   segment's *window* (itself, its two neighbours, and any segment within half the median segment
   length along the line), and once more onto the window of the best one if that lies at the edge.
   Vectorised in cache-sized chunks: typically three to five segments per point.
2. **Certificate.** That gives the nearest point among the segments searched. It is the nearest
   point on the whole line when (a) the window of the foot's segment was searched and (b) the
   point's distance d is at most the *clearance* of the foot's piece on the point's side: the
   largest radius r such that no disc of radius r touching the piece from that side, at any point
   of the piece, meets a segment outside the window. The disc of radius d around the point touches
   the line at the foot and lies inside such a disc, so nothing outside the window is nearer, and
   the window was searched. The union of those discs along a straight piece is a capsule; its
   clearance against a whole segment has a closed form (``_capsule_clearance``), so the bound is
   exact geometry, not an estimate. Feet exactly at a vertex on the outside of a bend use the two
   neighbouring pieces' capsules times cos(turn angle) (a point of the line inside the vertex's fan
   of normals is at least that far); at the two ends the half-plane beyond the end is checked.
   Clearances are computed once per line and distance cap, from candidate segments pruned by a
   rigorous bound, nearest first.
3. **Second tier.** When many points within the cap fail (a rough or densely digitised line), they
   are searched again with wide windows (+-max(cap / 4, 4 median segment lengths)) and their own
   clearance tables.
4. **Exact search** for the coarsest corners and what is left: a k-d tree over points spaced at
   most h_kd along the line. A nearest point lies on a piece with an end point within
   sqrt(d1^2 + h_kd^2 / 4) of the query (d1: distance to the nearest tree point), so every piece
   with such an end point is examined (k = 4, then 32, then a ball query).

Ambiguity (cheap and explainable)
---------------------------------
A point at distance d from the line is *ambiguous* when another part of the line, more than
``jump`` x d further along the line than the foot, lies within ``tolerance`` x d of the point: a
small change of the point or of the digitising could move its chainage a long way. The threshold
distance at which that starts is tabulated per side at samples every cap/16 along the line (from
pairs of samples within reach: a closed-form root per pair); a point is flagged when its distance
reaches the threshold of the sample interval holding its foot. The reason is ``NECK`` when the
other part is far along the line but close in space (along-line distance at least ``detour`` x
the straight distance: the river loops away and comes back), otherwise ``BEND`` (a bend tighter
than the point's offset). Beyond the tables' distance cap the definition is applied point by
point.
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

AMBIGUITY_NONE = 0
AMBIGUITY_NECK = 1
AMBIGUITY_BEND = 2
AMBIGUITY_NAMES = {AMBIGUITY_NONE: "", AMBIGUITY_NECK: "neck between loops", AMBIGUITY_BEND: "tight bend"}

DEFAULT_TOLERANCE = 1.10  # another part within 110 % of the nearest distance ...
DEFAULT_JUMP = 1.5  # ... and more than 1.5 x that distance away along the line
DEFAULT_DETOUR = 3.0  # along-line / straight distance at least 3: a neck; below: a tight bend

_CHUNK = 32768
_MAX_RANGE = 64  # candidate range wider than this: the bucket's points go to the exact search
_MAX_BUCKETS = 4_000_000
_EXACT_BELOW = 4000  # fewer points than this: exact search only
_TINY = 1e-12


@dataclass
class Nearest:
    """Nearest point on the polyline for each query point (arrays aligned with the points)."""

    segment: np.ndarray  # int32, segment holding the nearest point (0 .. n_segments - 1)
    along: np.ndarray  # float64, distance from the segment's first vertex to the foot, in [0, L]
    offset: np.ndarray  # float64, signed distance, + left of the vertex order
    end: np.ndarray  # int8, -1 beyond the first vertex, +1 beyond the last vertex, 0 otherwise
    ambiguity: np.ndarray  # uint8, AMBIGUITY_NONE / NECK / BEND
    n_fast: int = 0  # points certified on the bucket path
    n_exact: int = 0  # points located by the exact (tree) search


@dataclass
class _Tables:
    """Per-piece clearances and ambiguity thresholds valid up to ``cap`` metres from the line."""

    cap: float
    h: float
    margin: float  # window margin along the line
    wlo: np.ndarray  # window of each segment: first and last segment
    whi: np.ndarray
    piece_first: np.ndarray  # first piece of each segment
    piece_count: np.ndarray  # pieces per segment
    rho: np.ndarray  # (n_pieces, 2) certified clearance, left / right
    v_side: np.ndarray  # (n_vertices,) int8: convex side of an interior vertex (0 left, 1 right),
    #                     2 at the two ends of the line, -1 none (no turn)
    v_cone: np.ndarray  # (n_vertices,) cos(turn angle): factor on the neighbouring capsules for the
    #                     fan of an interior vertex; at the two ends the half-plane clearance
    v_any: np.ndarray  # (n_vertices,) clearance in any direction (sharp vertices and ends only)
    amb_step: float  # spacing of the ambiguity samples along the line
    amb_t: np.ndarray  # (n_samples, 2) distance from which a point is ambiguous, left / right
    amb_code: np.ndarray  # (n_samples, 2) reason
    amb_pending: object = None  # Future of (amb_step, amb_t, amb_code) while built in a thread

    def __getstate__(self):
        """Pickled (e.g. with a reach sent to worker processes) with the ambiguity tables built: a
        pending Future holds a lock and cannot be pickled."""
        self.ambiguity_ready()
        return self.__dict__.copy()

    def ambiguity_ready(self) -> _Tables:
        """The ambiguity tables, waiting for them if they are being built in a thread."""
        if self.amb_pending is not None:
            self.amb_step, self.amb_t, self.amb_code = self.amb_pending.result()
            self.amb_pending = None
        return self


def _near_pairs(x, y, tree, radius: float, block: int = 20000):
    """(b0, b1, i, j, distance) for every point i of (x, y) within ``radius`` of point j of ``tree``,
    in blocks of points [b0, b1) (bounded memory); i is the index into x, y."""
    n = len(x)
    for b0 in range(0, n, block):
        b1 = min(b0 + block, n)
        pairs = cKDTree(np.column_stack([x[b0:b1], y[b0:b1]])).sparse_distance_matrix(
            tree, radius, output_type="ndarray")
        if len(pairs) == 0:
            continue
        yield b0, b1, pairs["i"].astype(np.int64) + b0, pairs["j"].astype(np.int64), pairs["v"]


# ------------------------------------------------------------------------------------------------
# geometry kernels (vectorised over pairs)
# ------------------------------------------------------------------------------------------------

def _segment_pieces(vx, vy, h):
    """Split every segment into ceil(L/h) equal pieces. Returns the piece segment numbers, piece
    lengths, first piece and piece count per segment, and the piece end points (n_pieces + 1, in
    order along the line, vertices included) with their along-line position."""
    dx, dy = np.diff(vx), np.diff(vy)
    seg_len = np.hypot(dx, dy)
    count = np.maximum(np.ceil(seg_len / h - 1e-9).astype(np.int64), 1)
    first = np.concatenate([[0], np.cumsum(count)[:-1]])
    seg = np.repeat(np.arange(len(seg_len)), count)
    t = (np.arange(len(seg)) - first[seg]) / count[seg]
    cum = np.concatenate([[0.0], np.cumsum(seg_len)])
    ex = np.append(vx[seg] + t * dx[seg], vx[-1])
    ey = np.append(vy[seg] + t * dy[seg], vy[-1])
    e_along = np.append(cum[seg] + t * seg_len[seg], cum[-1])
    return seg, seg_len[seg] / count[seg], first, count, ex, ey, e_along


def _ball_min(wx, wy, vx, vy, ell):
    """min over t in [0, ell] with Y(t) > 0 of (X^2 + Y^2) / (2 Y), (X, Y) = w + t v, |v| = 1:
    the radius of the largest open disc tangent to the x axis at the origin, on the +y side, that
    misses the segment. +inf when the segment never rises above the axis."""
    t0 = np.zeros_like(wx)
    t1 = np.asarray(ell, dtype=np.float64).copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        cut = -wy / vy
    up = vy > _TINY
    down = vy < -_TINY
    flat = ~(up | down)
    t0 = np.where(up, np.maximum(t0, cut), t0)
    t1 = np.where(down, np.minimum(t1, cut), t1)
    empty = (t0 >= t1) | (flat & (wy <= 0))
    delta = wx * wx + wy * wy
    gamma = wx * vx + wy * vy
    # stationary points of the ratio: vy t^2 + 2 wy t + (2 gamma wy - vy delta) = 0
    disc = (wy - vy * gamma) ** 2 + vy * vy * np.maximum(delta - gamma * gamma, 0.0)
    sq = np.sqrt(disc)
    with np.errstate(divide="ignore", invalid="ignore"):
        r1 = np.where(flat, -gamma, (-wy + sq) / vy)
        r2 = np.where(flat, -gamma, (-wy - sq) / vy)
    best = np.full(wx.shape, np.inf)
    floor = _TINY * (1.0 + np.sqrt(delta))
    for t in (t0, t1, np.clip(r1, t0, t1), np.clip(r2, t0, t1)):
        yv = wy + vy * t
        with np.errstate(divide="ignore", invalid="ignore"):
            g = np.where(yv > floor, (delta + 2.0 * gamma * t + t * t) / (2.0 * yv), np.inf)
        np.minimum(best, g, out=best)
    return np.where(empty, np.inf, best)


def _capsule_clearance(qx, qy, vx, vy, ell, hp):
    """Largest r such that no disc of radius r tangent to the piece [-hp, hp] x {0} from the +y
    side, at any point of the piece, meets the segment q + t v (t in [0, ell], |v| = 1). A point
    (X, Y) of the segment with Y > 0 limits r to ((|X| - hp)_+^2 + Y^2) / (2 Y)."""
    gp = _ball_min(qx - hp, qy, vx, vy, ell)
    gm = _ball_min(qx + hp, qy, vx, vy, ell)
    # the part of the segment straight above the piece (|X| <= hp, Y > 0) limits r to Y / 2
    t0 = np.zeros_like(qx)
    t1 = np.asarray(ell, dtype=np.float64).copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        for val, slope, bound, keep_above in ((qx, vx, -hp, True), (qx, vx, hp, False), (qy, vy, 0.0, True)):
            cut = (bound - val) / slope
            if keep_above:  # val + t slope >= bound
                t0 = np.where(slope > _TINY, np.maximum(t0, cut), t0)
                t1 = np.where(slope < -_TINY, np.minimum(t1, cut), t1)
                t1 = np.where((np.abs(slope) <= _TINY) & (val < bound), -1.0, t1)
            else:  # val + t slope <= bound
                t1 = np.where(slope > _TINY, np.minimum(t1, cut), t1)
                t0 = np.where(slope < -_TINY, np.maximum(t0, cut), t0)
                t1 = np.where((np.abs(slope) <= _TINY) & (val > bound), -1.0, t1)
    ymin = np.minimum(qy + t0 * vy, qy + t1 * vy)
    gmid = np.where(t1 > t0, np.maximum(ymin, 0.0) / 2.0, np.inf)
    return np.minimum(np.minimum(gp, gm), gmid)


def _segment_distance(wx, wy, vx, vy, ell):
    """Distance from the origin to the segment w + t v, t in [0, ell], |v| = 1."""
    t = np.clip(-(wx * vx + wy * vy), 0.0, ell)
    return np.hypot(wx + t * vx, wy + t * vy)


def _cone_distance(wx, wy, vx, vy, ell, n1x, n1y, n2x, n2y):
    """Distance from the origin to the part of the segment w + t v inside the cone spanned by the
    unit vectors n1 and n2 (angle < pi); +inf when the segment misses the cone."""
    s = np.where(n1x * n2y - n1y * n2x >= 0, 1.0, -1.0)
    t0 = np.zeros_like(wx)
    t1 = np.asarray(ell, dtype=np.float64).copy()
    for a0, a1 in ((s * (n1x * wy - n1y * wx), s * (n1x * vy - n1y * vx)),
                   (s * (wx * n2y - wy * n2x), s * (vx * n2y - vy * n2x))):
        with np.errstate(divide="ignore", invalid="ignore"):
            cut = -a0 / a1
        t0 = np.where(a1 > _TINY, np.maximum(t0, cut), t0)
        t1 = np.where(a1 < -_TINY, np.minimum(t1, cut), t1)
        t1 = np.where((np.abs(a1) <= _TINY) & (a0 < 0), -1.0, t1)
    t = np.clip(-(wx * vx + wy * vy), t0, np.maximum(t1, t0))
    return np.where(t1 >= t0, np.hypot(wx + t * vx, wy + t * vy), np.inf)


def _halfplane_distance(wx, wy, vx, vy, ell, hx, hy):
    """Distance from the origin to the part of the segment w + t v with (w + t v) . h >= 0;
    +inf when the segment lies wholly on the other side."""
    a0 = wx * hx + wy * hy
    a1 = vx * hx + vy * hy
    t0 = np.zeros_like(wx)
    t1 = np.asarray(ell, dtype=np.float64).copy()
    with np.errstate(divide="ignore", invalid="ignore"):
        cut = -a0 / a1
    t0 = np.where(a1 > _TINY, np.maximum(t0, cut), t0)
    t1 = np.where(a1 < -_TINY, np.minimum(t1, cut), t1)
    t1 = np.where((np.abs(a1) <= _TINY) & (a0 < 0), -1.0, t1)
    t = np.clip(-(wx * vx + wy * vy), t0, np.maximum(t1, t0))
    return np.where(t1 >= t0, np.hypot(wx + t * vx, wy + t * vy), np.inf)


def _group_min(keys, values, n):
    """Minimum of ``values`` per key in 0..n-1 (+inf where a key has none)."""
    out = np.full(n, np.inf)
    if len(keys) == 0:
        return out
    order = np.argsort(keys, kind="stable")
    ks = keys[order]
    starts = np.flatnonzero(np.r_[True, ks[1:] != ks[:-1]])
    out[ks[starts]] = np.minimum.reduceat(values[order], starts)
    return out


def _estimate_spacing(X, Y, x0, y0, w, hgt):
    """Typical spacing of scattered points: sqrt(occupied area / n), the occupied area measured
    on a grid a few spacings wide (two passes, starting from the bounding box)."""
    n = len(X)
    s = math.sqrt(w * hgt / n)
    for _ in range(2):
        gc = max(3.0 * s, math.sqrt(w * hgt / 16_000_000))
        ncx = int(w / gc) + 1
        occ = np.zeros((int(hgt / gc) + 1) * ncx, dtype=bool)
        occ[((Y - y0) / gc).astype(np.int64) * ncx + ((X - x0) / gc).astype(np.int64)] = True
        s = math.sqrt(int(occ.sum()) * gc * gc / n)
    return s


def _round_cap(cap: float) -> float:
    """Round a distance cap up to 1, 1.25, 1.5 or 1.75 times a power of two (few rebuilds)."""
    cap = max(float(cap), 4.0)
    p = 2.0 ** math.floor(math.log2(cap))
    for f in (1.0, 1.25, 1.5, 1.75, 2.0):
        if p * f >= cap:
            return p * f
    return 2 * p


# ------------------------------------------------------------------------------------------------
class PolylineIndex:
    """Exact nearest-point location on a planar polyline (see the module doc)."""

    def __init__(self, x, y, tolerance: float = DEFAULT_TOLERANCE, jump: float = DEFAULT_JUMP,
                 detour: float = DEFAULT_DETOUR, threads: int = 1):
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        self.ox = float(np.mean(x))
        self.oy = float(np.mean(y))
        self.vx = x - self.ox
        self.vy = y - self.oy
        dx, dy = np.diff(self.vx), np.diff(self.vy)
        self.L = np.hypot(dx, dy)
        if len(self.L) == 0 or np.any(self.L <= 0):
            raise ValueError("PolylineIndex needs at least two vertices, consecutive ones distinct")
        self.n_seg = len(self.L)
        self.ux = dx / self.L
        self.uy = dy / self.L
        self.ax = self.vx[:-1].copy()
        self.ay = self.vy[:-1].copy()
        self.cum = np.concatenate([[0.0], np.cumsum(self.L)])
        self.length = float(self.cum[-1])
        self.median_len = float(np.median(self.L))
        # a segment's window: itself, its neighbours and whatever lies within this margin
        self.window_margin = 0.5 * self.median_len
        self.tolerance = float(tolerance)
        self.jump = float(jump)
        self.detour = float(detour)
        self.threads = max(int(threads), 1)
        # Exact-search tree: points at most h_kd apart along the line (all vertices included).
        self.h_kd = float(min(max(5.0, self.length / 20000.0), max(self.length / 4.0, 1e-3)))
        seg, _, _, _, ex, ey, _ = _segment_pieces(self.vx, self.vy, self.h_kd)
        self._kd_seg = seg.astype(np.int32)  # segment of piece j (between tree points j and j+1)
        self._kd_tree = cKDTree(np.column_stack([ex, ey]))
        self._kd_n = len(ex)
        self._tables: _Tables | None = None  # narrow windows (first tier)
        self._wide: _Tables | None = None  # wide windows (second tier, for rough lines)

    # --------------------------------------------------------------------------------------------
    # exact search (tree)
    # --------------------------------------------------------------------------------------------
    def _seg_d2(self, s, X, Y):
        wx = X - self.ax[s]
        wy = Y - self.ay[s]
        tc = np.clip(wx * self.ux[s] + wy * self.uy[s], 0.0, self.L[s])
        qx = wx - tc * self.ux[s]
        qy = wy - tc * self.uy[s]
        return qx * qx + qy * qy

    def _exact(self, X, Y):
        """Nearest segment of each point by the tree search (exact)."""
        n = len(X)
        best_s = np.zeros(n, dtype=np.int32)
        if n == 0:
            return best_s
        todo = np.arange(n)
        half2 = (0.5 * self.h_kd) ** 2
        for k in (4, 32):
            if todo.size == 0:
                break
            kk = min(k, self._kd_n)
            xs, ys = X[todo], Y[todo]
            dist, idx = self._kd_tree.query(np.column_stack([xs, ys]), k=kk, workers=-1)
            dist = dist.reshape(len(todo), kk)
            idx = idx.reshape(len(todo), kk)
            r2 = (dist[:, 0] ** 2 + half2) * (1 + 1e-12) + 1e-18
            bd = np.full(len(todo), np.inf)
            bs = np.zeros(len(todo), dtype=np.int32)
            for col in range(kk):
                within = dist[:, col] ** 2 <= r2
                if not within.any():
                    break
                j = idx[:, col]
                for piece in (np.maximum(j - 1, 0), np.minimum(j, self._kd_n - 2)):
                    s = self._kd_seg[piece]
                    d2 = self._seg_d2(s, xs, ys)
                    better = within & (d2 < bd)
                    bd = np.where(better, d2, bd)
                    bs = np.where(better, s, bs)
            complete = (dist[:, -1] ** 2 > r2) if kk < self._kd_n else np.ones(len(todo), bool)
            best_s[todo] = bs
            todo = todo[~complete]
        for i in todo:  # rare: many tree points within the radius
            d0, _ = self._kd_tree.query([X[i], Y[i]], k=1)
            r = math.sqrt(d0 * d0 + half2) * (1 + 1e-9) + 1e-9
            js = np.asarray(self._kd_tree.query_ball_point([X[i], Y[i]], r), dtype=np.int64)
            pieces = np.concatenate([np.maximum(js - 1, 0), np.minimum(js, self._kd_n - 2)])
            segs = np.unique(self._kd_seg[pieces])
            d2 = self._seg_d2(segs, np.full(len(segs), X[i]), np.full(len(segs), Y[i]))
            best_s[i] = segs[int(np.argmin(d2))]
        return best_s

    # --------------------------------------------------------------------------------------------
    # clearance and ambiguity tables
    # --------------------------------------------------------------------------------------------
    def tables(self, cap: float, wide: bool = False) -> _Tables:
        """Tables valid for points up to ``cap`` metres from the line (rebuilt when exceeded).
        ``wide``: windows of +-max(cap / 4, 4 median segment lengths) along the line instead of
        the neighbouring segments (second tier, for rough or densely digitised lines)."""
        t = self._wide if wide else self._tables
        if t is not None and t.cap >= cap:
            return t
        cap = _round_cap(cap)
        margin = max(cap / 4.0, 4.0 * self.median_len) if wide else self.window_margin
        t = self._build_tables(cap, margin)
        if wide:
            self._wide = t
        else:
            self._tables = t
        return t

    def _build_tables(self, cap: float, margin: float) -> _Tables:
        h = float(max(min(cap / 8.0, self.length / 64.0), 0.5))
        seg, plen, first, count, ex, ey, e_along = _segment_pieces(self.vx, self.vy, h)
        nseg = self.n_seg
        ids = np.arange(nseg)
        wlo = np.searchsorted(self.cum, self.cum[:-1] - margin, side="right") - 1
        whi = np.searchsorted(self.cum, self.cum[1:] + margin, side="left") - 1
        wlo = np.clip(np.minimum(wlo, ids - 1), 0, nseg - 1).astype(np.int32)
        whi = np.clip(np.maximum(whi, ids + 1), 0, nseg - 1).astype(np.int32)
        mx = 0.5 * (ex[:-1] + ex[1:])
        my = 0.5 * (ey[:-1] + ey[1:])
        pending = None
        if self.threads > 1:
            # the ambiguity tables are needed only once every point is located: built in a thread
            # meanwhile (the same computation; numpy and the k-d tree release the GIL in parts)
            pool = ThreadPoolExecutor(1, thread_name_prefix="ambiguity")
            pending = pool.submit(self._ambiguity_tables, cap)
            pool.shutdown(wait=False)
            amb_step, amb_t, amb_code = 0.0, None, None
        else:
            amb_step, amb_t, amb_code = self._ambiguity_tables(cap)
        rho = self._piece_clearance(cap, h, seg, plen, mx, my, wlo, whi)
        v_side, v_cone, v_any = self._vertex_clearance(cap, h, wlo, whi)
        return _Tables(cap, h, margin, wlo, whi, first.astype(np.int32), count.astype(np.int32),
                       np.minimum(rho, cap), v_side, v_cone, np.minimum(v_any, cap),
                       amb_step, amb_t, amb_code, pending)

    def _point_at(self, along):
        """Coordinates and segment of points at the given along-line positions (local frame)."""
        s = np.clip(np.searchsorted(self.cum, along, side="right") - 1, 0, self.n_seg - 1)
        t = along - self.cum[s]
        return self.ax[s] + t * self.ux[s], self.ay[s] + t * self.uy[s], s

    def _runs(self, h):
        """The line cut into runs of length <= h: each run lies in a disc of radius h/2 around
        the point at its middle. Returns centres, first and last segment of each run."""
        n_r = max(int(math.ceil(self.length / h)), 1)
        step = self.length / n_r
        cx, cy, _ = self._point_at((np.arange(n_r) + 0.5) * step)
        bounds = np.arange(n_r + 1) * step
        s_lo = np.clip(np.searchsorted(self.cum, bounds[:-1], side="right") - 1, 0, self.n_seg - 1)
        s_hi = np.clip(np.searchsorted(self.cum, bounds[1:], side="left") - 1, 0, self.n_seg - 1)
        return cx, cy, s_lo, np.maximum(s_hi, s_lo), 0.5 * step

    def _piece_clearance(self, cap, h, seg, plen, mx, my, wlo, whi):
        """Certified clearance of every piece, per side, against the segments outside its
        segment's window (capsule bound, exact geometry). Candidate segments come from runs whose
        bounding disc could come closer than the cap (bound dmin^2 / (2 ymax))."""
        n_p = len(seg)
        rho = np.full((n_p, 2), np.inf)
        rcx, rcy, rlo, rhi, rr = self._runs(h)
        tree_r = cKDTree(np.column_stack([rcx, rcy]))
        radius = 2.0 * cap + rr + 0.5 * float(plen.max())
        for b0, b1, p, r, dist in _near_pairs(mx, my, tree_r, radius):
            sp = seg[p]
            # the run's disc in the piece frame: lower bound dmin^2 / (2 ymax) of what it can do
            dx, dy = rcx[r] - mx[p], rcy[r] - my[p]
            ycen = -dx * self.uy[sp] + dy * self.ux[sp]
            dmin = np.maximum(dist - rr - 0.5 * plen[p], 0.0)
            outside = (rlo[r] < wlo[sp]) | (rhi[r] > whi[sp])  # runs wholly in the window never count
            for side, sgn in ((0, 1.0), (1, -1.0)):
                ymax = sgn * ycen + rr
                with np.errstate(divide="ignore", invalid="ignore"):
                    lb = np.where(ymax > 0, dmin * dmin / (2.0 * ymax), np.inf)
                lb = np.where(outside, lb, np.inf)
                # near runs first, then the rest only where they could still lower the clearance
                near = lb < 0.25 * cap
                self._runs_clearance(rho, side, sgn, b0, b1, p[near], r[near], seg, plen, mx, my,
                                     wlo, whi, rlo, rhi, cap)
                rest = (~near) & (lb < np.minimum(cap, rho[p, side]))
                self._runs_clearance(rho, side, sgn, b0, b1, p[rest], r[rest], seg, plen, mx, my,
                                     wlo, whi, rlo, rhi, cap)
        return rho

    def _runs_clearance(self, rho, side, sgn, b0, b1, p, r, seg, plen, mx, my, wlo, whi, rlo, rhi, cap):
        """Lower rho[:, side] of pieces p by the exact capsule clearance against the segments of
        runs r (pairs), counting only segments outside the piece's window."""
        if len(p) == 0:
            return
        cnt = (rhi[r] - rlo[r] + 1).astype(np.int64)
        pp = np.repeat(p, cnt)
        qs = np.repeat(rlo[r], cnt) + (np.arange(cnt.sum()) - np.repeat(np.cumsum(cnt) - cnt, cnt))
        key = np.unique(pp * self.n_seg + qs)
        pp, qs = np.divmod(key, self.n_seg)
        spp = seg[pp]
        counted = (qs < wlo[spp]) | (qs > whi[spp])
        pp, qs, spp = pp[counted], qs[counted], spp[counted]
        if len(pp) == 0:
            return
        tx, ty = self.ux[spp], self.uy[spp]
        wx0 = self.ax[qs] - mx[pp]
        wy0 = self.ay[qs] - my[pp]
        QX = wx0 * tx + wy0 * ty  # the segment in the piece's frame (X along, Y to the side)
        QY = sgn * (-wx0 * ty + wy0 * tx)
        VX = self.ux[qs] * tx + self.uy[qs] * ty
        VY = sgn * (-self.ux[qs] * ty + self.uy[qs] * tx)
        ell = self.L[qs]
        hp = 0.5 * plen[pp]
        dmid = np.maximum(_segment_distance(QX, QY, VX, VY, ell) - hp, 0.0)
        ymax = np.maximum(QY, QY + ell * VY)
        li = np.flatnonzero((ymax > 0) & (dmid * dmid < 2.0 * np.minimum(cap, rho[pp, side]) * ymax))
        if li.size == 0:
            return
        rv = _capsule_clearance(QX[li], QY[li], VX[li], VY[li], ell[li], hp[li])
        gm = _group_min(pp[li] - b0, rv, b1 - b0)
        rho[b0:b1, side] = np.minimum(rho[b0:b1, side], gm)

    def _ambiguity_tables(self, cap):
        """Ambiguity threshold per side at samples every ``step`` along the line (a point takes the
        value of the sample interval holding its foot)."""
        h = float(max(min(cap / 16.0, self.length / 64.0), 0.25))
        n_s = max(int(math.ceil(self.length / h)), 1)
        step = self.length / n_s
        f_along = (np.arange(n_s) + 0.5) * step
        fx, fy, fs = self._point_at(f_along)
        q_along = np.arange(n_s + 1) * step
        qx, qy, _ = self._point_at(q_along)
        amb_t = np.full((n_s, 2), np.inf)
        amb_code = np.zeros((n_s, 2), dtype=np.uint8)
        A = self.tolerance ** 2 - 1.0
        radius = (1.0 + self.tolerance) * cap + step
        tree_q = cKDTree(np.column_stack([qx, qy]))
        for b0, b1, p, q, dist in _near_pairs(fx, fy, tree_q, radius):
            dc = np.abs(q_along[q] - f_along[p])
            keep = dc * (1.0 + self.tolerance) > self.jump * dist  # else d* >= dc / jump
            p, q, dist, dc = p[keep], q[keep], dist[keep], dc[keep]
            if len(p) == 0:
                continue
            L2 = dist * dist
            sp = fs[p]
            bl = -(qx[q] - fx[p]) * self.uy[sp] + (qy[q] - fy[p]) * self.ux[sp]
            code = np.where(dc >= self.detour * dist, AMBIGUITY_NECK, AMBIGUITY_BEND).astype(np.uint8)
            for side, bb in ((0, bl), (1, -bl)):
                root = bb + np.sqrt(bb * bb + A * L2)
                with np.errstate(divide="ignore", invalid="ignore"):
                    dstar = np.where(root > 0, L2 / root, np.inf)
                dv = np.where(dc > self.jump * dstar, dstar, np.inf)
                gm = _group_min(p - b0, dv, b1 - b0)
                amb_t[b0:b1, side] = gm
                hit = np.isfinite(dv) & (dv <= gm[p - b0])
                amb_code[p[hit], side] = code[hit]
        return step, amb_t, amb_code

    def _vertex_clearance(self, cap, h, wlo, whi):
        """Clearances for feet exactly at a vertex.

        Interior vertex, convex side (its fan of normals, turn angle a < 90 degrees): a point x of
        the line inside the fan at angle t <= a from a neighbouring piece's normal lies at
        |x - V| / 2 = G(x) cos t >= rho_piece cos a from the vertex, where G is that piece's capsule
        function; so cos(a) x the smaller neighbouring capsule clearance bounds the fan, and
        ``v_cone`` holds cos(a). Sharp vertices (a >= 80 degrees) and the two ends use distances:
        ``v_any`` = half the distance to the nearest segment outside the windows, and at the ends
        ``v_cone`` = half the distance to the part beyond the end."""
        nseg = self.n_seg
        nv = nseg + 1
        turn = np.zeros(nv)
        dot = np.ones(nv)
        turn[1:-1] = self.ux[:-1] * self.uy[1:] - self.uy[:-1] * self.ux[1:]
        dot[1:-1] = self.ux[:-1] * self.ux[1:] + self.uy[:-1] * self.uy[1:]
        v_side = np.full(nv, -1, dtype=np.int8)
        v_side[1:-1] = np.where(turn[1:-1] > 0, 1, 0)  # turning left: the convex side is the right
        v_side[1:-1][turn[1:-1] == 0] = -1
        v_side[0] = v_side[-1] = 2
        v_cone = np.where(dot > math.cos(math.radians(80.0)), np.maximum(dot, 0.0), 0.0)  # cos(a)
        v_any = np.zeros(nv)
        need = np.flatnonzero((dot <= math.cos(math.radians(80.0))) | (v_side == 2))
        if need.size:
            k_all = need
            ulo = wlo[np.clip(k_all - 1, 0, nseg - 1)]
            uhi = whi[np.clip(k_all, 0, nseg - 1)]
            for i, k in enumerate(k_all):
                vx_, vy_ = self.vx[k], self.vy[k]
                outside = np.r_[np.arange(0, ulo[i]), np.arange(uhi[i] + 1, nseg)]
                if outside.size == 0:
                    v_any[k] = np.inf
                    if v_side[k] == 2:
                        v_cone[k] = np.inf
                    continue
                wx0 = self.ax[outside] - vx_
                wy0 = self.ay[outside] - vy_
                v_any[k] = 0.5 * float(_segment_distance(wx0, wy0, self.ux[outside], self.uy[outside],
                                                         self.L[outside]).min())
                if v_side[k] == 2:
                    hx, hy = (-self.ux[0], -self.uy[0]) if k == 0 else (self.ux[-1], self.uy[-1])
                    hd = _halfplane_distance(wx0, wy0, self.ux[outside], self.uy[outside],
                                             self.L[outside], hx, hy)
                    v_cone[k] = 0.5 * float(hd.min())
        return v_side, v_cone, v_any

    # --------------------------------------------------------------------------------------------
    # nearest point
    # --------------------------------------------------------------------------------------------
    def nearest(self, px, py, spacing: float | None = None, progress=None) -> Nearest:
        """Nearest point on the line of every (px, py). ``spacing``: the typical point spacing
        (a grid's cell size) if known; it sets the bucket size."""
        X = np.asarray(px, dtype=np.float64) - self.ox
        Y = np.asarray(py, dtype=np.float64) - self.oy
        if not (np.all(np.isfinite(X)) and np.all(np.isfinite(Y))):
            raise ValueError("point coordinates must be finite")
        if len(X) >= _EXACT_BELOW and self.n_seg > 2:
            # distance cap of the tables from a sample (exact search): points farther than the cap
            # simply fail the certificate and are searched exactly
            pick = np.random.default_rng(0).choice(len(X), 2000, replace=False)
            _, so = self._foot(self._exact(X[pick], Y[pick]), X[pick], Y[pick])
            self.tables(float(np.abs(so).max()) * 1.1 + 1.0)
        seg, along, off, end, amb, bad = self._locate(X, Y, spacing, progress, want_ambiguity=True)
        return Nearest(seg, along, off, end, amb, n_fast=len(X) - bad, n_exact=bad)

    def _locate(self, X, Y, spacing, progress=None, want_ambiguity=False):
        """(segment, along, offset, end, ambiguity, n searched) of every point, exact."""
        n = len(X)
        if n == 0:
            z = np.zeros(0)
            return np.zeros(0, np.int32), z, z, np.zeros(0, np.int8), np.zeros(0, np.uint8), 0
        seg = np.empty(n, dtype=np.int32)
        along = np.empty(n)
        off = np.empty(n)
        ok = np.zeros(n, dtype=bool)
        if n < _EXACT_BELOW or self.n_seg <= 2:
            seg[:] = self._exact(X, Y)
            along[:], off[:] = self._foot(seg, X, Y)
            tb = self.tables(float(np.abs(off).max()) + 1.0) if want_ambiguity else None
        else:
            tb = self._tables if self._tables is not None else self.tables(self.length / 8.0)
            grid = self._buckets(X, Y, spacing)
            if progress is not None:
                progress(0.2, "locating points along the centreline")
            starts = list(range(0, n, _CHUNK))

            def work(a_):
                b_ = min(a_ + _CHUNK, n)
                s, al, of, good = self._chunk(tb, grid, X[a_:b_], Y[a_:b_])
                seg[a_:b_], along[a_:b_], off[a_:b_], ok[a_:b_] = s, al, of, good

            if self.threads > 1 and len(starts) >= 8:
                # chunks shared by threads (ReachAxis uses 2): numpy releases the GIL in its loops;
                # measured ~20-25 % less wall time for 1.3 M points on an idle 2-core machine (little
                # when the other core is busy); each chunk writes its own slice: same results
                with ThreadPoolExecutor(self.threads) as pool:
                    for i, _ in enumerate(pool.map(work, starts)):
                        if progress is not None and i % 16 == 0:
                            progress(0.2 + 0.6 * i / len(starts), None)
            else:
                for i, a_ in enumerate(starts):
                    work(a_)
                    if progress is not None and i % 16 == 0:
                        progress(0.2 + 0.6 * i / len(starts), None)
        redo = np.flatnonzero(~ok)
        near = redo[np.abs(off[redo]) <= tb.cap] if (tb is not None and redo.size) else redo[:0]
        if near.size > max(500, n // 100):
            # second tier: wide windows around the first answer (only points within the cap can
            # be certified at all)
            tw = self.tables(tb.cap, wide=True)
            for a_ in range(0, near.size, _CHUNK):
                sub = near[a_:a_ + _CHUNK]
                s, al, of, good = self._refine(tw, X[sub], Y[sub], seg[sub])
                seg[sub], along[sub], off[sub], ok[sub] = s, al, of, good
            redo = np.flatnonzero(~ok)
        if redo.size:
            s2 = self._exact(X[redo], Y[redo])
            seg[redo] = s2
            along[redo], off[redo] = self._foot(s2, X[redo], Y[redo])
        end = np.zeros(n, dtype=np.int8)
        first = np.flatnonzero(seg == 0)
        end[first[self._proj(0, X[first], Y[first]) < 0]] = -1
        last = np.flatnonzero(seg == self.n_seg - 1)
        end[last[self._proj(self.n_seg - 1, X[last], Y[last]) > self.L[-1]]] = 1
        amb = self._ambiguity(tb, seg, along, off, X, Y) if want_ambiguity else None
        return seg, along, off, end, amb, int(redo.size)

    def _proj(self, s, X, Y):
        return (X - self.ax[s]) * self.ux[s] + (Y - self.ay[s]) * self.uy[s]

    def _seg_lut(self):
        """Chainage -> segment lookup: bins of half the median segment length (a first guess)."""
        if getattr(self, "_lut", None) is None:
            step = max(0.5 * self.median_len, self.length / 4_000_000)
            edges = np.arange(0.0, self.length + step, step)
            lut = np.clip(np.searchsorted(self.cum, edges, side="right") - 1, 0, self.n_seg - 1)
            self._lut = (lut.astype(np.int32), 1.0 / step)
        return self._lut

    def _buckets(self, X, Y, spacing):
        """Buckets of the points and the chainage at each occupied bucket's corners."""
        x0, x1 = float(X.min()), float(X.max())
        y0, y1 = float(Y.min()), float(Y.max())
        w, hgt = max(x1 - x0, 1e-6), max(y1 - y0, 1e-6)
        if spacing is None or not spacing > 0:
            spacing = _estimate_spacing(X, Y, x0, y0, w, hgt)
        g = max(2.0 * spacing, min(8.0 * spacing, 6.0 * self.median_len))
        g = max(g, math.sqrt(w * hgt / _MAX_BUCKETS), 1e-6)
        nx = int(w / g) + 1
        ny = int(hgt / g) + 1
        ix = np.minimum(((X - x0) * (1.0 / g)).astype(np.int64), nx - 1)
        iy = np.minimum(((Y - y0) * (1.0 / g)).astype(np.int64), ny - 1)
        occ = np.zeros(nx * ny, dtype=bool)
        occ[iy * nx + ix] = True
        ob = np.flatnonzero(occ)
        pos = np.full(nx * ny, -1, dtype=np.int32)
        pos[ob] = np.arange(len(ob), dtype=np.int32)
        biy, bix = np.divmod(ob, nx)
        ncx = nx + 1
        corner_ids = np.concatenate([biy * ncx + bix, biy * ncx + bix + 1,
                                     (biy + 1) * ncx + bix, (biy + 1) * ncx + bix + 1])
        cocc = np.zeros((ny + 1) * ncx, dtype=bool)
        cocc[corner_ids] = True
        cid = np.flatnonzero(cocc)
        cpos = np.full((ny + 1) * ncx, -1, dtype=np.int32)
        cpos[cid] = np.arange(len(cid), dtype=np.int32)
        cyi, cxi = np.divmod(cid, ncx)
        CX, CY = x0 + cxi * g, y0 + cyi * g
        cseg, calong = self._locate(CX, CY, g)[:2]  # exact, one level coarser
        cch = self.cum[cseg] + calong
        k = cpos[corner_ids]
        corner_ch = cch[k].reshape(4, -1)
        cs = cseg[k].reshape(4, -1)
        wide = (cs.max(axis=0) - cs.min(axis=0)) > _MAX_RANGE
        return {"x0": x0, "y0": y0, "g": g, "nx": nx, "ny": ny, "pos": pos, "corner_ch": corner_ch,
                "wide": wide}

    def _chunk(self, tb, grid, X, Y):
        """Nearest segment of each point in a chunk: guess the segment from the chainage
        interpolated between the bucket corners, search that segment's window (widened once if
        the best lies at its edge), and check the certificate."""
        g = grid["g"]
        fx = (X - grid["x0"]) * (1.0 / g)
        fy = (Y - grid["y0"]) * (1.0 / g)
        ix = np.minimum(fx.astype(np.int64), grid["nx"] - 1)
        iy = np.minimum(fy.astype(np.int64), grid["ny"] - 1)
        pb = grid["pos"][iy * grid["nx"] + ix]
        fx -= ix
        fy -= iy
        cc = grid["corner_ch"]
        c00, c10, c01, c11 = cc[0][pb], cc[1][pb], cc[2][pb], cc[3][pb]
        c_est = c00 + fx * (c10 - c00) + fy * (c01 - c00) + fx * fy * (c00 - c10 - c01 + c11)
        lut, inv = self._seg_lut()
        s0 = lut[np.minimum(np.maximum((c_est * inv).astype(np.int64), 0), len(lut) - 1)]
        bs, along, off, good = self._refine(tb, X, Y, s0)
        good &= ~grid["wide"][pb]
        return bs, along, off, good

    def _refine(self, tb, X, Y, s0):
        """Search the window of the guessed segment s0 (widened once if the best lies at its
        edge) and check the certificate."""
        lo = tb.wlo[s0]
        hi = tb.whi[s0]
        bs, _ = self._search(X, Y, lo, hi)
        along, off = self._foot(bs, X, Y)
        # the window that must have been searched: the foot segment's, or at a vertex the union
        # of both of the vertex's segments' windows; widen once where it was not
        k = bs + (along > 0)
        at_v = (along <= 0) | (along >= self.L[bs])
        rlo = np.where(at_v, tb.wlo[np.maximum(k - 1, 0)], tb.wlo[bs])
        rhi = np.where(at_v, tb.whi[np.minimum(k, self.n_seg - 1)], tb.whi[bs])
        edge = np.flatnonzero((rlo < lo) | (rhi > hi))
        if edge.size:
            lo2 = np.minimum(lo[edge], rlo[edge])
            hi2 = np.minimum(np.maximum(hi[edge], rhi[edge]), lo2 + _MAX_RANGE)
            s2, _ = self._search(X[edge], Y[edge], lo2, hi2)
            bs[edge] = s2
            lo[edge] = lo2
            hi[edge] = hi2
            along[edge], off[edge] = self._foot(s2, X[edge], Y[edge])
            k2 = s2 + (along[edge] > 0)
            v2 = (along[edge] <= 0) | (along[edge] >= self.L[s2])
            rlo[edge] = np.where(v2, tb.wlo[np.maximum(k2 - 1, 0)], tb.wlo[s2])
            rhi[edge] = np.where(v2, tb.whi[np.minimum(k2, self.n_seg - 1)], tb.whi[s2])
        good = (rlo >= lo) & (rhi <= hi)
        good &= np.abs(off) <= self._clearance(tb, bs, along, off)
        return bs, along, off, good

    def _search(self, X, Y, lo, hi):
        """Nearest segment among lo .. hi for each point (vectorised over the points)."""
        m = len(X)
        best = np.full(m, np.inf)
        bs = lo.astype(np.int32)
        s = np.empty(m, dtype=np.int32)
        wx = np.empty(m)
        wy = np.empty(m)
        p = np.empty(m)
        t = np.empty(m)
        d2 = np.empty(m)
        better = np.empty(m, dtype=bool)
        gath = np.empty(m)
        ax, ay, ux, uy, L = self.ax, self.ay, self.ux, self.uy, self.L
        for j in range(int((hi - lo).max()) + 1 if m else 0):
            np.add(lo, j, out=s, casting="unsafe")
            np.minimum(s, hi, out=s, casting="unsafe")
            np.take(ax, s, out=gath)
            np.subtract(X, gath, out=wx)
            np.take(ay, s, out=gath)
            np.subtract(Y, gath, out=wy)
            np.take(ux, s, out=gath)
            np.multiply(wx, gath, out=p)
            np.take(uy, s, out=gath)
            np.multiply(wy, gath, out=t)
            p += t
            np.take(L, s, out=gath)
            np.maximum(p, 0.0, out=t)
            np.minimum(t, gath, out=t)
            np.multiply(wx, wx, out=d2)
            np.multiply(wy, wy, out=wx)
            d2 += wx
            np.multiply(p, p, out=wy)
            d2 -= wy
            p -= t
            p *= p
            d2 += p
            np.less(d2, best, out=better)
            np.copyto(best, d2, where=better)
            np.copyto(bs, s, where=better)
        return bs, best

    def _foot(self, seg, X, Y):
        wx = X - self.ax[seg]
        wy = Y - self.ay[seg]
        ux, uy = self.ux[seg], self.uy[seg]
        tc = np.minimum(np.maximum(wx * ux + wy * uy, 0.0), self.L[seg])
        d = np.hypot(wx - tc * ux, wy - tc * uy)
        return tc, np.where(ux * wy - uy * wx >= 0, d, -d)

    def _piece(self, tb, seg, along):
        cnt = tb.piece_count[seg]
        k = np.minimum((along * (cnt / self.L[seg])).astype(np.int32), cnt - 1)
        return tb.piece_first[seg] + np.maximum(k, 0)

    def _clearance(self, tb, seg, along, off):
        """Certified clearance at each foot on the point's side."""
        side = (off < 0).astype(np.int8)
        r = tb.rho[self._piece(tb, seg, along), side]
        vert = np.flatnonzero((along <= 0) | (along >= self.L[seg]))
        if vert.size:
            s = seg[vert]
            k = s + (along[vert] > 0)  # the vertex
            sd = side[vert]
            sa = np.clip(k - 1, 0, self.n_seg - 1)
            pa = tb.piece_first[sa] + tb.piece_count[sa] - 1
            pb = tb.piece_first[np.clip(k, 0, self.n_seg - 1)]
            vs = tb.v_side[k]
            end = vs == 2  # beyond an end: both sides' capsules of the end piece, and the half-plane
            pe = np.where(k == 0, pb, pa)
            fan_end = np.minimum(np.minimum(tb.rho[pe, 0], tb.rho[pe, 1]), tb.v_cone[k])
            fan = np.minimum(tb.rho[pa, sd], tb.rho[pb, sd]) * tb.v_cone[k]
            r[vert] = np.where(end, fan_end, np.where((vs == sd) & (tb.v_cone[k] > 0), fan, tb.v_any[k]))
        return r

    # --------------------------------------------------------------------------------------------
    # ambiguity
    # --------------------------------------------------------------------------------------------
    def _ambiguity(self, tb, seg, along, off, X, Y):
        tb.ambiguity_ready()
        d = np.abs(off)
        side = (off < 0).astype(np.int8)
        k = np.minimum(((self.cum[seg] + along) * (1.0 / tb.amb_step)).astype(np.int64), len(tb.amb_t) - 1)
        flag = (d >= tb.amb_t[k, side]) & (d > 0)
        out = np.where(flag, tb.amb_code[k, side], AMBIGUITY_NONE).astype(np.uint8)
        far = np.flatnonzero(d > tb.cap)
        if far.size:
            out[far] = self._ambiguity_exact(X[far], Y[far], seg[far], along[far], d[far])
        return out

    def _ambiguity_exact(self, X, Y, seg, along, d):
        """The ambiguity definition applied point by point (points beyond the tables' cap)."""
        out = np.zeros(len(X), dtype=np.uint8)
        foot_c = self.cum[seg] + along
        fx = self.ax[seg] + along * self.ux[seg]
        fy = self.ay[seg] + along * self.uy[seg]
        for i in range(len(X)):
            r = self.tolerance * d[i] + self.h_kd
            js = np.asarray(self._kd_tree.query_ball_point([X[i], Y[i]], r), dtype=np.int64)
            if js.size == 0:
                continue
            segs = np.unique(np.concatenate([self._kd_seg[np.maximum(js - 1, 0)],
                                             self._kd_seg[np.minimum(js, self._kd_n - 2)]]))
            wx, wy = X[i] - self.ax[segs], Y[i] - self.ay[segs]
            tc = np.clip(wx * self.ux[segs] + wy * self.uy[segs], 0, self.L[segs])
            dist = np.hypot(wx - tc * self.ux[segs], wy - tc * self.uy[segs])
            c = self.cum[segs] + tc
            hit = np.flatnonzero((dist <= self.tolerance * d[i]) & (np.abs(c - foot_c[i]) > self.jump * d[i]))
            if hit.size:
                j = hit[0]
                qx = self.ax[segs[j]] + tc[j] * self.ux[segs[j]]
                qy = self.ay[segs[j]] + tc[j] * self.uy[segs[j]]
                neck = abs(c[j] - foot_c[i]) >= self.detour * math.hypot(qx - fx[i], qy - fy[i])
                out[i] = AMBIGUITY_NECK if neck else AMBIGUITY_BEND
        return out
