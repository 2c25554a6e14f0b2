"""Demo: habitat maps and chainage statistics of single runs (maphabitat).

Every regime of the invented Figment River (weir, weir_raised, weir_lowered, natural) at the lowest and the
highest discharge of the ladder, from the rasters; then the weir regime's mesh at the low discharge beside
its rasters, to show how close two supports of the same run come (a plausibility check only: invented data
is never a reference).

The demo centreline is digitised downstream to upstream on purpose; the step says so with
CENTRELINE_DIRECTION = reversed, so chainage runs from the upstream end and the 'lower' zone is next to the
weir.
"""

from __future__ import annotations

import csv

TITLE = "Habitat maps and segment statistics of single runs (maphabitat)"
REGIMES = ("weir", "weir_raised", "weir_lowered", "natural")


def _rows(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _outputs(demo, name, mesh=False):
    out = {
        "PATCHES": demo.path("maphabitat", name, "patches.gpkg"),
        "SEGMENT_STATS": demo.path("maphabitat", name, "segment_stats.gpkg"),
        "ZONE_STATS": demo.path("maphabitat", name, "zone_stats.gpkg"),
        "REPORT": demo.path("maphabitat", name, "report.html"),
    }
    if mesh:
        out["MESH_CLASSES"] = demo.path("maphabitat", name, "face_classes.gpkg")
    else:
        out["CLASSES"] = demo.path("maphabitat", name, "classes.tif")
    return out


def _zone_summary(path) -> str:
    from osgeo import ogr

    ds = ogr.Open(path)
    lyr = ds.GetLayer(0)
    parts = []
    for f in lyr:
        fast = (f.GetField("pct_moderate") or 0.0) + (f.GetField("pct_fast") or 0.0)
        parts.append(f"{f.GetField('zone')}: median {f.GetField('v_p50_ms'):.2f} m/s, "
                     f"{f.GetField('pct_very_slow'):.0f}% very slow, {fast:.0f}% moderate or fast")
    del lyr, ds
    return "; ".join(parts)


def run(demo):
    table = demo.sample / "scenarios.csv"
    if not table.exists():
        demo.log(f"  skipped: {table} not there (run `make sample`)")
        return []
    rows = _rows(table)
    qs = sorted({float(r["discharge"]) for r in rows})
    low, high = qs[0], qs[-1]
    cl = str(demo.sample / "centreline.gpkg") + "|layername=centreline"
    items = []
    for regime in REGIMES:
        for q in (low, high):
            row = next((r for r in rows if r["regime"] == regime and float(r["discharge"]) == q), None)
            if row is None:
                demo.log(f"  no {regime} run at {q:g} ML/d in scenarios.csv")
                continue
            name = f"{regime}_q{int(q):05d}"
            out = _outputs(demo, name)
            res = demo.run("maphabitat", {
                "DEPTH": str(demo.sample / row["depth"]), "SPEED": str(demo.sample / row["speed"]),
                "CENTRELINE": cl, "CENTRELINE_DIRECTION": 1, "SEGMENT_LENGTH": 1000.0, "ZONE_BREAKS": "",
                "RUN_NAME": f"{regime}, {q:,.0f} ML/d", **out})
            demo.log(f"  {regime} {q:g} ML/d: wet area {res['WET_AREA_M2'] / 1e6:.2f} km2; "
                     f"{_zone_summary(res['ZONE_STATS'])}")
            items.append((f"{regime}, {q:g} ML/d: report", res["REPORT"]))
            items += [(f"{regime}, {q:g} ML/d: {label}", res[key]) for key, label in (
                ("CLASSES", "class raster (CLASSES)"), ("PATCHES", "habitat patches (PATCHES)"),
                ("SEGMENT_STATS", "segment statistics (SEGMENT_STATS)"), ("ZONE_STATS", "zone statistics"))]
    # the weir regime's mesh beside its rasters
    mesh_table = demo.sample / "scenarios_mesh.csv"
    if mesh_table.exists():
        mrows = _rows(mesh_table)
        mq = sorted(float(r["discharge"]) for r in mrows if r["regime"] == "weir")
        if mq:
            q = mq[0]
            mrow = next(r for r in mrows if r["regime"] == "weir" and float(r["discharge"]) == q)
            from qgis.core import QgsMeshLayer

            layer = QgsMeshLayer(str(demo.sample / mrow["mesh"]), "weir mesh", "mdal")
            name = f"weir_mesh_q{int(q):05d}"
            out = _outputs(demo, name, mesh=True)
            res = demo.run("maphabitat", {
                "MESH": layer, "MESH_DEPTH_GROUP": mrow.get("depth_group") or "",
                "MESH_VELOCITY_GROUP": mrow.get("velocity_group") or "", "CENTRELINE": cl,
                "CENTRELINE_DIRECTION": 1, "SEGMENT_LENGTH": 1000.0, "ZONE_BREAKS": "",
                "RUN_NAME": f"weir (mesh), {q:,.0f} ML/d", **out})
            demo.log(f"  weir mesh {q:g} ML/d: wet area {res['WET_AREA_M2'] / 1e6:.2f} km2; "
                     f"{_zone_summary(res['ZONE_STATS'])}")
            items.append((f"weir mesh, {q:g} ML/d: report", res["REPORT"]))
            items.append((f"weir mesh, {q:g} ML/d: classes per face (MESH_CLASSES)", res["MESH_CLASSES"]))
            items.append((f"weir mesh, {q:g} ML/d: habitat patches", res["PATCHES"]))
    return items
