"""driftresidence through Processing: hand-made rasters, meshes and scenario tables with known travel
times, every output opened and checked; bad input; and a plausibility check on the demo reach."""

from __future__ import annotations

import csv
import os

import numpy as np
import pytest
from osgeo import gdal, ogr, osr

gdal.UseExceptions()
ogr.UseExceptions()

EPSG = 32755
X0, Y0 = 500000.0, 6000000.0
LENGTH, WIDTH, CELL = 1000.0, 40.0, 2.0
U = 0.25  # m/s, exact in float32; 'moderate' in the velocity classes


def _srs(epsg=EPSG):
    s = osr.SpatialReference()
    s.ImportFromEPSG(epsg)
    s.SetAxisMappingStrategy(osr.OAMS_TRADITIONAL_GIS_ORDER)
    return s


def _tif(path, array, gt, epsg=EPSG):
    ds = gdal.GetDriverByName("GTiff").Create(str(path), array.shape[1], array.shape[0], 1, gdal.GDT_Float32)
    ds.SetGeoTransform(gt)
    ds.SetProjection(_srs(epsg).ExportToWkt())
    b = ds.GetRasterBand(1)
    b.SetNoDataValue(-9999.0)
    b.WriteArray(np.where(np.isfinite(array), array, -9999.0).astype(np.float32))
    b.FlushCache()
    del b, ds
    return str(path)


def write_channel(folder, u=U, pad=10.0, speed_only=False, name=""):
    """A straight wet channel X0..X0+LENGTH x Y0..Y0+WIDTH with uniform flow u along +x."""
    folder.mkdir(parents=True, exist_ok=True)
    ncols, nrows = int((LENGTH + 2 * pad) / CELL), int((WIDTH + 2 * pad) / CELL)
    gt = (X0 - pad, CELL, 0.0, Y0 + WIDTH + pad, 0.0, -CELL)
    cc, rr = np.meshgrid(np.arange(ncols), np.arange(nrows))
    x, y = gt[0] + (cc + 0.5) * CELL, gt[3] - (rr + 0.5) * CELL
    inside = (x > X0) & (x < X0 + LENGTH) & (y > Y0) & (y < Y0 + WIDTH)
    out = {"depth": _tif(folder / f"{name}depth.tif", np.where(inside, 1.5, np.nan), gt)}
    if speed_only:
        out["speed"] = _tif(folder / f"{name}speed.tif", np.where(inside, u, np.nan), gt)
    else:
        out["u"] = _tif(folder / f"{name}u.tif", np.where(inside, u, np.nan), gt)
        out["v"] = _tif(folder / f"{name}v.tif", np.where(inside, 0.0, np.nan), gt)
    return out


def write_line(path, xs, ys, epsg=EPSG, layer="centreline"):
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    lyr = ds.CreateLayer(layer, _srs(epsg), ogr.wkbLineString)
    line = ogr.Geometry(ogr.wkbLineString)
    for xv, yv in zip(xs, ys):
        line.AddPoint_2D(float(xv), float(yv))
    f = ogr.Feature(lyr.GetLayerDefn())
    f.SetGeometry(line)
    lyr.CreateFeature(f)
    del f, lyr, ds
    return f"{path}|layername={layer}"


def centreline(folder, reverse=False):
    xs = np.linspace(X0, X0 + LENGTH, 11)
    if reverse:
        xs = xs[::-1]
    return write_line(folder / ("centreline_rev.gpkg" if reverse else "centreline.gpkg"), xs,
                      np.full(xs.size, Y0 + WIDTH / 2))


def write_points(path, pts, epsg):
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    lyr = ds.CreateLayer("seeds", _srs(epsg), ogr.wkbPoint)
    for px, py in pts:
        g = ogr.Geometry(ogr.wkbPoint)
        g.AddPoint_2D(px, py)
        f = ogr.Feature(lyr.GetLayerDefn())
        f.SetGeometry(g)
        lyr.CreateFeature(f)
    del lyr, ds
    return f"{path}|layername=seeds"


def write_ugrid(path, u=U, h=5.0):
    """A UGRID mesh of the channel: squares split into triangles (every third kept a quad), uniform
    flow on faces."""
    import netCDF4

    nx, ny = int(LENGTH / h), int(WIDTH / h)
    jx, jy = np.meshgrid(np.arange(nx + 1), np.arange(ny + 1))
    node_x, node_y = (X0 + jx * h).ravel(), (Y0 + jy * h).ravel()
    faces = []
    for j in range(ny):
        for i in range(nx):
            a, b = j * (nx + 1) + i, j * (nx + 1) + i + 1
            c, d = b + nx + 1, a + nx + 1
            if (i + j) % 3 == 0:
                faces.append([a, b, c, d])
            else:
                faces += [[a, b, c, -1], [a, c, d, -1]]
    fn = np.array(faces)
    with netCDF4.Dataset(str(path), "w") as ds:
        ds.Conventions = "CF-1.8 UGRID-1.0"
        ds.createDimension("n_node", len(node_x))
        ds.createDimension("n_face", len(fn))
        ds.createDimension("n_max", 4)
        m = ds.createVariable("mesh", "i4")
        m.cf_role = "mesh_topology"
        m.topology_dimension = 2
        m.node_coordinates = "node_x node_y"
        m.face_node_connectivity = "face_nodes"
        xv = ds.createVariable("node_x", "f8", ("n_node",))
        yv = ds.createVariable("node_y", "f8", ("n_node",))
        xv[:], yv[:] = node_x, node_y
        crs = ds.createVariable("crs", "i4")
        crs.epsg = EPSG
        xv.grid_mapping = yv.grid_mapping = "crs"
        fv = ds.createVariable("face_nodes", "i4", ("n_face", "n_max"), fill_value=-1)
        fv.cf_role = "face_node_connectivity"
        fv.start_index = 0
        fv[:] = fn
        for name, long_name, val in (("depth", "depth", 1.5), ("ucx", "velocity, x-component", u),
                                     ("ucy", "velocity, y-component", 0.0)):
            v = ds.createVariable(name, "f4", ("n_face",), fill_value=-999.0)
            v.mesh, v.location, v.long_name = "mesh", "face", long_name
            v[:] = np.full(len(fn), val)
    return str(path)


def outputs(tmp_path, tag=""):
    return {"PATHS": str(tmp_path / f"paths{tag}.gpkg"), "RESIDENCE": str(tmp_path / f"res{tag}.gpkg"),
            "RESIDENCE_SUMMARY": str(tmp_path / f"sum{tag}.gpkg"), "ESTIMATE": str(tmp_path / f"est{tag}.gpkg"),
            "REPORT": str(tmp_path / f"report{tag}.html")}


def read_table(path):
    ds = ogr.Open(path)
    lyr = ds.GetLayer(0)
    defn = lyr.GetLayerDefn()
    names = [defn.GetFieldDefn(i).GetName() for i in range(defn.GetFieldCount())]
    rows = [{n: f.GetField(n) for n in names} for f in lyr]
    return names, rows


def read_paths(path):
    ds = ogr.Open(path)
    lyr = ds.GetLayer(0)
    gtype = lyr.GetGeomType()
    out = []
    for f in lyr:
        g = f.GetGeometryRef()
        pts = [(g.GetX(i), g.GetY(i), g.GetM(i)) for i in range(g.GetPointCount())]
        out.append(({k: f.GetField(k) for k in ("particle", "fate", "t_total_h", "run", "method")}, np.array(pts)))
    return gtype, out


def read_text(path):
    with open(path, encoding="utf-8") as fh:
        return fh.read()


def col(rows, name):
    return np.array([r[name] for r in rows], dtype=float)


# ------------------------------------------------------------------------------------------------

def test_uniform_raster_channel(run_alg, tmp_path):
    files = write_channel(tmp_path / "run")
    out = outputs(tmp_path)
    res = run_alg("driftresidence", {
        "DEPTH": files["depth"], "VELOCITY_U": files["u"], "VELOCITY_V": files["v"], "REGIME": "test",
        "DISCHARGE": 1000.0, "CENTRELINE": centreline(tmp_path), "SEGMENT_LENGTH": 250.0,
        "ZONE_BREAKS": "0 upper, 400 lower", "N_PARTICLES": 12, **out})
    assert set(res) >= {"PATHS", "RESIDENCE", "RESIDENCE_SUMMARY", "ESTIMATE", "REPORT"}
    # RESIDENCE: the release one cell inside the upstream end; travel (1000 - 2) / U
    names, rows = read_table(out["RESIDENCE"])
    for key in ("run", "regime", "q_mld", "q_m3s", "particle", "fate", "release_chainage_m", "release_offset_m",
                "t_total_h", "t_total_d", "t_very_slow_h", "t_moderate_h", "pct_moderate", "t_zone_upper_h",
                "t_zone_lower_moderate_h"):
        assert key in names
    assert len(rows) == 12 and all(r["fate"] == "downstream" for r in rows)
    assert np.allclose(col(rows, "release_chainage_m"), 2.0)
    expected_h = (LENGTH - 2.0) / U / 3600.0
    assert np.allclose(col(rows, "t_total_h"), expected_h, rtol=1e-9)
    assert np.allclose(col(rows, "t_total_d"), expected_h / 24.0, rtol=1e-9)
    assert np.allclose(col(rows, "t_moderate_h"), expected_h, rtol=1e-9)
    assert np.allclose(col(rows, "pct_moderate"), 100.0)
    assert np.allclose(col(rows, "t_zone_upper_h"), (400.0 - 2.0) / U / 3600.0, rtol=1e-9)
    assert np.allclose(col(rows, "t_zone_lower_h"), 600.0 / U / 3600.0, rtol=1e-9)
    assert np.allclose(col(rows, "q_mld"), 1000.0) and np.allclose(col(rows, "q_m3s"), 1000.0 / 86.4)
    # seeds at the centres of 12 equal shares of the 40 m wet width
    assert np.allclose(np.sort(col(rows, "release_offset_m")), -20.0 + (np.arange(12) + 0.5) * 40.0 / 12, atol=0.3)
    # PATHS: LineStringM, M = seconds since release, ending at the travel time
    gtype, paths = read_paths(out["PATHS"])
    assert ogr.GT_HasM(gtype) and ogr.GT_Flatten(gtype) == ogr.wkbLineString
    assert len(paths) == 12
    for attrs, pts in paths:
        assert pts[0, 2] == 0.0 and pts[-1, 2] == pytest.approx(attrs["t_total_h"] * 3600.0)
        assert np.all(np.diff(pts[:, 2]) > 0)
        assert pts[-1, 0] == pytest.approx(X0 + LENGTH, abs=1e-6)
        # uniform flow: the measure grows with the distance travelled at U
        assert np.allclose(pts[:, 2], (pts[:, 0] - pts[0, 0]) / U, rtol=1e-9, atol=1e-6)
    # SUMMARY: reach + 2 zones; percentiles equal numpy's over the RESIDENCE rows
    _, srows = read_table(out["RESIDENCE_SUMMARY"])
    assert [r["unit"] for r in srows] == ["reach", "upper", "lower"]
    reach = srows[0]
    for q in (10, 50, 90):
        assert reach[f"t_total_p{q}_h"] == pytest.approx(np.percentile(col(rows, "t_total_h"), q))
        assert reach[f"t_moderate_p{q}_d"] == pytest.approx(np.percentile(col(rows, "t_moderate_h"), q) / 24.0)
        assert srows[1][f"t_total_p{q}_h"] == pytest.approx(np.percentile(col(rows, "t_zone_upper_h"), q))
    assert reach["n_downstream"] == 12 and reach["method"] == "particle tracking (RK4)"
    assert reach["t_estimate_h"] == pytest.approx(expected_h, rel=1e-6)
    assert "C = 1" in reach["step_rule"]
    # ESTIMATE: segments of 250 m; cumulative time L / U
    _, erows = read_table(out["ESTIMATE"])
    assert [r["segment"] for r in erows] == [1, 2, 3, 4]
    assert erows[-1]["t_cumulative_h"] == pytest.approx(expected_h, rel=1e-6)
    assert np.allclose(col(erows, "v_band_mean_ms"), U) and np.allclose(col(erows, "wet_width_m"), WIDTH)
    # REPORT
    text = read_text(out["REPORT"])
    assert "Drift and residence time" in text and "<svg" in text and "Caution" in text
    assert "Travel time along the reach" in text and "licensed professional practice" in text


def test_speed_only_run_gives_the_labelled_1d_estimate(run_alg, tmp_path):
    files = write_channel(tmp_path / "run", speed_only=True)
    out = outputs(tmp_path)
    run_alg("driftresidence", {"DEPTH": files["depth"], "SPEED": files["speed"], "CENTRELINE": centreline(tmp_path),
                               "SEGMENT_LENGTH": 100.0, **out})
    _, srows = read_table(out["RESIDENCE_SUMMARY"])
    assert srows[0]["method"] == "1D estimate" and srows[0]["n_particles"] == 0
    assert srows[0]["t_total_p50_h"] == pytest.approx((LENGTH - 2.0) / U / 3600.0, rel=1e-6)
    _, rows = read_table(out["RESIDENCE"])
    assert rows == []
    gtype, paths = read_paths(out["PATHS"])
    assert len(paths) == 1 and paths[0][0]["fate"] == "estimate"
    pts = paths[0][1]
    assert pts[-1, 2] == pytest.approx((LENGTH - 2.0) / U, rel=1e-6)
    assert np.allclose(pts[:, 2], (pts[:, 0] - pts[0, 0]) / U, rtol=1e-6)
    assert "1D estimate" in read_text(out["REPORT"])


def test_mesh_run_and_seed_points_in_another_crs(run_alg, tmp_path):
    mesh = write_ugrid(tmp_path / "run.nc")
    # three seeds given in geographic coordinates (reprojected), one of them on dry land
    tr = osr.CoordinateTransformation(_srs(EPSG), _srs(4326))
    pts = [tr.TransformPoint(X0 + 100.0, Y0 + yy)[:2] for yy in (5.0, 20.0, 70.0)]
    seeds = write_points(tmp_path / "seeds.gpkg", pts, 4326)
    out = outputs(tmp_path)
    run_alg("driftresidence", {"MESH": mesh, "CENTRELINE": centreline(tmp_path), "SEEDS": seeds,
                               "ZONE_BREAKS": "", **out})
    _, rows = read_table(out["RESIDENCE"])
    assert [r["fate"] for r in rows] == ["downstream", "downstream", "dry_release"]
    assert np.allclose(col(rows, "release_chainage_m")[:2], 100.0, atol=1e-3)
    assert np.allclose(col(rows, "t_total_h")[:2], (LENGTH - 100.0) / U / 3600.0, rtol=1e-6)
    _, paths = read_paths(out["PATHS"])
    assert len(paths) == 2  # the dry seed has no path
    _, srows = read_table(out["RESIDENCE_SUMMARY"])
    assert srows[0]["n_tracked"] == 2 and srows[0]["n_particles"] == 3


def test_scenario_table_runs_every_row(run_alg, tmp_path):
    rows = []
    for regime, q, u in (("fast", 2000, 0.5), ("slow", 2000, 0.125), ("slow", 4000, 0.25)):
        f = write_channel(tmp_path / "runs", u=u, name=f"{regime}_{q}_")
        rows.append({"regime": regime, "discharge": q, "unit": "ML/d", "depth": os.path.basename(f["depth"]),
                     "u": os.path.basename(f["u"]), "v": os.path.basename(f["v"])})
    table = tmp_path / "runs" / "scenarios.csv"
    with open(table, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    out = outputs(tmp_path)
    run_alg("driftresidence", {"SCENARIOS": str(table), "CENTRELINE": centreline(tmp_path), "N_PARTICLES": 5,
                               "WORKERS": 2, **out})
    _, srows = read_table(out["RESIDENCE_SUMMARY"])
    reach = [r for r in srows if r["scope"] == "reach"]
    assert [(r["regime"], r["q_mld"]) for r in reach] == [("fast", 2000), ("slow", 2000), ("slow", 4000)]
    for r, u in zip(reach, (0.5, 0.125, 0.25)):
        assert r["t_total_p50_h"] == pytest.approx((LENGTH - 2.0) / u / 3600.0, rel=1e-9)
    assert reach[1]["t_slow_p50_h"] == pytest.approx((LENGTH - 2.0) / 0.125 / 3600.0, rel=1e-9)
    _, res_rows = read_table(out["RESIDENCE"])
    assert len(res_rows) == 15
    text = read_text(out["REPORT"])
    assert "against discharge" in text  # the regime 'slow' has two discharges


def test_bad_input_names_the_parameter(run_alg, tmp_path):
    from qgis.core import QgsProcessingException

    files = write_channel(tmp_path / "run")
    base = {"DEPTH": files["depth"], "VELOCITY_U": files["u"], "VELOCITY_V": files["v"], "N_PARTICLES": 3,
            "RESIDENCE": "memory:", "RESIDENCE_SUMMARY": "memory:"}
    with pytest.raises(QgsProcessingException, match="CENTRELINE: .*against the reach axis"):
        run_alg("driftresidence", {**base, "CENTRELINE": centreline(tmp_path, reverse=True)})
    with pytest.raises(QgsProcessingException, match="RELEASE_CHAINAGE"):
        run_alg("driftresidence", {**base, "CENTRELINE": centreline(tmp_path), "RELEASE_CHAINAGE": 5000.0})
    with pytest.raises(QgsProcessingException, match="SCENARIOS"):
        run_alg("driftresidence", {"CENTRELINE": centreline(tmp_path), "RESIDENCE": "memory:",
                                   "RESIDENCE_SUMMARY": "memory:"})
    with pytest.raises(QgsProcessingException, match="END_CHAINAGE"):
        run_alg("driftresidence", {**base, "CENTRELINE": centreline(tmp_path), "RELEASE_CHAINAGE": 600.0,
                                   "END_CHAINAGE": 300.0})


def test_cancel_leaves_no_report(run_alg, tmp_path):
    from qgis.core import QgsProcessingException, QgsProcessingFeedback

    files = write_channel(tmp_path / "run", u=0.01)

    class Cancelling(QgsProcessingFeedback):
        def setProgress(self, p):  # noqa: N802
            super().setProgress(p)
            if p > 20:
                self.cancel()

    out = outputs(tmp_path)
    with pytest.raises(QgsProcessingException, match="Cancelled"):
        run_alg("driftresidence", {"DEPTH": files["depth"], "VELOCITY_U": files["u"], "VELOCITY_V": files["v"],
                                   "CENTRELINE": centreline(tmp_path), "N_PARTICLES": 50, **out},
                feedback=Cancelling())
    assert not os.path.exists(out["REPORT"])


# ------------------------------------------------------------------------------------------------
# The demo reach (plausibility; common practice, no source)
# ------------------------------------------------------------------------------------------------

@pytest.mark.slow
def test_demo_weir_pool_holds_drift_in_slow_water_longer_than_the_natural_river(run_alg, sample_dir, tmp_path):
    out = outputs(tmp_path)
    run_alg("driftresidence", {"SCENARIOS": str(sample_dir / "scenarios.csv"), "SCENARIO_REGIMES": "weir, natural",
                               "SCENARIO_DISCHARGES": "3000",
                               "CENTRELINE": str(sample_dir / "centreline.gpkg") + "|layername=centreline",
                               "CENTRELINE_DIRECTION": 1,  # the demo centreline is digitised downstream first
                               "ZONE_BREAKS": "0 upper, 12000 middle, 25000 lower", "N_PARTICLES": 40, **out})
    _, srows = read_table(out["RESIDENCE_SUMMARY"])
    reach = {r["regime"]: r for r in srows if r["scope"] == "reach"}
    slow = {k: r["t_slow_p50_h"] + r["t_very_slow_p50_h"] for k, r in reach.items()}
    # plausibility (common practice, no source): the pool at the lowest discharge keeps drifting
    # material in slow and very slow water several times longer than the natural river
    assert slow["weir"] > 3.0 * slow["natural"]
    assert reach["weir"]["t_total_p50_h"] > reach["natural"]["t_total_p50_h"]
    assert reach["weir"]["n_downstream"] >= 0.9 * 40 and reach["natural"]["n_downstream"] >= 0.9 * 40


def test_worker_processes_do_not_rerun_an_unguarded_script(tmp_path):
    # A script without an `if __name__ == "__main__"` guard that drifts a scenario table on two worker
    # processes: the workers must not run the script again (it would print twice, or hang).
    import subprocess
    import sys
    from pathlib import Path

    rows = []
    for q, u in ((1000, 0.25), (2000, 0.5)):
        f = write_channel(tmp_path / "runs", u=u, name=f"r{q}_")
        rows.append(f"test,{q},ML/d,{os.path.basename(f['depth'])},{os.path.basename(f['u'])},"
                    f"{os.path.basename(f['v'])}")
    table = tmp_path / "runs" / "scenarios.csv"
    table.write_text("regime,discharge,unit,depth,u,v\n" + "\n".join(rows) + "\n")
    root = Path(__file__).resolve().parents[2]
    script = tmp_path / "unguarded.py"
    script.write_text(f"""
import sys
sys.path.insert(0, {str(root)!r})
import numpy as np
from plugin.core import drift
from plugin.core.classes import velocity_preset
from plugin.core.reach import Reach, ReachAxis
from plugin.core.scenario import read_scenarios
from plugin.gis.driftio import drift_rows
print("script body ran", flush=True)
axis = ReachAxis(np.array([{X0}, {X0 + LENGTH}]), np.array([{Y0 + WIDTH / 2}] * 2))
reach = Reach(axis, np.array([0.0, {LENGTH}]), [0.0, {LENGTH}], ["reach"])
here = drift_rows(read_scenarios({str(table)!r}), reach, velocity_preset(), drift.DriftOptions(n_particles=3),
                  0.05, workers=1)  # the reach's locate tables are built and cached in this process first
out = drift_rows(read_scenarios({str(table)!r}), reach, velocity_preset(), drift.DriftOptions(n_particles=3),
                 0.05, workers=2)
assert [float(r.result.travel_s[0]) for _, _, r in here] == [float(r.result.travel_s[0]) for _, _, r in out]
print("travel", [round(float(r.result.travel_s[0]), 6) for _, _, r in out], flush=True)
""")
    proc = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.count("script body ran") == 1
    travel = eval(proc.stdout.split("travel", 1)[1].strip())  # noqa: S307 - our own printed list
    assert travel == pytest.approx([(LENGTH - 2.0) / 0.25, (LENGTH - 2.0) / 0.5], rel=1e-9)
