"""Rating fit (core/rating.py): input validation, refusals, ladders, tables."""

from __future__ import annotations

import math

import numpy as np
import pytest

from plugin.core.errors import ChannelHabitatError
from plugin.core.rating import (
    fit_rating,
    ladder_from_values,
    levels,
    parse_discharge_list,
    rating_table,
    records_from_values,
    residuals,
)

H = [41.2, 41.9, 42.5, 43.3, 44.0, 45.1, 46.2]
Q = [850 * (h - 40.4) ** 1.9 for h in H]


def _err(fn, *a, **k):
    with pytest.raises(ChannelHabitatError) as exc:
        fn(*a, **k)
    return exc.value


def test_records_text_blank_and_numbers():
    rec = records_from_values(["41.2", 41.9, None, "", " 43.3 ", "NULL"], ["100", 200.0, 5, "300", "400", 7],
                              "mld")
    assert rec.stage.tolist() == [41.2, 41.9, 43.3] and rec.discharge.tolist() == [100, 200, 400]
    assert rec.rows.tolist() == [1, 2, 5] and rec.skipped_blank == 3 and rec.unit == "ML/d"


@pytest.mark.parametrize("stage, q, param, expect", [
    (["41.2", "abc"], ["1", "2"], "STAGE_FIELD", "row 2: stage 'abc' is not a number"),
    (["41.2", "42"], ["1", "2,000"], "DISCHARGE_FIELD", "'2,000' is not a number (write numbers without"),
    (["41.2", "42"], ["1", "-3"], "DISCHARGE_FIELD", "row 2: discharge -3 ML/d is negative"),
    (["41.2", "42"], ["0", "3"], "DISCHARGE_FIELD", "row 1: discharge is zero"),
    (["41.2", "inf"], ["1", "3"], "STAGE_FIELD", "not a finite number"),
])
def test_bad_values(stage, q, param, expect):
    e = _err(records_from_values, stage, q, "ML/d")
    assert expect in str(e) and e.parameter == param


def test_unknown_unit():
    assert _err(records_from_values, [1], [1], "cfs").parameter == "DISCHARGE_UNIT"


def test_records_at_or_below_given_h0_are_refused():
    rec = records_from_values(H, Q, "ML/d")
    e = _err(fit_rating, rec, h0=41.9)
    assert e.parameter == "H0"
    assert "2 record(s) have a stage at or below h0 = 41.9 m (rows 1, 2)" in str(e)


def test_too_few_records():
    e = _err(fit_rating, records_from_values(H[:3], Q[:3], "ML/d"))
    assert "only 3 usable record(s): fitting C, b and h0 needs at least 4" in str(e) and e.parameter == "RECORDS"
    fit = fit_rating(records_from_values(H[:3], Q[:3], "ML/d"), h0=40.4)  # 2 parameters: 3 records do
    assert fit.dof == 1 and fit.b == pytest.approx(1.9, rel=1e-10)
    assert "only 3 records" in " ".join(fit.notes)
    e = _err(fit_rating, records_from_values(H[:2], Q[:2], "ML/d"), h0=40.4)
    assert "at least 3" in str(e)


def test_same_stage_and_swapped_fields_and_unknown_space():
    assert "same stage" in str(_err(fit_rating, records_from_values([42.0] * 5, [1, 2, 3, 4, 5], "ML/d")))
    # discharge falling with stage: the fields are probably swapped
    e = _err(fit_rating, records_from_values(H, Q[::-1], "ML/d"), h0=40.0)
    assert "discharge falling as stage rises" in str(e)
    assert _err(fit_rating, records_from_values(H, Q, "ML/d"), fit_space="cubic").parameter == "FIT_SPACE"


def test_h0_not_determined_by_the_records():
    # Q = exp(2 h): no power law with a finite h0 fits better than one with h0 far away
    h = np.linspace(1.0, 3.0, 20)
    e = _err(fit_rating, records_from_values(h, np.exp(2.0 * h), "m3/s"))
    assert "h0 (the stage of zero flow) cannot be estimated" in str(e) and e.parameter == "H0"


def test_tables_levels_and_residuals():
    fit = fit_rating(records_from_values(H, Q, "ML/d"))
    t = rating_table(fit)
    names = t["parameter"].tolist()
    assert names[:4] == ["C_mld", "C_m3s", "b", "h0_m"]
    assert t["value"][1] == pytest.approx(t["value"][0] * 1000 / 86400, rel=1e-15)
    assert t["std_error"][1] == pytest.approx(t["std_error"][0] * 1000 / 86400, rel=1e-15)
    assert t["value"][names.index("n_records")] == 7 and t["value"][names.index("dof")] == 4
    assert math.isnan(t["std_error"][names.index("r2")])
    assert t["description"][names.index("fit_space")] == "least squares on ln Q"
    lev = levels(fit, [850 * 0.6 ** 1.9, 1e5], "ML/d")  # h = 41.0 (below the records) and far above
    assert lev["within_records"].tolist() == [False, False]
    assert lev["stage_m"][0] == pytest.approx(41.0, abs=1e-8)
    lev = levels(fit, Q[2:4], "ML/d")
    assert lev["within_records"].tolist() == [True, True]
    np.testing.assert_allclose(lev["stage_m"], H[2:4], atol=1e-8)
    r = residuals(fit)
    assert r["row"].tolist() == list(range(1, 8))
    np.testing.assert_allclose(r["residual_pct"], 0.0, atol=1e-6)


def test_discharge_lists():
    assert parse_discharge_list("3000, 4000;5000  6000").tolist() == [3000, 4000, 5000, 6000]
    assert ladder_from_values(["3000", None, 4000.0, ""]).tolist() == [3000, 4000]
    for text, expect in [("", "give the discharges"), ("3000, abc", "'abc' is not a number"),
                         ("3,000, 4,000", "'3,000' reads as 3 and 000"), ("3000, 3000", "appears twice"),
                         ("-5", "not positive")]:
        e = _err(parse_discharge_list, text, "LADDER")
        assert expect in str(e) and e.parameter == "LADDER"
