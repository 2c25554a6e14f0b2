"""fitrating through Processing: outputs opened and checked against an independent computation
(scipy.optimize.curve_fit), ladder inputs, layers as records, and bad input."""

from __future__ import annotations

import numpy as np
import pytest
from qgis.core import QgsFeature, QgsField, QgsProcessingException, QgsVectorLayer
from qgis.PyQt.QtCore import QVariant
from scipy.optimize import curve_fit

LADDER = [3000, 4000, 5000, 6000, 8000, 10000, 13000, 17000, 22000, 30000, 40000]


def _records(tmp_path, n=50, seed=4, bad_row=None):
    rng = np.random.default_rng(seed)
    h = np.round(np.sort(rng.uniform(41.0, 46.8, n)), 3)
    q = np.round(850.0 * (h - 40.4) ** 1.9 * np.exp(rng.normal(0, 0.04, n)), 2)
    lines = ["date,discharge_mld,stage_m"]
    for i, (a, b) in enumerate(zip(h, q)):
        stage = "x" if bad_row == i + 1 else f"{a}"
        lines.append(f"2001-{i % 12 + 1:02d}-01,{b},{stage}")
    lines.append("2001-12-31,,")  # an empty record: skipped, counted
    p = tmp_path / "records.csv"
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return p, h, q


def _table(path, layer=None):
    lyr = QgsVectorLayer(str(path) if layer is None else f"{path}|layername={layer}", "t", "ogr")
    assert lyr.isValid(), path
    names = [f.name() for f in lyr.fields()]
    rows = [dict(zip(names, f.attributes())) for f in lyr.getFeatures()]
    return names, rows


def _is_null(v) -> bool:
    return v is None or v == "" or (hasattr(v, "isNull") and v.isNull())


def _log_model(h, lnc, b, h0):
    return lnc + b * np.log(h - h0)


def test_fitrating_outputs_against_curve_fit(run_alg, tmp_path):
    rec, h, q = _records(tmp_path)
    out = {"RATING": str(tmp_path / "rating.gpkg"), "LEVELS": str(tmp_path / "levels.gpkg"),
           "REPORT": str(tmp_path / "rating.html")}
    res = run_alg("fitrating", {"RECORDS": str(rec), "STAGE_FIELD": "stage_m", "DISCHARGE_FIELD": "discharge_mld",
                                "DISCHARGE_UNIT": 0, "LADDER": ", ".join(str(v) for v in LADDER),
                                "LADDER_UNIT": 0, **out})
    # independent: curve_fit on the same numbers (reference library)
    p, pcov = curve_fit(_log_model, h, np.log(q), p0=[np.log(800.0), 2.0, 40.0])
    se = np.sqrt(np.diag(pcov))
    names, rows = _table(res["RATING"])
    assert names[1:] == ["parameter", "value", "std_error", "ci95_low", "ci95_high", "unit", "description"]
    by = {r["parameter"]: r for r in rows}
    assert by["C_mld"]["value"] == pytest.approx(np.exp(p[0]), rel=1e-5)
    assert by["C_m3s"]["value"] == pytest.approx(np.exp(p[0]) * 1000 / 86400, rel=1e-5)
    assert by["b"]["value"] == pytest.approx(p[1], rel=1e-6)
    assert by["h0_m"]["value"] == pytest.approx(p[2], abs=1e-6)
    assert by["b"]["std_error"] == pytest.approx(se[1], rel=1e-3)
    assert by["h0_m"]["std_error"] == pytest.approx(se[2], rel=1e-3)
    assert by["n_records"]["value"] == len(h) and by["n_skipped"]["value"] == 1
    assert by["h0_m"]["unit"] == "m" and "estimated" in by["h0_m"]["description"]
    qf = np.exp(_log_model(h, *p))
    assert by["rmse_q"]["value"] == pytest.approx(np.sqrt(np.mean((q - qf) ** 2)), rel=1e-4)
    names, rows = _table(res["LEVELS"])
    assert names[1:] == ["q_mld", "q_m3s", "stage_m", "stage_se_m", "within_records"]
    lad = np.array(LADDER, dtype=float)
    assert [r["q_mld"] for r in rows] == LADDER
    np.testing.assert_allclose([r["q_m3s"] for r in rows], lad * 1000 / 86400, rtol=1e-15)
    np.testing.assert_allclose([r["stage_m"] for r in rows], p[2] + (lad / np.exp(p[0])) ** (1 / p[1]), atol=1e-5)
    assert [bool(r["within_records"]) for r in rows] == [bool(q.min() <= v <= q.max()) for v in lad]
    assert all(r["stage_se_m"] > 0 for r in rows)
    page = (tmp_path / "rating.html").read_text(encoding="utf-8")
    assert "licensed professional practice prevail" in page and "<svg" in page
    assert "Stage-discharge rating" in page and "h0_m" in page and "LEVELS" in page


def test_ladder_table_in_m3s_given_h0_linear_space_and_a_layer(run_alg, tmp_path):
    rec, h, q = _records(tmp_path, seed=8)
    layer = QgsVectorLayer("None?field=stage:double&field=flow:double", "records", "memory")
    feats = []
    for a, b in zip(h, q / 86.4):  # records in m3/s
        f = QgsFeature(layer.fields())
        f.setAttributes([float(a), float(b)])
        feats.append(f)
    layer.dataProvider().addFeatures(feats)
    lad = tmp_path / "ladder.csv"
    lad.write_text("q_mld,q_m3s\n" + "".join(f"{v},{v / 86.4!r}\n" for v in LADDER), encoding="utf-8")
    res = run_alg("fitrating", {"RECORDS": layer, "STAGE_FIELD": "stage", "DISCHARGE_FIELD": "flow",
                                "DISCHARGE_UNIT": 1, "H0": 40.3, "FIT_SPACE": 1, "LADDER_TABLE": str(lad),
                                "LADDER_FIELD": "q_m3s", "LADDER_UNIT": 0,
                                "RATING": str(tmp_path / "r.csv"), "LEVELS": str(tmp_path / "l.gpkg"),
                                "REPORT": str(tmp_path / "r.html")})
    p, _ = curve_fit(lambda hh, c, b: c * (hh - 40.3) ** b, h, q / 86.4, p0=[10.0, 2.0], maxfev=20000)
    _, rows = _table(res["RATING"])
    by = {r["parameter"]: r for r in rows}
    assert float(by["C_m3s"]["value"]) == pytest.approx(p[0], rel=1e-5)
    assert float(by["b"]["value"]) == pytest.approx(p[1], rel=1e-6)
    assert float(by["h0_m"]["value"]) == 40.3 and _is_null(by["h0_m"]["std_error"])
    assert "given" in by["h0_m"]["description"] and by["fit_space"]["description"] == "least squares on Q"
    _, rows = _table(res["LEVELS"])
    # the m3/s field of the ladder table is taken in m3/s (its name says so), kept as written
    assert [float(r["q_m3s"]) for r in rows] == [v / 86.4 for v in LADDER]
    np.testing.assert_allclose([float(r["q_mld"]) for r in rows], LADDER, rtol=1e-14)
    np.testing.assert_allclose([float(r["stage_m"]) for r in rows],
                               40.3 + (np.array(LADDER) / 86.4 / p[0]) ** (1 / p[1]), atol=1e-5)


@pytest.mark.parametrize("change, expect", [
    ({"bad_row": 3}, "STAGE_FIELD: row 3: stage 'x' is not a number"),
    ({"H0": 41.5}, "H0: "),
    ({"LADDER": ""}, "LADDER: give the discharge ladder"),
    ({"LADDER": "3000, 3,000"}, "LADDER: "),
    ({"STAGE_FIELD": "discharge_mld"}, "DISCHARGE_FIELD: the stage and discharge fields are the same"),
])
def test_bad_input_names_the_parameter_and_leaves_no_report(run_alg, tmp_path, change, expect):
    rec, _, _ = _records(tmp_path, bad_row=change.pop("bad_row", None))
    report = tmp_path / "bad.html"
    params = {"RECORDS": str(rec), "STAGE_FIELD": "stage_m", "DISCHARGE_FIELD": "discharge_mld",
              "LADDER": "3000, 4000", "RATING": "TEMPORARY_OUTPUT", "LEVELS": "TEMPORARY_OUTPUT",
              "REPORT": str(report)}
    params.update(change)
    with pytest.raises(QgsProcessingException) as exc:
        run_alg("fitrating", params)
    assert expect in str(exc.value)
    assert not report.exists()


def test_numeric_fields_of_a_layer_with_nulls(run_alg, tmp_path):
    layer = QgsVectorLayer("None?field=h:double&field=q:double", "records", "memory")
    h = np.linspace(41.0, 46.0, 12)
    q = 850.0 * (h - 40.4) ** 1.9
    feats = []
    for a, b in list(zip(h, q)) + [(None, 5.0)]:
        f = QgsFeature(layer.fields())
        f.setAttributes([None if a is None else float(a), float(b)])
        feats.append(f)
    layer.dataProvider().addFeatures(feats)
    assert QgsField("h", QVariant.Double).type() == QVariant.Double
    res = run_alg("fitrating", {"RECORDS": layer, "STAGE_FIELD": "h", "DISCHARGE_FIELD": "q", "LADDER": "5000",
                                "RATING": "TEMPORARY_OUTPUT", "LEVELS": "TEMPORARY_OUTPUT"})
    rating = res["RATING"]
    by = {f["parameter"]: f for f in rating.getFeatures()}
    assert by["b"]["value"] == pytest.approx(1.9, rel=1e-9)
    assert by["n_skipped"]["value"] == 1
    lev = next(res["LEVELS"].getFeatures())
    assert lev["stage_m"] == pytest.approx(40.4 + (5000 / 850.0) ** (1 / 1.9), abs=1e-8)
