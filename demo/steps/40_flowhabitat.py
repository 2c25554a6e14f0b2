"""Demo: flow-habitat curves of the invented Figment River for all four regimes x 11 discharges, and the
discharge each regime needs for three targets.

Needs sample_gis/generated/scenarios.csv (make sample). The reach axis is buildreach's AXIS when an
earlier demo step wrote one (demo_output/buildreach/*axis*.gpkg); otherwise the demo centreline, which
is digitised downstream -> upstream on purpose, is copied upstream -> downstream into
demo_output/flowhabitat/axis.gpkg. CURVES goes to demo_output/flowhabitat/curves.csv, where the
habitatseries demo step finds it.
"""

from __future__ import annotations

import csv
from pathlib import Path

TITLE = "Flow-habitat curves and target discharges, all regimes (flowhabitat)"
TARGETS = "lower: moderate+fast >= 50%\nupper: fast >= 85%\nreach: very slow <= 5%"
ZONES = "0 upper, 12000 middle, 25000 lower"


def demo_axis(demo) -> str:
    """buildreach's AXIS from an earlier step, else an upstream -> downstream copy of the centreline."""
    built = sorted(p for p in (demo.out / "buildreach").glob("*axis*.gpkg")) if (demo.out / "buildreach").is_dir() \
        else []
    if built:
        return str(built[0])
    from osgeo import ogr

    ogr.UseExceptions()
    out = Path(demo.path("flowhabitat", "axis.gpkg"))
    if out.exists():
        out.unlink()
    src = ogr.Open(str(demo.sample / "centreline.gpkg"))
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
    demo.log("  axis: the demo centreline reversed to run upstream -> downstream (no buildreach AXIS found)")
    return str(out) + "|layername=axis"


def run(demo):
    if not demo.scenarios.exists():
        demo.log(f"  skipped: {demo.scenarios} not there (run `make sample`)")
        return []
    out = {
        "CURVES": demo.path("flowhabitat", "curves.csv"),
        "TARGETS": demo.path("flowhabitat", "targets.csv"),
        "REPORT": demo.path("flowhabitat", "report.html"),
    }
    res = demo.run("flowhabitat", {
        "SCENARIOS": str(demo.scenarios),
        "CENTRELINE": demo_axis(demo),
        "SEGMENT_LENGTH": 1000.0,
        "ZONE_BREAKS": ZONES,
        "TARGET_STATEMENTS": TARGETS,
        **out,
    })
    with open(res["TARGETS"], encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    demo.log("  discharge needed (ML/d) per target and regime:")
    for r in rows:
        q = f"{float(r['q_mld']):,.0f}" if r["q_mld"] else "-"
        demo.log(f"    {r['target']:<30} {r['regime']:<13} {q:>8}  {r['status']}")
    return [("Flow-habitat report", res["REPORT"]), ("Curves (CURVES, read by habitatseries)", res["CURVES"]),
            ("Target discharges (TARGETS)", res["TARGETS"])]
