"""Demo: weighted usable area of the invented Figment River for an ILLUSTRATIVE suitability curve set
(sample_gis/suitability_demo.csv: a generic "large-bodied native fish, adult", invented for the demo,
not from any study): one run mapped (composite suitability raster) and WUA against discharge over the
whole scenario table.

Uses the reach axis of the flowhabitat step (or makes it the same way).
"""

from __future__ import annotations

import csv
import importlib.util
from pathlib import Path

TITLE = "Weighted usable area, illustrative curves (usablearea)"
ZONES = "0 upper, 12000 middle, 25000 lower"
CURVES = Path(__file__).resolve().parents[2] / "sample_gis" / "suitability_demo.csv"


def _axis(demo) -> dict:
    spec = importlib.util.spec_from_file_location("demo_step_40", Path(__file__).with_name("40_flowhabitat.py"))
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod.demo_axis(demo)


def run(demo):
    if not demo.scenarios.exists():
        demo.log(f"  skipped: {demo.scenarios} not there (run `make sample`)")
        return []
    base = {**_axis(demo), "SEGMENT_LENGTH": 1000.0, "ZONE_BREAKS": ZONES,
            "SUITABILITY_CURVES": str(CURVES), "CURVE_SET": "", "COMBINATION": 0}
    g = demo.sample / "rasters" / "weir"
    one = demo.run("usablearea", {
        **base, "DEPTH": str(g / "q06500_depth.tif"), "SPEED": str(g / "q06500_speed.tif"), "REGIME": "weir",
        "DISCHARGE": 6500, "DISCHARGE_UNIT": 0,
        "SUITABILITY": demo.path("usablearea", "suitability_weir_6500.tif"),
        "WUA_TABLE": demo.path("usablearea", "wua_weir_6500.csv"),
        "REPORT": demo.path("usablearea", "report_weir_6500.html"),
    })
    table = demo.run("usablearea", {
        **base, "SCENARIOS": str(demo.scenarios),
        "WUA_TABLE": demo.path("usablearea", "wua.csv"),
        "REPORT": demo.path("usablearea", "report.html"),
    })
    best = {}
    with open(table["WUA_TABLE"], encoding="utf-8") as fh:
        for r in csv.DictReader(fh):
            if r["scope"] == "reach":
                w = float(r["wua_m2"])
                if w > best.get(r["regime"], (0.0, 0.0))[1]:
                    best[r["regime"]] = (float(r["q_mld"]), w)
    demo.log("  largest reach WUA within the runs (illustrative curves):")
    for regime, (q, w) in best.items():
        demo.log(f"    {regime:<13} {w / 1e4:8.1f} ha at {q:,.0f} ML/d")
    return [("WUA report, all runs", table["REPORT"]), ("WUA table, all runs (WUA_TABLE)", table["WUA_TABLE"]),
            ("WUA report, weir 6500 ML/d", one["REPORT"]),
            ("Composite suitability, weir 6500 ML/d (SUITABILITY)", one["SUITABILITY"]),
            ("WUA table, weir 6500 ML/d", one["WUA_TABLE"])]
