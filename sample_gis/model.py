"""Steady hydraulics of the demo reach for every regime x discharge, and their values anywhere.

Cross-sections every ``spacing`` metres of chainage are sampled from the bed function, their
properties tabulated, and the standard-step profiles of all runs solved together
(``hydraulics.py``). A value at any (chainage, offset) then follows from:

* water level: linear between the two neighbouring sections;
* depth: water level minus the bed level there;
* unit discharge q = Q d^(5/3) / Phi, with Phi = integral of d^(5/3) across the section, so
  velocity V = q / d grows with local depth and the unit discharge integrated across a section
  returns Q (conveyance weighting, the strip form of Manning's equation). Phi is computed on
  stations ``phi_spacing`` apart (finer than the profile's sections, with the same interpolated
  water level), so that bed features between profile sections keep the discharge right;
* direction: along the channel (the smooth centreline direction at that chainage), so
  u = V cos(theta), v = V sin(theta).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from plugin.core.units import mld_to_m3s

from . import hydraulics as hy
from .tables import LADDER_MLD, REGIMES


@dataclass(frozen=True)
class Run:
    regime: str
    q_mld: float
    q_m3s: float
    column: int
    drowned: bool  # weir regimes: pool drowned out (level set by the river, not the weir)


class ReachModel:
    def __init__(self, geom, regimes=REGIMES, ladder=LADDER_MLD, spacing: float = 50.0, points: int = 121,
                 phi_spacing: float = 10.0):
        self.geom = geom
        d = geom.design
        L = geom.length_m
        n_sec = max(int(np.ceil(L / spacing)), 2)
        self.chainage = np.linspace(0.0, L, n_sec + 1)
        half = 0.5 * geom.along("width", self.chainage)
        self.offsets = np.linspace(-1.0, 1.0, points)[None, :] * half[:, None]
        self.bed = geom.bed(np.repeat(self.chainage[:, None], points, axis=1), self.offsets)
        self.tables = hy.tabulate(self.chainage, self.offsets, self.bed, d.manning_n)
        ladder = [float(q) for q in ladder]
        q = np.asarray(mld_to_m3s(ladder), dtype=float)
        last = n_sec
        natural = hy.rating_level(q, d.rating_c, d.rating_h0, d.rating_b)
        natural_area = self.tables.at(last, natural, "area")
        runs, q_all, h_all = [], [], []
        self.boundary = {}
        for reg in regimes:
            if reg == "natural":
                level, drowned = natural, np.zeros(len(q), dtype=bool)
            else:
                step = {"weir": 0.0, "weir_raised": d.pool_step_m, "weir_lowered": -d.pool_step_m}[reg]
                level, drowned = hy.weir_level(q, d.pool_level_m + step, natural, natural_area,
                                               d.structure_loss_coefficient)
            self.boundary[reg] = level
            for j, (qm, qs) in enumerate(zip(ladder, q)):
                runs.append(Run(reg, qm, float(qs), len(runs), bool(drowned[j])))
            q_all.append(q)
            h_all.append(level)
        self.runs = runs
        self.q = np.concatenate(q_all)
        self.profile = hy.standard_step(self.tables, self.q, np.concatenate(h_all))
        self.wse = self.profile.wse
        top = geom.along("bank_top", self.chainage)
        over = self.wse - top[:, None]
        self.max_over_bank_m = float(over.max())
        self._fine_phi(geom, points, phi_spacing)
        self.area = self._at_all(self.wse, "area")
        self.top_width = self._at_all(self.wse, "top_width")
        self.alpha = self._at_all(self.wse, "alpha")

    def _fine_phi(self, geom, points, spacing, chunk=32):
        L = geom.length_m
        n = max(int(np.ceil(L / spacing)), 1)
        self.phi_chainage = fc = np.linspace(0.0, L, n + 1)
        half = 0.5 * geom.along("width", fc)
        offsets = np.linspace(-1.0, 1.0, points)[None, :] * half[:, None]
        bed = geom.bed(np.repeat(fc[:, None], points, axis=1), offsets)
        i, t = self._coarse(fc)
        level = (1.0 - t)[:, None] * self.wse[i] + t[:, None] * self.wse[i + 1]
        self.phi = np.empty_like(level)
        for s0 in range(0, len(fc), chunk):
            s1 = min(s0 + chunk, len(fc))
            self.phi[s0:s1] = hy.strip_phi(offsets[s0:s1], bed[s0:s1], level[s0:s1])

    def _coarse(self, c):
        ch = self.chainage
        i = np.clip(np.searchsorted(ch, c, side="right") - 1, 0, len(ch) - 2)
        t = np.clip((c - ch[i]) / (ch[i + 1] - ch[i]), 0.0, 1.0)
        return i, t

    def _at_all(self, h, name):
        t = self.tables
        pos = np.clip((h - t.zmin[:, None]) / t.dh, 0.0, t.n_levels - 1 - 1e-9)
        k = np.floor(pos).astype(int)
        w = pos - k
        tab = getattr(t, name)
        rows = np.arange(len(t.zmin))[:, None]
        return (1.0 - w) * tab[rows, k] + w * tab[rows, k + 1]

    def run(self, regime: str, q_mld: float) -> Run:
        for r in self.runs:
            if r.regime == regime and abs(r.q_mld - q_mld) < 1e-9:
                return r
        raise KeyError((regime, q_mld))

    # ----------------------------------------------------------------------------------------
    def weights(self, c):
        """Indices and weights of every chainage between profile sections and between Phi
        stations (computed once, reused for every run)."""
        c = np.asarray(c, dtype=float)
        i, t = self._coarse(c)
        fc = self.phi_chainage
        j = np.clip(np.searchsorted(fc, c, side="right") - 1, 0, len(fc) - 2)
        s = np.clip((c - fc[j]) / (fc[j + 1] - fc[j]), 0.0, 1.0)
        return i, t, j, s

    def values(self, run: Run, where, bed, cos_t, sin_t):
        """(depth, speed, u, v) at points with section weights ``where`` = (i, t), bed level, and
        the channel direction. Dry points (depth <= 0) get NaN."""
        i, t, j, s = where
        r = run.column
        level = (1.0 - t) * self.wse[i, r] + t * self.wse[i + 1, r]
        phi = (1.0 - s) * self.phi[j, r] + s * self.phi[j + 1, r]
        depth = level - bed
        wet = depth > 0.0
        dw = np.where(wet, depth, 0.0)
        speed = run.q_m3s * np.cbrt(dw) ** 2 / phi
        depth = np.where(wet, depth, np.nan)
        speed = np.where(wet, speed, np.nan)
        return depth, speed, speed * cos_t, speed * sin_t

    def section_summary(self, run: Run):
        """Per section: chainage, thalweg, bank top, level, area, top width, mean velocity, Froude."""
        r = run.column
        a = self.area[:, r]
        tw = self.top_width[:, r]
        v = run.q_m3s / a
        fr = v / np.sqrt(hy.G * a / tw)
        return {
            "chainage_m": self.chainage,
            "thalweg_m": self.bed.min(axis=1),
            "bank_top_m": self.geom.along("bank_top", self.chainage),
            "wse_m": self.wse[:, r],
            "area_m2": a,
            "top_width_m": tw,
            "mean_velocity_ms": v,
            "froude": fr,
        }
