"""Demo: the stage-discharge rating from the invented pre-regulation gaugings, and the downstream
level of the natural-regime runs for every discharge of the ladder.

Needs sample_gis/generated/rating_records.csv (date, discharge_mld, stage_m) and ladder.csv
(q_mld, q_m3s). The invented gaugings scatter in stage, and the levels are what the natural-regime
runs need, so the rating is fitted by least squares on stage (FIT_SPACE 2); the default (ln Q) is
the usual choice for gauging records. As a plausibility check only (invented data is never a
reference), the levels are compared with the rating the demo generator used (reach.json).
"""

from __future__ import annotations

import csv
import json

TITLE = "Stage-discharge rating and levels for the ladder (fitrating)"


def run(demo):
    records = demo.sample / "rating_records.csv"
    ladder = demo.sample / "ladder.csv"
    missing = [p for p in (records, ladder) if not p.exists()]
    if missing:
        demo.log(f"  skipped: {', '.join(str(p) for p in missing)} not there (run `make sample`)")
        return []
    out = {
        "RATING": demo.path("fitrating", "rating.csv"),
        "LEVELS": demo.path("fitrating", "levels.csv"),
        "REPORT": demo.path("fitrating", "report.html"),
    }
    res = demo.run("fitrating", {
        "RECORDS": str(records),
        "STAGE_FIELD": "stage_m",
        "DISCHARGE_FIELD": "discharge_mld",
        "DISCHARGE_UNIT": 0,  # ML/d
        "FIT_SPACE": 2,  # least squares on stage: the levels are the purpose here
        "LADDER_TABLE": str(ladder),
        "LADDER_FIELD": "q_mld",
        **out,
    })
    design = demo.sample / "reach.json"
    if design.exists():
        r = json.loads(design.read_text(encoding="utf-8")).get("rating", {})
        if {"C", "h0", "b"} <= set(r):
            worst = 0.0
            with open(res["LEVELS"], encoding="utf-8") as fh:
                for row in csv.DictReader(fh):
                    h_design = r["h0"] + (float(row["q_m3s"]) / r["C"]) ** (1.0 / r["b"])
                    worst = max(worst, abs(float(row["stage_m"]) - h_design))
            demo.log(f"  plausibility: levels within {worst:.3f} m of the generator's invented rating "
                     f"Q = {r['C']:g} (h - {r['h0']:g})^{r['b']:g} (m3/s)")
    return [("Rating report", res["REPORT"]), ("Rating parameters and statistics (RATING)", res["RATING"]),
            ("Levels for the ladder (LEVELS)", res["LEVELS"])]
