"""The generated demo reach as QGIS sees it: UGRID meshes through the MDAL provider (CRS, dataset
groups, face-centred data equal to the file's values), and the rasters and vector layers."""

from __future__ import annotations

import csv

import numpy as np
import pytest
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsMesh,
    QgsMeshDatasetGroupMetadata,
    QgsMeshDatasetIndex,
    QgsMeshLayer,
    QgsRasterLayer,
    QgsVectorLayer,
    QgsWkbTypes,
)


def _mesh_rows(sample_dir):
    with open(sample_dir / "scenarios_mesh.csv", newline="") as fh:
        return list(csv.DictReader(fh))


def _groups(layer):
    dp = layer.dataProvider()
    out = {}
    for i in range(dp.datasetGroupCount()):
        meta = dp.datasetGroupMetadata(QgsMeshDatasetIndex(i, 0))
        out[meta.name()] = (i, meta)
    return out


def test_every_mesh_loads_with_crs_and_groups(qgis_app, sample_dir):
    rows = _mesh_rows(sample_dir)
    assert len(rows) >= 11 and {"weir"} <= {r["regime"] for r in rows}
    for row in rows:
        layer = QgsMeshLayer(str(sample_dir / row["mesh"]), "m", "mdal")
        assert layer.isValid(), row["mesh"]
        assert layer.crs() == QgsCoordinateReferenceSystem("EPSG:32744")
        groups = _groups(layer)
        # QGIS shows exactly the group names the table names (and the project's reader derives)
        assert set(groups) == {"depth", "velocity", "bed elevation"}
        assert row["depth_group"] in groups and row["velocity_group"] in groups
        depth, velocity, bed = groups["depth"][1], groups["velocity"][1], groups["bed elevation"][1]
        assert depth.dataType() == QgsMeshDatasetGroupMetadata.DataOnFaces and depth.isScalar()
        assert velocity.dataType() == QgsMeshDatasetGroupMetadata.DataOnFaces and velocity.isVector()
        assert bed.dataType() == QgsMeshDatasetGroupMetadata.DataOnVertices
        dp = layer.dataProvider()
        assert dp.datasetCount(QgsMeshDatasetIndex(groups["depth"][0], 0)) == 1


def test_mesh_face_values_as_in_the_file(qgis_app, sample_dir):
    import netCDF4

    path = sample_dir / "mesh" / "weir" / "q03000.nc"
    layer = QgsMeshLayer(str(path), "m", "mdal")
    dp = layer.dataProvider()
    with netCDF4.Dataset(path) as ds:
        ds.set_auto_mask(False)
        depth = np.asarray(ds.variables["depth"][0], dtype=float)
        u = np.asarray(ds.variables["velocity_x"][0], dtype=float)
        v = np.asarray(ds.variables["velocity_y"][0], dtype=float)
        fill = float(ds.variables["depth"]._FillValue)
        fn = np.asarray(ds.variables["mesh2d_face_nodes"][:])
        nx = np.asarray(ds.variables["mesh2d_node_x"][:])
    assert dp.faceCount() == len(depth) and dp.vertexCount() == len(nx)
    native = QgsMesh()
    dp.populateMesh(native)
    groups = _groups(layer)
    di = QgsMeshDatasetIndex(groups["depth"][0], 0)
    vi = QgsMeshDatasetIndex(groups["velocity"][0], 0)
    rng = np.random.default_rng(0)
    wet = np.flatnonzero(depth != fill)
    dry = np.flatnonzero(depth == fill)
    assert len(dry) > 0 and len(wet) > 0.5 * len(depth)
    for k in rng.choice(wet, 200, replace=False):
        k = int(k)
        assert dp.datasetValue(di, k).scalar() == pytest.approx(depth[k], rel=1e-6)
        val = dp.datasetValue(vi, k)
        assert val.x() == pytest.approx(u[k], rel=1e-6, abs=1e-9)
        assert val.y() == pytest.approx(v[k], rel=1e-6, abs=1e-9)
        # the face QGIS holds at this index has the file's nodes (triangles and quadrilaterals)
        nodes = [int(n) for n in fn[k] if n >= 0]
        assert list(native.face(k)) == nodes
    for k in rng.choice(dry, 20, replace=False):  # dry faces hold the fill value: no data in QGIS
        assert np.isnan(dp.datasetValue(di, int(k)).scalar())
    assert {len(native.face(k)) for k in range(0, dp.faceCount(), 7)} == {3, 4}


def test_rasters_load_with_crs_and_nodata(qgis_app, sample_dir):
    with open(sample_dir / "scenarios.csv", newline="") as fh:
        row = next(csv.DictReader(fh))
    for key in ("depth", "speed", "u", "v"):
        layer = QgsRasterLayer(str(sample_dir / row[key]), key)
        assert layer.isValid()
        assert layer.crs().authid() == "EPSG:32744"
        assert layer.crs().mapUnits() == QgsCoordinateReferenceSystem("EPSG:32744").mapUnits()
        dp = layer.dataProvider()
        assert dp.sourceHasNoDataValue(1) and dp.sourceNoDataValue(1) == -9999.0
        assert layer.rasterUnitsPerPixelX() == pytest.approx(5.0)


def test_vector_layers_load(qgis_app, sample_dir):
    line = QgsVectorLayer(f"{sample_dir / 'centreline.gpkg'}|layername=centreline", "c", "ogr")
    assert line.isValid() and line.featureCount() == 1
    assert QgsWkbTypes.geometryType(line.wkbType()) == QgsWkbTypes.LineGeometry
    assert line.crs().authid() == "EPSG:32744"
    chan = QgsVectorLayer(f"{sample_dir / 'channel.gpkg'}|layername=channel", "ch", "ogr")
    assert chan.isValid() and chan.featureCount() == 1
    geom = next(chan.getFeatures()).geometry()
    assert geom.isGeosValid()
    veg = QgsVectorLayer(f"{sample_dir / 'vegetation.gpkg'}|layername=vegetation", "v", "ogr")
    assert veg.isValid() and veg.featureCount() > 20
    names = veg.fields().names()
    assert "community" in names and "stand_id" in names
    assert len({f["community"] for f in veg.getFeatures()}) == 4
    assert all(f.geometry().isGeosValid() for f in veg.getFeatures())
