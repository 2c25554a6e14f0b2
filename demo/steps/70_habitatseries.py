"""Demo: habitat through time on the invented daily flow year, with two ways to deliver 40 GL.

Needs the invented flow year (sample_gis/generated/daily_flows.csv). The weir regime uses flowhabitat's
CURVES table written by an earlier demo step (found in the demo output folder); without it, its curves are
computed from the scenario table instead. The lowered weir pool (a management action) is then run straight
from the scenario table (SCENARIOS): only its 11 runs are read, and its curves are kept (CURVES_OUT).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

TITLE = "Habitat through time: a flow year and two ways to deliver 40 GL (habitatseries)"
ZONES = "0 upper, 12000 middle, 25000 lower"

VOLUME_GL = 40.0
HOLD_MLD = 9000.0  # the level the recession option holds up (ML/d), falling 1 % a day
TARGETS = "lower: moderate+fast >= 50%\nupper: fast >= 85%"
# The invented reach's weir pool is rarely more than a fifth very slow, so the default share (50 %)
# would flag no day; a 10 % share is used here to show the bloom-risk analysis at work.
BLOOM_SHARE = 10.0


def _find_curves(out: Path):
    """flowhabitat's CURVES output from an earlier step: a CSV or GeoPackage named like *curves*,
    or a layer named like *curves* inside a GeoPackage of the output folder."""
    files = sorted(p for p in out.rglob("*") if p.suffix.lower() in (".gpkg", ".csv")
                   and "habitatseries" not in p.parts and p.is_file())
    for p in files:
        if "curves" in p.stem.lower():
            return str(p)
    from osgeo import ogr

    for p in files:
        if p.suffix.lower() != ".gpkg":
            continue
        ds = ogr.Open(str(p))
        names = [ds.GetLayer(i).GetName() for i in range(ds.GetLayerCount())] if ds is not None else []
        ds = None
        for name in names:
            if "curves" in name.lower():
                return f"{p}|layername={name}"
    return None


def _options(flows_csv: Path) -> str:
    """Two delivery options placed on the invented year: a pulse into the lowest 30 days of flow
    starting in summer (December to February: the season of slow-water blooms), and, after the
    highest fresh following the first quarter of the record, the recession held up from the day it
    falls below HOLD_MLD, falling at most 1 % a day."""
    root = Path(__file__).resolve().parents[2]
    if str(root) not in sys.path:
        sys.path.insert(0, str(root))
    from plugin.core.series import iso, read_flow_series

    s = read_flow_series(flows_csv.read_text(encoding="utf-8-sig"))
    n, q = s.n_days, s.q_mld
    mean30 = np.convolve(q, np.ones(30) / 30.0, mode="valid")  # window starting on each day
    months = s.dates[: len(mean30)].astype("datetime64[M]").astype(int) % 12 + 1
    summer = np.flatnonzero(np.isin(months, (12, 1, 2)))
    cand = summer if summer.size else np.arange(len(mean30))
    low = int(cand[np.argmin(mean30[cand])])
    # local peaks (highest within +-3 days) after the first quarter, with 60 days left after them
    peaks = [i for i in range(n // 4, max(n // 4 + 1, n - 60)) if q[i] == q[max(0, i - 3): i + 4].max()]
    top = max(peaks, key=lambda i: q[i]) if peaks else int(np.argmax(q))
    below = np.flatnonzero(q[top:] < HOLD_MLD)
    hold = top + int(below[0]) if below.size else top
    return (f"summer pulse: pulse start={iso(s.dates[low])} duration=5 ramp_up=2 ramp_down=5\n"
            f"held recession: recession start={iso(s.dates[hold])} level={HOLD_MLD:g} fall=1")


def _scenario_parameters(demo) -> dict:
    """SCENARIOS and the reach, as in the flowhabitat step: buildreach's AXIS when an earlier step wrote
    one, else the demo centreline read as digitised downstream -> upstream."""
    folder = demo.out / "buildreach"
    built = sorted(folder.glob("*axis*.gpkg")) if folder.is_dir() else []
    axis = {"CENTRELINE": str(built[0])} if built else \
        {"CENTRELINE": str(demo.sample / "centreline.gpkg"), "CENTRELINE_DIRECTION": 1}
    return {"SCENARIOS": str(demo.scenarios), **axis, "SEGMENT_LENGTH": 1000.0, "ZONE_BREAKS": ZONES}


def _outputs(demo, *folder) -> dict:
    return {name: demo.path("habitatseries", *folder, file) for name, file in
            (("DAILY", "daily.gpkg"), ("SPELLS", "spells.gpkg"), ("OPTIONS", "options.gpkg"),
             ("REPORT", "report.html"))}


def run(demo):
    flows = demo.sample / "daily_flows.csv"
    if not flows.exists():
        demo.log(f"  skipped: the invented flow year {flows} is not there (run `make sample`)")
        return []
    common = {
        "FLOWS": str(flows),
        "TARGET_STATEMENTS": TARGETS,
        "BLOOM_CLASSES": "very slow",
        "BLOOM_SHARE": BLOOM_SHARE,
        "BLOOM_MIN_DAYS": 5,
        "ENV_VOLUME": VOLUME_GL,
        "VOLUME_UNIT": 1,  # GL
        "DELIVERY": _options(flows),
    }
    curves = _find_curves(demo.out)
    if curves is not None:
        demo.log(f"  weir: curves from {curves}")
        source = {"CURVES": str(curves)}
    elif demo.scenarios.exists():
        demo.log("  weir: no flowhabitat CURVES table in the demo output; curves computed from the scenario table")
        source = _scenario_parameters(demo)
    else:
        demo.log("  skipped: neither a flowhabitat CURVES table nor the scenario table (run `make sample`)")
        return []
    res = demo.run("habitatseries", {**source, "REGIME": "weir", **common, **_outputs(demo)})
    items = [("Habitat through time — report", res["REPORT"]),
             ("Options compared (OPTIONS)", res["OPTIONS"]),
             ("Spells (SPELLS)", res["SPELLS"]),
             ("Daily habitat (DAILY)", res["DAILY"])]
    if not demo.scenarios.exists():
        return items
    # The lowered weir pool, straight from the scenario table: only its runs are read.
    demo.log("  weir_lowered: curves computed from the scenario table (SCENARIOS), kept in CURVES_OUT")
    low = demo.run("habitatseries", {**_scenario_parameters(demo), "REGIME": "weir_lowered", **common,
                                     **_outputs(demo, "weir_lowered"),
                                     "CURVES_OUT": demo.path("habitatseries", "weir_lowered", "curves.csv")})
    return items + [("Lowered weir pool, curves from the scenario table — report", low["REPORT"]),
                    ("Lowered weir pool: options compared (OPTIONS)", low["OPTIONS"]),
                    ("Lowered weir pool: its curves (CURVES_OUT)", low["CURVES_OUT"])]
