"""Demo: flow-habitat curves of the invented Figment River for all four regimes x 11 discharges, and the
discharge each regime needs for three targets.

Needs sample_gis/generated/scenarios.csv (make sample). The reach axis is buildreach's AXIS when an
earlier demo step wrote one (demo_output/buildreach/*axis*.gpkg); otherwise the demo centreline, which
is digitised downstream -> upstream on purpose, read with CENTRELINE_DIRECTION = reversed. CURVES goes
to demo_output/flowhabitat/curves.csv, where the habitatseries demo step finds it.
"""

from __future__ import annotations

import csv

TITLE = "Flow-habitat curves and target discharges, all regimes (flowhabitat)"
TARGETS = "lower: moderate+fast >= 50%\nupper: fast >= 85%\nreach: very slow <= 5%"
ZONES = "0 upper, 12000 middle, 25000 lower"


def demo_axis(demo) -> dict:
    """The reach parameters: buildreach's AXIS from an earlier step, else the demo centreline read as
    digitised downstream -> upstream (CENTRELINE_DIRECTION = reversed)."""
    folder = demo.out / "buildreach"
    built = sorted(folder.glob("*axis*.gpkg")) if folder.is_dir() else []
    if built:
        return {"CENTRELINE": str(built[0])}
    demo.log("  axis: the demo centreline, read as digitised downstream -> upstream (no buildreach AXIS found)")
    return {"CENTRELINE": str(demo.sample / "centreline.gpkg"), "CENTRELINE_DIRECTION": 1}


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
        **demo_axis(demo),
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
