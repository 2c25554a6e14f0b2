"""Planform, channel shape and bed of the invented Figment River (all invented, seeded, deterministic).

Planform
    The centreline is a sine-generated curve (Langbein & Leopold 1966, River meanders - theory of
    minimum variance, USGS Professional Paper 422-H): the direction angle along the channel is
    ``theta(s) = theta_valley(s) + omega(s) cos(phi(s))``, where ``phi`` advances by pi over each
    bend and ``omega`` (the maximum angle to the valley axis) varies from bend to bend. A group of
    three tight bends has its middle bend's ``omega`` tuned so that its neck leaves a set strip of
    land between the banks (``neck_gap_m``); the bends beside it swing close to each other. The
    valley axis itself swings gently. Short straight approaches lead out of the upstream structure
    and into the downstream weir.

Cross-sections
    Bank-top width grows downstream (``width_upstream_m`` -> ``width_downstream_m``) with a seeded,
    smooth variation. The bed across a section is a power-law bowl below the bank top whose deepest
    point (thalweg) moves towards the outside of a bend and deepens there; the outer bank is steep
    and the inner (point-bar) side gentle, in proportion to the local bend curvature times width
    (common practice for schematic bend sections, no source). Crossings between bends are shallower
    and symmetric. Flat benches are cut into the inner banks of some bends: low benches in the
    free-flowing upper reach and "pool benches" near the weir whose crest is just above the normal
    pool level, so they are wetted at low flows only when the pool is raised.

Everything is a function of (chainage, offset): chainage along the centreline from the upstream end
(m), offset positive to the LEFT looking downstream (as in ``plugin/core/reach.py``).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
from scipy.interpolate import PchipInterpolator
from scipy.ndimage import gaussian_filter1d
from scipy.spatial import cKDTree

REACH_NAME = "Figment River"
UPSTREAM_STRUCTURE = "Upper Regulator"
DOWNSTREAM_STRUCTURE = "Weir F1"


@dataclass(frozen=True)
class ReachDesign:
    """Every invented number of the reach. Levels are metres above an invented reach datum."""

    length_m: float = 35000.0
    seed: int = 1
    epsg: int = 32744  # WGS 84 / UTM zone 44S; the reach sits in open ocean at round false coordinates
    weir_x: float = 500000.0
    weir_y: float = 6000000.0
    vertex_spacing_m: float = 10.0
    # planform
    bend_length_m: float = 1550.0  # arc length of one bend (half a meander wavelength)
    bend_length_jitter: float = 0.18
    omega_mean: float = 1.30  # rad, maximum angle to the valley axis in an ordinary bend
    omega_jitter: float = 0.22
    omega_tight: float = 1.80  # the bends either side of the necked bend
    tight_at: float = 0.45  # where the tight group sits (fraction of the reach length)
    neck_gap_m: float = 60.0  # land left between the banks across the neck
    straight_upstream_m: float = 500.0
    straight_downstream_m: float = 900.0
    valley_heading_rad: float = np.pi  # the river flows broadly west
    valley_swing_rad: float = 0.45
    valley_swing_length_m: float = 30000.0
    # cross-sections
    width_upstream_m: float = 120.0
    width_downstream_m: float = 175.0
    width_variation_m: float = 12.0
    width_limits_m: tuple = (80.0, 200.0)  # the demo brief: a channel 80-200 m wide
    crossing_depth_m: float = 6.5  # bank top above the thalweg at a straight crossing
    bend_extra_depth_m: float = 1.0  # extra thalweg depth at the apex of a tight bend
    thalweg_shift: float = 0.45  # thalweg offset towards the outer bank at a tight bend (fraction of half width)
    bend_lag_m: float = 60.0  # scour pools sit a little downstream of the bend apex
    # bed profile: thalweg level at the weir and a slope that flattens towards the weir
    bed_level_weir_m: float = 40.0
    slope_far: float = 2.0e-4
    slope_near: float = 1.0e-4
    slope_change_m: tuple = (10000.0, 22000.0)  # distances upstream of the weir over which it changes
    manning_n: float = 0.033
    # structures and regimes
    pool_level_m: float = 44.5  # normal full supply level of the Weir F1 pool
    pool_step_m: float = 0.5  # raised / lowered pool
    structure_loss_coefficient: float = 0.5  # head loss through the open weir, times V^2/2g
    # pre-regulation rating at the weir site, Q = C (h - h0)^b, Q in m3/s, h in m
    rating_c: float = 14.0
    rating_h0: float = 40.2
    rating_b: float = 2.1
    # benches (count per kind); pool-bench crest above the normal pool level
    n_pool_benches: int = 3
    n_low_benches: int = 4
    pool_bench_above_pool_m: float = 0.25
    low_bench_above_thalweg_m: float = 3.0
    margin_m: float = 40.0  # dry margin of the raster grid around the outermost feature

    def with_(self, **kw) -> ReachDesign:
        return replace(self, **kw)


@dataclass
class Bench:
    chainage_from_m: float
    chainage_to_m: float
    side: int  # +1 left bank, -1 right bank (looking downstream)
    width_m: float  # from the bank top towards the channel
    kind: str  # 'pool' or 'low'
    level_m: float | None = None  # crest level of a pool bench (absolute, flat)
    above_thalweg_m: float | None = None  # crest of a low bench above the reference thalweg
    taper_m: float = 80.0

    @property
    def bank(self) -> str:
        return "left" if self.side > 0 else "right"


BED_SMOOTHING_M = 80.0  # standard deviation of the along-channel smoothing of bend-driven bed shape
BENCH_RISER_M = 4.0  # horizontal width of the step from the bank top down to a bench


def _smoothstep(t):
    t = np.clip(t, 0.0, 1.0)
    return t * t * (3.0 - 2.0 * t)


def _smooth_noise(rng, x, amplitude, wavelengths):
    """A sum of sinusoids with seeded phases, scaled to +-amplitude at most."""
    out = np.zeros_like(x, dtype=float)
    for wl in wavelengths:
        out += np.sin(2.0 * np.pi * x / wl + rng.uniform(0.0, 2.0 * np.pi))
    return amplitude * out / len(wavelengths)


@dataclass
class Planform:
    s: np.ndarray  # fine arc length (1 m)
    x: np.ndarray
    y: np.ndarray
    theta: np.ndarray
    apex_s: np.ndarray  # arc length of each bend apex
    omega: np.ndarray  # omega of each bend
    tight: tuple  # indices of the tight group (before, necked, after)


def _planform(d: ReachDesign, rng: np.random.Generator, omegas=None, ds: float = 1.0) -> Planform:
    L = float(d.length_m)
    s = np.arange(0.0, L + 0.5 * ds, ds)
    s[-1] = L
    a, b = d.straight_upstream_m, L - d.straight_downstream_m
    span = b - a
    n_bends = max(int(round(span / d.bend_length_m)), 1)
    lengths = d.bend_length_m * (1.0 + rng.uniform(-d.bend_length_jitter, d.bend_length_jitter, n_bends))
    lengths *= span / lengths.sum()
    edges = a + np.concatenate([[0.0], np.cumsum(lengths)])
    apex = 0.5 * (edges[:-1] + edges[1:])
    base = d.omega_mean + rng.uniform(-d.omega_jitter, d.omega_jitter, n_bends)
    j = int(np.clip(round(d.tight_at * n_bends - 0.5), 1, max(n_bends - 2, 1)))
    tight = (j - 1, j, j + 1) if n_bends >= 5 else ()
    if omegas is None:
        omegas = base
        if tight:
            omegas[j - 1] = omegas[j + 1] = d.omega_tight
            omegas[j] = d.omega_tight + 0.15
    phi = np.interp(s, edges, np.pi * np.arange(n_bends + 1))  # inflections at k*pi, apexes between
    if n_bends >= 2:
        om = PchipInterpolator(apex, omegas, extrapolate=True)(s)
    else:
        om = np.full_like(s, omegas[0])
    env = _smoothstep(np.minimum((s - 0.4 * a) / (0.6 * a + 1e-9), (L - s - 0.4 * (L - b)) / (0.6 * (L - b))))
    valley = d.valley_heading_rad + d.valley_swing_rad * np.sin(2.0 * np.pi * s / d.valley_swing_length_m + 0.3)
    theta = valley + env * om * np.cos(phi)
    mid = 0.5 * (theta[1:] + theta[:-1])
    step = np.diff(s)
    x = np.concatenate([[0.0], np.cumsum(step * np.cos(mid))])
    y = np.concatenate([[0.0], np.cumsum(step * np.sin(mid))])
    x += d.weir_x - x[-1]
    y += d.weir_y - y[-1]
    return Planform(s, x, y, theta, apex, np.asarray(omegas, dtype=float), tight)


def _bank_gaps(x, y, c, width, min_arc):
    """Smallest land gap between banks of parts of the channel more than ``min_arc`` apart along it:
    centreline distance minus the two half widths. Returns (gap per vertex, partner index)."""
    tree = cKDTree(np.column_stack([x, y]))
    reach = float(width.max()) + 400.0
    pairs = tree.query_pairs(reach, output_type="ndarray")
    gap = np.full(len(x), np.inf)
    partner = np.full(len(x), -1)
    if len(pairs) == 0:
        return gap, partner
    i, k = pairs[:, 0], pairs[:, 1]
    far = np.abs(c[i] - c[k]) > min_arc
    i, k = i[far], k[far]
    if len(i) == 0:
        return gap, partner
    g = np.hypot(x[i] - x[k], y[i] - y[k]) - 0.5 * (width[i] + width[k])
    np.minimum.at(gap, i, g)
    np.minimum.at(gap, k, g)
    m = int(np.argmin(g))
    partner[i[m]] = k[m]
    partner[k[m]] = i[m]
    return gap, partner


class ReachGeometry:
    """The reach: centreline vertices (upstream -> downstream), along-channel fields, bed function."""

    def __init__(self, design: ReachDesign | None = None):
        self.design = d = design or ReachDesign()
        if d.length_m < 3000.0:
            raise ValueError("the demo reach must be at least 3 km long")
        self.rng = np.random.default_rng(d.seed)
        rng_plan = np.random.default_rng([d.seed, 1])
        self.planform = self._tuned_planform(rng_plan)
        pf = self.planform
        step = max(int(round(d.vertex_spacing_m)), 1)
        idx = np.arange(0, len(pf.s), step)
        if idx[-1] != len(pf.s) - 1:
            idx = np.append(idx, len(pf.s) - 1)
        self.vertex_s = pf.s[idx]
        self.x = pf.x[idx]
        self.y = pf.y[idx]
        self.theta = np.unwrap(pf.theta[idx])
        self.chainage = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(self.x), np.diff(self.y)))])
        self.length_m = float(self.chainage[-1])
        # curvature from the smooth direction angle (1/m, + turning left)
        kappa_fine = np.gradient(np.unwrap(pf.theta), pf.s)
        self.curvature = kappa_fine[idx]
        self._fields()
        self.benches = self._benches()
        self.gap, self.gap_partner = _bank_gaps(self.x, self.y, self.chainage, self.width,
                                                 min_arc=4.0 * float(self.width.max()))

    # ----------------------------------------------------------------------------------------
    def _tuned_planform(self, rng_plan_seed) -> Planform:
        """The planform with the necked bend's omega tuned so the neck leaves ``neck_gap_m`` of land."""
        d = self.design
        state = rng_plan_seed.bit_generator.state
        pf = _planform(d, rng_plan_seed)
        if not pf.tight:
            return pf
        j = pf.tight[1]
        width_probe = self._width_of(pf.s)

        def gap_for(om_mid):
            g = np.random.default_rng()
            g.bit_generator.state = state
            omegas = pf.omega.copy()
            omegas[j] = om_mid
            p = _planform(d, g, omegas=omegas)
            sub = slice(None, None, 5)
            gaps, _ = _bank_gaps(p.x[sub], p.y[sub], p.s[sub], width_probe[sub], 4.0 * width_probe.max())
            lo, hi = pf.apex_s[j] - 2.5 * d.bend_length_m, pf.apex_s[j] + 2.5 * d.bend_length_m
            near = (p.s[sub] > lo) & (p.s[sub] < hi)
            return float(gaps[near].min()) if near.any() else np.inf, p

        lo, hi = d.omega_tight - 0.2, 2.5
        g_lo, p_lo = gap_for(lo)
        if g_lo < d.neck_gap_m:  # even a moderate bend is too close: keep the moderate one
            return p_lo
        best = p_lo
        for _ in range(40):
            mid = 0.5 * (lo + hi)
            g_mid, p_mid = gap_for(mid)
            if g_mid >= d.neck_gap_m:
                lo, best = mid, p_mid
            else:
                hi = mid
            if hi - lo < 1e-4:
                break
        return best

    def _width_of(self, c):
        d = self.design
        L = d.length_m
        rng = np.random.default_rng([d.seed, 2])
        base = d.width_upstream_m + (d.width_downstream_m - d.width_upstream_m) * np.asarray(c) / L
        taper = _smoothstep(np.minimum(np.asarray(c) / 800.0, (L - np.asarray(c)) / 1200.0))
        w = base + taper * _smooth_noise(rng, np.asarray(c, dtype=float), d.width_variation_m, (2300.0, 4100.0, 6700.0))
        return np.clip(w, *d.width_limits_m)

    def _fields(self):
        d = self.design
        c = self.chainage
        L = self.length_m
        self.width = self._width_of(c * d.length_m / L)
        # reference thalweg level (at crossings): integrate the slope upstream from the weir
        up = L - c
        t = _smoothstep((up - d.slope_change_m[0]) / (d.slope_change_m[1] - d.slope_change_m[0]))
        slope = d.slope_near + (d.slope_far - d.slope_near) * t
        seg = np.diff(c)
        mids = 0.5 * (slope[1:] + slope[:-1])
        rise = np.concatenate([np.cumsum((seg * mids)[::-1])[::-1], [0.0]])
        self.slope = slope
        self.z_ref = d.bed_level_weir_m + rise
        self.bank_top = self.z_ref + d.crossing_depth_m
        # bendiness: signed curvature x width, lagged downstream, 1 at a bend of radius = 2 widths
        lagged = np.interp(c - d.bend_lag_m, c, self.curvature)
        raw = np.clip(lagged * self.width / 0.5, -1.0, 1.0)
        # scour pools and point bars change gradually along the channel: smooth over ~80 m so the
        # bed has no kinks (|curvature| has one at every crossing)
        sigma = BED_SMOOTHING_M / max(float(np.median(np.diff(c))), 1e-9)
        beta = gaussian_filter1d(raw, sigma, mode="nearest")
        bendiness = gaussian_filter1d(np.abs(raw), sigma, mode="nearest")
        self.beta = beta
        rng = np.random.default_rng([d.seed, 3])
        taper = _smoothstep(np.minimum(c / 800.0, (L - c) / 1200.0))
        noise = taper * _smooth_noise(rng, c, 0.15, (900.0, 1700.0, 3100.0))
        self.thalweg_depth = d.crossing_depth_m + d.bend_extra_depth_m * bendiness + noise
        self.eta_t = -d.thalweg_shift * beta  # towards the outer bank (right when turning left)
        pos, neg = np.maximum(beta, 0.0), np.maximum(-beta, 0.0)
        self.p_right = 2.2 + 2.3 * pos - 0.8 * neg  # right bank is the outer bank when turning left
        self.p_left = 2.2 + 2.3 * neg - 0.8 * pos

    def _benches(self) -> list[Bench]:
        d = self.design
        rng = np.random.default_rng([d.seed, 4])
        L = self.length_m
        pf = self.planform
        apex_c = np.interp(pf.apex_s, self.vertex_s, self.chainage)
        beta_apex = np.interp(apex_c + d.bend_lag_m, self.chainage, self.beta)
        out = []

        def pick(lo, hi, n, kind):
            ok = np.flatnonzero((apex_c > lo) & (apex_c < hi) & (np.abs(beta_apex) > 0.25))
            if n <= 0 or len(ok) == 0:
                return
            chosen = np.sort(rng.choice(ok, size=min(n, len(ok)), replace=False))
            for k in chosen:
                half = rng.uniform(250.0, 450.0) if kind == "pool" else rng.uniform(300.0, 600.0)
                c0 = max(apex_c[k] - half, 0.0)
                c1 = min(apex_c[k] + half, L)
                side = 1 if beta_apex[k] > 0 else -1  # inner bank: left when the bend turns left
                w = rng.uniform(22.0, 32.0) if kind == "pool" else rng.uniform(18.0, 28.0)
                if kind == "pool":
                    out.append(Bench(c0, c1, side, w, kind, level_m=d.pool_level_m + d.pool_bench_above_pool_m))
                else:
                    out.append(Bench(c0, c1, side, w, kind, above_thalweg_m=d.low_bench_above_thalweg_m))

        pick(L - 12000.0, L - 1500.0, d.n_pool_benches, "pool")
        pick(1000.0, L - 14000.0, d.n_low_benches, "low")
        out.sort(key=lambda b: b.chainage_from_m)
        return out

    # ----------------------------------------------------------------------------------------
    def along(self, name: str, c):
        """An along-channel field ('width', 'bank_top', 'z_ref', 'theta', ...) at chainages ``c``."""
        return np.interp(c, self.chainage, getattr(self, name))

    def to_xy(self, c, o):
        """Map (chainage, offset + left) to map coordinates using the smooth channel direction."""
        c = np.asarray(c, dtype=float)
        o = np.asarray(o, dtype=float)
        x0 = np.interp(c, self.chainage, self.x)
        y0 = np.interp(c, self.chainage, self.y)
        th = np.interp(c, self.chainage, self.theta)
        return x0 - o * np.sin(th), y0 + o * np.cos(th)

    def bed(self, c, o):
        """Bed level (m) at chainage ``c`` and offset ``o`` (+ left). Beyond the banks: the bank top."""
        c, o = np.broadcast_arrays(np.atleast_1d(np.asarray(c, dtype=float)),
                                   np.atleast_1d(np.asarray(o, dtype=float)))
        ch = self.chainage
        half = 0.5 * np.interp(c, ch, self.width)
        top = np.interp(c, ch, self.bank_top)
        dt = np.interp(c, ch, self.thalweg_depth)
        et = np.interp(c, ch, self.eta_t)
        pl = np.interp(c, ch, self.p_left)
        pr = np.interp(c, ch, self.p_right)
        eta = np.clip(o / half, -1.0, 1.0)
        left = eta >= et
        u = np.where(left, (eta - et) / (1.0 - et), (et - eta) / (1.0 + et))
        p = np.where(left, pl, pr)
        z = top - dt * (1.0 - np.clip(u, 0.0, 1.0) ** p)
        inside = half - np.abs(o)  # distance from the bank top towards the channel
        for b in self.benches:
            sel = (c > b.chainage_from_m - b.taper_m) & (c < b.chainage_to_m + b.taper_m) & (o * b.side > 0)
            if not np.any(sel):
                continue
            cc, dist, zs, tp = c[sel], inside[sel], z[sel], top[sel]
            w = _smoothstep(np.minimum((cc - (b.chainage_from_m - b.taper_m)) / b.taper_m,
                                       ((b.chainage_to_m + b.taper_m) - cc) / b.taper_m))
            if b.kind == "pool":
                level = np.full_like(cc, b.level_m)
            else:
                level = np.interp(cc, ch, self.z_ref) + b.above_thalweg_m
            # riser from the bank top down to the bench, the flat bench, then a 1:8 ramp down to the
            # bed (or the bench carried on, flat, where the bed lies higher than the bench)
            riser = np.clip(dist / BENCH_RISER_M, 0.0, 1.0)
            ramp = np.minimum(level, np.maximum(zs, level - 0.125 * np.maximum(dist - b.width_m, 0.0)))
            shaped = np.where(dist < BENCH_RISER_M, tp - (tp - level) * riser, ramp)
            z[sel] = w * shaped + (1.0 - w) * zs
        return z

    def thalweg(self, c):
        return np.interp(c, self.chainage, self.bank_top - self.thalweg_depth)

    def bank_lines(self, spacing: float = 10.0):
        """(left_xy, right_xy) bank-top lines from upstream to downstream, and their chainages."""
        n = max(int(np.ceil(self.length_m / spacing)), 2)
        c = np.linspace(0.0, self.length_m, n + 1)
        half = 0.5 * self.along("width", c)
        return c, self.to_xy(c, half), self.to_xy(c, -half)

    def summary(self) -> dict:
        """Numbers for the README and the report: bends, radii, neck gap."""
        r = 1.0 / np.maximum(np.abs(self.curvature), 1e-12)
        w_over_r = self.width / r
        finite = np.isfinite(self.gap)
        min_gap = float(self.gap[finite].min()) if finite.any() else None  # None: no part comes close
        return {
            "length_m": self.length_m,
            "bends": int(len(self.planform.apex_s)),
            "sinuosity": self.length_m / float(np.hypot(self.x[-1] - self.x[0], self.y[-1] - self.y[0])),
            "min_radius_m": float(r.min()),
            "max_width_over_radius": float(w_over_r.max()),
            "min_land_gap_m": min_gap,
            "width_min_m": float(self.width.min()),
            "width_max_m": float(self.width.max()),
        }


@dataclass
class Extent:
    x0: float
    y1: float
    cols: int
    rows: int
    cell: float
    transform: tuple = field(init=False)

    def __post_init__(self):
        self.transform = (self.x0, self.cell, 0.0, self.y1, 0.0, -self.cell)


def grid_extent(geom: ReachGeometry, cell: float, extra: float = 0.0) -> Extent:
    """A north-up grid around the channel and its riparian strip, snapped to multiples of the cell
    (and of 10 m) so the grid origin is a round number."""
    c, left, right = geom.bank_lines()
    xs = np.concatenate([left[0], right[0]])
    ys = np.concatenate([left[1], right[1]])
    m = geom.design.margin_m + extra
    x0 = np.floor((xs.min() - m) / 10.0) * 10.0
    y1 = np.ceil((ys.max() + m) / 10.0) * 10.0
    cols = int(np.ceil((xs.max() + m - x0) / cell))
    rows = int(np.ceil((y1 - (ys.min() - m)) / cell))
    return Extent(float(x0), float(y1), cols, rows, float(cell))
