"""Demo: what each managed regime changes against the natural river at the lowest discharge of the ladder.

Each managed regime (weir: the normal pool; weir_raised: +0.5 m; weir_lowered: -0.5 m) is compared with the
natural regime (no weir) at 3000 ML/d, on the invented Figment River rasters (the same 5 m grid, so cell by
cell). A fourth comparison puts the weir regime's mesh against its rasters (different supports: both on one
common grid), which shows the size of the resampling and discretisation differences.

The demo centreline is digitised downstream to upstream on purpose; the comparisons use a copy digitised
upstream to downstream (chainage from the upstream end), so the 'lower' zone is the one next to the weir.
"""

from __future__ import annotations

import csv

TITLE = "What each managed regime changes against the natural river at 3000 ML/d (compareregimes)"
Q = "q03000"
REGIMES = ("weir", "weir_raised", "weir_lowered")


def upstream_centreline(demo) -> str:
    """A copy of the demo centreline digitised upstream -> downstream (the generator's README says the
    original runs downstream -> upstream)."""
    from osgeo import ogr

    ogr.UseExceptions()
    src = ogr.Open(str(demo.sample / "centreline.gpkg"))
    lyr = src.GetLayer(0)
    feat = lyr.GetNextFeature()
    geom = feat.GetGeometryRef().Clone()
    pts = geom.GetPoints()
    out_path = demo.path("compareregimes", "centreline_upstream_first.gpkg")
    drv = ogr.GetDriverByName("GPKG")
    ds = drv.CreateDataSource(out_path)
    out = ds.CreateLayer("centreline", lyr.GetSpatialRef(), ogr.wkbLineString)
    line = ogr.Geometry(ogr.wkbLineString)
    for p in reversed(pts):
        line.AddPoint_2D(p[0], p[1])
    f = ogr.Feature(out.GetLayerDefn())
    f.SetGeometry(line)
    out.CreateFeature(f)
    del f, out, ds, feat, lyr, src
    return out_path + "|layername=centreline"


def _outputs(demo, name):
    return {
        "SPEED_CHANGE": demo.path("compareregimes", name, "speed_change.tif"),
        "DEPTH_CHANGE": demo.path("compareregimes", name, "depth_change.tif"),
        "WET_DRY_CHANGE": demo.path("compareregimes", name, "wet_dry_change.tif"),
        "TRANSITIONS": demo.path("compareregimes", name, "transitions.gpkg"),
        "SEGMENT_CHANGE": demo.path("compareregimes", name, "segment_change.gpkg"),
        "ZONE_CHANGE": demo.path("compareregimes", name, "zone_change.gpkg"),
        "TRANSITION_TABLE": demo.path("compareregimes", name, "transition_table.gpkg"),
        "REPORT": demo.path("compareregimes", name, "report.html"),
    }


def _zone_rows(path):
    from osgeo import ogr

    ds = ogr.Open(path)
    lyr = ds.GetLayer(0)
    rows = [{lyr.GetLayerDefn().GetFieldDefn(i).GetName(): f.GetField(i) for i in range(f.GetFieldCount())}
            for f in lyr]
    del lyr, ds
    return rows


def run(demo):
    rasters = demo.sample / "rasters"
    needed = [rasters / r / f"{Q}_{k}.tif" for r in REGIMES + ("natural",) for k in ("depth", "speed")]
    missing = [p for p in needed if not p.exists()]
    if missing:
        demo.log(f"  skipped: {len(missing)} rasters missing, e.g. {missing[0]} (run `make sample`)")
        return []
    cl = upstream_centreline(demo)
    items = []
    summary = []
    for regime in REGIMES:
        name = f"{regime}_vs_natural"
        out = _outputs(demo, name)
        res = demo.run("compareregimes", {
            "BASE_DEPTH": str(rasters / "natural" / f"{Q}_depth.tif"),
            "BASE_SPEED": str(rasters / "natural" / f"{Q}_speed.tif"),
            "ALT_DEPTH": str(rasters / regime / f"{Q}_depth.tif"),
            "ALT_SPEED": str(rasters / regime / f"{Q}_speed.tif"),
            "BASE_NAME": "natural", "ALT_NAME": regime,
            "CENTRELINE": cl, "SEGMENT_LENGTH": 1000.0, "ZONE_BREAKS": "",
            **out})
        zones = {r["zone"]: r for r in _zone_rows(res["ZONE_CHANGE"])}
        low = zones.get("lower")
        if low:
            demo.log(f"  {regime} vs natural, lower zone: fast water {low['chg_area_fast_m2'] / 1e4:+.1f} ha "
                     f"({low['base_pct_fast']:.0f} % -> {low['alt_pct_fast']:.0f} % of the wet area), very slow "
                     f"{low['chg_area_very_slow_m2'] / 1e4:+.1f} ha, median speed {low['base_v_p50_ms']:.2f} -> "
                     f"{low['alt_v_p50_ms']:.2f} m/s, wet area {low['chg_wet_area_m2'] / 1e4:+.1f} ha")
        demo.log(f"  {regime} vs natural, whole reach: wet in both {res['WET_BOTH_M2'] / 1e4:.1f} ha, wet only "
                 f"under natural {res['WET_BASE_ONLY_M2'] / 1e4:.1f} ha, newly wet {res['WET_ALT_ONLY_M2'] / 1e4:.1f} "
                 f"ha, class or wet state changed on {res['CHANGED_AREA_M2'] / 1e4:.1f} ha")
        for z, r in zones.items():
            summary.append({"alternative": regime, "zone": z, **{k: r[k] for k in (
                "base_wet_area_m2", "alt_wet_area_m2", "chg_area_very_slow_m2", "chg_area_slow_m2",
                "chg_area_moderate_m2", "chg_area_fast_m2", "chg_pct_fast", "chg_v_p50_ms", "pct_changed")}})
        items += [(f"{regime} vs natural: report", res["REPORT"]),
                  (f"{regime} vs natural: speed change (SPEED_CHANGE)", res["SPEED_CHANGE"]),
                  (f"{regime} vs natural: class transitions (TRANSITIONS)", res["TRANSITIONS"]),
                  (f"{regime} vs natural: change per segment (SEGMENT_CHANGE)", res["SEGMENT_CHANGE"])]
    path = demo.path("compareregimes", "zones_vs_natural.csv")
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=list(summary[0]))
        w.writeheader()
        w.writerows(summary)
    items.append(("Every managed regime vs natural, per zone (CSV)", path))

    mesh = demo.sample / "mesh" / "weir" / f"{Q}.nc"
    if mesh.exists():
        from qgis.core import QgsMeshLayer

        layer = QgsMeshLayer(str(mesh), "weir mesh", "mdal")
        out = _outputs(demo, "weir_mesh_vs_raster")
        res = demo.run("compareregimes", {
            "BASE_DEPTH": str(rasters / "weir" / f"{Q}_depth.tif"),
            "BASE_SPEED": str(rasters / "weir" / f"{Q}_speed.tif"),
            "ALT_MESH": layer, "BASE_NAME": "weir rasters", "ALT_NAME": "weir mesh",
            "CENTRELINE": cl, "SEGMENT_LENGTH": 1000.0, "ZONE_BREAKS": "", **out})
        union = res["WET_BOTH_M2"] + res["WET_BASE_ONLY_M2"] + res["WET_ALT_ONLY_M2"]
        demo.log(f"  weir mesh vs weir rasters ({res['METHOD']}): class or wet state differs on "
                 f"{100 * res['CHANGED_AREA_M2'] / union:.1f} % of the union of the wet areas (support differences)")
        items.append(("weir mesh vs weir rasters: report (resampling onto a common grid)", res["REPORT"]))
    return items
