"""The demo-reach generator (sample_gis): same bytes every run, the agreed layout, file formats,
orientation, and no half-written output. Runs on a small, coarse reach generated into tmp dirs."""

from __future__ import annotations

import csv
import datetime as dt
import hashlib
import json
from pathlib import Path

import numpy as np
import pytest
import shapely
from osgeo import gdal, ogr, osr
from scipy.spatial import cKDTree
from shapely import wkb

from sample_gis import generate as gen
from sample_gis.tables import LADDER_MLD, REGIMES

gdal.UseExceptions()

SMALL = dict(cell=10.0, length_km=8.0, seed=1, mesh_regimes=("weir",), mesh_face_size=20.0, verbose=False)


def _hashes(folder: Path) -> dict:
    out = {}
    for p in sorted(folder.rglob("*")):
        if p.is_file():
            out[str(p.relative_to(folder))] = hashlib.sha256(p.read_bytes()).hexdigest()
    return out


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "generated"
    info = gen.generate(out, **SMALL)
    return out, info


def _csv(path):
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _raster(path):
    ds = gdal.Open(str(path))
    band = ds.GetRasterBand(1)
    arr = band.ReadAsArray()
    meta = {
        "nodata": band.GetNoDataValue(), "dtype": band.DataType, "block": band.GetBlockSize(),
        "compression": ds.GetMetadata("IMAGE_STRUCTURE").get("COMPRESSION"), "gt": ds.GetGeoTransform(),
        "wkt": ds.GetProjection(),
    }
    del band, ds
    return arr, meta


def _layer(path, name):
    ds = ogr.Open(str(path))
    lyr = ds.GetLayer(name)
    assert lyr is not None, f"{path} has no layer {name}"
    defn = lyr.GetLayerDefn()
    fields = {defn.GetFieldDefn(i).GetName(): defn.GetFieldDefn(i).GetType() for i in range(defn.GetFieldCount())}
    feats = []
    for f in lyr:
        feats.append(({k: f.GetField(k) for k in fields}, wkb.loads(bytes(f.GetGeometryRef().ExportToWkb()))))
    srs = lyr.GetSpatialRef().Clone()
    gtype = lyr.GetGeomType()
    del lyr, ds
    return fields, feats, srs, gtype


def _centreline_upstream_first(folder):
    _, feats, _, _ = _layer(folder / "centreline.gpkg", "centreline")
    return np.asarray(feats[0][1].coords)[::-1]


# ---------------------------------------------------------------------------------------------

def test_same_bytes_every_run(small, tmp_path):
    first, _ = small
    again = tmp_path / "again"
    gen.generate(again, **SMALL)
    a, b = _hashes(first), _hashes(again)
    assert a.keys() == b.keys()
    different = [k for k in a if a[k] != b[k]]
    assert not different, f"files differ between two runs: {different}"


def test_another_seed_gives_another_reach(small, tmp_path):
    first, _ = small
    other = tmp_path / "other"
    gen.generate(other, **{**SMALL, "seed": 2, "mesh_regimes": ()})
    assert _hashes(first)["centreline.gpkg"] != _hashes(other)["centreline.gpkg"]


def test_layout_follows_the_interface(small):
    out, _ = small
    for name in (".complete", "README.md", "centreline.gpkg", "channel.gpkg", "vegetation.gpkg", "scenarios.csv",
                 "scenarios_mesh.csv", "rating_records.csv", "daily_flows.csv", "ladder.csv"):
        assert (out / name).is_file(), name
    for reg in REGIMES:
        for q in LADDER_MLD:
            for f in ("depth", "speed", "u", "v"):
                assert (out / "rasters" / reg / f"q{q:05d}_{f}.tif").is_file()
    assert sorted(p.name for p in (out / "mesh" / "weir").iterdir()) == [f"q{q:05d}.nc" for q in LADDER_MLD]
    assert not list(out.parent.glob(".*partial*")), "temporary folders left behind"
    assert not list(out.rglob(".partial-*")), "temporary files left behind"


def test_ladder(small):
    out, _ = small
    rows = _csv(out / "ladder.csv")
    q = np.array([float(r["q_mld"]) for r in rows])
    assert len(q) == 11 and q[0] == 3000 and q[-1] == 40000 and np.all(np.diff(q) > 0)
    # 1 ML/d = 1000 m3 / 86 400 s (SI definitions)
    np.testing.assert_allclose([float(r["q_m3s"]) for r in rows], q * 1000.0 / 86400.0, atol=5e-7)


def test_scenario_tables_parse_with_the_project_reader(small):
    from plugin.core.scenario import read_scenarios

    out, _ = small
    rows = _csv(out / "scenarios.csv")
    assert list(rows[0].keys()) == ["regime", "discharge", "unit", "depth", "speed", "u", "v"]
    assert all(not Path(r[k]).is_absolute() for r in rows for k in ("depth", "speed", "u", "v"))
    runs = read_scenarios(str(out / "scenarios.csv"))
    assert len(runs) == 44
    assert {(r.regime, round(r.q_mld)) for r in runs} == {(g, q) for g in REGIMES for q in LADDER_MLD}
    for r in runs:
        assert Path(r.source.depth).is_file() and Path(r.source.speed).is_file()
        assert r.q_m3s == pytest.approx(r.q_mld * 1000.0 / 86400.0, rel=1e-12)
    mesh_runs = read_scenarios(str(out / "scenarios_mesh.csv"))
    assert len(mesh_runs) == 11 and all(r.regime == "weir" for r in mesh_runs)
    assert all(Path(r.source.mesh).is_file() and r.source.time_index == -1 for r in mesh_runs)
    assert {r.source.depth_group for r in mesh_runs} == {"depth"}
    assert {r.source.velocity_group for r in mesh_runs} == {"velocity"}


def test_rasters_are_tiled_deflate_float32_with_nodata(small):
    out, info = small
    grids = set()
    for reg in REGIMES:
        for f in ("depth", "speed", "u", "v"):
            arr, m = _raster(out / "rasters" / reg / f"q03000_{f}.tif")
            assert m["dtype"] == gdal.GDT_Float32
            assert m["block"] == [256, 256]
            assert m["compression"] == "DEFLATE"
            assert m["nodata"] == -9999.0
            assert (arr == -9999.0).any() and (arr != -9999.0).any()
            gt = m["gt"]
            assert gt[1] == 10.0 and gt[5] == -10.0 and gt[2] == 0.0 and gt[4] == 0.0
            srs = osr.SpatialReference(wkt=m["wkt"])
            srs.AutoIdentifyEPSG()
            assert srs.GetAuthorityCode(None) == "32744" and srs.IsProjected()
            grids.add((gt, arr.shape))
    assert len(grids) == 1  # every raster on one grid


def test_velocity_components_consistent_and_along_the_channel(small):
    out, _ = small
    depth, _ = _raster(out / "rasters" / "natural" / "q14000_depth.tif")
    speed, m = _raster(out / "rasters" / "natural" / "q14000_speed.tif")
    u, _ = _raster(out / "rasters" / "natural" / "q14000_u.tif")
    v, _ = _raster(out / "rasters" / "natural" / "q14000_v.tif")
    wet = depth != -9999.0
    for a in (speed, u, v):
        assert np.array_equal(a != -9999.0, wet)  # one wet mask for all four
    assert np.all(depth[wet] > 0)
    np.testing.assert_allclose(np.hypot(u[wet], v[wet]), speed[wet], rtol=1e-5, atol=1e-6)
    # direction: the local downstream direction of the centreline (upstream -> downstream order)
    pts = _centreline_upstream_first(out)
    tangent = np.diff(pts, axis=0)
    tangent /= np.hypot(tangent[:, 0], tangent[:, 1])[:, None]
    rr, cc = np.nonzero(wet)
    gt = m["gt"]
    x, y = gt[0] + (cc + 0.5) * gt[1], gt[3] + (rr + 0.5) * gt[5]
    mids = 0.5 * (pts[1:] + pts[:-1])
    _, k = cKDTree(mids).query(np.column_stack([x, y]))
    cosang = (u[wet] * tangent[k, 0] + v[wet] * tangent[k, 1]) / np.maximum(speed[wet], 1e-12)
    assert np.median(cosang) > 0.999
    assert np.mean(cosang > 0.95) > 0.97


def test_centreline_is_digitised_downstream_to_upstream(small):
    out, _ = small
    fields, feats, srs, gtype = _layer(out / "centreline.gpkg", "centreline")
    assert len(feats) == 1 and ogr.GT_Flatten(gtype) == ogr.wkbLineString
    srs.AutoIdentifyEPSG()
    assert srs.GetAuthorityCode(None) == "32744"
    coords = np.asarray(feats[0][1].coords)
    weir, m = _raster(out / "rasters" / "weir" / "q03000_depth.tif")
    natural, _ = _raster(out / "rasters" / "natural" / "q03000_depth.tif")
    gt = m["gt"]

    def rise_at(p):  # how far the weir pool lifts the water above the natural river there
        c, r = int((p[0] - gt[0]) / gt[1]), int((p[1] - gt[3]) / gt[5])
        w, n = weir[r - 1:r + 2, c - 1:c + 2], natural[r - 1:r + 2, c - 1:c + 2]
        both = (w != -9999.0) & (n != -9999.0)
        return float(np.max((w - n)[both]))

    # the first vertex is at the weir, where the pool lifts the water most; the last at the regulator
    assert rise_at(coords[0]) > rise_at(coords[-1]) + 0.4
    assert "Figment River" in feats[0][0].values()


def test_channel_outline_is_valid_and_holds_the_water(small):
    out, _ = small
    _, feats, _, _ = _layer(out / "channel.gpkg", "channel")
    assert len(feats) == 1
    poly = feats[0][1]
    assert poly.is_valid and poly.geom_type == "Polygon"
    depth, m = _raster(out / "rasters" / "natural" / "q40000_depth.tif")
    gt = m["gt"]
    rr, cc = np.nonzero(depth != -9999.0)
    x, y = gt[0] + (cc + 0.5) * gt[1], gt[3] + (rr + 0.5) * gt[5]
    assert np.all(shapely.contains_xy(poly.buffer(0.01), x, y))
    # near bank-full: most of the channel is wet (cells of 100 m2)
    assert len(x) * 100.0 > 0.8 * poly.area


def test_vegetation_layer(small):
    out, _ = small
    fields, feats, _, gtype = _layer(out / "vegetation.gpkg", "vegetation")
    assert fields["community"] == ogr.OFTString and fields["stand_id"] == ogr.OFTInteger
    assert ogr.GT_Flatten(gtype) == ogr.wkbPolygon
    ids = [f["stand_id"] for f, _ in feats]
    assert sorted(ids) == list(range(1, len(ids) + 1))
    communities = {f["community"] for f, _ in feats}
    assert communities == {"riparian woodland", "bank sedgeland", "emergent reed bed"} or \
        communities == {"riparian woodland", "bank sedgeland", "emergent reed bed", "bench grassland"}
    _, chan, _, _ = _layer(out / "channel.gpkg", "channel")
    near = chan[0][1].buffer(25.0)
    for f, g in feats:
        assert g.is_valid and g.area > 100.0
        assert near.contains(g), f
    # stands of one community on one bank do not overlap
    by = {}
    for f, g in feats:
        by.setdefault((f["community"], f["bank"]), []).append(g)
    for gs in by.values():
        assert shapely.union_all(gs).area == pytest.approx(sum(g.area for g in gs), rel=1e-6)


def test_invented_flow_year_and_rating_records(small):
    out, info = small
    rows = _csv(out / "daily_flows.csv")
    assert list(rows[0].keys()) == ["date", "discharge", "unit"]
    dates = [dt.date.fromisoformat(r["date"]) for r in rows]
    assert len(rows) == 365 and all((b - a).days == 1 for a, b in zip(dates, dates[1:]))
    assert {r["unit"] for r in rows} == {"ML/d"}
    q = np.array([float(r["discharge"]) for r in rows])
    inside = (q >= 3000) & (q <= 40000)
    assert inside.mean() > 0.9 and not inside.all()  # mostly within the ladder, a few days outside
    assert q.argmax() < 180  # winter-spring peak in the first half of the water year
    rec = _csv(out / "rating_records.csv")
    assert list(rec[0].keys()) == ["date", "discharge_mld", "stage_m"] and len(rec) >= 100
    r = json.loads((out / "reach.json").read_text())["rating"]
    qm = np.array([float(x["discharge_mld"]) for x in rec]) * 1000.0 / 86400.0
    h = np.array([float(x["stage_m"]) for x in rec])
    resid = h - (r["h0"] + (qm / r["C"]) ** (1.0 / r["b"]))
    assert 0.03 < np.std(resid) < 0.15 and abs(np.median(resid)) < 0.03


def test_mesh_file_structure(small):
    import netCDF4

    out, _ = small
    with netCDF4.Dataset(out / "mesh" / "weir" / "q03000.nc") as ds:
        assert "UGRID-1.0" in ds.Conventions
        assert not any("date" in a.lower() or "history" in a.lower() for a in ds.ncattrs())
        topo = ds.variables["mesh2d"]
        assert topo.cf_role == "mesh_topology" and int(topo.topology_dimension) == 2
        fnv = ds.variables[topo.face_node_connectivity]
        assert int(fnv.start_index) == 0 and int(fnv._FillValue) == -1
        xname = topo.node_coordinates.split()[0]
        crs = ds.variables[ds.variables[xname].grid_mapping]
        assert isinstance(crs.epsg, (int, np.integer)) and int(crs.epsg) == 32744
        assert len(ds.dimensions["time"]) == 1
        long_names = {getattr(v, "long_name", "") for v in ds.variables.values()}
        assert {"depth", "velocity, x-component", "velocity, y-component"} <= long_names
        for name in ("depth", "velocity_x", "velocity_y"):
            assert ds.variables[name].location == "face" and ds.variables[name].mesh == "mesh2d"
        fn = np.asarray(fnv[:].filled(-1))
        x = np.asarray(ds.variables[xname][:])
        y = np.asarray(ds.variables[topo.node_coordinates.split()[1]][:])
    tri = fn[:, 3] < 0
    assert tri.any() and (~tri).any()  # triangles and quadrilaterals
    # anticlockwise faces (positive shoelace area), as UGRID recommends
    valid = fn >= 0
    nn = valid.sum(axis=1)
    safe = np.where(valid, fn, 0)
    nxt = np.take_along_axis(safe, np.where(np.arange(4)[None, :] + 1 < nn[:, None], np.arange(4)[None, :] + 1, 0),
                             axis=1)
    ox, oy = x[safe[:, 0]][:, None], y[safe[:, 0]][:, None]
    cross = np.where(valid, (x[safe] - ox) * (y[nxt] - oy) - (x[nxt] - ox) * (y[safe] - oy), 0.0)
    assert np.all(cross.sum(axis=1) > 0)


def test_mesh_read_by_the_project_reader_agrees_with_the_rasters(small):
    from plugin.core.sources import RunSource
    from plugin.gis.runs import open_ugrid, read_mesh_run, read_raster_run

    out, _ = small
    path = str(out / "mesh" / "weir" / "q03000.nc")
    mesh = open_ugrid(path)
    assert set(mesh.groups) == {"depth", "velocity", "bed elevation"}
    assert mesh.groups["velocity"].variables == ("velocity_x", "velocity_y")
    assert mesh.groups["depth"].location == "face" and mesh.groups["depth"].n_times == 1
    srs = osr.SpatialReference(wkt=mesh.crs_wkt)
    srs.AutoIdentifyEPSG()
    assert srs.GetAuthorityCode(None) == "32744"
    fm = read_mesh_run(RunSource(mesh=path))
    fr = read_raster_run(str(out / "rasters" / "weir" / "q03000_depth.tif"),
                         str(out / "rasters" / "weir" / "q03000_speed.tif"))
    assert fm.wet_area_m2 == pytest.approx(fr.wet_area_m2, rel=0.05)
    # the same water at the same place: mesh faces against the depth raster sampled bilinearly
    # (scipy.ndimage) at their centroids, away from the water's edge
    from scipy.ndimage import map_coordinates

    depth, m = _raster(out / "rasters" / "weir" / "q03000_depth.tif")
    gt = m["gt"]
    col = (fm.x - gt[0]) / gt[1] - 0.5
    row = (fm.y - gt[3]) / gt[5] - 0.5
    wet = (depth != -9999.0).astype(float)
    inner = map_coordinates(wet, [row, col], order=1) > 0.999
    d_r = map_coordinates(np.where(depth == -9999.0, 0.0, depth), [row, col], order=1)
    assert inner.mean() > 0.8
    assert np.median(np.abs(d_r[inner] - fm.depth[inner])) < 0.02
    assert np.percentile(np.abs(d_r[inner] - fm.depth[inner]), 95) < 0.15


def test_interrupted_run_leaves_nothing_that_looks_complete(tmp_path, monkeypatch):
    out = tmp_path / "generated"

    def boom(*a, **k):
        raise RuntimeError("interrupted")

    monkeypatch.setattr(gen, "write_ugrid", boom)
    with pytest.raises(RuntimeError):
        gen.generate(out, **{**SMALL, "discharges": (3000, 40000)})
    assert not out.exists()
    assert list(tmp_path.iterdir()) == []  # no temporary folder left either
    # an existing complete set survives a failed regeneration untouched
    monkeypatch.undo()
    gen.generate(out, **{**SMALL, "discharges": (3000,), "mesh_regimes": ()})
    before = _hashes(out)
    monkeypatch.setattr(gen, "write_ugrid", boom)
    with pytest.raises(RuntimeError):
        gen.generate(out, **{**SMALL, "discharges": (3000, 40000)})
    assert _hashes(out) == before and (out / ".complete").exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["generated"]


def test_bad_arguments(tmp_path):
    with pytest.raises(ValueError, match="unknown regime"):
        gen.generate(tmp_path / "x", regimes=("weir", "lake"), verbose=False)
    with pytest.raises(ValueError, match="mesh regime"):
        gen.generate(tmp_path / "x", regimes=("natural",), mesh_regimes=("weir",), verbose=False)
    with pytest.raises(ValueError, match="positive"):
        gen.generate(tmp_path / "x", discharges=(3000, -1), verbose=False)
    assert gen.main(["--out", str(tmp_path / "x"), "--regimes", "lake"]) == 2
    assert not (tmp_path / "x").exists()


def test_command_line(tmp_path, capsys):
    rc = gen.main(["--out", str(tmp_path / "cli"), "--length-km", "5", "--cell", "20", "--regimes", "weir,natural",
                   "--discharges", "3000,40000", "--mesh-regimes", "", "--quiet"])
    assert rc == 0
    assert (tmp_path / "cli" / ".complete").exists()
    assert len(_csv(tmp_path / "cli" / "scenarios.csv")) == 4
    assert _csv(tmp_path / "cli" / "scenarios_mesh.csv") == []
    assert capsys.readouterr().out == ""
