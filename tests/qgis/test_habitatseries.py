"""habitatseries through Processing: outputs opened and checked against independent values."""

import csv
import math
from pathlib import Path

import numpy as np
import pytest
from qgis.core import QgsProcessingException, QgsVectorLayer

from tests.core.test_series_analysis import LADDER, analytic_pct, curves_table

START = np.datetime64("2023-07-01")


def _write_curves(path, **kw):
    cols = curves_table(**kw)
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(list(cols))
        for row in zip(*cols.values()):
            w.writerow(row)
    return str(path)


def _write_flows(path, q, extra=None, unit="ML/d", header=None):
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        names = ["date", "discharge", "unit"] + list(extra or {})
        w.writerow(header or names)
        for i, v in enumerate(q):
            row = [str(START + i), repr(float(v)), unit] + [repr(float(c[i])) for c in (extra or {}).values()]
            w.writerow(row)
    return str(path)


def _layer(path):
    lyr = QgsVectorLayer(str(path), "t", "ogr")
    assert lyr.isValid(), path
    return lyr


def _rows(path):
    lyr = _layer(path)
    names = [f.name() for f in lyr.fields()]
    return names, [dict(zip(names, f.attributes())) for f in lyr.getFeatures()]


# 80 days: low flow (bloom risk in the analytic curves: very slow > 50 % below ~3996 ML/d), a
# natural rise to 12000 ML/d and back
Q = np.concatenate([np.full(30, 2500.0), np.linspace(2500.0, 12000.0, 10), np.linspace(12000.0, 2500.0, 20),
                    np.full(20, 2500.0)])


def _params(tmp_path, **over):
    p = {
        "CURVES": _write_curves(tmp_path / "curves.csv"),
        "REGIME": "weir",
        "FLOWS": _write_flows(tmp_path / "flows.csv", Q, {"more_water": Q + 1000.0}),
        "TARGET_STATEMENTS": "lower: fast >= 40%; reach: very slow + slow < 50%",
        "BLOOM_CLASSES": "very slow",
        "BLOOM_SHARE": 50.0,
        "BLOOM_MIN_DAYS": 5,
        "ENV_VOLUME": 0.08,
        "VOLUME_UNIT": 1,  # GL
        "DELIVERY": "early pulse: pulse start=2023-07-10 duration=4 ramp_up=2 ramp_down=3\n"
                    "held recession: recession start=2023-08-10 fall=1",
        "DAILY": str(tmp_path / "daily.gpkg"),
        "SPELLS": str(tmp_path / "spells.gpkg"),
        "OPTIONS": str(tmp_path / "options.gpkg"),
        "REPORT": str(tmp_path / "report.html"),
    }
    p.update(over)
    return p


def _share(cls, q):
    if not (LADDER[0] <= q <= LADDER[-1]):
        return None
    return float(analytic_pct(cls, q))


def test_habitatseries_outputs(run_alg, tmp_path):
    res = run_alg("habitatseries", _params(tmp_path))
    # ---- OPTIONS
    names, rows = _rows(res["OPTIONS"])
    assert [r["option"] for r in rows] == ["base", "early pulse", "held recession", "more_water"]
    by = {r["option"]: r for r in rows}
    assert by["early pulse"]["volume_ml"] == pytest.approx(80.0, abs=1e-6)  # 0.08 GL = 80 ML
    assert round(by["held recession"]["volume_ml"]) == 80
    assert by["more_water"]["volume_ml"] == pytest.approx(80 * 1000.0)  # +1000 ML/d on 80 days
    assert by["early pulse"]["delivery_start"] == "2023-07-10"
    assert by["early pulse"]["delivery_end"] == "2023-07-18"  # 2 + 4 + 3 days
    # pulse peak by hand: weights 1/3, 2/3, 1 x4, 3/4, 1/2, 1/4 -> sum 6.5
    assert by["early pulse"]["added_peak_mld"] == pytest.approx(80.0 / 6.5)
    # t1 = lower fast >= 40 % <=> q >= LO * sqrt(HI/LO) = 6324.6 ML/d (analytic curve)
    q_need = 1000.0 * math.sqrt(40.0)
    assert by["base"]["t1_met_days"] == int(np.sum(Q >= q_need))
    assert by["more_water"]["t1_met_days"] == int(np.sum(Q + 1000.0 >= q_need))
    assert by["more_water"]["t1_gain_days"] == by["more_water"]["t1_met_days"] - by["base"]["t1_met_days"]
    # bloom: very slow > 50 % <=> q < LO * (HI/LO)**0.375; 30 + ~k + ~m days at the ends
    q_bloom = 1000.0 * 40.0 ** 0.375
    low = Q < q_bloom
    runs, cur = [], 0
    for m in list(low) + [False]:
        if m:
            cur += 1
        elif cur:
            runs.append(cur)
            cur = 0
    assert by["base"]["bloom_lower_spells"] == sum(1 for r in runs if r >= 5)
    assert by["base"]["bloom_lower_days"] == sum(r for r in runs if r >= 5)
    assert by["base"]["bloom_lower_longest_days"] == max(runs)
    assert by["base"]["outside_ladder_days"] == 0
    # ---- DAILY
    names, daily = _rows(res["DAILY"])
    for f in ("option", "date", "q_mld", "q_m3s", "added_mld", "in_ladder", "pct_lower_fast", "pct_reach_very_slow",
              "t1_pct", "t1_met", "t2_met", "bloom_lower_met"):
        assert f in names
    assert len(daily) == 4 * len(Q)
    base = [r for r in daily if r["option"] == "base"]
    assert base[0]["date"] == "2023-07-01" and base[-1]["date"] == str(START + len(Q) - 1)
    for r, q in zip(base, Q):
        assert r["q_mld"] == pytest.approx(q)
        assert r["q_m3s"] == pytest.approx(q * 1000.0 / 86400.0)
        assert r["pct_lower_fast"] == pytest.approx(_share("fast", q), abs=1e-9)
        assert bool(r["t1_met"]) == (q >= q_need)
    # ---- SPELLS
    names, spells = _rows(res["SPELLS"])
    assert {"start", "end", "length_days", "censored_start", "censored_end", "qualifies"} <= set(names)
    b = [s for s in spells if s["option"] == "base" and s["criterion"] == "bloom_lower"]
    assert b[0]["start"] == "2023-07-01" and bool(b[0]["censored_start"])
    assert b[-1]["end"] == str(START + len(Q) - 1) and bool(b[-1]["censored_end"])
    for s in spells:
        days = (np.datetime64(s["end"]) - np.datetime64(s["start"])).astype(int) + 1
        assert s["length_days"] == days
    # ---- REPORT
    html = Path(res["REPORT"]).read_text(encoding="utf-8")
    assert "Habitat through time" in html and "licensed professional practice" in html
    assert "early pulse" in html and "<svg" in html


def test_habitatseries_outside_ladder_days_flagged(run_alg, tmp_path):
    q = np.concatenate([np.full(5, 500.0), np.full(10, 3000.0), np.full(3, 50000.0)])
    p = _params(tmp_path, FLOWS=_write_flows(tmp_path / "f.csv", q), DELIVERY="", ENV_VOLUME=0)
    res = run_alg("habitatseries", p)
    _, rows = _rows(res["OPTIONS"])
    assert rows[0]["outside_ladder_days"] == 8
    _, daily = _rows(res["DAILY"])
    assert [bool(r["in_ladder"]) for r in daily] == [False] * 5 + [True] * 10 + [False] * 3
    assert all(r["pct_lower_fast"] is None or (hasattr(r["pct_lower_fast"], "isNull") and r["pct_lower_fast"].isNull())
               for r in daily[:5])


@pytest.mark.parametrize("flows, needle", [
    ("date,discharge,unit\n2023-07-01,3000,ML/d\n2023-07-03,3000,ML/d\n", "FLOWS: the flow series has gaps"),
    ("date,discharge,unit\n2023-07-01,3000,ML/d\n2023-07-01,3000,ML/d\n", "FLOWS: the flow series has duplicate"),
    ("date,discharge,unit\n2023-07-01,-3,ML/d\n", "negative"),
    ("date,discharge,unit\n2023-07-01,3,furlongs\n", "unknown discharge unit"),
    ("date,discharge,unit\n2023-07-01,90000,ML/d\n2023-07-02,95000,ML/d\n", "FLOWS: the flow series (90000 to 95000"),
])
def test_habitatseries_bad_flows(run_alg, tmp_path, flows, needle):
    f = tmp_path / "bad.csv"
    f.write_text(flows)
    with pytest.raises(QgsProcessingException) as e:
        run_alg("habitatseries", _params(tmp_path, FLOWS=str(f), DELIVERY="", ENV_VOLUME=0))
    assert needle in str(e.value)
    assert not (tmp_path / "report.html").exists()


def test_habitatseries_bad_parameters(run_alg, tmp_path):
    with pytest.raises(QgsProcessingException, match="REGIME: no regime 'lake'"):
        run_alg("habitatseries", _params(tmp_path, REGIME="lake"))
    with pytest.raises(QgsProcessingException, match="ENV_VOLUME"):
        run_alg("habitatseries", _params(tmp_path, ENV_VOLUME=0))
    with pytest.raises(QgsProcessingException, match="DELIVERY: .*after the flow series ends"):
        run_alg("habitatseries", _params(tmp_path, DELIVERY="late: pulse start=2023-09-15 duration=5"))
    with pytest.raises(QgsProcessingException, match="BLOOM_CLASSES: no class 'pool'"):
        run_alg("habitatseries", _params(tmp_path, BLOOM_CLASSES="pool"))
    with pytest.raises(QgsProcessingException, match="TARGET_STATEMENTS"):
        run_alg("habitatseries", _params(tmp_path, TARGET_STATEMENTS="middle: fast >= 10%"))
    with pytest.raises(QgsProcessingException, match="REPORT_UNITS: no unit 'middle'"):
        run_alg("habitatseries", _params(tmp_path, REPORT_UNITS="middle"))
