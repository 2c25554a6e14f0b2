"""Generate the invented Figment River demo reach (deterministic: same bytes for the same arguments).

    python -m sample_gis.generate --out sample_gis/generated [--cell 5] [--length-km 35] [--seed 1]
        [--mesh-regimes weir] [--mesh-face-size 10] [--regimes ...] [--discharges ...] [--margin 40]

or, from Python, ``generate(out_dir, cell=5.0, length_km=35.0, ...)``. Everything is written into a
temporary folder beside ``out_dir`` and renamed into place at the end; ``.complete`` is the last file
written, so an interrupted run never leaves a folder that looks complete. The layout is described
in sample_gis/README.md (and agreed in the project's interface notes).
"""

from __future__ import annotations

import argparse
import json
import os
import queue
import shutil
import sys
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

if __package__ in (None, ""):  # allow `python sample_gis/generate.py`
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
    __package__ = "sample_gis"

from osgeo import gdal, ogr, osr  # noqa: E402

from plugin.core.reach import ReachAxis  # noqa: E402
from plugin.core.units import mld_to_m3s  # noqa: E402
from plugin.gis import geotiff  # noqa: E402

from . import tables as tb  # noqa: E402
from .geometry import (  # noqa: E402
    DOWNSTREAM_STRUCTURE,
    REACH_NAME,
    UPSTREAM_STRUCTURE,
    ReachDesign,
    ReachGeometry,
    grid_extent,
)
from .mesh import build_mesh, write_ugrid  # noqa: E402
from .model import ReachModel  # noqa: E402
from .vectors import (  # noqa: E402
    COMMUNITIES,
    centreline_downstream_to_upstream,
    channel_polygon,
    vegetation,
    write_gpkg,
)

gdal.UseExceptions()

NODATA = -9999.0
RASTER_WORKERS = 2  # GDAL and numpy release the GIL while compressing and scattering
FIELDS = ("depth", "speed", "u", "v")
FIELD_TEXT = {
    "depth": ("depth", "m"),
    "speed": ("depth-averaged speed", "m/s"),
    "u": ("depth-averaged velocity, x-component (east)", "m/s"),
    "v": ("depth-averaged velocity, y-component (north)", "m/s"),
}


def _crs_wkt(epsg: int) -> str:
    s = osr.SpatialReference()
    s.ImportFromEPSG(int(epsg))
    return s.ExportToWkt()


def _channel_mask(poly, extent, wkt) -> np.ndarray:
    """Cells whose centre lies inside the channel outline (GDAL rasterisation, in memory)."""
    drv = gdal.GetDriverByName("MEM")
    ds = drv.Create("", extent.cols, extent.rows, 1, gdal.GDT_Byte)
    ds.SetGeoTransform(extent.transform)
    ds.SetProjection(wkt)
    srs = osr.SpatialReference()
    srs.ImportFromWkt(wkt)
    mem = ogr.GetDriverByName("Memory").CreateDataSource("")
    lyr = mem.CreateLayer("c", srs, ogr.wkbPolygon)
    f = ogr.Feature(lyr.GetLayerDefn())
    f.SetGeometry(ogr.CreateGeometryFromWkb(poly.wkb))
    lyr.CreateFeature(f)
    gdal.RasterizeLayer(ds, [1], lyr, burn_values=[1])
    band = ds.GetRasterBand(1)
    mask = band.ReadAsArray().astype(bool)
    del band, ds, lyr, mem
    return mask


_UMASK = os.umask(0)
os.umask(_UMASK)
_FILE_MODE = 0o666 & ~_UMASK
_DIR_MODE = 0o777 & ~_UMASK


def _file_modes(root: Path):
    """Ordinary permissions for everything written (temporary files are created private)."""
    os.chmod(root, _DIR_MODE)
    for dirpath, dirnames, filenames in os.walk(root):
        for d in dirnames:
            os.chmod(os.path.join(dirpath, d), _DIR_MODE)
        for f in filenames:
            os.chmod(os.path.join(dirpath, f), _FILE_MODE)


def _say(verbose, msg):
    if verbose:
        print(msg, flush=True)


def generate(out_dir, cell: float = 5.0, length_km: float = 35.0, seed: int = 1, mesh_regimes=("weir",),
             mesh_face_size: float = 10.0, regimes=tb.REGIMES, discharges=tb.LADDER_MLD, margin_m: float = 40.0,
             verbose: bool = True, design: dict | None = None) -> dict:
    """Build the demo reach into ``out_dir`` (replaced as a whole at the end). Returns a summary.

    ``design``: further ``ReachDesign`` fields to override (e.g. ``width_upstream_m`` for a wider
    benchmark channel); the demo uses the defaults."""
    t_start = time.perf_counter()
    timings = {}
    out = Path(out_dir).resolve()
    regimes = tuple(regimes)
    unknown = [r for r in regimes if r not in tb.REGIMES]
    if unknown or not regimes:
        raise ValueError(f"unknown regime(s) {unknown}; choose from {', '.join(tb.REGIMES)}")
    mesh_regimes = tuple(r for r in (mesh_regimes or ()) if r)
    bad = [r for r in mesh_regimes if r not in regimes]
    if bad:
        raise ValueError(f"mesh regime(s) {bad} are not among the generated regimes {regimes}")
    discharges = tuple(int(round(float(q))) for q in discharges)
    if not discharges or any(q <= 0 for q in discharges):
        raise ValueError("discharges must be positive (ML/d)")
    if cell <= 0 or mesh_face_size <= 0:
        raise ValueError("cell size and mesh face size must be positive")

    overrides = dict(design or {})
    fields = set(ReachDesign.__dataclass_fields__)
    unknown_fields = sorted(set(overrides) - fields)
    if unknown_fields:
        raise ValueError(f"unknown reach design field(s) {unknown_fields}")
    design = ReachDesign(length_m=float(length_km) * 1000.0, seed=int(seed), margin_m=float(margin_m), **overrides)
    t = time.perf_counter()
    geom = ReachGeometry(design)
    poly = channel_polygon(geom)
    timings["geometry_s"] = time.perf_counter() - t
    t = time.perf_counter()
    model = ReachModel(geom, regimes, discharges)
    if model.max_over_bank_m > 0:
        raise ValueError(f"the water rises {model.max_over_bank_m:.2f} m above the bank top; the demo "
                         "reach is meant to stay in its channel")
    timings["hydraulics_s"] = time.perf_counter() - t
    _say(verbose, f"reach {geom.length_m / 1000:.2f} km, {len(model.chainage)} sections, "
                  f"{len(model.runs)} runs solved in {timings['hydraulics_s']:.1f} s")

    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.parent / f".{out.name}.partial-{os.getpid()}"
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir()
    try:
        summary = _write_all(tmp, geom, poly, model, design, cell, regimes, discharges, mesh_regimes,
                             mesh_face_size, timings, verbose)
        summary["timings"] = timings
        _file_modes(tmp)
        tb.write_text(str(tmp / ".complete"), "complete\n")
        os.chmod(tmp / ".complete", _FILE_MODE)
        old = None
        if out.exists():
            old = out.parent / f".{out.name}.old-{os.getpid()}"
            out.rename(old)
        tmp.rename(out)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    timings["total_s"] = time.perf_counter() - t_start
    _say(verbose, f"demo reach written to {out} in {timings['total_s']:.1f} s")
    return summary


def _write_all(tmp: Path, geom, poly, model, design, cell, regimes, discharges, mesh_regimes,
               mesh_face_size, timings, verbose) -> dict:
    epsg = design.epsg
    wkt = _crs_wkt(epsg)
    rng_veg = np.random.default_rng([design.seed, 5])
    rng_rating = np.random.default_rng([design.seed, 6])
    rng_flow = np.random.default_rng([design.seed, 7])

    # ---- vectors ----------------------------------------------------------------------------
    t = time.perf_counter()
    line = centreline_downstream_to_upstream(geom)
    write_gpkg(str(tmp / "centreline.gpkg"), "centreline", [line],
               [("name", str), ("digitised", str), ("from_structure", str), ("to_structure", str)],
               [{"name": REACH_NAME, "digitised": "downstream to upstream",
                 "from_structure": DOWNSTREAM_STRUCTURE, "to_structure": UPSTREAM_STRUCTURE}],
               epsg, ogr.wkbLineString, "Centreline of the invented Figment River (digitised upstream)")
    write_gpkg(str(tmp / "channel.gpkg"), "channel", [poly], [("name", str), ("area_m2", float)],
               [{"name": REACH_NAME, "area_m2": round(poly.area, 1)}], epsg, ogr.wkbPolygon,
               "Bank-top outline of the invented Figment River")
    stands = vegetation(geom, rng_veg)
    write_gpkg(str(tmp / "vegetation.gpkg"), "vegetation", [s.polygon for s in stands],
               [("stand_id", int), ("community", str), ("bank", str), ("area_m2", float)],
               [{"stand_id": k + 1, "community": s.community, "bank": s.bank, "area_m2": round(s.polygon.area, 1)}
                for k, s in enumerate(stands)], epsg, ogr.wkbPolygon,
               "Invented bank vegetation of the Figment River")
    timings["vectors_s"] = time.perf_counter() - t

    # ---- grid cells: location along the reach, bed, direction --------------------------------
    t = time.perf_counter()
    extent = grid_extent(geom, cell)
    mask = _channel_mask(poly, extent, wkt)
    index = np.flatnonzero(mask.ravel())
    del mask
    cx, cy = geotiff.cell_centres(extent.transform, (extent.rows, extent.cols), index)
    axis = ReachAxis(geom.x, geom.y)
    loc = axis.locate(cx, cy)
    del cx, cy
    ch, off = loc.chainage, loc.offset
    bed = geom.bed(ch, off)
    theta = geom.along("theta", ch)
    cos_t, sin_t = np.cos(theta), np.sin(theta)
    where = model.weights(ch)
    timings["cells_s"] = time.perf_counter() - t
    _say(verbose, f"grid {extent.cols} x {extent.rows} cells of {cell:g} m, {len(index)} in the channel "
                  f"(located in {timings['cells_s']:.1f} s)")

    # ---- rasters ----------------------------------------------------------------------------
    t = time.perf_counter()
    shape = (extent.rows, extent.cols)
    wet_counts = {}
    buffers = queue.SimpleQueue()
    for _ in range(RASTER_WORKERS):
        buffers.put(np.full(shape[0] * shape[1], np.float32(NODATA), dtype=np.float32))

    def write_run(run):
        vals = model.values(run, where, bed, cos_t, sin_t)
        wet = np.isfinite(vals[0])
        idx = index[wet]
        folder = tmp / "rasters" / run.regime
        folder.mkdir(parents=True, exist_ok=True)
        buf = buffers.get()
        try:
            for name, a in zip(FIELDS, vals):
                buf[index] = np.float32(NODATA)  # every channel cell back to nodata, then the wet ones
                buf[idx] = a[wet]
                label, unit = FIELD_TEXT[name]
                geotiff.write(str(folder / f"{tb.qtag(run.q_mld)}_{name}.tif"), buf.reshape(shape),
                              extent.transform, wkt, nodata=NODATA, description=f"{label} ({unit})",
                              metadata={"reach": REACH_NAME, "regime": run.regime,
                                        "regime_description": tb.REGIME_TITLES[run.regime],
                                        "discharge_mld": f"{run.q_mld:g}", "discharge_m3s": f"{run.q_m3s:.6f}",
                                        "quantity": label, "units": unit,
                                        "source": "invented demo data: sample_gis.generate"})
        finally:
            buffers.put(buf)
        return (run.regime, run.q_mld), int(wet.sum())

    with ThreadPoolExecutor(max_workers=RASTER_WORKERS) as pool:
        for key, n in pool.map(write_run, model.runs):
            wet_counts[key] = n
    timings["rasters_s"] = time.perf_counter() - t
    _say(verbose, f"{len(model.runs) * 4} rasters written in {timings['rasters_s']:.1f} s")

    # ---- meshes -------------------------------------------------------------------------------
    t = time.perf_counter()
    mesh_info = {}
    if mesh_regimes:
        mesh = build_mesh(geom, mesh_face_size)
        fw = model.weights(mesh.face_c)
        fbed = geom.bed(mesh.face_c, mesh.face_o)
        fth = geom.along("theta", mesh.face_c)
        fcos, fsin = np.cos(fth), np.sin(fth)
        node_bed = geom.bed(mesh.node_c, mesh.node_o)
        for run in model.runs:
            if run.regime not in mesh_regimes:
                continue
            depth, speed, u, v = model.values(run, fw, fbed, fcos, fsin)
            write_ugrid(str(tmp / "mesh" / run.regime / f"{tb.qtag(run.q_mld)}.nc"), mesh, epsg, wkt,
                        depth, u, v, node_bed,
                        title=f"{REACH_NAME}: {tb.REGIME_TITLES[run.regime]}, {run.q_mld:g} ML/d "
                              f"({run.q_m3s:.3f} m3/s)",
                        comment="Invented demo data. Dry faces hold the fill value.")
        mesh_info = {"faces": mesh.n_faces, "triangles": mesh.n_triangles, "nodes": int(len(mesh.node_x)),
                     "face_size_m": mesh_face_size}
    timings["meshes_s"] = time.perf_counter() - t

    # ---- tables ---------------------------------------------------------------------------------
    t = time.perf_counter()
    tb.write_csv(str(tmp / "ladder.csv"), ["q_mld", "q_m3s"],
                 [[q, f"{float(mld_to_m3s(q)):.6f}"] for q in discharges])
    tb.write_csv(str(tmp / "scenarios.csv"), ["regime", "discharge", "unit", "depth", "speed", "u", "v"],
                 tb.raster_scenario_rows(regimes, discharges))
    tb.write_csv(str(tmp / "scenarios_mesh.csv"),
                 ["regime", "discharge", "unit", "mesh", "depth_group", "velocity_group", "time_index"],
                 tb.mesh_scenario_rows(mesh_regimes, discharges))
    tb.write_csv(str(tmp / "rating_records.csv"), ["date", "discharge_mld", "stage_m"],
                 tb.rating_records(rng_rating, design.rating_c, design.rating_h0, design.rating_b))
    tb.write_csv(str(tmp / "daily_flows.csv"), ["date", "discharge", "unit"], tb.daily_flows(rng_flow))
    prof_rows = []
    for run in model.runs:
        s = model.section_summary(run)
        for k in range(len(s["chainage_m"])):
            prof_rows.append([run.regime, f"{run.q_mld:g}", f"{run.q_m3s:.4f}", f"{s['chainage_m'][k]:.1f}",
                              f"{s['thalweg_m'][k]:.3f}", f"{s['bank_top_m'][k]:.3f}", f"{s['wse_m'][k]:.3f}",
                              f"{s['area_m2'][k]:.1f}", f"{s['top_width_m'][k]:.1f}",
                              f"{s['mean_velocity_ms'][k]:.4f}", f"{s['froude'][k]:.4f}"])
    tb.write_csv(str(tmp / "profiles.csv"),
                 ["regime", "q_mld", "q_m3s", "chainage_m", "thalweg_m", "bank_top_m", "wse_m", "area_m2",
                  "top_width_m", "mean_velocity_ms", "froude"], prof_rows)
    gs = geom.summary()
    info = {
        "reach": REACH_NAME,
        "upstream_structure": UPSTREAM_STRUCTURE,
        "downstream_structure": DOWNSTREAM_STRUCTURE,
        "crs": f"EPSG:{epsg}",
        "seed": design.seed,
        "length_m": round(geom.length_m, 2),
        "cell_m": cell,
        "grid": {"cols": extent.cols, "rows": extent.rows, "transform": list(extent.transform),
                 "channel_cells": int(len(index)), "nodata": NODATA},
        "planform": {k: (round(v, 3) if isinstance(v, float) else v) for k, v in gs.items()},
        "zones_m": {"upper": [0.0, round(geom.length_m / 3.0, 2)],
                    "middle": [round(geom.length_m / 3.0, 2), round(2.0 * geom.length_m / 3.0, 2)],
                    "lower": [round(2.0 * geom.length_m / 3.0, 2), round(geom.length_m, 2)]},
        "manning_n": design.manning_n,
        "bed_level_at_weir_m": design.bed_level_weir_m,
        "bed_slope": {"far_from_weir": design.slope_far, "near_weir": design.slope_near},
        "pool_levels_m": {"weir": design.pool_level_m, "weir_raised": design.pool_level_m + design.pool_step_m,
                          "weir_lowered": design.pool_level_m - design.pool_step_m},
        "rating": {"equation": "Q = C (h - h0)^b, Q in m3/s, h in m", "C": design.rating_c,
                   "h0": design.rating_h0, "b": design.rating_b},
        "downstream_levels_m": {reg: [round(float(h), 3) for h in model.boundary[reg]] for reg in regimes},
        "drowned_out": {reg: [r.q_mld for r in model.runs if r.regime == reg and r.drowned]
                        for reg in regimes if reg != "natural"},
        "discharges_mld": list(discharges),
        "benches": [{"kind": b.kind, "bank": b.bank, "chainage_from_m": round(b.chainage_from_m, 1),
                     "chainage_to_m": round(b.chainage_to_m, 1), "width_m": round(b.width_m, 1),
                     "crest_m": (round(b.level_m, 3) if b.level_m is not None else
                                 f"reference thalweg + {b.above_thalweg_m:g}")} for b in geom.benches],
        "vegetation_communities": COMMUNITIES,
        "mesh": mesh_info,
        "wet_cells": {f"{reg}/{tb.qtag(q)}": n for (reg, q), n in sorted(wet_counts.items())},
    }
    tb.write_text(str(tmp / "reach.json"), json.dumps(info, indent=1) + "\n")
    tb.write_text(str(tmp / "README.md"), _readme(info, regimes, discharges, mesh_regimes))
    timings["tables_s"] = time.perf_counter() - t
    return info


def _readme(info, regimes, discharges, mesh_regimes) -> str:
    pools = info["pool_levels_m"]
    r = info["rating"]
    lines = [
        f"# {REACH_NAME} demo reach (invented data)",
        "",
        f"Everything here is invented by `python -m sample_gis.generate` (seed {info['seed']}): the "
        f"{REACH_NAME}, the {UPSTREAM_STRUCTURE} at its upstream end and {DOWNSTREAM_STRUCTURE} at "
        "its downstream end do not exist. The reach lies at round false coordinates in "
        f"{info['crs']} (WGS 84 / UTM zone 44S), which puts it in open ocean on purpose. Levels are "
        "metres above an invented datum. Hydraulics: a steady 1D standard-step profile (Chow 1959) "
        "spread across each section by conveyance weighting - plausible, not a model of anything.",
        "",
        f"- Channel: {info['length_m'] / 1000:.2f} km, {info['planform']['bends']} bends, sinuosity "
        f"{info['planform']['sinuosity']:.2f}, bank-top width {info['planform']['width_min_m']:.0f}-"
        f"{info['planform']['width_max_m']:.0f} m, Manning n {info['manning_n']}.",
        f"- Regimes: {', '.join(regimes)}. Pool levels (m): normal {pools['weir']:.2f}, raised "
        f"{pools['weir_raised']:.2f}, lowered {pools['weir_lowered']:.2f}.",
        f"- Natural regime: downstream level from the rating Q = {r['C']:g} (h - {r['h0']:g})^{r['b']:g} "
        "(Q in m3/s, h in m).",
        f"- Discharges (ML/d): {', '.join(str(q) for q in discharges)}.",
        f"- Rasters: {info['cell_m']:g} m cells, Float32, nodata {info['grid']['nodata']:g}; "
        "`scenarios.csv` lists them.",
        f"- Meshes (UGRID-1.0): {', '.join(mesh_regimes) if mesh_regimes else 'none'}; "
        "`scenarios_mesh.csv` lists them.",
        "- `centreline.gpkg` is digitised DOWNSTREAM to UPSTREAM on purpose (orientation handling).",
        "- `rating_records.csv`: invented pre-regulation gaugings around the rating; `daily_flows.csv`: "
        "an invented water year; `profiles.csv`: the 1D profiles; `reach.json`: every design number.",
        "",
    ]
    return "\n".join(lines)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(prog="python -m sample_gis.generate", description=__doc__.split("\n\n")[0])
    ap.add_argument("--out", required=True, help="output folder (replaced as a whole)")
    ap.add_argument("--cell", type=float, default=5.0, help="raster cell size in metres (default 5)")
    ap.add_argument("--length-km", type=float, default=35.0, help="channel length in km (default 35)")
    ap.add_argument("--seed", type=int, default=1, help="random seed of every invented choice (default 1)")
    ap.add_argument("--mesh-regimes", default="weir",
                    help="comma-separated regimes written as UGRID meshes too ('' for none; default weir)")
    ap.add_argument("--mesh-face-size", type=float, default=10.0, help="mesh face size in metres (default 10)")
    ap.add_argument("--regimes", default=",".join(tb.REGIMES), help="comma-separated regimes (default all four)")
    ap.add_argument("--discharges", default=",".join(str(q) for q in tb.LADDER_MLD),
                    help="comma-separated discharges in ML/d (default the 11-step ladder)")
    ap.add_argument("--margin", type=float, default=40.0, help="dry margin of the raster grid in metres")
    ap.add_argument("--quiet", action="store_true")
    a = ap.parse_args(argv)
    split = [x.strip() for x in a.regimes.split(",") if x.strip()]
    meshes = [x.strip() for x in a.mesh_regimes.split(",") if x.strip()]
    qs = [float(x) for x in a.discharges.split(",") if x.strip()]
    try:
        generate(a.out, cell=a.cell, length_km=a.length_km, seed=a.seed, mesh_regimes=meshes,
                 mesh_face_size=a.mesh_face_size, regimes=split, discharges=qs, margin_m=a.margin,
                 verbose=not a.quiet)
    except ValueError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())
