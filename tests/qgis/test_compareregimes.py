"""compareregimes through Processing: hand-made raster and mesh runs (every output opened and checked against
independent GDAL/numpy/netCDF4/shapely computations), different grids, meshes and CRS, bad input, and the demo
reach (natural against weir at 3000 ML/d)."""

from __future__ import annotations

import html
import re
from pathlib import Path

import numpy as np
import pytest
import shapely
from osgeo import gdal
from qgis.core import (
    QgsMeshLayer,
    QgsProcessingContext,
    QgsProcessingException,
    QgsProcessingFeedback,
    QgsRasterLayer,
    QgsVectorLayer,
)

from tests.qgis import habitat_cases as hc
from tests.qgis.habitat_cases import table

SEG = 200.0
ZONES = "0 upper, 500 middle, 900 lower"
BOUNDS = np.array([0.05, 0.2, 0.3], dtype=np.float32)  # velocity preset (DESIGN.md section 4)
STATES = ["dry", "very slow", "slow", "moderate", "fast"]
KEYS = ["dry", "very_slow", "slow", "moderate", "fast"]


# ------------------------------------------------------------------------------------------------
# helpers
# ------------------------------------------------------------------------------------------------


def raster(path):
    ds = gdal.Open(str(path))
    b = ds.GetRasterBand(1)
    a = b.ReadAsArray()
    out = (a, b.GetNoDataValue(), ds.GetGeoTransform(), ds.GetMetadata(), ds.GetProjection())
    del b, ds
    return out


def outputs(folder: Path, **extra):
    folder.mkdir(parents=True, exist_ok=True)
    p = {"SPEED_CHANGE": str(folder / "speed.tif"), "DEPTH_CHANGE": str(folder / "depth.tif"),
         "WET_DRY_CHANGE": str(folder / "wetdry.tif"), "TRANSITIONS": str(folder / "transitions.gpkg"),
         "SEGMENT_CHANGE": str(folder / "segments.gpkg"), "ZONE_CHANGE": str(folder / "zones.gpkg"),
         "TRANSITION_TABLE": str(folder / "matrix.gpkg"), "REPORT": str(folder / "report.html")}
    p.update(extra)
    return p


def run_params(base: dict, alt: dict, cl, folder, **extra):
    p = {"CENTRELINE": cl, "SEGMENT_LENGTH": SEG, "ZONE_BREAKS": ZONES}
    for prefix, run in (("BASE_", base), ("ALT_", alt)):
        for k, v in run.items():
            p[prefix + {"depth": "DEPTH", "speed": "SPEED", "mesh": "MESH"}.get(k, k)] = v
    p.update(outputs(folder))
    p.update(extra)
    return p


def read_cells(run):
    """Independent reading of a hand-made raster run: depth, speed (NaN where dry) and geotransform."""
    d_ds, s_ds = gdal.Open(run["depth"]), gdal.Open(run["speed"])
    d = d_ds.GetRasterBand(1).ReadAsArray().astype(float)
    s = s_ds.GetRasterBand(1).ReadAsArray().astype(np.float32)
    gt = d_ds.GetGeoTransform()
    del d_ds, s_ds
    wet = (d != -9999.0) & (d >= 0.05)
    return np.where(wet, d, np.nan), np.where(wet, s, np.nan), gt


def states(depth, speed):
    """0 = dry, 1..4 velocity classes (np.digitize on the preset thresholds)."""
    st = np.digitize(np.nan_to_num(speed), BOUNDS) + 1
    return np.where(np.isfinite(depth), st, 0)


def matrix_rows(path, unit="reach"):
    _, rows = table(path)
    sel = [r for r in rows if r["unit"] == unit]
    return np.array([[r[f"to_{k}_m2"] for k in KEYS] for r in sel]), sel


def channel_x(gt, shape):
    rows, cols = np.indices(shape)
    return gt[0] + (cols + 0.5) * gt[1], gt[3] + (rows + 0.5) * gt[5]


@pytest.fixture()
def channel(tmp_path):
    """The hand-made straight channel (habitat_cases) as the base run and a centreline."""
    (tmp_path / "base").mkdir()
    base = hc.write_rasters(tmp_path / "base")
    cl = hc.write_centreline(tmp_path / "centreline.gpkg")
    return tmp_path, base, cl


def write_run(folder: Path, depth, speed, gt, epsg=hc.EPSG):
    folder.mkdir(parents=True, exist_ok=True)
    return {"depth": hc.write_tif(folder / "depth.tif", depth, gt, epsg),
            "speed": hc.write_tif(folder / "speed.tif", speed, gt, epsg)}


# ------------------------------------------------------------------------------------------------
# identical runs, known shifts, wet/dry change
# ------------------------------------------------------------------------------------------------

def test_identical_runs_give_zero_change_and_a_diagonal_matrix(run_alg, channel):
    tmp, base, cl = channel
    res = run_alg("compareregimes", run_params(base, base, cl, tmp / "out"))
    d, s, gt = read_cells(base)
    wet = np.isfinite(d)
    assert res["METHOD"] == "same grid"
    for key in ("SPEED_CHANGE", "DEPTH_CHANGE"):
        a, nd, tgt, meta, _ = raster(res[key])
        assert nd == -9999.0 and tgt == gt
        assert np.all(a[wet] == 0) and np.all(a[~wet] == nd)
        assert meta["sign"] == "alternative minus base" and "cell by cell" in meta["comparison_method"]
        assert Path(res[key]).with_suffix(".qml").exists()
    wd, nd, _, _, _ = raster(res["WET_DRY_CHANGE"])
    assert nd == 0 and np.all(wd[wet] == 1) and np.all(wd[~wet] == 0)
    m, _ = matrix_rows(res["TRANSITION_TABLE"])
    cell = abs(gt[1] * gt[5])
    assert np.count_nonzero(m - np.diag(np.diag(m))) == 0
    np.testing.assert_allclose(np.diag(m), np.bincount(states(d, s)[wet], minlength=5) * cell)
    assert m.sum() == pytest.approx(wet.sum() * cell)
    names, rows, geoms = table(res["TRANSITIONS"], geometry=True)
    assert names[1:4] == ["base_run", "alt_run", "transition"]
    assert not any(r["changed"] for r in rows)
    assert all(r["transition"] == f"{r['from_class']} -> {r['to_class']}" for r in rows)
    assert sum(g.area for g in geoms) == pytest.approx(wet.sum() * cell)
    _, seg = table(res["SEGMENT_CHANGE"])
    assert len(seg) == 6
    for r in seg:
        for k, v in r.items():
            if k.startswith("chg_") and v is not None:
                assert v == 0, k
    assert res["WET_BASE_ONLY_M2"] == 0 and res["WET_ALT_ONLY_M2"] == 0 and res["CHANGED_AREA_M2"] == 0
    page = Path(res["REPORT"]).read_text(encoding="utf-8")
    assert "Caution." in page and "compared cell by cell" in page and "(base)" in page


def test_a_known_slowing_gives_the_known_transitions(run_alg, channel):
    tmp, base, cl = channel
    (tmp / "alt").mkdir()
    alt = hc.write_rasters(tmp / "alt", speed_scale=0.7)
    res = run_alg("compareregimes", run_params(base, alt, cl, tmp / "out", BASE_NAME="today", ALT_NAME="slower"))
    db, sb, gt = read_cells(base)
    da, sa, _ = read_cells(alt)
    x, _ = channel_x(gt, db.shape)
    ch = x - hc.X0
    cell = abs(gt[1] * gt[5])
    fb, fa = states(db, sb), states(da, sa)
    wet = np.isfinite(db)
    # the matrix per zone against np.add.at on the independently read rasters
    zone = np.digitize(ch, [500.0, 900.0])
    for z, name in enumerate(("upper", "middle", "lower")):
        m, rows = matrix_rows(res["TRANSITION_TABLE"], name)
        exp = np.zeros((5, 5))
        sel = wet & (zone == z)
        np.add.at(exp, (fb[sel], fa[sel]), cell)
        np.testing.assert_allclose(m, exp)
        assert [r["from_class"] for r in rows] == STATES
        assert all(r["base_run"] == "today" and r["alt_run"] == "slower" for r in rows)
    # TRANSITIONS: valid polygons whose areas per transition add up to the matrix
    _, rows, geoms = table(res["TRANSITIONS"], geometry=True)
    assert all(shapely.is_valid(g) for g in geoms)
    m_reach, _ = matrix_rows(res["TRANSITION_TABLE"])
    tot = {}
    for r, g in zip(rows, geoms):
        assert g.area == pytest.approx(r["area_m2"])
        key = (STATES.index(r["from_class"]), STATES.index(r["to_class"]))
        tot[key] = tot.get(key, 0.0) + r["area_m2"]
        assert r["changed"] == (key[0] != key[1])
        assert r["chainage_from_m"] <= shapely.centroid(g).x - hc.X0 <= r["chainage_to_m"] or r["n_parts"] > 1
    for (f, t), a in tot.items():
        assert a == pytest.approx(m_reach[f, t])
    assert "fast -> moderate" in {r["transition"] for r in rows}
    # change rasters
    spd, _, _, _, _ = raster(res["SPEED_CHANGE"])
    np.testing.assert_allclose(spd[wet], (sa - sb)[wet], atol=1e-6)
    dep, _, _, _, _ = raster(res["DEPTH_CHANGE"])
    assert np.all(dep[wet] == 0)
    # per segment: class share change against numpy
    _, seg = table(res["SEGMENT_CHANGE"])
    for r in seg:
        sel = wet & (ch >= r["chainage_from_m"]) & (ch < r["chainage_to_m"])
        for k in range(1, 5):
            exp = 100.0 * (np.mean(fa[sel] == k) - np.mean(fb[sel] == k))
            assert r[f"chg_pct_{KEYS[k]}"] == pytest.approx(exp, abs=1e-9)
        assert r["chg_v_p50_ms"] == pytest.approx(np.percentile(sa[sel], 50) - np.percentile(sb[sel], 50), abs=1e-6)
        assert r["chg_v_p90_ms"] == pytest.approx(np.percentile(sa[sel], 90) - np.percentile(sb[sel], 90), abs=1e-6)
        assert r["chg_wet_area_m2"] == 0
    # the report says it in words: the upper zone's change in fast water, from the rasters
    page = Path(res["REPORT"]).read_text(encoding="utf-8")
    up = wet & (ch < 500.0)
    d_fast = ((fa[up] == 4).sum() - (fb[up] == 4).sum()) * cell / 1e4
    d_pp = 100.0 * (np.mean(fa[up] == 4) - np.mean(fb[up] == 4))
    assert f"fast \u2212{abs(d_fast):.1f} ha (\u2212{abs(d_pp):.1f} pp)" in page
    assert "wet area 2.0 ha under today, 2.0 ha under slower" in page
    # styles are stored with the layers
    assert QgsVectorLayer(res["TRANSITIONS"], "t", "ogr").renderer().type() == "categorizedSymbol"
    assert QgsVectorLayer(res["SEGMENT_CHANGE"], "s", "ogr").renderer().type() == "graduatedSymbol"
    lyr = QgsRasterLayer(res["SPEED_CHANGE"], "s", "gdal")
    assert lyr.renderer().type() == "singlebandpseudocolor"
    assert lyr.renderer().classificationMin() == -lyr.renderer().classificationMax()


def test_wet_dry_change_and_the_dry_rule(run_alg, channel):
    tmp, base, cl = channel
    db, sb, gt = read_cells(base)
    # alternative: 0.5 m lower water (the shallow edges dry) and a 4 m wide wet band outside the left bank
    x, y = channel_x(gt, db.shape)
    da = np.where(np.isfinite(db), np.maximum(db - 0.5, 0.0), np.nan)
    band = (y > hc.Y0 + hc.WIDTH) & (y < hc.Y0 + hc.WIDTH + 4.0) & (x > hc.X0) & (x < hc.X0 + hc.LENGTH)
    da = np.where(band, 0.3, da)
    sa = np.where(band, 0.01, sb).astype(np.float32)
    alt = write_run(tmp / "alt", da, sa, gt)
    res = run_alg("compareregimes", run_params(base, alt, cl, tmp / "out"))
    ra, rs, _ = read_cells(alt)
    wb, wa = np.isfinite(db), np.isfinite(ra)
    cell = abs(gt[1] * gt[5])
    wd, _, _, _, _ = raster(res["WET_DRY_CHANGE"])
    np.testing.assert_array_equal(wd, np.select([wb & wa, wb, wa], [1, 2, 3], 0))
    assert res["WET_BASE_ONLY_M2"] == pytest.approx((wb & ~wa).sum() * cell)
    assert res["WET_ALT_ONLY_M2"] == pytest.approx((wa & ~wb).sum() * cell) == pytest.approx(band.sum() * cell)
    dep, _, _, _, _ = raster(res["DEPTH_CHANGE"])
    spd, _, _, _, _ = raster(res["SPEED_CHANGE"])
    dried = wb & ~wa
    np.testing.assert_allclose(dep[dried], -db[dried], rtol=1e-6)
    np.testing.assert_allclose(spd[dried], -sb[dried], rtol=1e-6)
    np.testing.assert_allclose(dep[wa & ~wb], ra[wa & ~wb], rtol=1e-6)
    m, _ = matrix_rows(res["TRANSITION_TABLE"])
    assert m.sum() == pytest.approx((wb | wa).sum() * cell)
    assert m[0, 1] == pytest.approx(band.sum() * cell)  # dry -> very slow
    assert m[:, 0].sum() == pytest.approx(dried.sum() * cell)
    _, rows = table(res["TRANSITIONS"])
    assert {"dry -> very slow"} <= {r["transition"] for r in rows}
    assert any(r["to_class"] == "dry" for r in rows)


# ------------------------------------------------------------------------------------------------
# different grids, meshes, CRS
# ------------------------------------------------------------------------------------------------

def test_different_grids_give_the_same_totals_within_resampling_error(run_alg, channel):
    tmp, base, cl = channel
    (tmp / "alt5").mkdir()
    alt = hc.write_rasters(tmp / "alt5", cell=5.0)  # the same field on 5 m cells
    res = run_alg("compareregimes", run_params(base, alt, cl, tmp / "out"))
    assert res["METHOD"] == "common grid"
    db, sb, gt = read_cells(base)
    da, sa, gt5 = read_cells(alt)
    cell = abs(gt[1] * gt[5])
    a, _, tgt, meta, _ = raster(res["SPEED_CHANGE"])
    assert tgt[1] == 2.0 and (tgt[0] - gt[0]) / 2.0 == round((tgt[0] - gt[0]) / 2.0)  # on the finer grid's lines
    assert "nearest neighbour" in meta["comparison_method"] and "2 m cells" in meta["comparison_method"]
    m, _ = matrix_rows(res["TRANSITION_TABLE"])
    wet_b = np.isfinite(db).sum() * cell
    wet_a = np.isfinite(da).sum() * abs(gt5[1] * gt5[5])
    # totals: rows are the base exactly (its own grid); columns are the alternative within resampling error:
    # at most half a 5 m cell along the wet edge of a 1200 m x 40 m channel (both edges): 2 x 1240 x 2.5 m2
    own_b = np.bincount(states(db, sb)[np.isfinite(db)], minlength=5)[1:] * cell
    np.testing.assert_allclose(m.sum(axis=1)[1:], own_b)
    edge_error = 2 * (hc.LENGTH + hc.WIDTH) * 2.5
    assert abs(m.sum() - max(wet_b, wet_a)) <= edge_error
    own_a = np.bincount(states(da, sa)[np.isfinite(da)], minlength=5)[1:] * abs(gt5[1] * gt5[5])
    assert np.all(np.abs(m.sum(axis=0)[1:] - own_a) <= edge_error + 0.03 * wet_a)
    # the whole matrix, independently: every 2 m cell centre takes the 5 m cell that contains it (nearest
    # neighbour by hand); centres exactly on a 5 m cell edge take the cell to their right / below (as GDAL)
    x, y = channel_x(gt, db.shape)
    c5 = np.floor((x - gt5[0]) / gt5[1] + 1e-9).astype(int)
    r5 = np.floor((y - gt5[3]) / gt5[5] + 1e-9).astype(int)
    ok = (c5 >= 0) & (c5 < da.shape[1]) & (r5 >= 0) & (r5 < da.shape[0])
    st5 = states(da, sa)
    to = np.where(ok, st5[np.clip(r5, 0, da.shape[0] - 1), np.clip(c5, 0, da.shape[1] - 1)], 0)
    frm = states(db, sb)
    exp = np.zeros((5, 5))
    sel = (frm > 0) | (to > 0)
    np.add.at(exp, (frm[sel], to[sel]), cell)
    np.testing.assert_allclose(m, exp)
    # the same field on two grids: medians agree; the zones' own wet areas are those of each grid
    _, zones = table(res["ZONE_CHANGE"])
    x5, _ = channel_x(gt5, da.shape)
    for r in zones:
        assert abs(r["chg_v_p50_ms"]) < 0.01
        inz = (x5 - hc.X0 >= r["chainage_from_m"]) & (x5 - hc.X0 < r["chainage_to_m"])
        assert r["alt_wet_area_m2"] == pytest.approx(np.isfinite(da)[inz].sum() * 25.0)
    page = Path(res["REPORT"]).read_text(encoding="utf-8")
    assert "one aligned grid of 2 m cells" in page and "on the common grid" in page


def test_raster_against_a_mesh_of_the_same_field(run_alg, channel):
    tmp, base, cl = channel
    mesh = QgsMeshLayer(hc.write_ugrid(tmp / "mesh.nc"), "mesh", "mdal")
    res = run_alg("compareregimes", run_params(base, {"mesh": mesh}, cl, tmp / "out"))
    assert res["METHOD"] == "common grid"
    _, _, _, meta, _ = raster(res["SPEED_CHANGE"])
    assert "face-constant sampling at cell centres" in meta["comparison_method"]
    db, _, gt = read_cells(base)
    m, _ = matrix_rows(res["TRANSITION_TABLE"])
    # the mesh covers the same 1200 m x 40 m channel: the union differs from the base by edge cells only
    assert abs(m.sum() - np.isfinite(db).sum() * 4.0) <= 2 * (hc.LENGTH + hc.WIDTH) * 2.0
    _, zones = table(res["ZONE_CHANGE"])
    for r in zones:
        assert abs(r["chg_v_p50_ms"]) < 0.01 and abs(r["chg_wet_area_m2"]) <= 0.02 * r["base_wet_area_m2"]
    assert "MESH_CHANGE" not in res  # not a face-by-face comparison


def test_two_time_steps_of_one_mesh_are_compared_face_by_face(run_alg, tmp_path):
    import netCDF4

    cl = hc.write_centreline(tmp_path / "centreline.gpkg")
    path = hc.write_ugrid(tmp_path / "mesh.nc")
    layer = QgsMeshLayer(path, "mesh", "mdal")
    res = run_alg("compareregimes", run_params({"mesh": layer, "MESH_TIME_INDEX": 0},
                                               {"mesh": layer, "MESH_TIME_INDEX": 1}, cl, tmp_path / "out",
                                               MESH_CHANGE=str(tmp_path / "out" / "faces.gpkg")))
    assert res["METHOD"] == "same mesh"
    with netCDF4.Dataset(path) as ds:
        d = np.asarray(ds["depth"][:], dtype=np.float32)
        u = np.asarray(ds["ucx"][:], dtype=np.float32)
        v = np.asarray(ds["ucy"][:], dtype=np.float32)
    s = np.hypot(u.astype(float), v.astype(float))
    wet0, wet1 = d[0] >= 0.05, d[1] >= 0.05
    names, faces, geoms = table(res["MESH_CHANGE"], geometry=True)
    assert names[1:5] == ["face", "wet_change", "wet_change_code", "from_class"]
    fid = np.array([r["face"] for r in faces])
    np.testing.assert_array_equal(np.sort(fid), np.flatnonzero(wet0 | wet1))
    exp_code = np.select([wet0 & wet1, wet0, wet1], [1, 2, 3], 0)[fid]
    np.testing.assert_array_equal([r["wet_change_code"] for r in faces], exp_code)
    s0 = np.where(wet0, s[0], 0.0)[fid]
    s1 = np.where(wet1, s[1], 0.0)[fid]
    np.testing.assert_allclose([r["chg_speed_ms"] for r in faces], s1 - s0, atol=1e-5)
    d_change = (np.where(wet1, d[1], 0) - np.where(wet0, d[0], 0))[fid]
    np.testing.assert_allclose([r["chg_depth_m"] for r in faces], d_change, atol=1e-5)
    np.testing.assert_allclose([g.area for g in geoms], [r["area_m2"] for r in faces])
    m, _ = matrix_rows(res["TRANSITION_TABLE"])
    assert m.sum() == pytest.approx(sum(r["area_m2"] for r in faces))
    assert res["WET_ALT_ONLY_M2"] == pytest.approx(sum(r["area_m2"] for r in faces if r["wet_change_code"] == 3))
    _, _, gt, meta, _ = raster(res["SPEED_CHANGE"])
    assert "MESH_CHANGE holds the exact face values" in meta["comparison_method"]
    assert QgsVectorLayer(res["MESH_CHANGE"], "f", "ogr").renderer().type() == "graduatedSymbol"


def test_an_alternative_in_another_crs_is_reprojected_and_said(run_alg, channel):
    tmp, base, cl = channel
    (tmp / "src").mkdir()
    src = hc.write_rasters(tmp / "src", speed_scale=0.7)
    (tmp / "alt").mkdir()
    alt = {}
    for k in ("depth", "speed"):  # the alternative delivered in GDA94 / MGA zone 55 (another projected CRS)
        alt[k] = str(tmp / "alt" / f"{k}.tif")
        gdal.Warp(alt[k], src[k], dstSRS="EPSG:28355", resampleAlg="near", xRes=2.0, yRes=2.0)
    fb = QgsProcessingFeedback()
    messages = []
    fb.pushWarning = messages.append
    res = run_alg("compareregimes", run_params(base, alt, cl, tmp / "out"), feedback=fb)
    assert any("reprojected to the base run's CRS" in m for m in messages)
    assert res["METHOD"] == "common grid"
    _, _, _, meta, wkt = raster(res["SPEED_CHANGE"])
    assert "32755" in wkt or "zone 55S" in wkt
    page = Path(res["REPORT"]).read_text(encoding="utf-8")
    assert "was reprojected to the base run" in page
    db, sb, gt = read_cells(base)
    m, _ = matrix_rows(res["TRANSITION_TABLE"])
    wet = np.isfinite(db).sum() * 4.0
    assert abs(m.sum() - wet) <= 2 * (hc.LENGTH + hc.WIDTH) * 2.0  # edge cells only
    # the same slowing as without reprojection, within the resampling error
    (tmp / "alt_same").mkdir()
    same = hc.write_rasters(tmp / "alt_same", speed_scale=0.7)
    ref = run_alg("compareregimes", run_params(base, same, cl, tmp / "out_same"))
    m_ref, _ = matrix_rows(ref["TRANSITION_TABLE"])
    assert np.abs(m - m_ref).sum() <= 0.05 * wet


def test_a_cell_size_forces_the_common_grid_and_identical_runs_still_do_not_change(run_alg, channel):
    tmp, base, cl = channel
    res = run_alg("compareregimes", run_params(base, base, cl, tmp / "out", RESAMPLE_CELL_SIZE=4.0))
    assert res["METHOD"] == "common grid"
    a, nd, gt, meta, _ = raster(res["SPEED_CHANGE"])
    assert gt[1] == 4.0 and "4 m cells (the cell size given)" in meta["comparison_method"]
    assert np.all((a == 0) | (a == nd)) and (a == 0).sum() > 0
    m, _ = matrix_rows(res["TRANSITION_TABLE"])
    assert np.count_nonzero(m - np.diag(np.diag(m))) == 0
    # 4 m cells sample the 2 m rasters at their centres: every 4 m cell centre lies on a 2 m cell corner, so
    # the area on the grid is that of the wet 2 m cells picked, within one 4 m cell along each wet edge
    d, _, _ = read_cells(base)
    assert abs(m.sum() - np.isfinite(d).sum() * 4.0) <= 2 * (hc.LENGTH + hc.WIDTH) * 4.0
    assert res["CHANGED_AREA_M2"] == 0


def test_a_run_covering_part_of_the_reach_is_said(run_alg, channel):
    tmp, base, cl = channel
    (tmp / "part").mkdir()
    d_part = str(tmp / "part" / "depth.tif")
    s_part = str(tmp / "part" / "speed.tif")
    window = [hc.X0 - 10.0, hc.Y0 + hc.WIDTH + 10.0, hc.X0 + 600.0, hc.Y0 - 10.0]  # the upstream half only
    gdal.Translate(d_part, base["depth"], projWin=window)
    gdal.Translate(s_part, base["speed"], projWin=window)
    fb = QgsProcessingFeedback()
    warnings = []
    fb.pushWarning = warnings.append
    res = run_alg("compareregimes", run_params(base, {"depth": d_part, "speed": s_part}, cl, tmp / "out"),
                  feedback=fb)
    d, _, gt = read_cells(base)
    x, _ = channel_x(gt, d.shape)
    outside = np.isfinite(d) & (x > hc.X0 + 600.0)
    assert res["WET_BASE_ONLY_M2"] == pytest.approx(outside.sum() * 4.0)
    text = f"{outside.sum() * 4.0:,.0f} m2 of the base run's wet area lies outside the alternative run's raster extent"
    assert any(text in w for w in warnings)
    assert text in html.unescape(Path(res["REPORT"]).read_text(encoding="utf-8"))


# ------------------------------------------------------------------------------------------------
# bad input
# ------------------------------------------------------------------------------------------------

def _fails(run_alg, params, param, pattern):
    with pytest.raises(QgsProcessingException) as err:
        run_alg("compareregimes", params)
    msg = str(err.value)
    assert msg.startswith(f"{param}:"), msg
    assert re.search(pattern, msg), msg
    return msg


def test_bad_input(run_alg, channel):
    tmp, base, cl = channel
    out = tmp / "bad"
    db, sb, gt = read_cells(base)
    # runs that do not overlap: the alternative 5 km further east
    far = write_run(tmp / "far", db, sb, (gt[0] + 5000.0,) + tuple(gt[1:]))
    _fails(run_alg, run_params(base, far, cl, out), "ALT_DEPTH", "do not overlap")
    # runs that overlap in extent but share no wet cell
    half_a = write_run(tmp / "ha", np.where(channel_x(gt, db.shape)[0] < hc.X0 + 600, db, np.nan), sb, gt)
    half_b = write_run(tmp / "hb", np.where(channel_x(gt, db.shape)[0] >= hc.X0 + 600, db, np.nan), sb, gt)
    _fails(run_alg, run_params(half_a, half_b, cl, out), "ALT_DEPTH", "share no wet element")
    # no alternative run at all
    _fails(run_alg, {**run_params(base, {}, cl, out)}, "ALT_DEPTH", "give the run")
    # two different class schemes
    f = tmp / "alt_classes.csv"
    f.write_text("class,speed_min,speed_max\nvery slow,,0.05\nslow,0.05,0.25\nmoderate,0.25,0.3\nfast,0.3,\n")
    _fails(run_alg, run_params(base, base, cl, out, ALT_CLASS_FILE=str(f)), "ALT_CLASS_FILE",
           "slow.*upper speed bound is 0.2 in the scheme but 0.25.*no meaning")
    f2 = tmp / "pool_classes.csv"
    f2.write_text("class,froude_min,froude_max\npool,,0.18\nrun,0.18,\n")
    _fails(run_alg, run_params(base, base, cl, out, ALT_CLASS_FILE=str(f2)), "ALT_CLASS_FILE", "2 classes")
    # a geographic base run
    (tmp / "geo").mkdir()
    geo = hc.write_rasters(tmp / "geo", epsg=4326)
    _fails(run_alg, run_params(geo, base, cl, out), "BASE_DEPTH", "geographic")
    assert not out.exists() or not any(out.iterdir())
    # the same class table given twice is fine
    f3 = tmp / "same_classes.csv"
    f3.write_text("class,speed_min,speed_max\nvery slow,,0.05\nslow,0.05,0.2\nmoderate,0.2,0.3\nfast,0.3,\n")
    res = run_alg("compareregimes", run_params(base, base, cl, tmp / "ok", ALT_CLASS_FILE=str(f3)))
    assert res["CHANGED_AREA_M2"] == 0


def test_cancel_leaves_no_outputs(provider, channel):
    import processing

    tmp, base, cl = channel
    fb = QgsProcessingFeedback()
    fb.cancel()
    with pytest.raises(QgsProcessingException, match="Cancelled"):
        processing.run("channelhabitat:compareregimes", run_params(base, base, cl, tmp / "out"),
                       context=QgsProcessingContext(), feedback=fb)
    assert not any((tmp / "out").iterdir())


# ------------------------------------------------------------------------------------------------
# the demo reach
# ------------------------------------------------------------------------------------------------

@pytest.mark.slow
def test_demo_weir_against_natural_at_3000(run_alg, sample_dir, tmp_path):
    from osgeo import ogr

    ds = ogr.Open(str(sample_dir / "centreline.gpkg"))
    lyr = ds.GetLayer(0)
    feat = lyr.GetNextFeature()
    pts = feat.GetGeometryRef().GetPoints()
    out = ogr.GetDriverByName("GPKG").CreateDataSource(str(tmp_path / "cl.gpkg"))
    ol = out.CreateLayer("centreline", lyr.GetSpatialRef(), ogr.wkbLineString)
    line = ogr.Geometry(ogr.wkbLineString)
    for p in reversed(pts):  # the demo centreline is digitised downstream -> upstream
        line.AddPoint_2D(p[0], p[1])
    f = ogr.Feature(ol.GetLayerDefn())
    f.SetGeometry(line)
    ol.CreateFeature(f)
    del f, ol, out, feat, lyr, ds
    r = sample_dir / "rasters"
    runs = {k: {"depth": str(r / k / "q03000_depth.tif"), "speed": str(r / k / "q03000_speed.tif")}
            for k in ("natural", "weir")}
    params = {**run_params(runs["natural"], runs["weir"], str(tmp_path / "cl.gpkg"), tmp_path / "out"),
              "SEGMENT_LENGTH": 1000.0, "ZONE_BREAKS": ""}
    res = run_alg("compareregimes", params)
    dn, sn, gt = read_cells(runs["natural"])
    dw, sw, _ = read_cells(runs["weir"])
    cell = abs(gt[1] * gt[5])
    union = (np.isfinite(dn) | np.isfinite(dw)).sum() * cell
    m, _ = matrix_rows(res["TRANSITION_TABLE"])
    assert m.sum() == pytest.approx(union)  # the whole demo channel lies along the axis
    wd, _, _, _, _ = raster(res["WET_DRY_CHANGE"])
    assert (wd == 3).sum() * cell == pytest.approx(res["WET_ALT_ONLY_M2"])
    wn, ww = np.isfinite(dn), np.isfinite(dw)
    spd, nd, _, _, _ = raster(res["SPEED_CHANGE"])
    dep, _, _, _, _ = raster(res["DEPTH_CHANGE"])
    np.testing.assert_allclose(spd[wn & ww], (sw - sn)[wn & ww], atol=1e-6)
    np.testing.assert_allclose(dep[ww & ~wn], dw[ww & ~wn], rtol=1e-6)
    assert np.all(spd[~(wn | ww)] == nd)
    _, zones = table(res["ZONE_CHANGE"])
    z = {r["zone"]: r for r in zones}
    # plausibility on invented data (not a reference): the weir pool slows the lower zone and widens it
    assert z["lower"]["chg_area_fast_m2"] < 0 and z["lower"]["chg_v_p50_ms"] < 0 and z["lower"]["chg_wet_area_m2"] > 0
    assert abs(z["upper"]["chg_v_p50_ms"]) < abs(z["lower"]["chg_v_p50_ms"])
    _, segs, geoms = table(res["SEGMENT_CHANGE"], geometry=True)
    assert len(segs) == 35 and all(g is not None and shapely.is_valid(g) for g in geoms)
    _, rows, tgeoms = table(res["TRANSITIONS"], geometry=True)
    assert sum(g.area for g in tgeoms) == pytest.approx(union, rel=1e-9)
    assert Path(res["REPORT"]).stat().st_size > 20_000
