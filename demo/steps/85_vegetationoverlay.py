"""Demo: bank vegetation against the four regimes at the lowest discharge of the ladder.

Needs sample_gis/generated/vegetation.gpkg (field ``community``, ``stand_id``) and scenarios.csv.
As a plausibility check only (invented data is never a reference), it logs the wetted share of the
vegetation under each regime: a higher pool should wet more of it.
"""

from __future__ import annotations

TITLE = "Bank vegetation under each regime at 3000 ML/d (vegetationoverlay)"

DISCHARGE_MLD = 3000


def run(demo):
    veg = demo.sample / "vegetation.gpkg"
    if not veg.exists() or not demo.scenarios.exists():
        demo.log(f"  skipped: {veg} or {demo.scenarios} is not there (run `make sample`)")
        return []
    out = {
        "VEGETATION_STATS": demo.path("vegetationoverlay", "vegetation_stats.gpkg"),
        "COMMUNITY_SUMMARY": demo.path("vegetationoverlay", "community_summary.csv"),
        "EDGES": demo.path("vegetationoverlay", "vegetation_edges.gpkg"),
        "REPORT": demo.path("vegetationoverlay", "report.html"),
    }
    res = demo.run("vegetationoverlay", {
        "VEGETATION": str(veg), "COMMUNITY_FIELD": "community", "ID_FIELD": "stand_id",
        "SCENARIOS": str(demo.scenarios), "SCENARIO_DISCHARGES": str(DISCHARGE_MLD), "DISCHARGE_UNIT": 0,
        "EDGE_DISTANCE": 10.0, **out})
    _log_shares(demo, res["COMMUNITY_SUMMARY"])
    return [("Vegetation statistics per stand and regime (GeoPackage)", res["VEGETATION_STATS"]),
            ("Summary per community and regime (CSV)", res["COMMUNITY_SUMMARY"]),
            ("Channel-facing edges by water class (GeoPackage)", res["EDGES"]),
            ("Vegetation overlay report", res["REPORT"])]


def _log_shares(demo, path):
    import csv

    wet, area = {}, {}
    with open(path, encoding="utf-8") as fh:
        for row in csv.DictReader(fh):
            r = row["regime"]
            wet[r] = wet.get(r, 0.0) + float(row["wet_area_m2"] or 0)
            area[r] = area.get(r, 0.0) + float(row["area_m2"] or 0)
    shares = ", ".join(f"{r} {100 * wet[r] / area[r]:.1f} %" for r in wet if area[r] > 0)
    demo.log(f"  wetted share of all vegetation: {shares}")
