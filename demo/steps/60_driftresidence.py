"""Demo: how long drifting eggs, larvae or algal cells spend in slow water, weir pool against natural river.

200 particles are released across the wet width at the upstream end of the invented Figment River and
drift to the downstream end in the weir and natural regimes at the lowest discharge of the ladder
(3000 ML/d), from the scenario table's rasters. A second run drifts the weir regime's mesh at the same
discharge. The log prints the median time in each class per regime.

The reach is the buildreach AXIS of step 10 with its SEGMENTS and ZONES when that step has run;
otherwise the demo centreline itself, which is digitised downstream to upstream on purpose
(CENTRELINE_DIRECTION = reversed), with the same zone breaks.
"""

from __future__ import annotations

TITLE = "Drift and residence time, weir pool against natural river at 3000 ML/d (driftresidence)"
CLASSES = ("very_slow", "slow", "moderate", "fast")


def reach_parameters(demo) -> dict:
    """buildreach's AXIS, SEGMENTS and ZONES from step 10, or the raw centreline (reversed)."""
    folder = demo.out / "buildreach"
    axis, segments, zones = (folder / f"{k}.gpkg" for k in ("axis", "segments", "zones"))
    if axis.exists() and segments.exists() and zones.exists():
        demo.log("  reach: buildreach AXIS, SEGMENTS and ZONES of step 10")
        return {"CENTRELINE": str(axis), "SEGMENTS": str(segments), "ZONES": str(zones)}
    demo.log("  reach: the demo centreline, reversed (digitised downstream -> upstream)")
    return {"CENTRELINE": str(demo.sample / "centreline.gpkg") + "|layername=centreline",
            "CENTRELINE_DIRECTION": 1, "SEGMENT_LENGTH": 1000.0, "ZONE_BREAKS": "0 upper, 12000 middle, 25000 lower"}


def _rows(path):
    from osgeo import ogr

    ds = ogr.Open(path)
    lyr = ds.GetLayer(0)
    defn = lyr.GetLayerDefn()
    names = [defn.GetFieldDefn(i).GetName() for i in range(defn.GetFieldCount())]
    rows = [{n: f.GetField(n) for n in names} for f in lyr]
    del lyr, ds
    return rows


def _outputs(demo, name):
    return {k: demo.path("driftresidence", name, f) for k, f in (
        ("PATHS", "paths.gpkg"), ("RESIDENCE", "residence.gpkg"), ("RESIDENCE_SUMMARY", "residence_summary.gpkg"),
        ("ESTIMATE", "estimate.gpkg"), ("REPORT", "report.html"))}


def run(demo):
    if not demo.scenarios.exists():
        demo.log("  skipped: the scenario table is missing (run `make sample`)")
        return []
    reach = reach_parameters(demo)
    items = []
    out = _outputs(demo, "weir_natural_3000")
    demo.run("driftresidence", {
        "SCENARIOS": str(demo.scenarios), "SCENARIO_REGIMES": "weir, natural", "SCENARIO_DISCHARGES": "3000",
        "DISCHARGE_UNIT": 0, **reach, "N_PARTICLES": 200, "MAX_TIME_DAYS": 30.0, **out})
    rows = [r for r in _rows(out["RESIDENCE_SUMMARY"]) if r["scope"] == "reach"]
    demo.log("  median time in each class, 200 particles, release to the downstream end (hours):")
    demo.log("    " + f"{'regime':10s}" + "".join(f"{c:>11s}" for c in CLASSES) + f"{'total':>11s}"
             + f"{'1D est.':>10s}")
    for r in rows:
        demo.log("    " + f"{r['regime']:10s}" + "".join(f"{r[f't_{c}_p50_h']:11.1f}" for c in CLASSES)
                 + f"{r['t_total_p50_h']:11.1f}{r['t_estimate_h']:10.1f}")
    by = {r["regime"]: r for r in rows}
    if "weir" in by and "natural" in by:
        slow = {k: v["t_very_slow_p50_h"] + v["t_slow_p50_h"] for k, v in by.items()}
        if slow["natural"] > 0:
            demo.log(f"  slow and very slow water: weir {slow['weir']:.1f} h against natural {slow['natural']:.1f} h "
                     f"({slow['weir'] / slow['natural']:.1f} times as long)")
    items += [("Weir and natural, 3000 ML/d: report", out["REPORT"]),
              ("Particle paths (LineStringM, M = seconds since release)", out["PATHS"]),
              ("Residence time per particle", out["RESIDENCE"]),
              ("Residence time per run and zone", out["RESIDENCE_SUMMARY"]),
              ("1D travel-time estimate per segment", out["ESTIMATE"])]
    mesh = demo.sample / "mesh" / "weir" / "q03000.nc"
    if mesh.exists():
        out = _outputs(demo, "weir_mesh_3000")
        demo.run("driftresidence", {
            "MESH": str(mesh), "REGIME": "weir (mesh)", "DISCHARGE": 3000.0, **reach, "N_PARTICLES": 200, **out})
        r = [r for r in _rows(out["RESIDENCE_SUMMARY"]) if r["scope"] == "reach"][0]
        demo.log(f"  weir mesh: median travel {r['t_total_p50_h']:.1f} h, slow {r['t_slow_p50_h']:.1f} h, "
                 f"{r['n_downstream']} of {r['n_particles']} particles reached the end")
        items += [("Weir mesh, 3000 ML/d: report", out["REPORT"]), ("Weir mesh: particle paths", out["PATHS"])]
    return items
