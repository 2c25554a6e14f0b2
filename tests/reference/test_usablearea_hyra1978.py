"""Weighted usable area end to end through usablearea (Processing) against Hyra (1978), Table 3.

Source: Hyra, R. (1978) Methods of assessing instream flows for recreation. Instream Flow Information
Paper No. 6, US Fish and Wildlife Service, Table 3 (p. 8): surface area and weighted usable surface
area (ft2) of a 4 x 4 matrix of depth and velocity classes with their probabilities-of-use (transcribed
in tests/reference/test_wua_hyra1978.py, which checks the core functions on the same table).

A hand-made raster reproduces the table: cells of 10 ft x 10 ft (100 ft2, 3.048 m), one cell per
100 ft2 of each table cell, at the table cell's class mid-values of depth and velocity. The channel is
one row of cells along a straight centreline; table cell (depth class i, velocity class j) lies in
chainage segment 4 i + j + 1 (segments of 100 ft = 30.48 m) and depth class i in zone 'd<i>'. So the
WUA of every segment is a table cell, of every zone a row total (0, 444, 432, 40 ft2), and of the reach
the table total 916 of 4,500 ft2.
"""

from __future__ import annotations

import numpy as np
import pytest
from osgeo import gdal, ogr, osr

from tests.reference.test_wua_hyra1978 import AREA_FT2, CURVES, DEPTH_MID_FT, VEL_MID_FTS, WUA_FT2

FT = 0.3048  # international foot, exact
FT2_M2 = FT * FT
CELL = 10 * FT  # 10 ft
SEG = 10 * CELL  # 100 ft: ten cells per segment
X0, Y0 = 600000.0, 5000000.0
EPSG = 32755


def _srs():
    s = osr.SpatialReference()
    s.ImportFromEPSG(EPSG)
    return s


def _write(path, array):
    ds = gdal.GetDriverByName("GTiff").Create(str(path), array.shape[1], array.shape[0], 1, gdal.GDT_Float32)
    ds.SetGeoTransform((X0, CELL, 0.0, Y0 + 1.5 * CELL, 0.0, -CELL))
    ds.SetProjection(_srs().ExportToWkt())
    b = ds.GetRasterBand(1)
    b.SetNoDataValue(-9999.0)
    b.WriteArray(array.astype(np.float32))
    del b, ds
    return str(path)


@pytest.fixture()
def hyra_case(tmp_path):
    depth = np.full((3, 160), -9999.0)
    speed = np.full((3, 160), -9999.0)
    for i in range(4):
        for j in range(4):
            n = int(AREA_FT2[i, j] // 100)
            cols = 10 * (4 * i + j) + 1 + np.arange(n)  # inside segment 4 i + j, away from its ends
            depth[1, cols] = DEPTH_MID_FT[i] * FT
            speed[1, cols] = VEL_MID_FTS[j] * FT
    d = _write(tmp_path / "depth.tif", depth)
    s = _write(tmp_path / "speed.tif", speed)
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(tmp_path / "axis.gpkg"))
    lyr = ds.CreateLayer("axis", _srs(), ogr.wkbLineString)
    line = ogr.Geometry(ogr.wkbLineString)
    line.AddPoint_2D(X0, Y0)
    line.AddPoint_2D(X0 + 16 * SEG, Y0)
    f = ogr.Feature(lyr.GetLayerDefn())
    f.SetGeometry(line)
    lyr.CreateFeature(f)
    del f, lyr, ds
    curves = tmp_path / "hyra.csv"
    curves.write_text(CURVES, encoding="utf-8")
    return {"DEPTH": d, "SPEED": s, "CENTRELINE": str(tmp_path / "axis.gpkg") + "|layername=axis",
            "SEGMENT_LENGTH": SEG, "ZONE_BREAKS": ", ".join(f"{4 * i * SEG!r} d{i}" for i in range(4)),
            "SUITABILITY_CURVES": str(curves), "COMBINATION": 0, "WET_DEPTH": 0.05}


def test_usablearea_reproduces_hyra_1978_table_3(run_alg, hyra_case, tmp_path):
    # Source: Hyra 1978, Instream Flow Information Paper No. 6, Table 3 (see the module docstring).
    res = run_alg("usablearea", {**hyra_case, "SUITABILITY": str(tmp_path / "s.tif"),
                                 "WUA_TABLE": str(tmp_path / "wua.gpkg"), "REPORT": None})
    from qgis.core import QgsVectorLayer

    lyr = QgsVectorLayer(res["WUA_TABLE"], "w", "ogr")
    rows = {(f["scope"], f["unit"]): f for f in lyr.getFeatures()}
    assert len(rows) == 1 + 4 + 16
    for i in range(4):
        for j in range(4):
            seg = rows[("segment", str(4 * i + j + 1))]
            assert seg["wua_m2"] / FT2_M2 == pytest.approx(WUA_FT2[i, j], abs=1e-9)
            assert seg["wet_area_m2"] / FT2_M2 == pytest.approx(AREA_FT2[i, j], abs=1e-9)
    for i, total in enumerate((0, 444, 432, 40)):  # Table 3 row totals
        assert rows[("zone", f"d{i}")]["wua_m2"] / FT2_M2 == pytest.approx(total, abs=1e-9)
    reach = rows[("reach", "reach")]
    assert reach["wua_m2"] / FT2_M2 == pytest.approx(916.0, abs=1e-9)  # Table 3 total
    assert reach["wet_area_m2"] / FT2_M2 == pytest.approx(4500.0, abs=1e-9)
    assert reach["wua_fraction"] == pytest.approx(916.0 / 4500.0, rel=1e-12)
    # the composite per cell is the product of the two class probabilities (Hyra 1978 p. 6)
    s = gdal.Open(res["SUITABILITY"]).ReadAsArray()
    p_depth = np.array([0.0, 0.3, 0.8, 1.0])
    p_vel = np.array([1.0, 0.8, 0.4, 0.0])
    for i in range(4):
        for j in range(4):
            n = int(AREA_FT2[i, j] // 100)
            cols = 10 * (4 * i + j) + 1 + np.arange(n)
            np.testing.assert_allclose(s[1, cols], p_depth[i] * p_vel[j], atol=1e-7)
    assert np.all(s[[0, 2]] == -9999.0)
