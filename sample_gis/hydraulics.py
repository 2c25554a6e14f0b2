"""Steady open-channel hydraulics for the invented demo reach (the generator's science).

Not shipped in the plugin: the plugin reads hydraulic results, it does not compute them. This module
turns the invented channel into plausible results:

* Manning's equation, V = R^(2/3) S^(1/2) / n (SI units).
* Cross-section properties from a piecewise-linear bed (exact integrals over each linear piece):
  area, top width, wetted perimeter and conveyance, either for the whole section
  (K = A R^(2/3) / n) or summed over vertical strips (K = (1/n) * integral of d^(5/3) dy, the
  divided-channel "wide strip" form whose lateral distribution of unit discharge is q ~ d^(5/3)).
  With strips, the energy coefficient is alpha = A^2 * integral(d^3) / integral(d^(5/3))^3.
* The standard step method for a gradually varied flow profile (Chow 1959, Open-Channel
  Hydraulics, section 10-3): from a known level at the downstream section, the energy equation is
  solved section by section upstream, with the average friction slope of the two sections and
  eddy losses proportional to the change of velocity head. Levels are tabulated per section, so
  all runs (regimes x discharges) are solved together in vectorised form, subcritical branch only.
* Downstream boundaries: a weir pool held at a set level until the river, with the weir fully
  open, would stand higher (the weir "drowns out"); and a stage-discharge rating Q = C (h - h0)^b.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

G = 9.80665  # standard gravity (m/s2)


# --------------------------------------------------------------------------------------------
# Manning
# --------------------------------------------------------------------------------------------

def manning_velocity(n, hydraulic_radius, slope):
    """Mean velocity (m/s) by Manning's equation in SI units."""
    return np.asarray(hydraulic_radius, dtype=float) ** (2.0 / 3.0) * np.sqrt(slope) / n


def manning_discharge(n, area, hydraulic_radius, slope):
    """Discharge (m3/s) = A V by Manning's equation."""
    return np.asarray(area, dtype=float) * manning_velocity(n, hydraulic_radius, slope)


def rectangular(b, y):
    """(area, wetted perimeter, hydraulic radius) of a rectangular channel of width b, depth y."""
    area = b * y
    perimeter = b + 2.0 * y
    return area, perimeter, area / perimeter


def normal_depth_rectangular(q, b, n, slope, tol=1e-10):
    """Normal depth of a rectangular channel by bisection on Manning's equation."""
    lo, hi = 1e-6, 1.0
    while manning_discharge(n, *rectangular(b, hi)[::2], slope) < q:
        hi *= 2.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if manning_discharge(n, *rectangular(b, mid)[::2], slope) < q:
            lo = mid
        else:
            hi = mid
        if hi - lo < tol:
            break
    return 0.5 * (lo + hi)


# --------------------------------------------------------------------------------------------
# Cross-section properties
# --------------------------------------------------------------------------------------------

def section_integrals(offsets, bed, levels, perimeter=True):
    """Exact properties of a piecewise-linear section at water levels ``levels``.

    offsets, bed: (..., m) node arrays (offsets non-decreasing across the section; equal offsets
    make vertical walls). levels: (..., L). Returns a dict of (..., L) arrays:
    area, top_width, perimeter, phi (= integral of d^(5/3) dy) and psi (= integral of d^3 dy).

    Over a linear piece of horizontal width w whose depth goes from a to b (both clipped at 0) and
    whose wet fraction is f, the integral of d^p is f w (b^(p+1) - a^(p+1)) / ((p+1)(b - a)) (and
    f w a^p when a = b); a piece that is partly wet has a = 0 at the water's edge and f = b / |b - a|
    of its width wet, which the same expression covers.
    """
    offsets = np.asarray(offsets, dtype=float)
    bed = np.asarray(bed, dtype=float)
    levels = np.asarray(levels, dtype=float)
    raw = levels[..., :, None] - bed[..., None, :]
    d = np.maximum(raw, 0.0)
    cb = np.cbrt(d)
    d2 = d * d
    p53 = d * cb * cb  # d^(5/3)
    p83 = d2 * cb * cb  # d^(8/3)
    p3 = d2 * d
    p4 = d2 * d2
    ra, rb = raw[..., :-1], raw[..., 1:]
    a, b = d[..., :-1], d[..., 1:]
    w = np.diff(offsets, axis=-1)[..., None, :]
    dz = np.diff(bed, axis=-1)[..., None, :]
    span = np.abs(ra - rb)
    f = np.where((ra >= 0) & (rb >= 0), 1.0,
                 np.where((ra > 0) | (rb > 0), np.maximum(ra, rb) / np.where(span > 0, span, 1.0), 0.0))
    fw = f * w
    diff = b - a
    close = np.abs(diff) < 1e-6
    inv = 1.0 / np.where(close, 1.0, diff)

    def integral(hi_a, hi_b, lo_a, lo_b, p):
        general = (hi_b - hi_a) * inv / (p + 1.0)
        return np.sum(fw * np.where(close, 0.5 * (lo_a + lo_b), general), axis=-1)

    return {
        "area": np.sum(fw * 0.5 * (a + b), axis=-1),
        "top_width": np.sum(fw, axis=-1),
        "perimeter": np.sum(f * np.sqrt(w * w + dz * dz), axis=-1) if perimeter else None,
        "phi": integral(p83[..., :-1], p83[..., 1:], p53[..., :-1], p53[..., 1:], 5.0 / 3.0),
        "psi": integral(p4[..., :-1], p4[..., 1:], p3[..., :-1], p3[..., 1:], 3.0),
    }


def strip_phi(offsets, bed, levels):
    """Integral of d^(5/3) across piecewise-linear sections (exact per piece, as in
    :func:`section_integrals`). offsets, bed: (..., m); levels: (..., R) -> (..., R)."""
    raw = np.asarray(levels, dtype=float)[..., :, None] - np.asarray(bed, dtype=float)[..., None, :]
    d = np.maximum(raw, 0.0)
    cb = np.cbrt(d)
    p53 = d * cb * cb
    p83 = p53 * d
    ra, rb = raw[..., :-1], raw[..., 1:]
    a, b = d[..., :-1], d[..., 1:]
    w = np.diff(np.asarray(offsets, dtype=float), axis=-1)[..., None, :]
    span = np.abs(ra - rb)
    f = np.where((ra >= 0) & (rb >= 0), 1.0,
                 np.where((ra > 0) | (rb > 0), np.maximum(ra, rb) / np.where(span > 0, span, 1.0), 0.0))
    diff = b - a
    close = np.abs(diff) < 1e-6
    general = (p83[..., 1:] - p83[..., :-1]) / np.where(close, 1.0, diff) * 0.375
    return np.sum(f * w * np.where(close, 0.5 * (p53[..., :-1] + p53[..., 1:]), general), axis=-1)


@dataclass
class Section:
    """A cross-section: bed levels at offsets across the channel and a Manning n.

    conveyance: 'strip' (sum over vertical strips, lateral distribution q ~ d^(5/3)) or 'whole'
    (K = A R^(2/3) / n with R = A / P).
    """

    offsets: np.ndarray
    bed: np.ndarray
    n: float
    conveyance: str = "strip"

    def properties(self, levels):
        p = section_integrals(self.offsets, self.bed, np.atleast_1d(levels))
        return _finish(p, self.n, self.conveyance)


def _finish(p, n, conveyance):
    area = p["area"]
    with np.errstate(divide="ignore", invalid="ignore"):
        if conveyance == "strip":
            k = p["phi"] / n
            alpha = np.where(p["phi"] > 0, area ** 2 * p["psi"] / np.maximum(p["phi"], 1e-300) ** 3, 1.0)
        elif conveyance == "whole":
            r = np.where(p["perimeter"] > 0, area / np.where(p["perimeter"] > 0, p["perimeter"], 1.0), 0.0)
            k = area * r ** (2.0 / 3.0) / n
            alpha = np.ones_like(area)
        else:
            raise ValueError(f"unknown conveyance method '{conveyance}'")
    p = dict(p)
    p["conveyance"] = k
    p["alpha"] = alpha
    return p


@dataclass
class SectionTables:
    """Properties of every section tabulated at evenly spaced levels (zmin + k dh)."""

    chainage: np.ndarray  # (N,)
    zmin: np.ndarray  # (N,)
    dh: float
    area: np.ndarray  # (N, L)
    top_width: np.ndarray
    conveyance: np.ndarray
    alpha: np.ndarray
    phi: np.ndarray

    @property
    def n_levels(self) -> int:
        return self.area.shape[1]

    def levels(self, i: int) -> np.ndarray:
        return self.zmin[i] + self.dh * np.arange(self.n_levels)

    def at(self, i: int, h, name: str):
        """Property ``name`` of section i at levels h (linear between table levels)."""
        tab = getattr(self, name)[i]
        pos = (np.asarray(h, dtype=float) - self.zmin[i]) / self.dh
        if np.any(pos > self.n_levels - 1):
            raise ValueError(f"water level above the property table of section {i} (chainage "
                             f"{self.chainage[i]:.0f} m)")
        pos = np.clip(pos, 0.0, self.n_levels - 1 - 1e-9)
        k = np.floor(pos).astype(int)
        t = pos - k
        return (1.0 - t) * tab[k] + t * tab[k + 1]


def tabulate(chainage, offsets, bed, n, dh=0.05, headroom=1.5, conveyance="strip", chunk=4) -> SectionTables:
    """Tabulate section properties. offsets, bed: (N, m). Levels from each section's lowest bed to
    its highest bank plus ``headroom``."""
    offsets = np.asarray(offsets, dtype=float)
    bed = np.asarray(bed, dtype=float)
    zmin = bed.min(axis=1)
    n_levels = int(np.ceil(float((bed.max(axis=1) - zmin).max() + headroom) / dh)) + 1
    N = len(zmin)
    names = ("area", "top_width", "conveyance", "alpha", "phi")
    out = {k: np.empty((N, n_levels)) for k in names}
    steps = dh * np.arange(n_levels)
    for s0 in range(0, N, chunk):
        s1 = min(s0 + chunk, N)
        lev = zmin[s0:s1, None] + steps[None, :]
        p = _finish(section_integrals(offsets[s0:s1], bed[s0:s1], lev, perimeter=conveyance == "whole"),
                    n, conveyance)
        for k in names:
            out[k][s0:s1] = p[k]
    return SectionTables(np.asarray(chainage, dtype=float), zmin, dh, **out)


# --------------------------------------------------------------------------------------------
# Standard step
# --------------------------------------------------------------------------------------------

@dataclass
class Profile:
    wse: np.ndarray  # (N, R) water-surface levels
    critical: np.ndarray  # (N, R) True where no subcritical solution existed (level set critical)


def standard_step(tables: SectionTables, q, downstream_level, contraction=0.1, expansion=0.3) -> Profile:
    """Water-surface profiles for R runs at once, computed upstream from the last section.

    q: (R,) discharges (m3/s); downstream_level: (R,) level at the last section (m). Energy
    equation between sections i (upstream) and i+1: h_i + a_i V_i^2/2g = h_(i+1) + a_(i+1)
    V_(i+1)^2/2g + dx (Sf_i + Sf_(i+1))/2 + eddy loss, Sf = (Q/K)^2; eddy loss = contraction or
    expansion coefficient times the change of velocity head (Chow 1959, section 10-3).
    """
    q = np.atleast_1d(np.asarray(q, dtype=float))
    h_down = np.atleast_1d(np.asarray(downstream_level, dtype=float))
    N = len(tables.chainage)
    R = len(q)
    wse = np.empty((N, R))
    crit = np.zeros((N, R), dtype=bool)
    q2 = q * q

    def state(i, h):
        a = tables.at(i, h, "area")
        k = tables.at(i, h, "conveyance")
        al = tables.at(i, h, "alpha")
        vh = al * q2 / (2.0 * G * a * a)
        return h + vh, q2 / (k * k), vh

    last = N - 1
    # the downstream level may not be below critical depth
    hc_last = _critical_levels(tables, last, q)
    crit[last] = h_down < hc_last
    wse[last] = np.maximum(h_down, hc_last)
    H, sf, vh = state(last, wse[last])
    for i in range(N - 2, -1, -1):
        dx = tables.chainage[i + 1] - tables.chainage[i]
        lev = tables.levels(i)[:, None]
        A = tables.area[i][:, None]
        K = tables.conveyance[i][:, None]
        al = tables.alpha[i][:, None]
        T = tables.top_width[i][:, None]
        wet = A > 1e-9
        Asafe = np.where(wet, A, 1.0)
        big = 1e30  # dry table levels: no solution there (finite, so no inf - inf)
        vh_k = np.where(wet, al * q2[None, :] / (2.0 * G * Asafe ** 2), big)
        sf_k = np.where(wet, q2[None, :] / np.where(wet, K, 1.0) ** 2, big)
        dvh = vh[None, :] - vh_k  # > 0: velocity head grows downstream (contraction)
        loss = np.where(dvh > 0, contraction * dvh, -expansion * dvh)
        f = lev + vh_k - (H[None, :] + 0.5 * dx * (sf_k + sf[None, :]) + loss)
        fr2 = np.where(wet, al * q2[None, :] * T / (G * Asafe ** 3), big)
        sub = fr2 < 1.0
        ok = sub & (f >= 0)
        has = ok.any(axis=0)
        k1 = np.argmax(ok, axis=0)
        cols = np.arange(R)
        k0 = np.maximum(k1 - 1, 0)
        f1 = f[k1, cols]
        f0 = f[k0, cols]
        use = (k1 > 0) & sub[k0, cols] & (f0 < 0)
        t = np.where(use, -f0 / np.where(use, f1 - f0, 1.0), 1.0)
        h = np.where(use, tables.levels(i)[k0] + t * tables.dh, tables.levels(i)[k1])
        if not has.all():
            hc = _critical_levels(tables, i, q)
            h = np.where(has, h, hc)
            crit[i] = ~has
        wse[i] = h
        H, sf, vh = state(i, h)
    return Profile(wse, crit)


def _critical_levels(tables: SectionTables, i: int, q):
    """Lowest tabulated level at which the flow is subcritical (Froude number below 1)."""
    A = tables.area[i][:, None]
    T = tables.top_width[i][:, None]
    al = tables.alpha[i][:, None]
    wet = A > 1e-9
    fr2 = np.where(wet, al * (q * q)[None, :] * T / (G * np.where(wet, A, 1.0) ** 3), np.inf)
    k = np.argmax(fr2 < 1.0, axis=0)
    return tables.levels(i)[k]


# --------------------------------------------------------------------------------------------
# Downstream boundaries
# --------------------------------------------------------------------------------------------

def rating_level(q, c, h0, b):
    """Level h from the rating Q = C (h - h0)^b, i.e. h = h0 + (Q / C)^(1 / b)."""
    return h0 + (np.asarray(q, dtype=float) / c) ** (1.0 / b)


def rating_discharge(h, c, h0, b):
    """Discharge from the rating Q = C (h - h0)^b (zero at or below h0)."""
    return c * np.maximum(np.asarray(h, dtype=float) - h0, 0.0) ** b


def weir_level(q, pool_level, natural_level, natural_area, loss_coefficient):
    """Level upstream of the weir: the pool is held at ``pool_level`` until the river level with the
    weir fully open (natural level plus a head loss of ``loss_coefficient`` V^2/2g through the open
    structure) rises above it; then the weir is drowned out and that level applies."""
    v = np.asarray(q, dtype=float) / np.asarray(natural_area, dtype=float)
    open_level = np.asarray(natural_level, dtype=float) + loss_coefficient * v * v / (2.0 * G)
    return np.maximum(pool_level, open_level), open_level > pool_level
