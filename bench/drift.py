"""Benchmark: 1,000 particles drifting through a 40 km reach (DESIGN.md section 7: under 30 s).

    .venv/bin/python bench/drift.py [--particles 1000] [--cell 2] [--reference 5] [--repeat 1]

The reach is generated once into bench/output/drift_reach/ (``sample_gis.generate``: 40 km at 2 m
cells, regime 'weir', the lowest discharge of the ladder - the slowest water, so the most steps in
still water; reused while it exists). Measured side by side in one run, in this process:

  read         the depth and u/v rasters into a HydraulicField (GDAL, wet cells only) - the I/O floor
  locate       chainage and offset of every wet cell (core/reach, cold cache)
  drift        core.drift.drift_run with N particles (default 1000): velocity field, seeds across the
               wet width, RK4 tracking to the downstream end, class and zone accounting, 1D estimate
  reference    the textbook way: each particle on its own with scipy.integrate.solve_ivp (RK45,
               rtol 1e-6, positions relative to the release point) on scipy's RegularGridInterpolator
               (bilinear over wet cells, as core.drift: interp(u * wet) / interp(wet)) over the same u/v
               grid, stopping at the end chainage; --reference particles from the same seeds as a drift
               of those particles, travel times printed side by side. The reference has no bank rule:
               a particle that meets a bank stalls there, and is left out; the cost of the arriving
               ones is scaled to N
  scenario     the first two discharges of weir and natural on the demo reach (sample_gis/generated,
               100 particles each) through gis.driftio.drift_rows: one process vs two worker processes

Wall time and process CPU time are printed (the machine may be shared: CPU time is the steadier
figure); ratios compare the drift with the reference and with the floor.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
OUT = ROOT / "bench" / "output"
LENGTH_KM = 40.0
DISCHARGE = 3000


def ensure_reach(cell: float) -> Path:
    reach = OUT / f"drift_reach_{cell:g}m"
    if (reach / ".complete").exists():
        return reach
    from sample_gis.generate import generate

    print(f"generating the benchmark reach ({LENGTH_KM:g} km at {cell:g} m) into {reach} ...", flush=True)
    generate(reach, cell=cell, length_km=LENGTH_KM, regimes=("weir",), discharges=(DISCHARGE,), mesh_regimes=(),
             verbose=False)
    return reach


def centreline_upstream_first(path: Path):
    """The generated centreline is digitised downstream -> upstream: its vertices reversed."""
    from osgeo import ogr

    ds = ogr.Open(str(path))
    lyr = ds.GetLayer(0)
    feat = lyr.GetNextFeature()
    pts = np.array(feat.GetGeometryRef().GetPoints())[::-1]
    return pts[:, 0], pts[:, 1]


class Timer:
    def __init__(self):
        self.wall = time.perf_counter()
        self.cpu = time.process_time()

    def stop(self):
        return time.perf_counter() - self.wall, time.process_time() - self.cpu


def reference_solve_ivp(fld, reach, chain, n_ref: int, release_m: float, end_m: float):
    """solve_ivp per particle on RegularGridInterpolator.

    Returns (seeds x, seeds y, travel times (NaN: did not arrive), wall s and CPU s per particle). The
    reference has no bank rule: a particle whose path meets a bank stops moving there (its velocity is
    0 out of the water) and runs to the time limit; such particles are left out of the cost."""
    from scipy.integrate import solve_ivp
    from scipy.interpolate import RegularGridInterpolator

    from plugin.core.drift import cross_section_seeds, flow_from_field
    from plugin.gis.geotiff import scatter_to_grid

    sup = fld.support
    x0, dx, _, y0, _, dy = sup.transform
    rows, cols = sup.shape
    r, c = np.divmod(sup.index, cols)
    r0, r1, c0, c1 = r.min(), r.max() + 1, c.min(), c.max() + 1
    sub = (r1 - r0, c1 - c0)
    idx = (r - r0) * sub[1] + (c - c0)
    ug = scatter_to_grid(fld.u.astype(np.float64), idx, sub, 0.0)
    vg = scatter_to_grid(fld.v.astype(np.float64), idx, sub, 0.0)
    xs = x0 + (np.arange(c0, c1) + 0.5) * dx
    ys = y0 + (np.arange(r0, r1) + 0.5) * dy  # decreasing: flip for the interpolator
    wg = scatter_to_grid(np.ones(idx.size), idx, sub, 0.0)  # 1 at wet cells, 0 at dry ones
    # bilinear over wet cells only, as core.drift defines it: interp(u * wet) / interp(wet); with dry cells
    # taken as 0 m/s instead, particles released near a bank slow down there and stall
    fu = RegularGridInterpolator((ys[::-1], xs), ug[::-1], bounds_error=False, fill_value=0.0)
    fv = RegularGridInterpolator((ys[::-1], xs), vg[::-1], bounds_error=False, fill_value=0.0)
    fw = RegularGridInterpolator((ys[::-1], xs), wg[::-1], bounds_error=False, fill_value=0.0)
    flow = flow_from_field(fld, chain)
    axis = reach.axis
    sx, sy, _ = cross_section_seeds(flow, axis, release_m, n_ref, 200.0)

    # positions relative to the release point: solve_ivp's relative tolerance then means metres along the
    # path, not parts of a map coordinate of millions of metres (which let a step jump a bend)
    ox, oy = float(np.mean(sx)), float(np.mean(sy))

    def rhs(t, p):
        q = np.array([[p[1] + oy, p[0] + ox]])
        w = float(fw(q)[0])
        if w <= 0.0:
            return [0.0, 0.0]
        return [float(fu(q)[0]) / w, float(fv(q)[0]) / w]

    def arrive(t, p):
        return axis.locate(np.array([p[0] + ox]), np.array([p[1] + oy])).chainage[0] - end_m

    arrive.terminal = True
    arrive.direction = 1
    times, walls, cpus = [], [], []
    for i in range(n_ref):
        tm = Timer()
        sol = solve_ivp(rhs, (0.0, 30 * 86400.0), [sx[i] - ox, sy[i] - oy], method="RK45", rtol=1e-6, atol=1e-3,
                        events=arrive, max_step=600.0)
        w, c = tm.stop()
        times.append(sol.t_events[0][0] if sol.t_events[0].size else np.nan)
        walls.append(w)
        cpus.append(c)
    return sx, sy, np.array(times), np.array(walls), np.array(cpus)


def scenario_bench():
    """Two workers against one on four demo runs."""
    from plugin.core import drift
    from plugin.core.classes import velocity_preset
    from plugin.core.reach import Reach, ReachAxis, parse_zone_breaks, segment_edges
    from plugin.core.scenario import read_scenarios
    from plugin.gis.driftio import drift_rows

    sample = ROOT / "sample_gis" / "generated"
    if not (sample / ".complete").exists():
        print("  (demo reach not generated: scenario comparison skipped; run `make sample`)")
        return None
    x, y = centreline_upstream_first(sample / "centreline.gpkg")
    axis = ReachAxis(x, y)
    ze, zn = parse_zone_breaks("", axis.start_m, axis.end_m)
    reach = Reach(axis, segment_edges(axis.start_m, axis.end_m, 1000.0), ze, zn)
    rows = [r for r in read_scenarios(sample / "scenarios.csv")
            if r.regime in ("weir", "natural") and r.q_mld in (3000.0, 4000.0)]
    opts = drift.DriftOptions(n_particles=100)
    out = {}
    for workers in (1, 2):
        tm = Timer()
        drift_rows(rows, reach, velocity_preset(), opts, 0.05, workers=workers)
        out[workers] = tm.stop()
    return len(rows), out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--particles", type=int, default=1000)
    ap.add_argument("--cell", type=float, default=2.0)
    ap.add_argument("--reference", type=int, default=5, help="particles for the solve_ivp reference")
    ap.add_argument("--no-scenario", action="store_true")
    args = ap.parse_args()

    from plugin.core import drift
    from plugin.core.classes import velocity_preset
    from plugin.core.reach import Reach, ReachAxis, locate_field, parse_zone_breaks, segment_edges
    from plugin.core.sources import RunSource
    from plugin.gis.runs import read_run

    reach_dir = ensure_reach(args.cell)
    q = f"q{DISCHARGE:05d}"
    src = RunSource(depth=str(reach_dir / "rasters" / "weir" / f"{q}_depth.tif"),
                    u=str(reach_dir / "rasters" / "weir" / f"{q}_u.tif"),
                    v=str(reach_dir / "rasters" / "weir" / f"{q}_v.tif"))
    read_run(src)  # warm the OS page cache
    x, y = centreline_upstream_first(reach_dir / "centreline.gpkg")
    axis = ReachAxis(x, y)
    ze, zn = parse_zone_breaks("", axis.start_m, axis.end_m)
    reach = Reach(axis, segment_edges(axis.start_m, axis.end_m, 1000.0), ze, zn)

    tm = Timer()
    fld = read_run(src)
    t_read = tm.stop()
    tm = Timer()
    loc = locate_field(reach, fld)
    t_loc = tm.stop()
    tm = Timer()
    run = drift.drift_run(fld, reach, velocity_preset(), drift.DriftOptions(n_particles=args.particles),
                          location=loc)
    t_drift = tm.stop()
    res = run.result
    steps = int(res.n_steps.sum())
    print(f"\nDrift benchmark: {axis.length_m / 1000:.1f} km reach, {args.cell:g} m cells, {fld.n:,} wet cells, "
          f"weir at {DISCHARGE} ML/d, {args.particles} particles, {os.cpu_count()} cores")
    print(f"  fates: {res.fate_counts()}")
    print("  travel time p10/p50/p90: " + " / ".join(
        f"{v:.2f}" for v in np.percentile(res.travel_s[res.fate == 0] / 86400.0, [10, 50, 90])) + " days; "
          f"1D estimate {run.estimate.total_s / 86400.0:.2f} days")
    print(f"  iterations {res.iterations:,}, particle steps {steps:,} "
          f"({t_drift[1] / max(steps, 1) * 1e6:.2f} us CPU per particle step)")
    rows = [("read u, v, depth (floor)", t_read), ("locate wet cells", t_loc),
            (f"drift {args.particles} particles", t_drift)]
    if args.reference > 0:
        sx, sy, times, walls, cpus = reference_solve_ivp(fld, reach, loc.chainage, args.reference, run.release_m,
                                                         run.end_m)
        ok = np.isfinite(times)
        if ok.any():  # the cost of a particle that travels the reach, scaled to the particle count
            rows.append((f"solve_ivp, {int(ok.sum())} arriving, scaled to {args.particles}",
                         (walls[ok].mean() * args.particles, cpus[ok].mean() * args.particles)))
        same = drift.drift_run(fld, reach, velocity_preset(), drift.DriftOptions(n_particles=args.reference),
                               location=loc, seeds=(sx, sy)).result
        print("  same seeds, travel time (days): solve_ivp (RK45, rtol 1e-6; no bank rule) "
              f"{np.round(times / 86400.0, 3)}; drift {np.round(same.travel_s / 86400.0, 3)} "
              f"(bank contacts {same.bank_contacts.tolist()})")
        if (~ok).any():
            print(f"  {int((~ok).sum())} reference particle(s) met a bank and stalled there (no bank rule in the "
                  "reference; the drift slides along banks): left out of the reference cost")
    print(f"\n  {'step':44s} {'wall s':>9s} {'cpu s':>9s}")
    for name, (w, c) in rows:
        print(f"  {name:44s} {w:9.2f} {c:9.2f}")
    print(f"\n  drift within the 30 s target: {'yes' if t_drift[0] < 30 else 'NO'} (wall {t_drift[0]:.1f} s)")
    print(f"  drift / read floor: {t_drift[0] / max(t_read[0], 1e-9):.1f}x wall")
    if args.reference > 0 and rows[-1][0].startswith("solve_ivp"):
        print(f"  per-particle solve_ivp / drift: {rows[-1][1][0] / t_drift[0]:.1f}x wall, "
              f"{rows[-1][1][1] / t_drift[1]:.1f}x CPU")
    if not args.no_scenario:
        sc = scenario_bench()
        if sc:
            n, out = sc
            print(f"\n  scenario rows ({n} demo runs, 100 particles each): one process {out[1][0]:.1f} s, two "
                  f"worker processes {out[2][0]:.1f} s wall -> {out[1][0] / out[2][0]:.2f}x")
    return 0


if __name__ == "__main__":
    sys.exit(main())
