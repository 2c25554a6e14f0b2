"""Drift and residence time: passive particles carried by the depth-averaged velocity.

Eggs, larvae and cyanobacterial cells drift with the water. How long they spend in slow water on
their way through the reach decides whether they settle out, and whether a bloom has time to
grow. This module moves particles through one run's velocity field and counts the time each one
spends in each habitat class and each reach zone. Pure numpy/scipy; vectorised over particles.

Velocity at a point
-------------------
* Rasters (:class:`GridFlow`): bilinear interpolation between the centres of the four surrounding
  cells, over *wet* cells only (the weights of dry or no-data cells are dropped and the rest
  renormalised), so velocities next to a bank are the model's own near-bank values rather than
  being pulled towards zero. A point is in the water when the cell that contains it is wet.
* Meshes (:class:`MeshFlow`): face-constant - the value stored on the face that contains the point
  (DESIGN.md section 5: face values are used as stored, no smoothing). The face is found by walking:
  the particle's current face, then its edge neighbours, then a k-d tree over face centroids with
  an exact point-in-polygon test. A point is in the water when its face is wet.
* Analytic fields (:class:`AnalyticFlow`) for tests and checks.

Integration
-----------
Classical 4th-order Runge-Kutta (Kutta 1901; e.g. Press et al. 2007, Numerical Recipes 3rd ed.,
section 17.1) with one step per particle per iteration, the step chosen per particle from its
speed and the local element size:

    dt = clip(C * h / |V|, dt_min, dt_max),   and never past the time limit

with C the Courant number of the particle step (default 0.5: a particle moves at most about half an
element per step), h the cell size (raster) or the square root of the face area (mesh), |V| the
speed at the start of the step, dt_min = 0.1 s and dt_max = 600 s by default. The cap keeps steps
short in near-still water (so a particle's path and its class times stay resolved) and bounds the
cost of a particle that stalls: at most T / dt_max steps (4 320 for 30 days), while a moving particle
needs about (path length) / (C h) steps whatever its speed.

Stopping rules (``fate``)
-------------------------
* ``downstream``: the particle reached the end chainage: the last chainage of the reach axis unless
  another is given, or - when the wet field of the run ends further upstream - five element sizes
  upstream of the field's end (the last cross-sections fully inside the model). The crossing point
  and time within the last step come from the step's cubic Hermite path and exact axis chainages.
  Leaving the model's extent within half an element of the end chainage (a model boundary drawn at
  the end of the axis) counts as reaching it.
* ``upstream``: left the wet area upstream of its release chainage.
* ``stranded``: met a bank (a dry or no-data element inside the model) and stopped there: at the first
  contact with the ``strand`` bank rule; with the default ``slide`` rule only when it cannot slide on
  (eight contacts in a row without moving, e.g. a current straight into the bank).
* ``outside``: left the extent of the grid or mesh away from the reach ends.
* ``time_limit``: still drifting at the maximum travel time (its times are lower bounds).
* ``dry_release``: released on a dry element; not tracked.
Where a step would end out of the water, the point where it meets the wet edge is found by
bisection along the step. Bank rule ``slide`` (default): the rest of the step is projected on the
wet edge met (the crossed side of a raster cell, or of a mesh face) and the particle moves on along
the bank - the no-flux condition of a bank in a depth-averaged model; bank contacts are counted.
Bank rule ``strand``: the step is first retried at one eighth of its length (so a particle that only
clips a corner continues), and a particle that still meets the edge stops there.

Residence accounting
--------------------
The class of the water at a point is the scheme applied to the interpolated speed and depth there.
Within each step, the time is shared between the classes seen at the four RK4 stage points with
Simpson weights 1/6, 1/3, 1/3, 1/6 (the same quadrature RK4 applies to the velocity), so class times
follow class boundaries to within a fraction of a step and always sum exactly to the travel time.
A stage point outside the water takes the class of the step's start. Time per zone is counted by
the chainage at the start of each step. The result is a (particle, zone, class) matrix of seconds.

The 1D estimate
---------------
When a run has speed only (no vector), :func:`travel_time_estimate` gives a travel time along the
centreline: for every segment, its length over the mean speed of the wet elements in the
centreline band |offset| <= f * W / 2 (W = the segment's mean wet width = wet area / segment
length, f = band fraction, default 0.5: the central half of the wet width). It is an *estimate*:
it ignores the spread between particles, eddies and the slow water near banks.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np

from .errors import ChannelHabitatError, as_progress
from .field import GridSupport, HydraulicField, MeshSupport
from .stats import field_key

SECONDS_PER_HOUR = 3600.0
SECONDS_PER_DAY = 86400.0

FATES = ("downstream", "upstream", "stranded", "outside", "time_limit", "dry_release")
FATE_DOWNSTREAM, FATE_UPSTREAM, FATE_STRANDED, FATE_OUTSIDE, FATE_TIME_LIMIT, FATE_DRY_RELEASE = range(6)
FATE_TEXT = {
    "downstream": "reached the end chainage (the end of the reach axis, or of the wet field)",
    "upstream": "left the wet area upstream of its release chainage",
    "stranded": "stopped at a bank: at the first contact (bank rule 'strand'), or where the current pushed "
                "it straight into the bank so that it could not slide on (bank rule 'slide')",
    "outside": "left the extent of the grid or mesh away from the reach ends",
    "time_limit": "still drifting at the maximum travel time: its times are lower bounds",
    "dry_release": "released on a dry or no-data element: not tracked",
}

RK4_WEIGHTS = (1.0 / 6.0, 1.0 / 3.0, 1.0 / 3.0, 1.0 / 6.0)
RK4_WEIGHTS_ARRAY = np.array(RK4_WEIGHTS)
RETRY_FACTOR = 0.125
BISECTION_STEPS = 12
STUCK_LIMIT = 8  # bank contacts in a row without sliding on: the particle is stranded
BANK_RULES = ("slide", "strand")
DEFAULT_T_MAX_S = 30.0 * SECONDS_PER_DAY
DEFAULT_PATH_SPACING_M = 20.0
PATH_MAX_GAP_S = SECONDS_PER_HOUR


@dataclass(frozen=True)
class StepRule:
    """The time-step rule: dt = clip(courant * h / |V|, dt_min_s, dt_max_s), or ``fixed_dt_s``."""

    courant: float = 1.0
    dt_min_s: float = 0.1
    dt_max_s: float = 600.0
    fixed_dt_s: float | None = None

    def __post_init__(self):
        if self.fixed_dt_s is not None:
            if not self.fixed_dt_s > 0:
                raise ChannelHabitatError("the fixed time step must be positive", "MAX_STEP_S")
            return
        if not 0 < self.courant <= 4:
            raise ChannelHabitatError("the Courant number of the particle step must lie in (0, 4]; "
                                      "1 moves a particle about one element per step", "COURANT")
        if not self.dt_min_s > 0 or not self.dt_max_s >= self.dt_min_s:
            raise ChannelHabitatError("the step limits must satisfy 0 < minimum step <= maximum step",
                                      "MAX_STEP_S")

    def describe(self) -> str:
        if self.fixed_dt_s is not None:
            return f"RK4, fixed step {self.fixed_dt_s:g} s"
        return (f"RK4; step dt = C h / |V| with C = {self.courant:g}, h = element size, |V| = speed at the "
                f"step start, kept between {self.dt_min_s:g} s and {self.dt_max_s:g} s")

    def dt(self, h, speed):
        if self.fixed_dt_s is not None:
            return np.full(np.shape(speed), float(self.fixed_dt_s))
        with np.errstate(divide="ignore"):
            dt = self.courant * h / speed
        np.minimum(dt, self.dt_max_s, out=dt)
        np.maximum(dt, self.dt_min_s, out=dt)
        return dt


class FlowSample(NamedTuple):
    """Values at points: velocity (m/s), depth (m), chainage (m); ``wet``: the element containing
    the point is wet; ``where``: the containing element (face number for meshes; -1 when none),
    used as a hint by the next call. Where no wet element is near, u = v = 0."""

    u: np.ndarray
    v: np.ndarray
    depth: np.ndarray
    chainage: np.ndarray
    wet: np.ndarray
    where: np.ndarray


# ----------------------------------------------------------------------------------------------
# Velocity fields
# ----------------------------------------------------------------------------------------------

class AnalyticFlow:
    """A velocity field given by functions (tests and checks). ``func(x, y) -> (u, v)``;
    ``chainage(x, y)`` defaults to x; ``wet(x, y)`` to everywhere; depth to 1 m."""

    kind = "analytic"

    def __init__(self, func, size_m: float = 1.0, chainage=None, wet=None, depth=None):
        self.func = func
        self.size_m = float(size_m)
        self._chainage = chainage or (lambda x, y: np.asarray(x, dtype=np.float64))
        self._wet = wet
        self._depth = depth
        self.uniform_size = self.size_m

    def sample(self, x, y, where=None, values: int = 4, contain: bool = True) -> FlowSample:
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        u, v = self.func(x, y)
        u = np.broadcast_to(np.asarray(u, dtype=np.float64), x.shape).copy()
        v = np.broadcast_to(np.asarray(v, dtype=np.float64), x.shape).copy()
        wet = np.ones(x.shape, bool) if self._wet is None else np.asarray(self._wet(x, y), bool)
        d = np.ones(x.shape) if self._depth is None else np.broadcast_to(self._depth(x, y), x.shape).astype(float)
        u[~wet] = 0.0
        v[~wet] = 0.0
        return FlowSample(u, v, np.where(wet, d, np.nan), self._chainage(x, y), wet, np.where(wet, 0, -1))

    def outside(self, x, y) -> np.ndarray:
        return np.zeros(np.shape(x), bool)

    def bank_moves(self, xw, yw, xd, yd, rx, ry) -> tuple:
        """No bank geometry: a particle at the edge of an analytic wet area cannot slide."""
        zero = np.zeros_like(rx)
        return [], zero, zero, zero

    def element_size(self, where) -> np.ndarray:
        return np.full(np.shape(where), self.size_m)

    @property
    def typical_size_m(self) -> float:
        return self.size_m

    def exact_chainage(self, x, y):
        return self._chainage(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))


class GridFlow:
    """Bilinear (wet cells only) interpolation on a north-up grid; see the module docstring.

    ``u, v, depth, chainage`` are per wet cell, aligned with ``index`` (flat index in the grid of
    ``shape``). Only the bounding box of the wet cells (plus one dry cell all round) is stored:
    an int32 slot per cell and a (wet cells + 1, 4) float64 table of values.
    """

    kind = "grid"
    PAD = 12  # dry cells round the wet box: more than any step (2 C h, C <= 4) can reach

    def __init__(self, transform, shape, index, u, v, depth, chainage):
        x0, dx, rx, y0, ry, dy = (float(t) for t in transform)
        if rx != 0 or ry != 0:
            raise ChannelHabitatError("rotated grids are not supported", "VELOCITY_U")
        rows, cols = int(shape[0]), int(shape[1])
        index = np.asarray(index, dtype=np.int64)
        if index.size == 0:
            raise ChannelHabitatError("the run has no wet cells", "DEPTH")
        r, c = np.divmod(index, cols)
        r0, r1, c0, c1 = int(r.min()), int(r.max()), int(c.min()), int(c.max())
        pad = self.PAD
        self.nr, self.nc = r1 - r0 + 1 + 2 * pad, c1 - c0 + 1 + 2 * pad  # dry cells all round
        self.dx, self.dy = dx, dy
        self.ox = x0 + (c0 - pad) * dx  # corner of the padded box
        self.oy = y0 + (r0 - pad) * dy
        self.inv_dx, self.inv_dy = 1.0 / dx, 1.0 / dy
        self.slot = np.zeros(self.nr * self.nc, dtype=np.int32)
        self.slot[(r - r0 + pad) * self.nc + (c - c0 + pad)] = np.arange(1, index.size + 1, dtype=np.int32)
        # values per slot, channel-major: 1 (the wet weight), u, v, depth, chainage; slot 0 is dry
        table = np.zeros((5, index.size + 1), dtype=np.float64)
        table[0, 1:] = 1.0
        table[1, 1:] = u
        table[2, 1:] = v
        table[3, 1:] = depth
        table[4, 1:] = chainage
        self.table = table
        # continuous cell-centre index: gc = x / dx + bc (bilinear corner = floor(gc))
        self.bc = -self.ox * self.inv_dx - 0.5
        self.br = -self.oy * self.inv_dy - 0.5
        # the full raster (outside it is 'outside', inside it dry cells are 'stranded')
        self.raster = (x0, y0, dx, dy, rows, cols)
        self.size_m = min(abs(dx), abs(dy))
        self.uniform_size = self.size_m
        self._offsets = np.array([0, 1, self.nc, self.nc + 1], dtype=np.int64)[:, None]
        self._scale = np.array([[self.inv_dx], [self.inv_dy]])
        self._shift = np.array([[self.bc], [self.br]])

    @property
    def typical_size_m(self) -> float:
        return self.size_m

    def element_size(self, where) -> np.ndarray:
        return np.full(np.shape(where), self.size_m)

    def sample(self, x, y, where=None, values: int = 4, contain: bool = True) -> FlowSample:
        """``values``: 2 = velocity only (depth and chainage None), 3 = + depth, 4 = all.
        ``contain=False`` (RK4 stage points) skips finding the containing cell: ``wet`` then says
        whether any of the four surrounding cells is wet."""
        n = np.size(x)
        g = np.empty((2, n))
        g[0] = x
        g[1] = y
        g *= self._scale
        g += self._shift  # continuous cell-centre index (column, row)
        g0 = np.floor(g)
        f = g - g0  # position inside the 2 x 2 block of cell centres
        # top-left corner of the block; points beyond the padded box are clipped onto its dry
        # padding (PAD cells wide: a step end or stage point near the water sees only dry cells)
        k = (g0[1] * self.nc + g0[0]).astype(np.int64)
        slots = np.take(self.slot, self._offsets + k, mode="clip")  # (4, n)
        p = np.empty((2, 2, n))
        np.subtract(1.0, f, out=p[0])
        p[1] = f
        w = (p[:, None, 1, :] * p[None, :, 0, :]).reshape(4, n)  # rows x columns
        vals = np.einsum("ckn,kn->cn", np.take(self.table[:values + 1], slots, axis=1), w)
        total = vals[0]
        total[total <= 0.0] = np.inf  # no wet corner: every value 0
        vals[1:] /= total
        if not contain:
            near = total < np.inf
            return FlowSample(vals[1], vals[2], vals[3] if values >= 3 else None,
                              vals[4] if values >= 4 else None, near, np.where(near, 0, -1))
        # the containing cell is the corner nearest the point
        half = f >= 0.5
        j = half[0] + 2 * half[1].astype(np.intp)
        cs = slots.ravel()[j * n + np.arange(n)]
        wet = cs > 0
        return FlowSample(vals[1], vals[2], vals[3] if values >= 3 else None,
                          vals[4] if values >= 4 else None, wet, np.where(wet, cs, -1))

    def _cell(self, x, y):
        x0, y0, dx, dy, rows, cols = self.raster
        return (np.floor((np.asarray(x, dtype=np.float64) - x0) / dx),
                np.floor((np.asarray(y, dtype=np.float64) - y0) / dy))

    def outside(self, x, y) -> np.ndarray:
        """Points in no cell of the raster (same cell convention as :meth:`sample`)."""
        c, r = self._cell(x, y)
        rows, cols = self.raster[4], self.raster[5]
        return (c < 0) | (c >= cols) | (r < 0) | (r >= rows)

    def wet_weight(self, x, y) -> np.ndarray:
        """The bilinear interpolation of the wet indicator (1 wet, 0 dry) - a smooth picture of the
        wet edge, whose gradient points into the water across the cell staircase of a bank."""
        n = np.size(x)
        g = np.empty((2, n))
        g[0] = x
        g[1] = y
        g *= self._scale
        g += self._shift
        g0 = np.floor(g)
        f = g - g0
        k = (g0[1] * self.nc + g0[0]).astype(np.int64)
        wet = (np.take(self.slot, self._offsets + k, mode="clip") > 0).astype(np.float64)
        p = np.empty((2, 2, n))
        np.subtract(1.0, f, out=p[0])
        p[1] = f
        w = (p[:, None, 1, :] * p[None, :, 0, :]).reshape(4, n)
        return (w * wet).sum(axis=0)

    def bank_moves(self, xw, yw, xd, yd, rx, ry) -> tuple:
        """Candidate moves along the wet edge for a particle that met it between the last wet point
        (xw, yw) and the first dry point (xd, yd), with (rx, ry) of its step left; and the unit
        direction and length of the rest of the step along the bank (see :func:`_along_bank`).

        The bank's direction is taken from the gradient of :meth:`wet_weight`, so a particle follows a
        bank drawn as a staircase of cells; then: along the side of the wet cell that was crossed (at
        a corner: along y, then along x)."""
        e = 0.25 * self.size_m
        gx = (self.wet_weight(xw + e, yw) - self.wet_weight(xw - e, yw)) / (2 * e)
        gy = (self.wet_weight(xw, yw + e) - self.wet_weight(xw, yw - e)) / (2 * e)
        moves, tx, ty, tlen = _along_bank(rx, ry, gx, gy, self.size_m)
        cw, rw = self._cell(xw, yw)
        cd, rd = self._cell(xd, yd)
        vert = cw != cd  # crossed a side parallel to y
        horz = rw != rd
        zero = np.zeros_like(rx)
        moves.append((np.where(vert, zero, rx), np.where(vert, ry, zero)))
        moves.append((np.where(vert & horz, rx, zero), zero))
        return moves, tx, ty, tlen


def _polygon_edges(node_x, node_y, face_nodes):
    """Edge start/end coordinates (n_faces, max_nodes) with padded edges degenerate."""
    fn = np.asarray(face_nodes)
    valid = fn >= 0
    nn = valid.sum(axis=1)
    safe = np.where(valid, fn, 0)
    col = np.arange(fn.shape[1])[None, :]
    nxt = np.take_along_axis(safe, np.where(col + 1 < nn[:, None], col + 1, 0), axis=1)
    nxt = np.where(valid, nxt, safe[:, :1])
    start = np.where(valid, safe, safe[:, :1])
    return node_x[start], node_y[start], node_x[nxt], node_y[nxt], start, nxt, valid


class MeshFlow:
    """Face-constant values on an unstructured mesh, faces found by walking (module docstring).

    ``u, v, depth, chainage`` are per wet face, aligned with ``index`` (face numbers).
    """

    kind = "mesh"

    def __init__(self, node_x, node_y, face_nodes, index, u, v, depth, chainage, face_area=None):
        from scipy.spatial import cKDTree

        node_x = np.asarray(node_x, dtype=np.float64)
        node_y = np.asarray(node_y, dtype=np.float64)
        fn = np.asarray(face_nodes, dtype=np.int64)
        nf, m = fn.shape
        ax, ay, bx, by, start, nxt, valid = _polygon_edges(node_x, node_y, fn)
        self.ax, self.ay, self.bx, self.by = ax, ay, bx, by
        with np.errstate(divide="ignore", invalid="ignore"):
            self.slope = np.where(by != ay, (bx - ax) / (by - ay), 0.0)
        # edge neighbours: faces sharing the same (unordered) pair of nodes
        e_face = np.repeat(np.arange(nf), m)[valid.ravel()]
        e_col = np.tile(np.arange(m), nf)[valid.ravel()]
        a = start[valid]
        b = nxt[valid]
        key = np.minimum(a, b) * (len(node_x) + 1) + np.maximum(a, b)
        order = np.argsort(key, kind="stable")
        ks = key[order]
        pair = np.flatnonzero(ks[1:] == ks[:-1])
        self.neighbours = np.full((nf, m), -1, dtype=np.int64)
        f1, f2 = e_face[order[pair]], e_face[order[pair + 1]]
        self.neighbours[f1, e_col[order[pair]]] = f2
        self.neighbours[f2, e_col[order[pair + 1]]] = f1
        cx = np.where(valid, ax, 0.0).sum(axis=1) / valid.sum(axis=1)
        cy = np.where(valid, ay, 0.0).sum(axis=1) / valid.sum(axis=1)
        self._centroid = np.column_stack([cx, cy])
        self._tree = cKDTree(self._centroid)
        if face_area is None:
            cross = np.where(valid, ax * by - bx * ay, 0.0)
            face_area = np.abs(cross.sum(axis=1)) / 2.0
        self.size = np.sqrt(np.asarray(face_area, dtype=np.float64))
        index = np.asarray(index, dtype=np.int64)
        if index.size == 0:
            raise ChannelHabitatError("the run has no wet faces", "MESH_DEPTH_GROUP")
        self.table = np.zeros((nf + 1, 4), dtype=np.float64)  # row nf: no face
        self.table[:, 2:4] = np.nan
        self.table[index, 0] = u
        self.table[index, 1] = v
        self.table[index, 2] = depth
        self.table[index, 3] = chainage
        self.wet = np.zeros(nf + 1, dtype=bool)
        self.wet[index] = True
        self.table[~self.wet, 0:2] = 0.0
        self.nf = nf
        self.uniform_size = None
        self.size_m = float(np.median(self.size[index]))
        self.extent = (float(node_x.min()), float(node_x.max()), float(node_y.min()), float(node_y.max()))

    @property
    def typical_size_m(self) -> float:
        return self.size_m

    def element_size(self, where) -> np.ndarray:
        where = np.asarray(where)
        return np.where(where >= 0, self.size[np.maximum(where, 0)], self.size_m)

    def _inside(self, px, py, faces):
        """Point-in-polygon (crossing number) of each point in its candidate face (faces >= 0)."""
        ay = self.ay[faces]
        by = self.by[faces]
        pyc = py[:, None]
        straddle = (ay > pyc) != (by > pyc)
        xint = self.ax[faces] + self.slope[faces] * (pyc - ay)
        return (np.count_nonzero(straddle & (px[:, None] < xint), axis=1) & 1).astype(bool)

    def locate(self, x, y, hint=None) -> np.ndarray:
        """The face containing each point (-1 when none)."""
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        n = x.size
        found = np.full(n, -1, dtype=np.int64)
        todo = np.arange(n)
        if hint is not None:
            hint = np.asarray(hint, dtype=np.int64)
            has = hint >= 0
            idx = todo[has]
            if idx.size:
                ok = self._inside(x[idx], y[idx], hint[idx])
                found[idx[ok]] = hint[idx[ok]]
                rest = idx[~ok]
                # the neighbours of the hint face
                nb = self.neighbours[hint[rest]]
                for j in range(nb.shape[1]):
                    if rest.size == 0:
                        break
                    cand = nb[:, j]
                    sel = cand >= 0
                    if sel.any():
                        ii = rest[sel]
                        ok = self._inside(x[ii], y[ii], cand[sel])
                        found[ii[ok]] = cand[sel][ok]
                    keep = found[rest] < 0
                    rest, nb = rest[keep], nb[keep]
            todo = np.concatenate([todo[~has], rest]) if idx.size else todo
        todo = todo[found[todo] < 0]
        if todo.size:
            ext = self.extent
            inb = (x[todo] >= ext[0]) & (x[todo] <= ext[1]) & (y[todo] >= ext[2]) & (y[todo] <= ext[3])
            todo = todo[inb]
        if todo.size:
            k = min(12, self.nf)
            _, cand = self._tree.query(np.column_stack([x[todo], y[todo]]), k=k)
            cand = np.asarray(cand).reshape(todo.size, -1)
            for j in range(cand.shape[1]):
                if todo.size == 0:
                    break
                ok = self._inside(x[todo], y[todo], cand[:, j])
                found[todo[ok]] = cand[ok, j]
                todo, cand = todo[~ok], cand[~ok]
        return found

    def sample(self, x, y, where=None, values: int = 4, contain: bool = True) -> FlowSample:
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        face = self.locate(x, y, where)
        row = np.where(face >= 0, face, self.nf)
        vals = self.table[row]
        return FlowSample(vals[:, 0], vals[:, 1], vals[:, 2], vals[:, 3], self.wet[row], face)

    def outside(self, x, y) -> np.ndarray:
        """Points in no face of the mesh."""
        return self.locate(x, y) < 0

    def bank_moves(self, xw, yw, xd, yd, rx, ry) -> tuple:
        """Candidate moves along the wet edge (see :func:`_along_bank`): the bank's inward normal is
        the sum of the inward normals of the sides of the last wet face that border dry faces or
        the mesh's edge (a corner face gives the diagonal); without such a side, the side nearest the
        last wet point."""
        face = self.locate(xw, yw)
        ok = face >= 0
        f = np.where(ok, face, 0)
        ax, ay, bx, by = self.ax[f], self.ay[f], self.bx[f], self.by[f]
        ex, ey = bx - ax, by - ay
        length = np.hypot(ex, ey)
        valid = length > 0
        safe = np.where(valid, length, 1.0)
        qx, qy = -ey / safe, ex / safe  # unit normals of the sides
        cx, cy = self._centroid[f, 0][:, None], self._centroid[f, 1][:, None]
        inward = np.sign((cx - 0.5 * (ax + bx)) * qx + (cy - 0.5 * (ay + by)) * qy)
        qx, qy = qx * inward, qy * inward
        nb = self.neighbours[f]
        dry_side = valid & ((nb < 0) | ~self.wet[np.where(nb >= 0, nb, self.nf)])
        nx_ = np.where(dry_side, qx, 0.0).sum(axis=1)
        ny_ = np.where(dry_side, qy, 0.0).sum(axis=1)
        # fallback: the side nearest the last wet point
        px, py = xw[:, None], yw[:, None]
        with np.errstate(invalid="ignore", divide="ignore"):
            t = np.clip(((px - ax) * ex + (py - ay) * ey) / (safe * safe), 0.0, 1.0)
        d2 = np.where(valid, (ax + t * ex - px) ** 2 + (ay + t * ey - py) ** 2, np.inf)
        j = np.argmin(d2, axis=1)
        k = np.arange(face.size)
        none = np.hypot(nx_, ny_) == 0
        nx_ = np.where(none, qx[k, j], nx_)
        ny_ = np.where(none, qy[k, j], ny_)
        nx_ = np.where(ok, nx_, 0.0)
        ny_ = np.where(ok, ny_, 0.0)
        return _along_bank(rx, ry, nx_, ny_, self.size[f])


def flow_from_field(fld: HydraulicField, chainage) -> GridFlow | MeshFlow:
    """The velocity field of a run (u and v needed), with the chainage of every element."""
    if fld.u is None or fld.v is None:
        raise ChannelHabitatError("particle tracking needs velocity vectors: give u and v rasters, or a "
                                  "mesh vector group", "VELOCITY_U")
    sup = fld.support
    chainage = np.asarray(chainage, dtype=np.float64)
    if isinstance(sup, GridSupport):
        return GridFlow(sup.transform, sup.shape, sup.index, fld.u, fld.v, fld.depth, chainage)
    if isinstance(sup, MeshSupport):
        return MeshFlow(sup.node_x, sup.node_y, sup.face_nodes, sup.index, fld.u, fld.v, fld.depth, chainage)
    raise ChannelHabitatError("the run has no grid or mesh geometry", "VELOCITY_U")


# ----------------------------------------------------------------------------------------------
# Seeds
# ----------------------------------------------------------------------------------------------

def cross_section_seeds(flow, axis, chainage: float, n: int, max_offset_m: float, spacing_m: float | None = None,
                        along_sign: float = 1.0):
    """``n`` points spread evenly over the wet width of the cross-section at ``chainage``.

    The section is the line through the axis point at ``chainage``, normal to the axis, sampled
    every ``spacing_m`` (default a quarter element) out to ``max_offset_m`` each side. Wet samples
    whose chainage is far from ``chainage`` (another loop of a meander) are left out. Points sit at
    the centres of n equal shares of the wet length, so islands and side channels get their share.
    The flow's chainage channel is ``along_sign`` x the axis chainage. Returns (x, y, offset) with
    offset > 0 left of the axis direction (of the flow when chainage grows downstream).
    """
    if n < 1:
        raise ChannelHabitatError("the number of particles must be at least 1", "N_PARTICLES")
    h = flow.typical_size_m
    ds = float(spacing_m or h / 4.0)
    half = max(float(max_offset_m), 2 * h)
    ns = int(np.ceil(2 * half / ds)) + 1
    if ns > 400_000:
        ds = 2 * half / 400_000
        ns = 400_001
    s = -half + ds * np.arange(ns)
    px, py, ang = axis.point_at(np.array([chainage]))
    nx, ny = -np.sin(ang[0]), np.cos(ang[0])  # left normal
    xs, ys = px[0] + s * nx, py[0] + s * ny
    smp = flow.sample(xs, ys)
    tol = max(3.0 * h, 0.1 * half)
    good = smp.wet & (np.abs(smp.chainage - along_sign * chainage) <= tol)
    if not good.any():
        raise ChannelHabitatError(
            f"no wet water across the reach at the release chainage {chainage:.0f} m; give a release "
            "chainage inside the wet area, or a seed point layer", "RELEASE_CHAINAGE")
    sw = s[good]
    total = sw.size
    q = (np.arange(n) + 0.5) / n * total
    j = np.minimum(np.floor(q).astype(np.int64), total - 1)
    so = sw[j] + (q - j - 0.5) * ds
    x, y = px[0] + so * nx, py[0] + so * ny
    chk = flow.sample(x, y)
    bad = ~chk.wet
    so[bad] = sw[j[bad]]
    return px[0] + so * nx, py[0] + so * ny, so


# ----------------------------------------------------------------------------------------------
# Tracking
# ----------------------------------------------------------------------------------------------

@dataclass
class DriftResult:
    """Per particle: release point, end point, travel time (s), fate code, path length (m), steps,
    and ``time_s`` (particle, zone, class) seconds where class column 0 is 'unclassified' (wet water
    no class row matched) and columns 1..N are the scheme's classes. ``paths``: list of (x, y, t)."""

    seed_x: np.ndarray
    seed_y: np.ndarray
    release_chainage: np.ndarray
    end_x: np.ndarray
    end_y: np.ndarray
    end_chainage: np.ndarray
    travel_s: np.ndarray
    fate: np.ndarray
    path_length_m: np.ndarray
    n_steps: np.ndarray
    bank_contacts: np.ndarray
    time_s: np.ndarray
    paths: list
    path_chainage: list  # chainage of every path vertex (sampled from the field; exact at the ends)
    class_names: list
    zone_names: list
    zone_edges: np.ndarray
    end_m: float
    t_max_s: float
    step: StepRule
    flow_kind: str
    iterations: int = 0
    notes: list = field(default_factory=list)
    sign: int = 1  # the axis's flow sign: chainage = sign x downstream distance

    @property
    def n(self) -> int:
        return len(self.travel_s)

    @property
    def class_time_s(self) -> np.ndarray:
        """(particle, 1 + classes) seconds; column 0 unclassified."""
        return self.time_s.sum(axis=1)

    @property
    def zone_time_s(self) -> np.ndarray:
        return self.time_s.sum(axis=2)

    def fate_counts(self) -> dict:
        return {name: int(np.count_nonzero(self.fate == i)) for i, name in enumerate(FATES)}


def class_coder(scheme):
    """A function (depth, speed) -> int64 class codes equal to ``scheme.classify``; for a table of
    contiguous speed intervals (the velocity preset) a single sorted search with the bounds
    prepared once, since the tracker classifies four points per particle per step."""
    if scheme.variables() == {"speed"}:
        lows, highs = [], []
        for c in scheme.classes:
            lo, hi = c.bounds.get("speed", (None, None))
            lows.append(-np.inf if lo is None else float(lo))
            highs.append(np.inf if hi is None else float(hi))
        if all(a == b for a, b in zip(highs[:-1], lows[1:])) and all(lo < hi for lo, hi in zip(lows, highs)):
            inner = np.array(lows[1:], dtype=np.float64)
            first, last = lows[0], highs[-1]

            def code(depth, speed):
                speed = np.asarray(speed, dtype=np.float64)
                out = np.searchsorted(inner, speed, side="right") + 1
                ok = np.isfinite(speed) & np.isfinite(depth)
                if np.isfinite(first):
                    ok &= speed >= first
                if np.isfinite(last):
                    ok &= speed < last
                out[~ok] = 0
                return out

            return code

    def general(depth, speed):
        return scheme.classify(depth, speed).astype(np.int64)

    return general


class _Recorder:
    """Path vertices, appended in time order per particle as whole arrays per iteration."""

    def __init__(self, spacing_m: float, max_gap_s: float):
        self.spacing = spacing_m
        self.max_gap = max_gap_s
        self.parts = []

    def add(self, pid, x, y, t, c):
        if pid.size:
            self.parts.append((pid.copy(), x.copy(), y.copy(), t.copy(), np.array(c, dtype=np.float64)))

    def paths(self, n: int) -> tuple:
        """([(x, y, t)] per particle, [chainage] per particle)."""
        if not self.parts:
            empty = np.zeros(0)
            return [(empty, empty, empty) for _ in range(n)], [empty for _ in range(n)]
        pid = np.concatenate([p[0] for p in self.parts])
        order = np.argsort(pid, kind="stable")
        pid = pid[order]
        cols = [np.concatenate([p[k] for p in self.parts])[order] for k in (1, 2, 3, 4)]
        bounds = np.searchsorted(pid, np.arange(n + 1))
        xyt = [tuple(c[bounds[i]:bounds[i + 1]] for c in cols[:3]) for i in range(n)]
        return xyt, [cols[3][bounds[i]:bounds[i + 1]] for i in range(n)]


def _stage(flow, x, y, where, k1u, k1v, values):
    """A stage sample; a stage point out of the water keeps the start velocity (so the step runs
    on to the wet-area edge at the particle's own pace, where the exit rules take over)."""
    s = flow.sample(x, y, where, values, False)
    dry = ~s.wet
    if dry.any():
        s.u[dry] = k1u[dry]
        s.v[dry] = k1v[dry]
    return s


def _rk4(flow, x, y, where, k1u, k1v, dt, values=4):
    s2 = _stage(flow, x + 0.5 * dt * k1u, y + 0.5 * dt * k1v, where, k1u, k1v, values)
    s3 = _stage(flow, x + 0.5 * dt * s2.u, y + 0.5 * dt * s2.v, where, k1u, k1v, values)
    s4 = _stage(flow, x + dt * s3.u, y + dt * s3.v, where, k1u, k1v, values)
    xn = x + dt / 6.0 * (k1u + 2.0 * s2.u + 2.0 * s3.u + s4.u)
    yn = y + dt / 6.0 * (k1v + 2.0 * s2.v + 2.0 * s3.v + s4.v)
    return xn, yn, (s2, s3, s4)


def _crossing(chainage_of, end_m, x0, y0, u0, v0, c0, x1, y1, u1, v1, wet1, c1, dt, iterations: int = 6):
    """Where and when (fraction of the step) the path crosses the end chainage.

    The path within the step is the cubic Hermite curve through the step's ends with the
    velocities there as tangents (4th-order accurate like the step itself; where the end point is
    out of the water its velocity is replaced by the start's); the chainage on it is solved for
    ``end_m`` by the Illinois variant of regula falsi, bracketed by the step's ends."""
    u1 = np.where(wet1, u1, u0)
    v1 = np.where(wet1, v1, v0)

    def point(sv):
        s2, s3 = sv * sv, sv * sv * sv
        h00, h10, h01, h11 = 2 * s3 - 3 * s2 + 1, s3 - 2 * s2 + sv, -2 * s3 + 3 * s2, s3 - s2
        return (h00 * x0 + h10 * dt * u0 + h01 * x1 + h11 * dt * u1,
                h00 * y0 + h10 * dt * v0 + h01 * y1 + h11 * dt * v1)

    lo, hi = np.zeros_like(c0), np.ones_like(c0)
    flo, fhi = c0 - end_m, c1 - end_m  # flo < 0 <= fhi
    s = np.clip(np.where(fhi > flo, -flo / np.where(fhi > flo, fhi - flo, 1.0), 1.0), 0.0, 1.0)
    side = np.zeros(c0.shape, dtype=np.int8)
    for _ in range(iterations):
        px, py = point(s)
        fs = np.asarray(chainage_of(px, py), dtype=np.float64) - end_m
        right = fs >= 0
        # Illinois: halve the value kept twice on the same side
        fhi = np.where(~right & (side == -1), fhi * 0.5, fhi)
        flo = np.where(right & (side == 1), flo * 0.5, flo)
        hi = np.where(right, s, hi)
        fhi = np.where(right, fs, fhi)
        lo = np.where(right, lo, s)
        flo = np.where(right, flo, fs)
        side = np.where(right, 1, -1).astype(np.int8)
        den = fhi - flo
        s = np.where(den > 0, lo - flo * (hi - lo) / np.where(den > 0, den, 1.0), hi)
        s = np.clip(s, lo, hi)
    px, py = point(s)
    return s, px, py


def _along_bank(rx, ry, gx, gy, size):
    """(moves, tx, ty, tlen) for the rest of a step (rx, ry) that met a bank whose inward direction
    is (gx, gy) (any length; zero = unknown): the step without its component into the bank, length
    ``tlen`` along the unit tangent (tx, ty), nudged 0.01, 0.25 and 0.5 ``size`` into the water (the
    larger nudges round the inner corners of a bank drawn by cells or faces)."""
    norm = np.hypot(gx, gy)
    has = norm > 0
    nx_ = np.where(has, gx / np.where(has, norm, 1.0), 0.0)
    ny_ = np.where(has, gy / np.where(has, norm, 1.0), 0.0)
    into = np.minimum(rx * nx_ + ry * ny_, 0.0)  # component into the bank (negative)
    ax_, ay_ = np.where(has, rx - into * nx_, 0.0), np.where(has, ry - into * ny_, 0.0)
    tlen = np.hypot(ax_, ay_)
    tx = np.where(tlen > 0, ax_ / np.where(tlen > 0, tlen, 1.0), 0.0)
    ty = np.where(tlen > 0, ay_ / np.where(tlen > 0, tlen, 1.0), 0.0)
    moves = []
    for k in (0.01, 0.25, 0.5):
        nudge = k * size
        moves.append((np.where(has, ax_ + nudge * nx_, 0.0), np.where(has, ay_ + nudge * ny_, 0.0)))
    return moves, tx, ty, tlen


def _slide(flow, xw, yw, xd, yd, rx, ry):
    """(x, y, moved): each particle moved along the wet edge by the first of the flow's candidate
    moves (whole, half or quarter) that ends in the water; unmoved particles stay at (xw, yw).
    ``moved`` is False also when the rest of the step has almost nothing along the bank (under 5 %:
    a current straight into the bank) or the move gains under 5 % of it along the bank (nudges off
    the bank do not count)."""
    nx_, ny_ = xw.copy(), yw.copy()
    done = np.zeros(xw.size, bool)
    moves, tx, ty, tlen = flow.bank_moves(xw, yw, xd, yd, rx, ry)
    for mx, my in moves:
        for f in (1.0, 0.5, 0.25):
            todo = np.flatnonzero(~done & ((mx != 0) | (my != 0)))
            if todo.size == 0:
                break
            px, py = xw[todo] + f * mx[todo], yw[todo] + f * my[todo]
            ok = flow.sample(px, py, None, 2).wet
            idx = todo[ok]
            nx_[idx], ny_[idx] = px[ok], py[ok]
            done[idx] = True
    progress = (nx_ - xw) * tx + (ny_ - yw) * ty
    moved = done & (tlen >= 0.05 * np.hypot(rx, ry)) & (progress >= 0.05 * tlen)
    return nx_, ny_, moved


def _take(sample: FlowSample, sel) -> FlowSample:
    return FlowSample(*(None if a is None else a[sel] for a in sample))


def _put(dst: FlowSample, sel, src: FlowSample) -> None:
    for a, b in zip(dst, src):
        if a is not None:
            a[sel] = b


def track(flow, seed_x, seed_y, scheme, *, end_m: float, exact_chainage=None, zone_edges=None, zone_names=None,
          t_max_s: float = DEFAULT_T_MAX_S, step: StepRule | None = None,
          path_spacing_m: float | None = DEFAULT_PATH_SPACING_M, bank: str = "slide",
          progress=None) -> DriftResult:
    """Move particles from (seed_x, seed_y) until they stop (module docstring: stopping rules).

    ``exact_chainage(x, y)``: the axis chainage of points (``ReachAxis.locate``), used at the end
    crossing and for exits; defaults to the flow's own (analytic flows). ``zone_edges``: chainages
    of the zone boundaries (one zone = the whole reach by default). ``bank``: 'slide' or 'strand'.
    """
    progress = as_progress(progress)
    step = step or StepRule()
    if bank not in BANK_RULES:
        raise ChannelHabitatError(f"unknown bank rule '{bank}' (use {' or '.join(BANK_RULES)})", "BANK_CONTACT")
    slide = bank == "slide"
    if not t_max_s > 0:
        raise ChannelHabitatError("the maximum travel time must be positive", "MAX_TIME_DAYS")
    if exact_chainage is None:
        exact_chainage = flow.exact_chainage
    seed_x = np.atleast_1d(np.asarray(seed_x, dtype=np.float64))
    seed_y = np.atleast_1d(np.asarray(seed_y, dtype=np.float64))
    n = seed_x.size
    names = list(scheme.names)
    ncls = len(names) + 1
    if zone_edges is None:
        zone_edges = np.array([-np.inf, np.inf])
        zone_names = ["reach"]
    zone_edges = np.asarray(zone_edges, dtype=np.float64)
    zone_names = list(zone_names or [f"zone {i + 1}" for i in range(len(zone_edges) - 1)])
    nz = len(zone_edges) - 1
    inner_edges = zone_edges[1:-1]
    h_typ = flow.typical_size_m
    spacing = float(path_spacing_m) if path_spacing_m else 0.0
    rec = _Recorder(spacing, PATH_MAX_GAP_S)

    # outputs
    travel = np.zeros(n)
    fate = np.full(n, -1, dtype=np.int8)
    end_x, end_y = seed_x.copy(), seed_y.copy()
    end_ch = np.full(n, np.nan)
    plen = np.zeros(n)
    nsteps = np.zeros(n, dtype=np.int64)
    bank = np.zeros(n, dtype=np.int64)
    time_s = np.zeros((n, nz, ncls))

    s0 = flow.sample(seed_x, seed_y)
    release_ch = np.asarray(exact_chainage(seed_x, seed_y), dtype=np.float64)
    dry = ~s0.wet
    fate[dry] = FATE_DRY_RELEASE
    end_ch[dry] = release_ch[dry]
    live = np.flatnonzero(~dry)
    # live state (compact arrays)
    pid = live.copy()
    x, y = seed_x[live].copy(), seed_y[live].copy()
    t = np.zeros(live.size)
    cur = _take(s0, live)
    acc = np.zeros((live.size, nz, ncls))
    contacts = np.zeros(live.size, dtype=np.int64)
    stuck = np.zeros(live.size, dtype=np.int64)
    length = np.zeros(live.size)
    steps = np.zeros(live.size, dtype=np.int64)
    rel = release_ch[live]
    last_rx, last_ry, last_rt = x.copy(), y.copy(), t.copy()
    rec.add(pid, x, y, t, cur.chainage)
    span = max(end_m - float(np.nanmin(rel)) if rel.size else 1.0, 1e-9)
    it = 0
    uniform_h = getattr(flow, "uniform_size", None)
    need_depth = bool(scheme.variables() & {"depth", "froude", "vd"})
    classify = class_coder(scheme)
    stage_values = 3 if need_depth else 2
    ones4 = np.ones(4 * n)
    max_disp = None if step.fixed_dt_s is not None else 2.0 * step.courant
    cells = nz * ncls
    it = 0
    while pid.size:
        it += 1
        if it % 50 == 1:
            frac_i = np.maximum(np.clip((cur.chainage - rel) / span, 0, 1), t / t_max_s)
            progress((n - pid.size + float(np.nansum(frac_i))) / max(n, 1),
                     f"drifting {pid.size} particles, median time {np.median(t) / 3600.0:.1f} h")
        m = pid.size
        speed1 = np.hypot(cur.u, cur.v)
        h = uniform_h if uniform_h is not None else flow.element_size(cur.where)
        dt = np.minimum(step.dt(h, speed1), t_max_s - t)
        xn, yn, stages = _rk4(flow, x, y, cur.where, cur.u, cur.v, dt, stage_values)
        if max_disp is not None:
            # the speed rose steeply within the step: redo it shorter (at most ~C h per step)
            disp = np.hypot(xn - x, yn - y)
            lim = max_disp * h
            over = np.flatnonzero(disp > lim)
            if over.size:
                hh = lim if np.ndim(lim) == 0 else lim[over]
                dt[over] *= 0.5 * hh / disp[over]
                cb = _take(cur, over)
                xo, yo, st_o = _rk4(flow, x[over], y[over], cb.where, cb.u, cb.v, dt[over], stage_values)
                xn[over], yn[over] = xo, yo
                for full, part in zip(stages, st_o):
                    _put(full, over, part)
        nxt = flow.sample(xn, yn, cur.where)
        frac = np.ones(m)  # share of the step actually travelled (end crossing, exit)
        stop = np.full(m, -1, dtype=np.int8)
        # crossing the end chainage (checked first: the grid or mesh may end right there)
        near_end = end_m - 2.0 * h_typ
        # how far down the axis the step can have reached (chainage runs faster than the water on the
        # inside of a bend: up to R / (R - offset); a factor of 4 covers offsets up to 3/4 of R)
        reach_ = cur.chainage + 4.0 * np.hypot(xn - x, yn - y) + h_typ
        cand = np.flatnonzero((nxt.wet & (nxt.chainage >= near_end)) | (~nxt.wet & (reach_ >= near_end)))
        if cand.size:
            c_new = np.asarray(exact_chainage(xn[cand], yn[cand]), dtype=np.float64)
            hit = c_new >= end_m
            if hit.any():
                ci = cand[hit]
                c_old = np.asarray(exact_chainage(x[ci], y[ci]), dtype=np.float64)
                f, px, py = _crossing(exact_chainage, end_m, x[ci], y[ci], cur.u[ci], cur.v[ci], c_old,
                                      xn[ci], yn[ci], nxt.u[ci], nxt.v[ci], nxt.wet[ci], c_new[hit], dt[ci])
                # a step that met a bank before the end is handled as a bank contact first
                q = 1.0 - 1e-6
                wet_before = flow.sample(x[ci] + q * (px - x[ci]), y[ci] + q * (py - y[ci]), cur.where[ci], 2).wet
                ci, f, px, py = ci[wet_before], f[wet_before], px[wet_before], py[wet_before]
                frac[ci] = f
                xn[ci], yn[ci] = px, py
                stop[ci] = FATE_DOWNSTREAM
        # a step that ends out of the water: retry shorter; else find the exit
        bad = np.flatnonzero(~nxt.wet & (stop < 0))
        if bad.size:
            if slide:
                still = bad  # slide from where the step met the edge
            else:  # retry shorter: a particle that only clipped a corner continues
                dt_r = dt[bad] * RETRY_FACTOR
                cb = _take(cur, bad)
                xr, yr, st_r = _rk4(flow, x[bad], y[bad], cb.where, cb.u, cb.v, dt_r, stage_values)
                nr = flow.sample(xr, yr, cb.where)
                dt[bad] = dt_r
                xn[bad], yn[bad] = xr, yr
                for full, part in zip(stages, st_r):
                    _put(full, bad, part)
                _put(nxt, bad, nr)
                still = bad[~nr.wet]
            if still.size:
                # bisection along the step for the last wet point
                lo = np.zeros(still.size)
                hi = np.ones(still.size)
                ex, ey = x[still], y[still]
                dxs, dys = xn[still] - ex, yn[still] - ey
                for _ in range(BISECTION_STEPS):
                    mid = 0.5 * (lo + hi)
                    sm = flow.sample(ex + mid * dxs, ey + mid * dys, cur.where[still], 2)
                    lo = np.where(sm.wet, mid, lo)
                    hi = np.where(sm.wet, hi, mid)
                xd, yd = ex + hi * dxs, ey + hi * dys  # first point out of the water
                outside_hi = flow.outside(xd, yd)
                xw, yw = ex + lo * dxs, ey + lo * dys  # last point in the water
                frac[still] = lo
                xn[still], yn[still] = xw, yw
                ch = np.asarray(exact_chainage(xw, yw), dtype=np.float64)
                f = np.where(outside_hi, FATE_OUTSIDE, FATE_STRANDED)
                f = np.where(ch < rel[still], FATE_UPSTREAM, f)
                # leaving the model through its downstream boundary within half an element of the end
                f = np.where(outside_hi & (ch >= end_m - 0.5 * flow.element_size(cur.where[still])),
                             FATE_DOWNSTREAM, f)
                contact = f == FATE_STRANDED  # met a bank (a dry element inside the model)
                contacts[still[contact]] += 1
                if slide and contact.any():
                    # slide along the bank: the rest of the step, projected on the wet edge
                    ii = still[contact]
                    rest = 1.0 - lo[contact]
                    xs, ys, moved = _slide(flow, xw[contact], yw[contact], xd[contact], yd[contact],
                                           rest * dxs[contact], rest * dys[contact])
                    stuck[ii] = np.where(moved, 0, stuck[ii] + 1)
                    go = stuck[ii] < STUCK_LIMIT
                    gi = ii[go]
                    xn[gi], yn[gi] = xs[go], ys[go]
                    frac[gi] = 1.0  # the whole step elapses
                    _put(nxt, gi, flow.sample(xn[gi], yn[gi], cur.where[gi]))
                    fi = np.flatnonzero(contact)[go]
                    f[fi] = -1
                    # sliding past the end chainage: stop where the slide crossed it
                    cs_ = np.asarray(exact_chainage(xs[go], ys[go]), dtype=np.float64)
                    past = cs_ >= end_m
                    if past.any():
                        pi, fp = gi[past], fi[past]
                        cw_ = ch[fp]
                        g = np.clip((end_m - cw_) / np.maximum(cs_[past] - cw_, 1e-300), 0.0, 1.0)
                        xn[pi] = xw[fp] + g * (xs[go][past] - xw[fp])
                        yn[pi] = yw[fp] + g * (ys[go][past] - yw[fp])
                        frac[pi] = lo[fp] + g * (1.0 - lo[fp])
                        f[fp] = FATE_DOWNSTREAM
                stop[still] = f
        ok_step = np.ones(m, bool)
        ok_step[bad] = False
        stuck[ok_step] = 0
        dt_eff = dt * frac
        tl = (stop < 0) & (t + dt_eff >= t_max_s * (1.0 - 1e-12))
        stop[tl] = FATE_TIME_LIMIT
        # residence: Simpson weights over the RK4 stage points, zone by the chainage at the start
        s2, s3, s4 = stages
        if need_depth:
            d_all = np.concatenate([cur.depth, s2.depth, s3.depth, s4.depth])
        else:
            d_all = ones4[:4 * m]
        codes = classify(d_all, np.concatenate([speed1, np.hypot(s2.u, s2.v), np.hypot(s3.u, s3.v),
                                                np.hypot(s4.u, s4.v)])).reshape(4, m)
        for j, sj in enumerate(stages, start=1):
            codes[j] = np.where(sj.wet, codes[j], codes[0])  # a stage out of the water: start's class
        if inner_edges.size:
            base = np.searchsorted(inner_edges, cur.chainage, side="right")
            base += np.arange(m) * nz
            base *= ncls
        else:
            base = np.arange(m) * ncls
        codes += base
        wts = np.multiply.outer(RK4_WEIGHTS_ARRAY, dt_eff)
        acc += np.bincount(codes.ravel(), weights=wts.ravel(), minlength=m * cells).reshape(m, nz, ncls)
        length += np.hypot(xn - x, yn - y)
        steps += 1
        t = t + dt_eff
        x, y = xn, yn
        cur = nxt
        # path vertices
        done = stop >= 0
        if spacing > 0:
            want = done | (t - last_rt >= PATH_MAX_GAP_S) | (np.hypot(x - last_rx, y - last_ry) >= spacing)
        else:
            want = np.ones(m, bool)
        if want.any():
            cw_ = cur.chainage[want]
            dw = done[want]
            if dw.any():  # the stopping point: its exact chainage
                cw_ = np.array(cw_, dtype=np.float64)
                cw_[dw] = exact_chainage(x[want][dw], y[want][dw])
            rec.add(pid[want], x[want], y[want], t[want], cw_)
            last_rx[want], last_ry[want], last_rt[want] = x[want], y[want], t[want]
        if done.any():
            di = np.flatnonzero(done)
            p = pid[di]
            travel[p] = t[di]
            fate[p] = stop[di]
            end_x[p], end_y[p] = x[di], y[di]
            plen[p] = length[di]
            nsteps[p] = steps[di]
            time_s[p] = acc[di]
            bank[p] = contacts[di]
            keep = ~done
            pid, x, y, t = pid[keep], x[keep], y[keep], t[keep]
            cur = _take(cur, keep)
            acc, length, steps, rel = acc[keep], length[keep], steps[keep], rel[keep]
            contacts, stuck = contacts[keep], stuck[keep]
            last_rx, last_ry, last_rt = last_rx[keep], last_ry[keep], last_rt[keep]
    paths, path_chainage = rec.paths(n)
    fin = fate != FATE_DRY_RELEASE
    if fin.any():
        end_ch[fin] = np.asarray(exact_chainage(end_x[fin], end_y[fin]), dtype=np.float64)
    progress(1.0, "drift finished")
    return DriftResult(
        seed_x=seed_x, seed_y=seed_y, release_chainage=release_ch, end_x=end_x, end_y=end_y,
        end_chainage=end_ch, travel_s=travel, fate=fate, path_length_m=plen, n_steps=nsteps, bank_contacts=bank,
        time_s=time_s, paths=paths, path_chainage=path_chainage, class_names=names, zone_names=zone_names,
        zone_edges=zone_edges, end_m=float(end_m), t_max_s=float(t_max_s), step=step,
        flow_kind=flow.kind, iterations=it)


# ----------------------------------------------------------------------------------------------
# Tables
# ----------------------------------------------------------------------------------------------

SUMMARY_PERCENTILES = (10.0, 50.0, 90.0)


def _pct_label(q: float) -> str:
    return f"p{q:g}"


def particle_columns(res: DriftResult, seed_offset=None) -> dict:
    """One row per particle: fate, chainages, travel time and the time in every class and zone.

    Columns: particle (1-based), fate, release_x, release_y, release_chainage_m, release_offset_m,
    end_chainage_m, path_length_m, n_steps, t_total_h, t_total_d, t_<class>_h and pct_<class>
    (share of the travel time), t_unclassified_h (only when a class table left wet water
    unclassified), t_zone_<zone>_h, t_zone_<zone>_<class>_h.
    """
    n = res.n
    ct = res.class_time_s
    zt = res.zone_time_s
    tracked = res.fate != FATE_DRY_RELEASE
    cols = {
        "particle": np.arange(1, n + 1, dtype=np.int64),
        "fate": [FATES[int(f)] for f in res.fate],
        "release_x": res.seed_x,
        "release_y": res.seed_y,
        "release_chainage_m": res.release_chainage,
        "release_offset_m": np.full(n, np.nan) if seed_offset is None else np.asarray(seed_offset, float),
        "end_chainage_m": res.end_chainage,
        "path_length_m": res.path_length_m,
        "n_steps": res.n_steps,
        "t_total_h": np.where(tracked, res.travel_s / SECONDS_PER_HOUR, np.nan),
        "t_total_d": np.where(tracked, res.travel_s / SECONDS_PER_DAY, np.nan),
    }
    with np.errstate(invalid="ignore", divide="ignore"):
        for j, name in enumerate(res.class_names, start=1):
            cols[f"t_{field_key(name)}_h"] = np.where(tracked, ct[:, j] / SECONDS_PER_HOUR, np.nan)
        for j, name in enumerate(res.class_names, start=1):
            cols[f"pct_{field_key(name)}"] = np.where(tracked & (res.travel_s > 0),
                                                       100.0 * ct[:, j] / res.travel_s, np.nan)
    if np.any(ct[:, 0] > 0):
        cols["t_unclassified_h"] = np.where(tracked, ct[:, 0] / SECONDS_PER_HOUR, np.nan)
    if len(res.zone_names) > 1 or res.zone_names != ["reach"]:
        for z, zname in enumerate(res.zone_names):
            cols[f"t_zone_{field_key(zname)}_h"] = np.where(tracked, zt[:, z] / SECONDS_PER_HOUR, np.nan)
        for z, zname in enumerate(res.zone_names):
            for j, name in enumerate(res.class_names, start=1):
                cols[f"t_zone_{field_key(zname)}_{field_key(name)}_h"] = np.where(
                    tracked, res.time_s[:, z, j] / SECONDS_PER_HOUR, np.nan)
    return cols


def _stats_block(cols: dict, prefix: str, values_s: np.ndarray) -> None:
    """p10/p50/p90 (numpy linear percentiles over particles) and mean, in hours and days."""
    if values_s.size:
        pct = np.percentile(values_s, SUMMARY_PERCENTILES)
        mean = float(np.mean(values_s))
    else:
        pct = np.full(len(SUMMARY_PERCENTILES), np.nan)
        mean = np.nan
    for unit, div in (("h", SECONDS_PER_HOUR), ("d", SECONDS_PER_DAY)):
        for q, val in zip(SUMMARY_PERCENTILES, pct):
            cols[f"{prefix}_{_pct_label(q)}_{unit}"] = val / div
        cols[f"{prefix}_mean_{unit}"] = mean / div


def summary_rows(res: DriftResult) -> list:
    """Rows (dicts) per scope: the whole reach, then every zone. Over all tracked particles
    (released wet), whatever their fate: particles stopped by the time limit give lower bounds,
    stranded ones the time until stranding - the fate counts say how many of each."""
    tracked = res.fate != FATE_DRY_RELEASE
    counts = res.fate_counts()
    rows = []
    scopes = [("reach", "reach", None)]
    if len(res.zone_names) > 1 or res.zone_names != ["reach"]:
        scopes += [("zone", zname, z) for z, zname in enumerate(res.zone_names)]
    ts = res.time_s[tracked]
    for scope, unit, z in scopes:
        row = {"scope": scope, "unit": unit}
        if z is None:
            sg = res.sign
            row["chainage_from_m"] = (sg * float(np.nanmin(sg * res.release_chainage[tracked])) if tracked.any()
                                      else np.nan)  # the upstream-most release
            row["chainage_to_m"] = res.end_m
            per_class = ts.sum(axis=1)
        else:
            row["chainage_from_m"] = float(res.zone_edges[z])
            row["chainage_to_m"] = float(res.zone_edges[z + 1])
            per_class = ts[:, z, :]
        row["n_particles"] = res.n
        row["n_tracked"] = int(tracked.sum())
        for name in FATES[:-1]:
            row[f"n_{name}"] = counts[name]
        total = per_class.sum(axis=1)
        _stats_block(row, "t_total", total)
        grand = float(total.sum())
        for j, name in enumerate(res.class_names, start=1):
            _stats_block(row, f"t_{field_key(name)}", per_class[:, j])
        for j, name in enumerate(res.class_names, start=1):
            row[f"pct_{field_key(name)}"] = 100.0 * float(per_class[:, j].sum()) / grand if grand > 0 else np.nan
        if np.any(per_class[:, 0] > 0):
            row["pct_unclassified"] = 100.0 * float(per_class[:, 0].sum()) / grand if grand > 0 else np.nan
        rows.append(row)
    return rows


def arrival_profile(res: DriftResult, n_levels: int = 200):
    """Time since release at which particles first pass chainages between the release and the end.

    Returns (chainage levels, p10, p50, p90 in seconds, number of particles that passed each
    level). Percentiles (numpy, linear) over the particles that passed the level; a particle's
    passage time is interpolated linearly between its path vertices on the running maximum of its
    downstream distance (so an eddy that carries it back does not count twice)."""
    sg = res.sign
    tracked = np.flatnonzero(res.fate != FATE_DRY_RELEASE)
    if tracked.size == 0:
        empty = np.zeros(0)
        return empty, empty, empty, empty, np.zeros(0, dtype=np.int64)
    start = float(np.nanmin(sg * res.release_chainage[tracked]))
    end = sg * res.end_m
    levels = np.linspace(start, end, n_levels)
    times = np.full((tracked.size, n_levels), np.nan)
    for k, i in enumerate(tracked):
        a = sg * np.asarray(res.path_chainage[i], dtype=np.float64)
        t = res.paths[i][2]
        ok = np.isfinite(a)
        if ok.sum() < 2:
            continue
        a, t = np.maximum.accumulate(a[ok]), t[ok]
        reach_ = levels <= a[-1]
        keep = np.concatenate([[True], np.diff(a) > 0])  # strictly increasing for interpolation
        times[k, reach_] = np.interp(levels[reach_], a[keep], t[keep])
    count = np.count_nonzero(np.isfinite(times), axis=0)
    with np.errstate(all="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            pct = np.nanpercentile(times, SUMMARY_PERCENTILES, axis=0)
    return sg * levels, pct[0], pct[1], pct[2], count


# ----------------------------------------------------------------------------------------------
# The 1D estimate (speed only)
# ----------------------------------------------------------------------------------------------

@dataclass
class Estimate:
    """Travel time along the centreline from segment mean speeds (an estimate, module docstring)."""

    segments: dict  # ordered columns per segment
    class_names: list
    zone_names: list
    zone_edges: np.ndarray
    time_s: np.ndarray  # (zone, 1 + classes) seconds, column 0 unclassified
    chainage_m: np.ndarray  # piece edges
    cumulative_s: np.ndarray  # time at each piece edge
    release_m: float
    end_m: float
    band_fraction: float
    notes: list = field(default_factory=list)
    sign: int = 1  # chainage = sign x the downstream distance of release_m, end_m, chainage_m

    @property
    def total_s(self) -> float:
        return float(self.cumulative_s[-1]) if self.cumulative_s.size else np.nan

    def time_at(self, chainage) -> np.ndarray:
        """Estimated time since release at chainages (linear within a piece: constant speed)."""
        return np.interp(chainage, self.chainage_m, self.cumulative_s)


def travel_time_estimate(chainage, offset, speed, depth, area, seg_edges, scheme, *, release_m: float,
                         end_m: float, zone_edges=None, zone_names=None, band_fraction: float = 0.5) -> Estimate:
    """Segment-by-segment travel time from ``release_m`` to ``end_m`` (module docstring, 1D estimate).

    Per segment: W = wet area / segment length; the band holds the wet elements with
    |offset| <= band_fraction * W / 2; V = area-weighted mean speed of the band; time = length / V
    (length clipped to [release_m, end_m]). A segment whose band is empty takes the elements
    nearest the centreline (a tenth of the segment's elements); a segment with no water, or a
    band mean speed of zero, has no finite time (the total is then infinite) and is noted.
    """
    if not 0 < band_fraction <= 1:
        raise ChannelHabitatError("the centreline band fraction must lie in (0, 1]", "BAND_FRACTION")
    if not end_m > release_m:
        raise ChannelHabitatError(f"the end chainage ({end_m:.0f} m) must lie downstream of the release "
                                  f"chainage ({release_m:.0f} m)", "END_CHAINAGE")
    chainage = np.asarray(chainage, dtype=np.float64)
    offset = np.asarray(offset, dtype=np.float64)
    speed = np.asarray(speed, dtype=np.float64)
    depth = np.asarray(depth, dtype=np.float64)
    area = np.asarray(area, dtype=np.float64)
    seg_edges = np.asarray(seg_edges, dtype=np.float64)
    nseg = len(seg_edges) - 1
    if zone_edges is None:
        zone_edges, zone_names = np.array([seg_edges[0], seg_edges[-1]]), ["reach"]
    zone_edges = np.asarray(zone_edges, dtype=np.float64)
    zone_names = list(zone_names)
    notes = []
    seg = np.searchsorted(seg_edges, chainage, side="right") - 1
    seg = np.where(chainage == seg_edges[-1], nseg - 1, seg)
    inside = (seg >= 0) & (seg < nseg) & np.isfinite(speed)
    seg_len = np.diff(seg_edges)
    wet_area = np.bincount(seg[inside], weights=area[inside], minlength=nseg)
    width = wet_area / seg_len
    half_band = band_fraction * width / 2.0
    in_band = inside.copy()
    in_band[inside] = np.abs(offset[inside]) <= half_band[seg[inside]]
    n_band = np.bincount(seg[in_band], minlength=nseg)
    n_all = np.bincount(seg[inside], minlength=nseg)
    fallback = np.flatnonzero((n_band == 0) & (n_all > 0))
    for s in fallback:
        members = np.flatnonzero(inside & (seg == s))
        k = max(1, members.size // 10)
        nearest = members[np.argsort(np.abs(offset[members]))[:k]]
        in_band[nearest] = True
    if fallback.size:
        notes.append(f"{fallback.size} segment(s) had no wet element within the centreline band; their "
                     "speed is the mean of the tenth of their elements nearest the centreline.")
    n_band = np.bincount(seg[in_band], minlength=nseg)
    a_band = np.bincount(seg[in_band], weights=area[in_band], minlength=nseg)
    with np.errstate(invalid="ignore", divide="ignore"):
        v_mean = np.bincount(seg[in_band], weights=(area * speed)[in_band], minlength=nseg) / a_band
        d_mean = np.bincount(seg[in_band], weights=(area * depth)[in_band], minlength=nseg) / a_band
    # pieces: segment and zone boundaries between release and end
    inner = np.concatenate([seg_edges, zone_edges])
    inner = inner[(inner > release_m) & (inner < end_m)]
    pieces = np.unique(np.concatenate([[release_m], inner, [end_m]]))
    mid = 0.5 * (pieces[:-1] + pieces[1:])
    plen = np.diff(pieces)
    pseg = np.clip(np.searchsorted(seg_edges, mid, side="right") - 1, 0, nseg - 1)
    outside_segments = (mid < seg_edges[0]) | (mid > seg_edges[-1])
    pv = np.where(outside_segments, np.nan, v_mean[pseg])
    with np.errstate(invalid="ignore", divide="ignore"):
        ptime = np.where(pv > 0, plen / pv, np.inf)
    if not np.all(np.isfinite(ptime)):
        bad = np.unique(pseg[~np.isfinite(ptime)]) + 1
        notes.append("no finite travel time through segment(s) " + ", ".join(str(int(b)) for b in bad)
                     + " (no wet water on the centreline band, or zero speed): the estimate is infinite.")
    cum = np.concatenate([[0.0], np.cumsum(ptime)])
    codes = scheme.classify(d_mean.astype(np.float64), v_mean.astype(np.float64)).astype(np.int64)
    pcode = codes[pseg]
    pzone = np.clip(np.searchsorted(zone_edges, mid, side="right") - 1, 0, len(zone_names) - 1)
    ncls = len(scheme.names) + 1
    time_s = np.zeros((len(zone_names), ncls))
    np.add.at(time_s, (pzone, pcode), ptime)
    # per segment rows (segments overlapping [release, end])
    used = np.unique(pseg[~outside_segments])
    seg_time = np.bincount(pseg, weights=ptime, minlength=nseg)
    seg_used_len = np.bincount(pseg, weights=plen, minlength=nseg)
    cum_end = np.array([cum[np.flatnonzero(pseg == s)[-1] + 1] for s in used]) if used.size else np.zeros(0)
    names = scheme.names
    cols = {
        "segment": (used + 1).astype(np.int64),
        "chainage_from_m": np.maximum(seg_edges[used], release_m),
        "chainage_to_m": np.minimum(seg_edges[used + 1], end_m),
        "length_m": seg_used_len[used],
        "wet_width_m": width[used],
        "band_half_width_m": half_band[used],
        "n_band": n_band[used].astype(np.int64),
        "v_band_mean_ms": v_mean[used],
        "d_band_mean_m": d_mean[used],
        "class": [names[c - 1] if c > 0 else "unclassified" for c in codes[used]],
        "t_segment_h": seg_time[used] / SECONDS_PER_HOUR,
        "t_cumulative_h": cum_end / SECONDS_PER_HOUR,
        "t_cumulative_d": cum_end / SECONDS_PER_DAY,
    }
    return Estimate(cols, list(names), zone_names, zone_edges, time_s, pieces, cum, float(release_m),
                    float(end_m), float(band_fraction), notes)


def estimate_summary_rows(est: Estimate) -> list:
    """Rows like :func:`summary_rows` for the 1D estimate (one value: p10 = p50 = p90)."""
    rows = []
    scopes = [("reach", "reach", None)]
    if est.zone_names != ["reach"]:
        scopes += [("zone", zn, z) for z, zn in enumerate(est.zone_names)]
    for scope, unit, z in scopes:
        per_class = est.time_s.sum(axis=0) if z is None else est.time_s[z]
        sg = est.sign
        if z is None:
            c_from, c_to = sg * est.release_m, sg * est.end_m
        else:
            c_from = sg * max(sg * float(est.zone_edges[z]), est.release_m)
            c_to = sg * min(sg * float(est.zone_edges[z + 1]), est.end_m)
        row = {"scope": scope, "unit": unit, "chainage_from_m": c_from, "chainage_to_m": c_to,
               "n_particles": 0, "n_tracked": 0}
        for name in FATES[:-1]:
            row[f"n_{name}"] = 0
        _stats_block(row, "t_total", np.array([per_class.sum()]))
        grand = float(per_class.sum())
        for j, name in enumerate(est.class_names, start=1):
            _stats_block(row, f"t_{field_key(name)}", np.array([per_class[j]]))
        for j, name in enumerate(est.class_names, start=1):
            row[f"pct_{field_key(name)}"] = 100.0 * per_class[j] / grand if 0 < grand < np.inf else np.nan
        if per_class[0] > 0:
            row["pct_unclassified"] = 100.0 * per_class[0] / grand if 0 < grand < np.inf else np.nan
        rows.append(row)
    return rows


# ----------------------------------------------------------------------------------------------
# One run, start to finish
# ----------------------------------------------------------------------------------------------

@dataclass
class DriftOptions:
    n_particles: int = 200
    t_max_s: float = DEFAULT_T_MAX_S
    step: StepRule = field(default_factory=StepRule)
    release_m: float | None = None
    end_m: float | None = None
    path_spacing_m: float | None = DEFAULT_PATH_SPACING_M
    band_fraction: float = 0.5
    bank: str = "slide"


@dataclass
class DriftRun:
    """Everything one run gives: particle tracking (None for speed-only runs) and the 1D estimate."""

    result: DriftResult | None
    estimate: Estimate
    seed_offset: np.ndarray | None
    release_m: float
    end_m: float  # where drift was followed to
    requested_end_m: float  # the end asked for (axis end by default)
    field_end_m: float  # downstream end of the wet field along the axis
    method: str
    notes: list = field(default_factory=list)


def extended_chainage(axis, x, y) -> np.ndarray:
    """Axis chainage of points, continued beyond the axis ends along the end tangents (so a step
    that overshoots the last cross-section still measures how far it went past it)."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.size == 0:
        return np.zeros(0)
    c = np.array(axis.locate(x, y).chainage, dtype=np.float64)
    ends = np.array([axis.start_m, axis.end_m])
    ex, ey, ang = axis.point_at(ends)
    along_end = (x - ex[1]) * np.cos(ang[1]) + (y - ey[1]) * np.sin(ang[1])
    along_start = (x - ex[0]) * np.cos(ang[0]) + (y - ey[0]) * np.sin(ang[0])
    c = np.where((c >= axis.end_m) & (along_end > 0), axis.end_m + along_end, c)
    c = np.where((c <= axis.start_m) & (along_start < 0), axis.start_m + along_start, c)
    return c


METHOD_TRACKING = "particle tracking (RK4)"
METHOD_ESTIMATE = "1D estimate"


END_BAND_ELEMENTS = 5.0


def reach_window(start_m: float, end_m_axis: float, chainage, element_size: float, release_m=None, end_m=None):
    """(release, end, requested end, field end, notes) in *downstream distance* (the chainage times
    the axis's flow sign, so it grows downstream): the stretch a run's drift runs along.

    ``start_m``/``end_m_axis``: the axis's upstream and downstream ends, ``chainage``: the run's
    element positions, ``release_m``/``end_m``: requested values (None: defaults), all in downstream
    distance. Release: one element inside the upstream end of the wet field (not before the axis
    start). End: the axis's downstream end; when the wet field ends further upstream,
    :data:`END_BAND_ELEMENTS` elements inside the field's end instead (with a note)."""
    c = np.asarray(chainage, dtype=np.float64)
    c = c[np.isfinite(c)]
    if c.size == 0:
        raise ChannelHabitatError("no wet element of the run lies along the reach axis", "CENTRELINE")
    lo_, hi_ = min(start_m, end_m_axis), max(start_m, end_m_axis)
    field_start = max(float(c.min()) - element_size / 2.0, start_m)
    field_end = min(float(c.max()) + element_size / 2.0, end_m_axis)
    if release_m is None:
        release_m = field_start + element_size
    requested = end_m_axis if end_m is None else float(end_m)

    def show(v):  # back to chainage for messages
        return abs(v) if start_m < 0 or end_m_axis < 0 else v

    if not lo_ <= release_m < hi_:
        raise ChannelHabitatError(f"the release chainage {show(release_m):.0f} m is outside the reach axis "
                                  f"({show(start_m):.0f}-{show(end_m_axis):.0f} m)", "RELEASE_CHAINAGE")
    if not lo_ < requested <= hi_:
        raise ChannelHabitatError(f"the end chainage {show(requested):.0f} m is outside the reach axis "
                                  f"({show(start_m):.0f}-{show(end_m_axis):.0f} m)", "END_CHAINAGE")
    if not requested > release_m:
        raise ChannelHabitatError(f"the end chainage ({show(requested):.0f} m) must lie downstream of the "
                                  f"release chainage ({show(release_m):.0f} m)", "END_CHAINAGE")
    notes = []
    end = requested
    if field_end < requested - element_size / 2.0:
        end = field_end - END_BAND_ELEMENTS * element_size
        notes.append(f"the wet field ends at chainage {show(field_end):.0f} m, upstream of the end chainage "
                     f"{show(requested):.0f} m: drift is followed to {show(end):.0f} m ({END_BAND_ELEMENTS:g} "
                     "elements inside the field's end).")
        if end <= release_m:
            raise ChannelHabitatError(f"the wet field ends at chainage {show(field_end):.0f} m, too close to the "
                                      f"release chainage {show(release_m):.0f} m", "RELEASE_CHAINAGE")
    return float(release_m), float(end), float(requested), float(field_end), notes


def drift_run(fld: HydraulicField, reach, scheme, options: DriftOptions | None = None, location=None,
              seeds=None, progress=None) -> DriftRun:
    """Particle tracking (when the run has u and v) and the 1D estimate for one run.

    ``location``: the run's element Location (chainage, offset) - computed when not given.
    ``seeds``: (x, y) arrays of release points; default ``n_particles`` across the wet width at the
    release chainage. Works for axes whose chainage grows downstream or upstream (the axis's
    ``flow_sign``): internally in downstream distance, outputs in chainage.
    """
    from .reach import locate_field

    options = options or DriftOptions()
    progress = as_progress(progress)
    if location is None:
        location = locate_field(reach, fld)
    axis = reach.axis
    sign = float(getattr(axis, "flow_sign", 1))
    along = sign * np.asarray(location.chainage, dtype=np.float64)  # downstream distance
    offset = np.asarray(location.offset, dtype=np.float64)
    if isinstance(fld.support, GridSupport):
        h = min(abs(fld.support.transform[1]), abs(fld.support.transform[5]))
    else:
        h = float(np.sqrt(np.median(fld.area))) if fld.n else 1.0
    a_start, a_end = sorted((sign * axis.start_m, sign * axis.end_m))
    seg_a = np.sort(sign * np.asarray(reach.segment_edges, dtype=np.float64))
    zone_a = np.sort(sign * np.asarray(reach.zone_edges, dtype=np.float64))
    zone_names = list(reach.zone_names) if sign > 0 else list(reach.zone_names)[::-1]
    rel_req = None if options.release_m is None else sign * options.release_m
    end_req = None if options.end_m is None else sign * options.end_m
    release_a, end_a, requested_a, field_end_a, notes = reach_window(a_start, a_end, along, h, rel_req, end_req)
    est = travel_time_estimate(along, offset, fld.speed, fld.depth, fld.area, seg_a, scheme,
                               release_m=release_a, end_m=end_a, zone_edges=zone_a, zone_names=zone_names,
                               band_fraction=options.band_fraction)
    _estimate_to_chainage(est, sign, len(seg_a) - 1)
    notes += est.notes
    ends = (sign * release_a, sign * end_a, sign * requested_a, sign * field_end_a)
    if fld.u is None or fld.v is None:
        notes.append("the run has speed only (no velocity vectors): travel times are the 1D estimate.")
        return DriftRun(None, est, None, *ends, METHOD_ESTIMATE, notes)
    check_flow_direction(fld, axis, location.chainage, sign)
    progress(0.02, "building the velocity field")
    flow = flow_from_field(fld, along)

    def exact(x, y):
        return sign * extended_chainage(axis, x, y)

    if seeds is None:
        near = np.abs(along - release_a) <= 2.0 * flow.typical_size_m
        if not near.any():
            raise ChannelHabitatError(f"no wet element near the release chainage {sign * release_a:.0f} m",
                                      "RELEASE_CHAINAGE")
        max_off = float(np.max(np.abs(offset[near]))) + 2.0 * flow.typical_size_m
        sx, sy, soff = cross_section_seeds(flow, axis, sign * release_a, options.n_particles, max_off,
                                           along_sign=sign)
        soff = sign * soff  # left of the chainage direction -> left of the flow
        order = np.argsort(soff, kind="stable")  # particles numbered from the right bank to the left
        sx, sy, soff = sx[order], sy[order], soff[order]
    else:
        sx = np.asarray(seeds[0], dtype=np.float64)
        sy = np.asarray(seeds[1], dtype=np.float64)
        if sx.size == 0:
            raise ChannelHabitatError("the seed layer has no points", "SEEDS")
        soff = axis.locate(sx, sy).offset
    res = track(flow, sx, sy, scheme, end_m=end_a, exact_chainage=exact, zone_edges=zone_a,
                zone_names=zone_names, t_max_s=options.t_max_s, step=options.step,
                path_spacing_m=options.path_spacing_m, bank=options.bank, progress=progress.sub(0.05, 1.0))
    # back to chainage for the outputs
    res.release_chainage = sign * res.release_chainage
    res.end_chainage = sign * res.end_chainage
    res.zone_edges = sign * zone_a
    res.end_m = sign * end_a
    res.path_chainage = [sign * c for c in res.path_chainage]
    res.sign = int(sign)
    counts = res.fate_counts()
    if counts["dry_release"]:
        notes.append(f"{counts['dry_release']} seed point(s) lie on dry or no-data elements and were not tracked.")
    if counts["time_limit"]:
        notes.append(f"{counts['time_limit']} particle(s) were still drifting at the time limit "
                     f"({options.t_max_s / SECONDS_PER_DAY:g} days): their times are lower bounds.")
    return DriftRun(res, est, soff, *ends, METHOD_TRACKING, notes)


def check_flow_direction(fld: HydraulicField, axis, chainage, sign: float) -> None:
    """Refuse a reach axis whose downstream direction runs against the water: the area-weighted
    mean velocity component along the axis's downstream tangent must be positive."""
    _, _, ang = axis.point_at(np.asarray(chainage, dtype=np.float64))
    along = (fld.u * np.cos(ang) + fld.v * np.sin(ang)) * sign
    w = np.asarray(fld.area, dtype=np.float64)
    mean = float(np.sum(w * along) / np.sum(w)) if w.sum() > 0 else 0.0
    if mean < 0:
        raise ChannelHabitatError(
            f"the water flows against the reach axis (mean velocity {mean:.3f} m/s along its downstream "
            "direction): the centreline seems to run from downstream to upstream. Build the axis with "
            "buildreach (which orients it), or reverse the line, so chainage runs with the flow.", "CENTRELINE")


def _estimate_to_chainage(est: Estimate, sign: float, n_segments: int) -> None:
    """Segment rows of an estimate made in downstream distance, in chainage and the reach's own
    segment numbers (the internal pieces stay in downstream distance, with ``sign``)."""
    est.sign = int(sign)
    if sign > 0:
        return
    cols = est.segments
    cols["segment"] = (n_segments + 1 - cols["segment"]).astype(np.int64)
    cols["chainage_from_m"] = -cols["chainage_from_m"]
    cols["chainage_to_m"] = -cols["chainage_to_m"]
    est.zone_edges = -est.zone_edges


# ----------------------------------------------------------------------------------------------
# Tables over several runs (regime x discharge)
# ----------------------------------------------------------------------------------------------

RUN_KEYS = ("run", "regime", "q_mld", "q_m3s")


def _stack(rows: list, keys_first=()) -> dict:
    """Rows (dicts) -> ordered columns; a key missing from a row gives NaN (numbers) or ''."""
    order = list(keys_first)
    for r in rows:
        for k in r:
            if k not in order:
                order.append(k)
    cols = {}
    for k in order:
        vals = [r.get(k, None) for r in rows]
        sample = next((v for v in vals if v is not None), None)
        if isinstance(sample, str):
            cols[k] = ["" if v is None else v for v in vals]
        elif isinstance(sample, (bool, np.bool_)):
            cols[k] = np.array([bool(v) for v in vals])
        elif isinstance(sample, (int, np.integer)) and all(v is not None for v in vals):
            cols[k] = np.array(vals, dtype=np.int64)
        else:
            cols[k] = np.array([np.nan if v is None else v for v in vals], dtype=np.float64)
    return cols


def _columns_to_rows(cols: dict) -> list:
    n = len(next(iter(cols.values()))) if cols else 0
    return [{k: (v[i].item() if isinstance(v, np.ndarray) else v[i]) for k, v in cols.items()} for i in range(n)]


def run_tables(runs: list, axis=None) -> dict:
    """Output tables of several runs. ``runs``: [(meta, DriftRun)] with meta keys :data:`RUN_KEYS`.

    Returns {'paths': (columns, [(x, y, m)]), 'residence': columns, 'summary': columns,
    'estimate': columns}. PATHS holds one line per tracked particle (M = seconds since release);
    a speed-only run gives one line along the axis from release to end, M = the 1D estimate of the
    time since release. SUMMARY rows: per run, the reach then every zone.
    """
    path_rows, path_geoms, res_rows, sum_rows, est_rows = [], [], [], [], []
    for meta, run in runs:
        base = {k: meta.get(k) for k in RUN_KEYS}
        est = run.estimate
        est_zone = est.time_s.sum(axis=1)
        common = {**base, "method": run.method, "release_chainage_m": run.release_m,
                  "end_chainage_m": run.end_m}
        if run.result is not None:
            res = run.result
            pcols = particle_columns(res, run.seed_offset)
            for row in _columns_to_rows(pcols):
                res_rows.append({**base, **row})
            tracked = res.fate != FATE_DRY_RELEASE
            for i in range(res.n):
                if not tracked[i]:
                    continue
                px, py, pt = res.paths[i]
                path_rows.append({**base, "particle": i + 1, "fate": FATES[int(res.fate[i])],
                                  "method": run.method,
                                  "t_total_h": float(res.travel_s[i] / SECONDS_PER_HOUR),
                                  "t_total_d": float(res.travel_s[i] / SECONDS_PER_DAY),
                                  "release_offset_m": float(run.seed_offset[i]) if run.seed_offset is not None
                                  else np.nan,
                                  "end_chainage_m": float(res.end_chainage[i]),
                                  "path_length_m": float(res.path_length_m[i]),
                                  "bank_contacts": int(res.bank_contacts[i])})
                path_geoms.append((px, py, pt))
            srows = summary_rows(res)
            step = res.step.describe()
        else:
            srows = estimate_summary_rows(est)
            step = "segment length / centreline-band mean speed"
            if axis is not None and np.isfinite(est.total_s):
                sg = est.sign
                va = sg * axis.chainage
                ch = np.unique(np.concatenate([est.chainage_m, va[(va > est.release_m) & (va < est.end_m)]]))
                ax_, ay_, _ = axis.point_at(sg * ch)
                path_rows.append({**base, "particle": 0, "fate": "estimate", "method": run.method,
                                  "t_total_h": est.total_s / SECONDS_PER_HOUR,
                                  "t_total_d": est.total_s / SECONDS_PER_DAY, "release_offset_m": 0.0,
                                  "end_chainage_m": sg * est.end_m, "path_length_m": est.end_m - est.release_m,
                                  "bank_contacts": 0})
                path_geoms.append((ax_, ay_, est.time_at(ch)))
        for srow in srows:
            z = None if srow["scope"] == "reach" else est.zone_names.index(srow["unit"])
            t_est = est.total_s if z is None else float(est_zone[z])
            sum_rows.append({**common, **srow, "step_rule": step, "t_estimate_h": t_est / SECONDS_PER_HOUR})
        for row in _columns_to_rows(est.segments):
            est_rows.append({**base, **row})
    return {
        "paths": (_stack(path_rows, RUN_KEYS), path_geoms),
        "residence": _stack(res_rows, RUN_KEYS),
        "summary": _stack(sum_rows, RUN_KEYS),
        "estimate": _stack(est_rows, RUN_KEYS),
    }
