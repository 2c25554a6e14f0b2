"""Benchmark: one maphabitat run against the floor and the chain of stock QGIS tools, side by side.

    .venv/bin/python bench/maphabitat.py [--repeat 3] [--keep]

The reach is generated once into bench/output/maphabitat_reach/ (``sample_gis.generate``: 40 km at
2 m cells, regime 'weir', one high discharge; reused while it exists). Every variant runs in its own
child process (fresh QGIS, empty caches of our own, files already in the OS page cache after a warm-up
read), ``--repeat`` times, interleaved; the table shows the best and the median wall time and the
ratios of the best times. Memory is the peak resident set size of the child process (VmHWM from
/proc/self/status, the kernel's high-water mark of resident memory; it includes QGIS itself, GDAL's
block cache and everything else), and the part added by the measured work (peak minus the resident
size just before it).

Variants
  floor        read the compressed speed raster (GDAL, whole band) and classify its wet cells
               (velocity preset) -- the least any tool must do.
  stock chain  what a GIS officer clicks through in QGIS, as Processing algorithms:
               native:reclassifybytable (speed -> class raster), gdal:polygonize (class polygons),
               segment polygons by cross-sections (native:splitlinesbylength of the centreline at
               1000 m + native:buffer with flat ends: the cross-sections), native:zonalstatisticsfb
               (count, mean, median, st.dev., min, max of speed per segment), native:intersection
               (class polygons x segments, for class areas). Outputs to GeoPackage/GeoTIFF files.
               Numbering the segment polygons (native:fieldcalculator, @row_number) is included;
               the segment layers are temporary (memory) layers (QGIS 3.22 keeps the one feature id of
               the centreline for every piece, which a GeoPackage refuses), the rest are files.
               Turning the intersection into class areas per segment needs one more step
               (qgis:statisticsbycategories on $area); it is timed separately and NOT included.
  maphabitat   channelhabitat:maphabitat through Processing with every output written (CLASSES
               GeoTIFF, PATCHES, SEGMENT_STATS, ZONE_STATS, REPORT): depth and speed read, located
               on the axis (chainage computed from scratch: a cold cache), classes, patches per class
               and segment, percentiles per segment and zone, HTML report with charts. The table's
               main row is this first (cold) run; a second row gives a second run on the same grid in
               the same session (what each further discharge of a scenario table costs: the chainage
               of the grid is cached), outputs overwritten.
  maphabitat phases: the same steps called directly (no Processing), timed one by one, one after the
               other. In the algorithm several overlap: the rasters are read in a background thread
               while the centreline is read, the depth raster first, so the wet cells are located
               while the velocities are read; the classes are computed and the CLASSES GeoTIFF
               encoded in the background meanwhile; patches and wet footprints are polygonized in
               background threads (2) while the statistics (1 thread) and the report are made;
               locating uses 2 threads. So the sum of the phases is more than the run's wall time.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
OUT = ROOT / "bench" / "output"
sys.path.insert(0, str(ROOT / "bench"))
import common  # noqa: E402

REACH = OUT / "maphabitat_reach"
# --wide: the design's reference size (about 24 M cells, about 2 M wet) -- the channel widened beyond the
# demo brief's 80-200 m and the dry margin of the grid enlarged
WIDE_REACH = OUT / "maphabitat_reach_wide"
WIDE_DESIGN = {"width_upstream_m": 215.0, "width_downstream_m": 260.0, "width_limits_m": (80.0, 300.0)}
WIDE_MARGIN_M = 330.0
DISCHARGE = 40000  # ML/d: the highest of the ladder, the most wet cells
LENGTH_KM = 40.0
CELL = 2.0


def rss_mb() -> float:
    """Current resident set size (MB) from /proc."""
    with open("/proc/self/statm") as fh:
        pages = int(fh.read().split()[1])
    return pages * os.sysconf("SC_PAGE_SIZE") / 1e6


def cpu_s() -> float:
    """CPU seconds used so far by this process (all threads) and its finished child processes
    (gdal:polygonize runs GDAL's polygonize script in a child process)."""
    a = resource.getrusage(resource.RUSAGE_SELF)
    b = resource.getrusage(resource.RUSAGE_CHILDREN)
    return a.ru_utime + a.ru_stime + b.ru_utime + b.ru_stime


def ensure_reach(wide: bool = False) -> Path:
    reach = WIDE_REACH if wide else REACH
    if (reach / ".complete").exists():
        return reach
    from sample_gis.generate import generate

    extra = {"design": WIDE_DESIGN, "margin_m": WIDE_MARGIN_M} if wide else {}
    print(f"generating the benchmark reach ({LENGTH_KM:g} km at {CELL:g} m) into {reach} ...", flush=True)
    generate(reach, cell=CELL, length_km=LENGTH_KM, regimes=("weir",), discharges=(DISCHARGE,), mesh_regimes=(),
             verbose=True, **extra)
    return reach


def paths(reach: Path) -> dict:
    q = f"q{DISCHARGE:05d}"
    return {"depth": str(reach / "rasters" / "weir" / f"{q}_depth.tif"),
            "speed": str(reach / "rasters" / "weir" / f"{q}_speed.tif"),
            "centreline": str(reach / "centreline.gpkg") + "|layername=centreline"}


# ----------------------------------------------------------------------------------------------
# Child processes: one measured variant each
# ----------------------------------------------------------------------------------------------

def _qgis(provider: bool = True):
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    sys.path.insert(0, "/usr/share/qgis/python/plugins")
    from qgis.core import QgsApplication

    app = QgsApplication([], False)
    app.initQgis()
    from processing.core.Processing import Processing

    Processing.initialize()
    prov = None
    if provider:
        from plugin.provider import ChannelHabitatProvider

        prov = ChannelHabitatProvider()
        QgsApplication.processingRegistry().addProvider(prov)
    return app, prov


def child_floor(p: dict, work: Path) -> dict:
    import numpy as np
    from osgeo import gdal

    from plugin.core.classes import velocity_preset

    gdal.UseExceptions()
    scheme = velocity_preset()
    before = rss_mb()
    c0 = cpu_s()
    t = time.perf_counter()
    ds = gdal.Open(p["speed"])
    band = ds.GetRasterBand(1)
    a = band.ReadAsArray()
    nd = band.GetNoDataValue()
    wet = np.isfinite(a) & (a != nd)
    v = a[wet]
    codes = scheme.classify(np.ones_like(v), v)
    dt = time.perf_counter() - t
    cpu = cpu_s() - c0
    del band, ds
    return {"seconds": dt, "cpu_s": cpu, "cells": int(a.size), "wet": int(v.size), "classified": int((codes > 0).sum()),
            "rss_before_mb": before}


def child_stock(p: dict, work: Path) -> dict:
    app, prov = _qgis(provider=False)
    import processing
    from qgis.core import QgsProcessingContext, QgsProcessingFeedback

    ctx = QgsProcessingContext()
    fb = QgsProcessingFeedback()
    steps = {}

    def run(name, alg, params):
        t = time.perf_counter()
        res = processing.run(alg, params, context=ctx, feedback=fb)
        steps[name] = time.perf_counter() - t
        return res

    before = rss_mb()
    c0 = cpu_s()
    t0 = time.perf_counter()
    # 1. classes: [min, max, value] rows, min < value <= max by default -> use min <= value < max
    table = [-1e9, 0.05, 1, 0.05, 0.20, 2, 0.20, 0.30, 3, 0.30, 1e9, 4]
    cls = run("reclassify by table", "native:reclassifybytable", {
        "INPUT_RASTER": p["speed"], "RASTER_BAND": 1, "TABLE": table, "NO_DATA": 0, "RANGE_BOUNDARIES": 1,
        "NODATA_FOR_MISSING": True, "DATA_TYPE": 0, "OUTPUT": str(work / "stock_classes.tif")})["OUTPUT"]
    # 2. class polygons
    polys = run("polygonize", "gdal:polygonize", {
        "INPUT": cls, "BAND": 1, "FIELD": "class", "EIGHT_CONNECTEDNESS": False,
        "OUTPUT": str(work / "stock_polygons.gpkg")})["OUTPUT"]
    # 3. segment polygons bounded by cross-sections: 1000 m pieces of the centreline, flat-ended buffers
    pieces = run("segment polygons: split centreline", "native:splitlinesbylength", {
        "INPUT": p["centreline"], "LENGTH": 1000.0, "OUTPUT": "TEMPORARY_OUTPUT"})["OUTPUT"]
    segs = run("segment polygons: flat-ended buffers", "native:buffer", {
        "INPUT": pieces, "DISTANCE": 150.0, "SEGMENTS": 5, "END_CAP_STYLE": 1, "JOIN_STYLE": 0,
        "MITER_LIMIT": 2, "DISSOLVE": False, "OUTPUT": "TEMPORARY_OUTPUT"})["OUTPUT"]
    segs = run("segment polygons: number them", "native:fieldcalculator", {
        "INPUT": segs, "FIELD_NAME": "segment", "FIELD_TYPE": 1, "FIELD_LENGTH": 10, "FIELD_PRECISION": 0,
        "FORMULA": "@row_number", "OUTPUT": "TEMPORARY_OUTPUT"})["OUTPUT"]
    # 4. zonal statistics of speed per segment (no percentiles besides the median)
    run("zonal statistics", "native:zonalstatisticsfb", {
        "INPUT": segs, "INPUT_RASTER": p["speed"], "RASTER_BAND": 1, "COLUMN_PREFIX": "v_",
        "STATISTICS": [0, 2, 3, 4, 5, 6], "OUTPUT": "TEMPORARY_OUTPUT"})
    # 5. class polygons x segments for class areas
    n_segments = segs.featureCount()
    inter = run("intersection", "native:intersection", {
        "INPUT": polys, "OVERLAY": segs, "INPUT_FIELDS": ["class"], "OVERLAY_FIELDS": ["segment"],
        "OUTPUT": str(work / "stock_intersection.gpkg")})["OUTPUT"]
    total = time.perf_counter() - t0
    cpu = cpu_s() - c0
    # extra (not in the total): class area per segment from the intersection
    t = time.perf_counter()
    area = processing.run("native:fieldcalculator", {
        "INPUT": inter, "FIELD_NAME": "area_m2", "FIELD_TYPE": 0, "FIELD_LENGTH": 20, "FIELD_PRECISION": 2,
        "FORMULA": "$area", "OUTPUT": str(work / "stock_area.gpkg")}, context=ctx, feedback=fb)["OUTPUT"]
    processing.run("qgis:statisticsbycategories", {
        "INPUT": area, "VALUES_FIELD_NAME": "area_m2", "CATEGORIES_FIELD_NAME": ["class", "segment"],
        "OUTPUT": str(work / "stock_class_areas.gpkg")}, context=ctx, feedback=fb)
    extra = time.perf_counter() - t
    return {"seconds": total, "cpu_s": cpu, "steps": steps, "extra_class_areas_s": extra, "rss_before_mb": before,
            "segments": n_segments}


def child_maphabitat(p: dict, work: Path) -> dict:
    app, prov = _qgis()
    import processing
    from qgis.core import QgsProcessingContext, QgsProcessingFeedback

    params = {"DEPTH": p["depth"], "SPEED": p["speed"], "CENTRELINE": p["centreline"], "SEGMENT_LENGTH": 1000.0,
              "ZONE_BREAKS": "", "CLASSES": str(work / "classes.tif"), "PATCHES": str(work / "patches.gpkg"),
              "SEGMENT_STATS": str(work / "segments.gpkg"), "ZONE_STATS": str(work / "zones.gpkg"),
              "REPORT": str(work / "report.html")}
    before = rss_mb()
    c0 = cpu_s()
    t = time.perf_counter()
    res = processing.run("channelhabitat:maphabitat", params, context=QgsProcessingContext(),
                         feedback=QgsProcessingFeedback())
    dt = time.perf_counter() - t
    cpu = cpu_s() - c0
    first_peak = common.peak_mb()
    # the same grid again in the same session (e.g. the next discharge of a scenario table): chainage cached
    c1 = cpu_s()
    t = time.perf_counter()
    processing.run("channelhabitat:maphabitat", params, context=QgsProcessingContext(),
                   feedback=QgsProcessingFeedback())
    warm = time.perf_counter() - t
    return {"seconds": dt, "cpu_s": cpu, "warm_seconds": warm, "warm_cpu_s": cpu_s() - c1,
            "wet_area_m2": res["WET_AREA_M2"], "rss_before_mb": before, "first_peak_mb": first_peak}


def child_phases(p: dict, work: Path) -> dict:
    """The maphabitat steps called directly, timed one by one (no Processing, no QGIS layers)."""
    import numpy as np

    import plugin.algorithms.base  # noqa: F401 - imported by the report (its caution); loaded with the plugin
    from plugin.core import habitat
    from plugin.core.classes import velocity_preset
    from plugin.core.reach import Reach, ReachAxis, locate_field, parse_zone_breaks, segment_edges
    from plugin.gis import classraster, geotiff, habitatreport, patches
    from plugin.gis.runs import read_raster_run

    times = {}
    before = rss_mb()
    c0 = cpu_s()

    def tick(name, t):
        times[name] = time.perf_counter() - t

    t = time.perf_counter()
    fld = read_raster_run(p["depth"], p["speed"])
    tick("read depth + speed (speed only in blocks with wet cells)", t)
    from osgeo import ogr

    ds = ogr.Open(p["centreline"].split("|")[0])
    layer = ds.GetLayer(0)
    feat = layer.GetNextFeature()
    geom = feat.GetGeometryRef()
    xy = np.array(geom.GetPoints())[:, :2]
    del geom, feat, layer, ds
    axis = ReachAxis(xy[:, 0], xy[:, 1], fld.crs_wkt)
    ze, zn = parse_zone_breaks("", axis.start_m, axis.end_m)
    reach = Reach(axis, segment_edges(axis.start_m, axis.end_m, 1000.0), ze, zn)
    t = time.perf_counter()
    loc = locate_field(reach, fld)
    tick("locate (chainage, cold; 2 threads)", t)
    t = time.perf_counter()
    ra = habitat.analyse_run(fld, reach, velocity_preset(), location=loc)
    tick("classes + statistics (segments, zones, reach, profile)", t)
    t = time.perf_counter()
    ptc, _ = patches.start_patch_job(ra, footprints=True).result()
    tick("patches + segment and zone footprints (one pass, 2 threads)", t)
    t = time.perf_counter()
    geotiff.write(str(work / "phase_classes.tif"), classraster.class_grid(fld, ra.codes), fld.support.transform,
                  fld.crs_wkt, nodata=0, colours={i + 1: c for i, c in enumerate(ra.scheme.colours)})
    tick("write CLASSES GeoTIFF", t)
    t = time.perf_counter()
    habitatreport.build_report(ra, habitat.run_summary(ra), [], patch_count=len(ptc)).write(
        str(work / "phase_report.html"))
    tick("report (3 SVG charts)", t)
    return {"seconds": sum(times.values()), "cpu_s": cpu_s() - c0, "phases": times, "wet": fld.n,
            "grid": list(fld.support.shape), "rss_before_mb": before}


CHILDREN = {"floor": child_floor, "stock": child_stock, "maphabitat": child_maphabitat, "phases": child_phases}


def child_main(kind: str, reach: str) -> None:
    gdal_cfg = os.environ.get("GDAL_CACHEMAX")
    p = paths(Path(reach))
    keep = os.environ.get("BENCH_KEEP")
    if keep:
        Path(keep).mkdir(parents=True, exist_ok=True)
        res = CHILDREN[kind](p, Path(keep))
    else:
        with tempfile.TemporaryDirectory(prefix=f"bench-{kind}-", dir=OUT) as tmp:
            res = CHILDREN[kind](p, Path(tmp))
    res["peak_rss_mb"] = res.pop("first_peak_mb", None) or common.peak_mb()
    res["session_peak_rss_mb"] = common.peak_mb()
    res["gdal_cachemax"] = gdal_cfg
    print("RESULT " + json.dumps(res), flush=True)
    sys.stderr.flush()
    os._exit(0)  # skip QGIS teardown: nothing more to measure, and exitQgis after Processing may crash


def run_child(kind: str, reach: Path) -> dict:
    return common.run_child(__file__, kind, reach)


# ----------------------------------------------------------------------------------------------
# Parent: run, repeat, print
# ----------------------------------------------------------------------------------------------

def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--child", default="")
    ap.add_argument("--reach", default="")
    ap.add_argument("--wide", action="store_true",
                    help="the design's reference size: ~24 M cells with ~2 M wet (channel widened beyond the demo's)")
    args = ap.parse_args()
    OUT.mkdir(parents=True, exist_ok=True)
    if args.child:
        child_main(args.child, args.reach)
        return 0
    reach = ensure_reach(args.wide)
    p = paths(reach)
    for f in (p["depth"], p["speed"]):  # warm the OS page cache: every variant reads warm files
        Path(f).read_bytes()
    results = {k: [] for k in ("floor", "stock", "maphabitat", "phases")}
    for i in range(args.repeat):
        for kind in results:
            r = run_child(kind, reach)
            results[kind].append(r)
            print(f"  run {i + 1}/{args.repeat} {kind:<11} {r['seconds']:7.2f} s   peak RSS {r['peak_rss_mb']:6.0f} MB",
                  flush=True)
    best = {k: min(r["seconds"] for r in v) for k, v in results.items()}
    med = {k: statistics.median(r["seconds"] for r in v) for k, v in results.items()}
    cpu = {k: min(r["cpu_s"] for r in v) for k, v in results.items()}
    fl = results["floor"][0]
    ph = min(results["phases"], key=lambda r: r["seconds"])
    load = os.getloadavg()
    print()
    print(f"maphabitat benchmark: {LENGTH_KM:g} km reach at {CELL:g} m cells, grid {ph['grid'][1]} x {ph['grid'][0]} = "
          f"{fl['cells'] / 1e6:.1f} M cells, {fl['wet'] / 1e6:.2f} M wet cells (speed), {ph['wet'] / 1e6:.2f} M wet "
          f"cells (depth >= 0.05 m); {os.cpu_count()} cores; load average {load[0]:.1f} (other work on the machine); "
          f"best of {args.repeat}")
    print("wall = elapsed seconds; cpu = CPU seconds of the process and its child processes (all threads): less "
          "sensitive to other load, blind to the gain from using both cores")
    print(f"{'variant':<14}{'wall best':>10}{'median':>8}{'x floor':>9}{'stock/it':>10}{'cpu s':>8}{'x floor':>9}"
          f"{'stock/it':>10}{'peak RSS MB':>13}{'added MB':>10}")
    for k, label in (("floor", "floor"), ("stock", "stock chain"), ("maphabitat", "maphabitat")):
        pk = max(r["peak_rss_mb"] for r in results[k])
        added = max(r["peak_rss_mb"] - r["rss_before_mb"] for r in results[k])
        print(f"{label:<14}{best[k]:10.2f}{med[k]:8.2f}{best[k] / best['floor']:9.1f}{best['stock'] / best[k]:10.2f}"
              f"{cpu[k]:8.2f}{cpu[k] / cpu['floor']:9.1f}{cpu['stock'] / cpu[k]:10.2f}{pk:13.0f}{added:10.0f}")
    wb = min(r["warm_seconds"] for r in results["maphabitat"])
    wm = statistics.median(r["warm_seconds"] for r in results["maphabitat"])
    wc = min(r["warm_cpu_s"] for r in results["maphabitat"])
    sp = max(r["session_peak_rss_mb"] for r in results["maphabitat"])
    print(f"{'  same grid':<14}{wb:10.2f}{wm:8.2f}{wb / best['floor']:9.1f}{best['stock'] / wb:10.2f}"
          f"{wc:8.2f}{wc / cpu['floor']:9.1f}{cpu['stock'] / wc:10.2f}{sp:13.0f}   (second run in the same "
          "session, chainage cached; peak over both runs)")
    print()
    st = min(results["stock"], key=lambda r: r["seconds"])
    print(f"stock chain steps (best run; {st['segments']} segment polygons):")
    for name, s in st["steps"].items():
        print(f"  {name:<45}{s:7.2f} s")
    print(f"  (not included: class areas from the intersection, field calculator + statistics by categories: "
          f"{st['extra_class_areas_s']:.2f} s)")
    print("maphabitat phases called directly (best run):")
    for name, s in ph["phases"].items():
        print(f"  {name:<55}{s:7.2f} s")
    print(f"  {'sum':<55}{ph['seconds']:7.2f} s")
    print()
    speedup = best["stock"] / best["maphabitat"]
    of_floor = best["maphabitat"] / best["floor"]
    print(f"targets (DESIGN.md section 7): maphabitat >= 4x faster than the stock chain: {speedup:.2f}x wall "
          f"({cpu['stock'] / cpu['maphabitat']:.2f}x cpu); within 4x of the floor: {of_floor:.1f}x wall "
          f"({cpu['maphabitat'] / cpu['floor']:.1f}x cpu);"
          f" memory < 1 GB: peak RSS {max(r['peak_rss_mb'] for r in results['maphabitat']):.0f} MB "
          f"(whole process incl. QGIS; VmHWM)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
