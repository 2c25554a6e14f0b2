"""The demo-reach generator's hydraulics against outside references, and the plausibility of the
generated demo set (sample_gis/generated, via the ``sample_dir`` fixture).

Sources are named beside each check. The plausibility checks use invented data and are common
practice, not references.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal, ogr
from scipy.integrate import solve_ivp
from scipy.ndimage import map_coordinates
from scipy.optimize import brentq
from scipy.spatial import cKDTree

from sample_gis import hydraulics as hy

gdal.UseExceptions()
G = 9.80665


def rect_section(b, height=10.0, n=0.015):
    """A rectangular channel as a piecewise-linear section with vertical walls."""
    return hy.Section(np.array([0.0, 0.0, b, b]), np.array([height, 0.0, 0.0, height]), n, conveyance="whole")


# ---------------------------------------------------------------------------------------------
# Manning's equation and normal depth
# ---------------------------------------------------------------------------------------------

def test_manning_rectangular_channel_handbook_example():
    # Source: V. M. Ponce, Open-channel hydraulics (online course), Manning example: rectangular
    # channel b = 6 m, y = 1.6 m, n = 0.015, S = 0.0025 -> V = 3.43 m/s, Q = 32.9 m3/s.
    area, perimeter, radius = hy.rectangular(6.0, 1.6)
    assert area == pytest.approx(9.6)
    assert perimeter == pytest.approx(9.2)
    assert float(hy.manning_velocity(0.015, radius, 0.0025)) == pytest.approx(3.43, abs=0.005)
    assert float(hy.manning_discharge(0.015, area, radius, 0.0025)) == pytest.approx(32.9, abs=0.05)
    # the same channel through the generic section integrals (whole-section conveyance)
    p = rect_section(6.0).properties(np.array([1.6]))
    assert p["area"][0] == pytest.approx(9.6, rel=1e-12)
    assert p["perimeter"][0] == pytest.approx(9.2, rel=1e-12)
    assert p["top_width"][0] == pytest.approx(6.0, rel=1e-12)
    assert p["conveyance"][0] * np.sqrt(0.0025) == pytest.approx(32.9, abs=0.05)


def test_section_integrals_match_numerical_integration():
    # Source: numpy (trapezoid rule on a 2-million-point resampling of the same bed).
    rng = np.random.default_rng(3)
    off = np.sort(rng.uniform(0.0, 80.0, 25))
    bed = rng.uniform(0.0, 4.0, 25)
    y = np.linspace(off[0], off[-1], 2_000_001)
    z = np.interp(y, off, bed)
    for level in (1.0, 2.7, 5.0):
        p = hy.section_integrals(off, bed, np.array([level]))
        d = np.maximum(level - z, 0.0)
        assert p["area"][0] == pytest.approx(np.trapz(d, y), rel=1e-6)
        assert p["phi"][0] == pytest.approx(np.trapz(d ** (5.0 / 3.0), y), rel=1e-6)
        assert p["psi"][0] == pytest.approx(np.trapz(d ** 3, y), rel=1e-6)


def _prismatic_tables(b, n, slope, length, dx, dh):
    ch = np.arange(0.0, length + dx / 2, dx)
    zb = slope * (length - ch)  # bed falls downstream
    off = np.tile(np.array([0.0, 0.0, b, b]), (len(ch), 1))
    bed = np.column_stack([zb + 12.0, zb, zb, zb + 12.0])
    return ch, zb, hy.tabulate(ch, off, bed, n, dh=dh, conveyance="whole", headroom=1.0)


def test_profile_recovers_normal_depth_far_upstream():
    # Source: Ponce example above (y_n = 1.6 m for Q = 32.9 m3/s, b = 6 m, n = 0.015, S = 0.0025),
    # and scipy brentq on Manning's equation for the exact normal depth of Q = 32.92 m3/s.
    b, n, s = 6.0, 0.015, 0.0025
    q = 32.92
    yn = brentq(lambda y: (b * y) * ((b * y) / (b + 2 * y)) ** (2 / 3) * s ** 0.5 / n - q, 0.1, 10.0)
    assert yn == pytest.approx(1.6, abs=0.005)
    ch, zb, tab = _prismatic_tables(b, n, s, 3000.0, 25.0, 0.002)
    for start_depth in (2.6, 1.62):  # an M1 curve from a raised downstream level, and nearly uniform flow
        prof = hy.standard_step(tab, [q], [zb[-1] + start_depth], contraction=0.0, expansion=0.0)
        depth = prof.wse[:, 0] - zb
        far = ch < 1000.0  # 2 km and more upstream of the control
        assert np.all(np.abs(depth[far] - yn) < 0.01)
        assert not prof.critical.any()


def test_standard_step_matches_gradually_varied_flow_equation():
    # Source: Chow 1959, Open-Channel Hydraulics, eq. 9-13, dy/dx = (S0 - Sf) / (1 - Fr^2), here
    # for a wide-ish rectangular channel, integrated upstream with scipy's solve_ivp (RK45).
    b, n, s0, q = 20.0, 0.03, 0.0005, 50.0
    length, dx = 5000.0, 20.0
    ch, zb, tab = _prismatic_tables(b, n, s0, length, dx, 0.001)
    y_down = 4.0
    prof = hy.standard_step(tab, [q], [zb[-1] + y_down], contraction=0.0, expansion=0.0)
    depth = prof.wse[:, 0] - zb

    def dydx(x, y):  # x measured upstream from the control: dy/dx_up = -(S0 - Sf)/(1 - Fr^2)
        a = b * y[0]
        r = a / (b + 2 * y[0])
        sf = (q * n / (a * r ** (2 / 3))) ** 2
        fr2 = q * q * b / (G * a ** 3)
        return [-(s0 - sf) / (1 - fr2)]

    x_up = length - ch
    sol = solve_ivp(dydx, (0.0, length), [y_down], t_eval=np.sort(x_up), rtol=1e-10, atol=1e-10)
    ode = np.interp(x_up, sol.t, sol.y[0])
    assert np.max(np.abs(depth - ode)) < 0.005
    assert depth[0] < depth[-1]  # an M1 curve falls towards normal depth upstream


def test_rating_and_weir_boundaries():
    # Source: algebra of the rating Q = C (h - h0)^b (value from memory: usual power-law rating form).
    c, h0, b = 14.0, 40.2, 2.1
    q = np.array([10.0, 100.0, 500.0])
    h = hy.rating_level(q, c, h0, b)
    np.testing.assert_allclose(c * (h - h0) ** b, q, rtol=1e-12)
    np.testing.assert_allclose(hy.rating_discharge(h, c, h0, b), q, rtol=1e-12)
    # the weir holds its pool until the open-weir level (river + k V^2/2g) rises above it
    level, drowned = hy.weir_level(q, 44.0, h, np.array([50.0, 200.0, 600.0]), 0.5)
    v = q / np.array([50.0, 200.0, 600.0])
    expect = np.maximum(44.0, h + 0.5 * v * v / (2 * G))
    np.testing.assert_allclose(level, expect)
    assert list(drowned) == list(expect > 44.0)


# ---------------------------------------------------------------------------------------------
# Units
# ---------------------------------------------------------------------------------------------

def test_megalitres_per_day_exact():
    # Source: SI definitions: 1 L = 1e-3 m3 (1 ML = 1000 m3), 1 d = 86 400 s.
    from plugin.core.units import mld_to_m3s

    assert float(mld_to_m3s(1.0)) == 1000.0 / 86400.0
    assert float(mld_to_m3s(40000.0)) == pytest.approx(462.962962962963, rel=1e-15)


# ---------------------------------------------------------------------------------------------
# Continuity: unit discharge integrated across a section returns Q
# ---------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def small_model():
    from sample_gis.geometry import ReachDesign, ReachGeometry
    from sample_gis.model import ReachModel

    geom = ReachGeometry(ReachDesign(length_m=8000.0, seed=2))
    return geom, ReachModel(geom, ("weir", "natural"), (3000, 14000, 40000))


def test_continuity_at_every_computed_section(small_model):
    # Source: conservation of mass (common practice, no source); integral by numpy's trapezoid rule
    # over 4001 points of the generator's own bed function.
    geom, model = small_model
    for run in model.runs:
        for c in model.chainage:
            half = 0.5 * float(geom.along("width", c))
            o = np.linspace(-half, half, 4001)
            bed = geom.bed(np.full_like(o, c), o)
            where = model.weights(np.full_like(o, c))
            depth, speed, _, _ = model.values(run, where, bed, np.ones_like(o), np.zeros_like(o))
            qn = np.nan_to_num(depth * speed)
            assert np.trapz(qn, o) == pytest.approx(run.q_m3s, rel=0.01), (run, c)


def test_continuity_between_sections(small_model):
    # Source: conservation of mass (common practice, no source): halfway between computed sections.
    geom, model = small_model
    mids = 0.5 * (model.chainage[1:] + model.chainage[:-1])
    for run in model.runs:
        for c in mids[::7]:
            half = 0.5 * float(geom.along("width", c))
            o = np.linspace(-half, half, 4001)
            depth, speed, _, _ = model.values(run, model.weights(np.full_like(o, c)),
                                              geom.bed(np.full_like(o, c), o), np.ones_like(o), np.zeros_like(o))
            assert np.trapz(np.nan_to_num(depth * speed), o) == pytest.approx(run.q_m3s, rel=0.01)


def _read(path):
    ds = gdal.Open(str(path))
    band = ds.GetRasterBand(1)
    a = band.ReadAsArray().astype(np.float64)
    nd = band.GetNoDataValue()
    gt = ds.GetGeoTransform()
    del band, ds
    return np.where(a == nd, 0.0, a), gt


def test_continuity_through_written_rasters(tmp_path):
    # Source: conservation of mass (common practice, no source). Fluxes through cross-sections of
    # the written depth and u, v rasters (1 m cells; bilinear sampling by scipy.ndimage at 0.25 m
    # along straight lines normal to the centreline), compared with the run's discharge.
    from sample_gis.generate import generate

    out = tmp_path / "reach"
    info = generate(out, cell=1.0, length_km=4.0, seed=2, regimes=("weir", "natural"), discharges=(3000, 40000),
                    mesh_regimes=(), verbose=False)
    assert info["cell_m"] == 1.0
    # the centreline as written (downstream -> upstream) gives the section positions and normals
    ds = ogr.Open(str(out / "centreline.gpkg"))
    lyr = ds.GetLayer("centreline")
    feat = lyr.GetNextFeature()
    pts = np.array(feat.GetGeometryRef().GetPoints())[::-1, :2]
    del feat, lyr, ds
    seg = np.hypot(*np.diff(pts, axis=0).T)
    chain = np.concatenate([[0.0], np.cumsum(seg)])
    with open(out / "scenarios.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 4
    for row in rows:
        q_m3s = float(row["discharge"]) * 1000.0 / 86400.0
        d, gt = _read(out / row["depth"])
        u, _ = _read(out / row["u"])
        v, _ = _read(out / row["v"])
        for c in np.arange(300.0, chain[-1] - 300.0, 400.0):
            k = np.searchsorted(chain, c) - 1
            t = (c - chain[k]) / seg[k]
            p = pts[k] + t * (pts[k + 1] - pts[k])
            tan = (pts[k + 1] - pts[k]) / seg[k]
            nrm = np.array([-tan[1], tan[0]])
            s = np.arange(-120.0, 120.0001, 0.25)
            x, y = p[0] + s * nrm[0], p[1] + s * nrm[1]
            col = (x - gt[0]) / gt[1] - 0.5
            rw = (y - gt[3]) / gt[5] - 0.5
            dd = map_coordinates(d, [rw, col], order=1)
            uu = map_coordinates(u, [rw, col], order=1)
            vv = map_coordinates(v, [rw, col], order=1)
            flux = np.trapz(dd * (uu * tan[0] + vv * tan[1]), s)
            assert flux == pytest.approx(q_m3s, rel=0.01), (row["regime"], row["discharge"], c)


# ---------------------------------------------------------------------------------------------
# Plausibility of the generated default set (invented data: common practice, no source)
# ---------------------------------------------------------------------------------------------

SPEED_EDGES = (0.05, 0.20, 0.30)  # DESIGN.md section 4 velocity classes (m/s)


class DemoSet:
    def __init__(self, folder: Path):
        self.folder = folder
        with open(folder / "scenarios.csv", newline="") as fh:
            self.rows = {(r["regime"], int(r["discharge"])): r for r in csv.DictReader(fh)}
        ds = ogr.Open(str(folder / "centreline.gpkg"))
        lyr = ds.GetLayer("centreline")
        feat = lyr.GetNextFeature()
        pts = np.array(feat.GetGeometryRef().GetPoints())[::-1, :2]  # upstream -> downstream
        del feat, lyr, ds
        seg = np.hypot(*np.diff(pts, axis=0).T)
        chain = np.concatenate([[0.0], np.cumsum(seg)])
        self.length = chain[-1]
        dense_c = np.arange(0.0, self.length, 1.0)
        self.tree = cKDTree(np.column_stack([np.interp(dense_c, chain, pts[:, 0]),
                                             np.interp(dense_c, chain, pts[:, 1])]))
        self.dense_c = dense_c
        self._zone = None  # zone of every grid cell, filled in as cells get wet

    def field(self, regime, q):
        row = self.rows[(regime, q)]
        d, gt = _read(self.folder / row["depth"])
        s, _ = _read(self.folder / row["speed"])
        if self._zone is None:
            self._zone = np.full(d.shape, -1, dtype=np.int8)
        wet = d >= 0.05
        todo = wet & (self._zone < 0)
        if todo.any():
            rr, cc = np.nonzero(todo)
            x = gt[0] + (cc + 0.5) * gt[1]
            y = gt[3] + (rr + 0.5) * gt[5]
            _, k = self.tree.query(np.column_stack([x, y]))
            # 0 upper, 1 middle, 2 lower third of the chainage
            self._zone[rr, cc] = np.minimum((self.dense_c[k] / (self.length / 3.0)).astype(int), 2)
        return s[wet], self._zone[wet], abs(gt[1] * gt[5])

    def shares(self, regime, q):
        """Percent of wet area in each velocity class, per zone: array (3 zones, 4 classes)."""
        speed, zone, area = self.field(regime, q)
        cls = np.digitize(speed, SPEED_EDGES)
        out = np.zeros((3, 4))
        for z in range(3):
            m = zone == z
            out[z] = [100.0 * np.count_nonzero(m & (cls == c)) / np.count_nonzero(m) for c in range(4)]
        return out, {z: float(np.sum(zone == z) * area) for z in range(3)}, speed, zone


@pytest.fixture(scope="module")
def demo(sample_dir):
    return DemoSet(Path(sample_dir))


def test_weir_pool_slows_the_lower_reach_at_low_flow(demo):
    # Common practice, no source: a weir pool at a low regulated flow is mostly slow water.
    weir, _, _, _ = demo.shares("weir", 3000)
    natural, _, _, _ = demo.shares("natural", 3000)
    assert weir[2, 0] + weir[2, 1] >= 80.0  # lower third: very slow + slow
    assert natural[2, 2] + natural[2, 3] >= 60.0  # natural lower third: mostly moderate or fast
    assert natural[2, 0] + natural[2, 1] < 50.0
    # the upper third is largely free-flowing in every regime
    for reg in ("weir", "weir_raised", "weir_lowered", "natural"):
        up, _, _, _ = demo.shares(reg, 3000)
        assert up[0, 2] + up[0, 3] >= 75.0, reg


def test_raising_the_pool_slows_the_lower_reach_further(demo):
    # Common practice, no source: a deeper pool passes the same discharge more slowly.
    w, _, ws, wz = demo.shares("weir", 3000)
    r, _, rs, rz = demo.shares("weir_raised", 3000)
    lo, _, ls, lz = demo.shares("weir_lowered", 3000)
    assert r[2, 0] > w[2, 0] > lo[2, 0]  # more very slow water as the pool rises
    assert np.mean(rs[rz == 2]) < np.mean(ws[wz == 2]) < np.mean(ls[lz == 2])


def test_regimes_converge_at_high_flow(demo):
    # Common practice, no source: near bank-full the weir is drowned out and the regimes agree.
    nat, nat_area, _, _ = demo.shares("natural", 40000)
    for reg in ("weir", "weir_raised", "weir_lowered"):
        other, other_area, _, _ = demo.shares(reg, 40000)
        assert np.max(np.abs(other - nat)) <= 2.0, reg
        for z in range(3):
            assert other_area[z] == pytest.approx(nat_area[z], rel=0.01)


def test_every_velocity_class_occurs(demo):
    # Common practice, no source: the demo exercises every class of the velocity preset somewhere.
    seen = np.zeros(4)
    for reg in ("weir", "natural"):
        for q in (3000, 40000):
            seen += demo.shares(reg, q)[0].sum(axis=0)
    assert np.all(seen > 0)


def test_pool_benches_wet_only_when_the_pool_is_raised(sample_dir):
    # Common practice, no source: the emergent reed beds sit on benches just above the normal pool.
    folder = Path(sample_dir)
    info = json.loads((folder / "reach.json").read_text())
    pool = info["pool_levels_m"]
    crests = [b["crest_m"] for b in info["benches"] if b["kind"] == "pool"]
    assert crests and all(pool["weir"] < c < pool["weir_raised"] for c in crests)
    ds = ogr.Open(str(folder / "vegetation.gpkg"))
    lyr = ds.GetLayer("vegetation")
    lyr.SetAttributeFilter("community = 'emergent reed bed'")
    geoms = []
    for feat in lyr:
        geoms.append(feat.GetGeometryRef().Clone())
    del lyr, ds
    assert geoms

    def wet_fraction(regime):
        d, gt = _read(folder / "rasters" / regime / "q03000_depth.tif")
        fr = []
        for g in geoms:
            xmin, xmax, ymin, ymax = g.GetEnvelope()
            c0, c1 = int((xmin - gt[0]) / gt[1]), int((xmax - gt[0]) / gt[1]) + 1
            r0, r1 = int((ymax - gt[3]) / gt[5]), int((ymin - gt[3]) / gt[5]) + 1
            rr, cc = np.mgrid[r0:r1, c0:c1]
            x = gt[0] + (cc + 0.5) * gt[1]
            y = gt[3] + (rr + 0.5) * gt[5]
            inside = np.array([g.Contains(ogr.CreateGeometryFromWkt(f"POINT ({a} {b})"))
                               for a, b in zip(x.ravel(), y.ravel())])
            fr.append(np.mean(d[r0:r1, c0:c1].ravel()[inside] > 0.05))
        return np.array(fr)

    normal, raised = wet_fraction("weir"), wet_fraction("weir_raised")
    assert np.all(raised > 0.5)
    assert np.all(normal < raised - 0.3)


def test_natural_profile_is_near_uniform_far_from_the_weir(sample_dir):
    # Common practice, no source: far upstream of any control the flow tends to normal depth, so the
    # water surface runs parallel to the bed (here the bank tops, which follow the mean bed).
    with open(Path(sample_dir) / "profiles.csv", newline="") as fh:
        rows = [r for r in csv.DictReader(fh) if r["regime"] == "natural"]
    for q in ("3000", "14000", "40000"):
        r = [x for x in rows if x["q_mld"] == q]
        c = np.array([float(x["chainage_m"]) for x in r])
        far = (c > 1000.0) & (c < 10000.0)  # 25-34 km upstream of the weir
        wse = np.polyfit(c[far], [float(x["wse_m"]) for x, f in zip(r, far) if f], 1)[0]
        bed = np.polyfit(c[far], [float(x["bank_top_m"]) for x, f in zip(r, far) if f], 1)[0]
        assert wse / bed == pytest.approx(1.0, abs=0.1), q
