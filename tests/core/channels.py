"""Analytic test channels: centrelines made of straights and circular arcs (tangent-continuous),
with the exact chainage of any point: the arc length at the foot of the normal through it.

A point's *cross-section-bounded* chainage is the arc length s of the centreline point whose
normal (the cross-section at s) passes through it, within the channel half-width; where several
cross-sections pass through a point (two loops' channels overlapping at a neck) the nearest one
counts. For a tangent-continuous curve of straights and arcs that is the nearest point on the
curve, computed here in closed form per piece (projection for a straight, polar angle about the
centre for an arc). Common geometry, no source needed beyond that.
"""

from __future__ import annotations

import math

import numpy as np


class Channel:
    """pieces: ('line', length) or ('arc', radius, turn_degrees) (+ left turn, - right turn)."""

    def __init__(self, pieces, x0=0.0, y0=0.0, heading_deg=0.0):
        self.pieces = []
        x, y, h, s = x0, y0, math.radians(heading_deg), 0.0
        for p in pieces:
            if p[0] == "line":
                L = float(p[1])
                self.pieces.append(("line", x, y, h, s, L, None))
                x += L * math.cos(h)
                y += L * math.sin(h)
                s += L
            else:
                R, turn = float(p[1]), math.radians(float(p[2]))
                sgn = 1.0 if turn > 0 else -1.0
                cx = x - sgn * R * math.sin(h)
                cy = y + sgn * R * math.cos(h)
                L = R * abs(turn)
                self.pieces.append(("arc", x, y, h, s, L, (cx, cy, R, sgn, turn)))
                phi0 = math.atan2(y - cy, x - cx)
                x = cx + R * math.cos(phi0 + turn)
                y = cy + R * math.sin(phi0 + turn)
                h += turn
                s += L
        self.length = s

    def point(self, s):
        """Coordinates at arc length s (array)."""
        s = np.clip(np.asarray(s, dtype=float), 0.0, self.length)
        X = np.empty_like(s)
        Y = np.empty_like(s)
        for kind, x, y, h, s0, L, arc in self.pieces:
            m = (s >= s0) & (s <= s0 + L)
            t = s[m] - s0
            if kind == "line":
                X[m] = x + t * math.cos(h)
                Y[m] = y + t * math.sin(h)
            else:
                cx, cy, R, sgn, _ = arc
                phi0 = math.atan2(y - cy, x - cx)
                phi = phi0 + sgn * t / R
                X[m] = cx + R * np.cos(phi)
                Y[m] = cy + R * np.sin(phi)
        return X, Y

    def polyline(self, spacing):
        """Vertices on the curve: every piece end, and at most ``spacing`` apart along each piece."""
        ss = [0.0]
        for _, _, _, _, s0, L, _ in self.pieces:
            n = max(int(math.ceil(L / spacing)), 1)
            ss.extend(list(s0 + L * np.arange(1, n + 1) / n))
        ss = np.array(ss)
        x, y = self.point(ss)
        return x, y, ss

    def exact(self, px, py):
        """(chainage, distance, second) of each point: the nearest normal foot, and the distance to
        the nearest normal foot on another piece at least 2 x that distance away along the curve
        (inf when none) - used to know which points are near ties between two parts."""
        px = np.asarray(px, float)
        py = np.asarray(py, float)
        n = len(px)
        cands_s, cands_d = [], []
        for kind, x, y, h, s0, L, arc in self.pieces:
            if kind == "line":
                ux, uy = math.cos(h), math.sin(h)
                t = (px - x) * ux + (py - y) * uy
                d = np.abs(-(px - x) * uy + (py - y) * ux)
                ok = (t >= 0) & (t <= L)
                cands_s.append(np.where(ok, s0 + t, np.nan))
                cands_d.append(np.where(ok, d, np.inf))
            else:
                cx, cy, R, sgn, turn = arc
                phi0 = math.atan2(y - cy, x - cx)
                phi = np.arctan2(py - cy, px - cx)
                t = np.mod(sgn * (phi - phi0), 2 * np.pi) * R  # arc length from the piece start
                d = np.abs(np.hypot(px - cx, py - cy) - R)
                ok = t <= L
                cands_s.append(np.where(ok, s0 + t, np.nan))
                cands_d.append(np.where(ok, d, np.inf))
        # the two ends (points beyond them)
        for s_end in (0.0, self.length):
            ex, ey = self.point(np.array([s_end]))
            cands_s.append(np.full(n, s_end))
            cands_d.append(np.hypot(px - ex[0], py - ey[0]))
        S = np.vstack(cands_s)
        D = np.vstack(cands_d)
        k = np.argmin(D, axis=0)
        idx = np.arange(n)
        s_best = S[k, idx]
        d_best = D[k, idx]
        far = np.abs(S - s_best) > 2.0 * np.maximum(d_best, 1.0)
        second = np.min(np.where(far, D, np.inf), axis=0)
        return s_best, d_best, second


def meander_with_neck_and_tight_bend():
    """About 5.6 km: straights, gentle bends, a tight bend (radius 60 m), and an omega loop whose
    arms come within 69.4 m of each other (a neck: with a 40 m half-width the channels overlap)."""
    return Channel([
        ("line", 600), ("arc", 400, 40), ("line", 300), ("arc", 400, -40), ("line", 400),
        ("arc", 60, 90),  # tight bend
        ("line", 300), ("arc", 300, -90), ("line", 500),
        ("arc", 80, -145), ("arc", 120, 290), ("arc", 80, -145),  # omega loop with a neck
        ("line", 400), ("arc", 500, 30), ("line", 600), ("arc", 500, -30), ("line", 300),
    ])


def cells_within(ch: Channel, half_width: float, cell: float, spacing: float = 1.0):
    """Centres of grid cells (size ``cell``) within ``half_width`` of the curve (beside it, not
    beyond its ends). Returns x, y, exact chainage, distance, second distance."""
    x, y, _ = ch.polyline(spacing)
    x0, x1 = x.min() - half_width - cell, x.max() + half_width + cell
    y0, y1 = y.min() - half_width - cell, y.max() + half_width + cell
    gx = np.arange(math.floor(x0 / cell) * cell + cell / 2, x1, cell)
    gy = np.arange(math.floor(y0 / cell) * cell + cell / 2, y1, cell)
    X, Y = np.meshgrid(gx, gy)
    X = X.ravel()
    Y = Y.ravel()
    # coarse filter: distance transform of the rasterised curve (scipy.ndimage), then exact
    from scipy import ndimage

    xf, yf, _ = ch.polyline(cell / 4.0)
    cols = np.clip(np.floor((xf - gx[0] + cell / 2) / cell).astype(int), 0, len(gx) - 1)
    rows = np.clip(np.floor((yf - gy[0] + cell / 2) / cell).astype(int), 0, len(gy) - 1)
    img = np.ones((len(gy), len(gx)), dtype=bool)
    img[rows, cols] = False
    d0 = ndimage.distance_transform_edt(img).ravel() * cell
    m = d0 <= half_width + 2 * cell
    X, Y = X[m], Y[m]
    s, d, second = ch.exact(X, Y)
    keep = (d <= half_width) & (s > 0) & (s < ch.length)
    return X[keep], Y[keep], s[keep], d[keep], second[keep]
