"""Column -> field type and value conversion used by every vector/table output."""

import numpy as np
from qgis.PyQt.QtCore import QDate, QVariant

from plugin.gis.outputs import _py, fields_from_columns


def test_field_types_follow_dtypes():
    cols = {
        "q_mld": np.array([1.5]), "n": np.array([3], dtype=np.int32), "ok": np.array([True]),
        "name": ["weir"], "date": np.array(["2020-07-01"], dtype="datetime64[D]"),
    }
    f = fields_from_columns(cols)
    assert [f.at(i).type() for i in range(f.count())] == [
        QVariant.Double, QVariant.LongLong, QVariant.Bool, QVariant.String, QVariant.Date]


def test_values_nulls_and_dates():
    assert _py(float("nan"), QVariant.Double) is None
    assert _py(np.float32(0.25), QVariant.Double) == 0.25
    masked = np.ma.masked_array([True, False], mask=[False, True])
    assert _py(masked[0], QVariant.Bool) is True
    assert _py(masked[1], QVariant.Bool) is None
    d = np.array(["2021-02-28", "NaT"], dtype="datetime64[D]")
    assert _py(d[0], QVariant.Date) == QDate(2021, 2, 28)
    assert _py(d[1], QVariant.Date) is None


def test_column_lists_nulls():
    from plugin.gis.outputs import _column_list

    assert _column_list(np.array([1.0, np.nan]), QVariant.Double) == [1.0, None]
    assert _column_list(np.ma.masked_array([1, 2], mask=[True, False]), QVariant.LongLong) == [None, 2]
    assert _column_list(np.array([3, 4], dtype=np.int16), QVariant.LongLong) == [3, 4]
    assert _column_list(["a", None], QVariant.String) == ["a", None]
    assert _column_list(np.array(["2020-01-02"], dtype="datetime64[D]"), QVariant.Date) == [QDate(2020, 1, 2)]
