"""Benchmark: flowhabitat over a whole scenario table against the sum of the per-run floors, side by side.

    .venv/bin/python bench/flowhabitat.py [--repeat 2] [--only 5m|2m]

Two scenario tables: the demo reach (sample_gis/generated/scenarios.csv: 4 regimes x 11 discharges at
5 m cells) and the same reach at 2 m cells (generated once into bench/output/flowhabitat_2m/ with
``sample_gis.generate.generate(out, cell=2.0, mesh_regimes=())`` and reused while it exists). Every
variant runs in its own child process (fresh QGIS, empty caches of our own; the files are read once
beforehand so all variants read them from the OS page cache), ``--repeat`` times, interleaved; the
table shows the best and the median wall time.

Variants
  floor          per run: read the compressed speed raster (GDAL, whole band) and classify its wet
                 cells (velocity preset) -- the least any tool must do per run (DESIGN.md section 7);
                 summed over the 44 runs, one after the other.
  flowhabitat    channelhabitat:flowhabitat through Processing, everything included: the table read
                 and checked, every run's depth and speed read, chainage, classes, class areas per
                 segment, zone and reach, the curves, targets, the HTML report with its charts, and
                 CURVES/TARGETS written. PARALLEL_RUNS = 2 (both cores).
  no report      the same without the REPORT (CURVES and TARGETS only).
  one at a time  flowhabitat with PARALLEL_RUNS = 1, to show what the second core gives.

Target (DESIGN.md section 7): a scenario table of 44 runs within 2x of the sum of the per-run floors.
The printed ratio is flowhabitat's best time over the floor's best time, measured in the same run.
Note that flowhabitat must read the depth raster of every run too (to know which cells are wet), which
the floor does not.
"""

from __future__ import annotations

import argparse
import csv
import json
import os
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

REACHES = {"5m": ROOT / "sample_gis" / "generated", "2m": OUT / "flowhabitat_2m"}
TARGETS = "lower: moderate+fast >= 50%\nupper: fast >= 85%"
ZONES = "0 upper, 12000 middle, 25000 lower"


def ensure_reach(name: str) -> Path:
    reach = REACHES[name]
    if (reach / ".complete").exists():
        return reach
    if name == "5m":
        raise SystemExit("the demo reach is not generated: run `make sample`")
    from sample_gis.generate import generate

    print(f"generating the 2 m scenario table into {reach} (all regimes x 11 discharges; once) ...", flush=True)
    generate(reach, cell=2.0, mesh_regimes=(), verbose=True)
    return reach


def axis_path(reach: Path) -> str:
    """The demo centreline is digitised downstream -> upstream: an upstream -> downstream copy."""
    from osgeo import ogr

    ogr.UseExceptions()
    out = OUT / f"axis_{reach.name}.gpkg"
    if out.exists():
        return str(out) + "|layername=axis"
    src = ogr.Open(str(reach / "centreline.gpkg"))
    lyr = src.GetLayer(0)
    feat = lyr.GetNextFeature()
    pts = feat.GetGeometryRef().GetPoints()[::-1]
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(out))
    dst = ds.CreateLayer("axis", lyr.GetSpatialRef(), ogr.wkbLineString)
    line = ogr.Geometry(ogr.wkbLineString)
    for p in pts:
        line.AddPoint_2D(p[0], p[1])
    f = ogr.Feature(dst.GetLayerDefn())
    f.SetGeometry(line)
    dst.CreateFeature(f)
    del f, dst, ds, feat, lyr, src
    return str(out) + "|layername=axis"


def speed_rasters(reach: Path) -> list:
    with open(reach / "scenarios.csv", encoding="utf-8") as fh:
        return [str(reach / r["speed"]) for r in csv.DictReader(fh)]


# ----------------------------------------------------------------------------------------------
# Children
# ----------------------------------------------------------------------------------------------

def child_floor(reach: Path, work: Path) -> dict:
    import numpy as np
    from osgeo import gdal

    from plugin.core.classes import velocity_preset

    gdal.UseExceptions()
    scheme = velocity_preset()
    per_run, cells, wet = [], 0, 0
    c0 = time.process_time()
    for path in speed_rasters(reach):
        t = time.perf_counter()
        ds = gdal.Open(path)
        band = ds.GetRasterBand(1)
        a = band.ReadAsArray()
        nd = band.GetNoDataValue()
        m = np.isfinite(a) & (a != nd)
        v = a[m]
        scheme.classify(np.ones_like(v), v)
        per_run.append(time.perf_counter() - t)
        cells, wet = cells + a.size, wet + v.size
        del band, ds
    return {"seconds": sum(per_run), "cpu": time.process_time() - c0, "per_run": per_run, "cells": cells, "wet": wet}


def _qgis():
    os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
    sys.path.insert(0, "/usr/share/qgis/python/plugins")
    from qgis.core import QgsApplication

    app = QgsApplication([], False)
    app.initQgis()
    from processing.core.Processing import Processing

    Processing.initialize()
    from plugin.provider import ChannelHabitatProvider

    prov = ChannelHabitatProvider()
    QgsApplication.processingRegistry().addProvider(prov)
    return app, prov


def _flowhabitat(reach: Path, work: Path, workers: int, report: bool = True) -> dict:
    app, prov = _qgis()
    import processing
    from qgis.core import QgsProcessingContext, QgsProcessingFeedback

    class Feedback(QgsProcessingFeedback):
        lines = []

        def pushInfo(self, info):  # noqa: N802
            self.lines.append(info)

    fb = Feedback()
    params = {"SCENARIOS": str(reach / "scenarios.csv"), "CENTRELINE": axis_path(reach), "SEGMENT_LENGTH": 1000.0,
              "ZONE_BREAKS": ZONES, "TARGET_STATEMENTS": TARGETS, "PARALLEL_RUNS": workers,
              "CURVES": str(work / "curves.gpkg"), "TARGETS": str(work / "targets.gpkg"),
              "REPORT": str(work / "report.html") if report else None}
    c0 = time.process_time()
    t = time.perf_counter()
    processing.run("channelhabitat:flowhabitat", params, context=QgsProcessingContext(), feedback=fb)
    dt = time.perf_counter() - t
    cpu = time.process_time() - c0
    chain = [line for line in fb.lines if line.startswith("chainage on") or " runs in " in line]
    runs = [line for line in fb.lines if "wet elements; read" in line]
    return {"seconds": dt, "cpu": cpu, "chainage": chain, "runs": len(runs), "first_run_line": runs[0] if runs else ""}


def child_flowhabitat(reach: Path, work: Path) -> dict:
    return _flowhabitat(reach, work, 2)


def child_no_report(reach: Path, work: Path) -> dict:
    return _flowhabitat(reach, work, 2, report=False)


def child_serial(reach: Path, work: Path) -> dict:
    return _flowhabitat(reach, work, 1)


CHILDREN = {"floor": child_floor, "flowhabitat": child_flowhabitat, "no report": child_no_report,
            "one at a time": child_serial}


def child_main(kind: str, reach: str) -> None:
    with tempfile.TemporaryDirectory(prefix="bench-flow-", dir=OUT) as tmp:
        res = CHILDREN[kind](Path(reach), Path(tmp))
    res["peak_rss_mb"] = common.peak_mb()
    print("RESULT " + json.dumps(res), flush=True)
    sys.stderr.flush()
    os._exit(0)  # skip QGIS teardown


def run_child(kind: str, reach: Path) -> dict:
    return common.run_child(__file__, kind, reach)


# ----------------------------------------------------------------------------------------------
# Parent
# ----------------------------------------------------------------------------------------------

def bench_reach(name: str, repeat: int) -> dict:
    reach = ensure_reach(name)
    axis_path(reach)
    for f in reach.joinpath("rasters").rglob("*_depth.tif"):  # warm the page cache
        f.read_bytes()
        f.with_name(f.name.replace("_depth", "_speed")).read_bytes()
    results = {k: [] for k in CHILDREN}
    for i in range(repeat):
        for kind in results:
            r = run_child(kind, reach)
            results[kind].append(r)
            print(f"  {name} run {i + 1}/{repeat} {kind:<14}{r['seconds']:7.2f} s  CPU {r['cpu']:7.2f} s  "
                  f"peak RSS {r['peak_rss_mb']:6.0f} MB", flush=True)
    return results


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--only", default="", choices=("", "5m", "2m"))
    ap.add_argument("--child", default="")
    ap.add_argument("--reach", default="")
    args = ap.parse_args()
    OUT.mkdir(parents=True, exist_ok=True)
    if args.child:
        child_main(args.child, args.reach)
        return 0
    names = [args.only] if args.only else ["5m", "2m"]
    summary = []
    for name in names:
        res = bench_reach(name, args.repeat)
        best = {k: min(r["seconds"] for r in v) for k, v in res.items()}
        med = {k: statistics.median(r["seconds"] for r in v) for k, v in res.items()}
        fl = res["floor"][0]
        fh = min(res["flowhabitat"], key=lambda r: r["seconds"])
        load = os.getloadavg()
        print()
        nr = len(fl["per_run"])
        print(f"flowhabitat benchmark, {name} cells: {nr} runs, {fl['cells'] / nr / 1e6:.1f} M cells per grid, "
              f"{fl['wet'] / nr / 1e6:.2f} M wet cells per run on average (speed); {os.cpu_count()} cores; load "
              f"average {load[0]:.1f} (other work on the machine slows every variant); best of {args.repeat}")
        cpu = {k: min(r["cpu"] for r in v) for k, v in res.items()}
        print(f"{'variant':<16}{'best s':>9}{'median s':>10}{'x floor':>9}{'CPU s':>9}{'CPU x floor':>13}"
              f"{'peak RSS MB':>13}")
        for k in CHILDREN:
            pk = max(r["peak_rss_mb"] for r in res[k])
            print(f"{k:<16}{best[k]:9.2f}{med[k]:10.2f}{best[k] / best['floor']:9.2f}{cpu[k]:9.2f}"
                  f"{cpu[k] / cpu['floor']:13.2f}{pk:13.0f}")
        print(f"  floor per run: {min(fl['per_run']) * 1000:.0f}-{max(fl['per_run']) * 1000:.0f} ms")
        for line in fh["chainage"]:
            print(f"  {line}")
        ratio = best["flowhabitat"] / best["floor"]
        summary.append((name, ratio, best["no report"] / best["floor"], best["one at a time"] / best["flowhabitat"]))
        print()
    for name, ratio, bare, gain in summary:
        print(f"target (DESIGN.md section 7), {name}: 44 runs within 2x of the sum of the per-run floors: "
              f"{ratio:.2f}x with the report ({'met' if ratio <= 2.0 else 'NOT met'}), {bare:.2f}x without it; "
              f"two threads vs one: {gain:.2f}x faster")
    return 0


if __name__ == "__main__":
    sys.exit(main())
