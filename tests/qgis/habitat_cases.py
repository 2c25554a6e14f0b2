"""Small hand-made runs for maphabitat tests: a straight channel along +x as GeoTIFFs and a centreline
GeoPackage, and a UGRID mesh of the same field (two face sizes)."""

from __future__ import annotations

import numpy as np
from osgeo import gdal, ogr, osr

gdal.UseExceptions()
ogr.UseExceptions()

EPSG = 32755  # a projected CRS in metres
X0, Y0 = 500000.0, 6000000.0  # lower-left corner of the channel
LENGTH, WIDTH, CELL = 1200.0, 40.0, 2.0


def srs(epsg=EPSG):
    s = osr.SpatialReference()
    s.ImportFromEPSG(epsg)
    return s


def speed_of(x, y):
    """A field with every class: speed falls from 0.45 m/s upstream (x small) to 0 at the far end,
    and slows towards the banks. Flow towards +x."""
    along = np.clip(1.0 - (x - X0) / LENGTH, 0, 1)
    across = 1.0 - ((y - Y0 - WIDTH / 2) / (WIDTH / 2)) ** 2
    return (0.45 * along * np.clip(across, 0, 1) ** 0.5).astype(np.float32)


def depth_of(x, y):
    across = 1.0 - ((y - Y0 - WIDTH / 2) / (WIDTH / 2)) ** 2
    return (3.0 * np.clip(across, 0, 1) + 0.01).astype(np.float32)


def grid(cell=CELL, pad=10.0):
    ncols = int(round((LENGTH + 2 * pad) / cell))
    nrows = int(round((WIDTH + 2 * pad) / cell))
    gt = (X0 - pad, cell, 0.0, Y0 + WIDTH + pad, 0.0, -cell)
    cc, rr = np.meshgrid(np.arange(ncols), np.arange(nrows))
    x = gt[0] + (cc + 0.5) * cell
    y = gt[3] + (rr + 0.5) * gt[5]
    return gt, x, y


def write_tif(path, array, gt, epsg=EPSG, nodata=-9999.0):
    drv = gdal.GetDriverByName("GTiff")
    ds = drv.Create(str(path), array.shape[1], array.shape[0], 1, gdal.GDT_Float32,
                    ["TILED=YES", "COMPRESS=DEFLATE"])
    ds.SetGeoTransform(gt)
    ds.SetProjection(srs(epsg).ExportToWkt())
    b = ds.GetRasterBand(1)
    b.SetNoDataValue(nodata)
    b.WriteArray(np.where(np.isfinite(array), array, nodata).astype(np.float32))
    b.FlushCache()
    del b, ds
    return str(path)


def write_rasters(folder, cell=CELL, speed_scale=1.0, depth_offset=0.0, epsg=EPSG, uv=False):
    """depth.tif and speed.tif (or u.tif, v.tif) of the straight channel; dry outside the banks."""
    gt, x, y = grid(cell)
    inside = (x > X0) & (x < X0 + LENGTH) & (y > Y0) & (y < Y0 + WIDTH)
    d = np.where(inside, depth_of(x, y) + depth_offset, np.nan)
    s = np.where(inside, speed_of(x, y) * speed_scale, np.nan)
    out = {"depth": write_tif(folder / "depth.tif", d, gt, epsg)}
    if uv:
        out["u"] = write_tif(folder / "u.tif", s * 0.8, gt, epsg)
        out["v"] = write_tif(folder / "v.tif", s * 0.6, gt, epsg)
    else:
        out["speed"] = write_tif(folder / "speed.tif", s, gt, epsg)
    return out


def write_centreline(path, epsg=EPSG, x_from=X0, x_to=X0 + LENGTH, reverse=False):
    """A centreline GeoPackage along the channel middle, digitised upstream -> downstream (+x)."""
    drv = ogr.GetDriverByName("GPKG")
    ds = drv.CreateDataSource(str(path))
    lyr = ds.CreateLayer("centreline", srs(epsg), ogr.wkbLineString)
    line = ogr.Geometry(ogr.wkbLineString)
    xs = np.linspace(x_from, x_to, 13)
    if reverse:
        xs = xs[::-1]
    for xv in xs:
        if epsg == EPSG:
            line.AddPoint_2D(float(xv), Y0 + WIDTH / 2)
        else:
            tr = osr.CoordinateTransformation(srs(EPSG), srs(epsg))
            p = tr.TransformPoint(float(xv), Y0 + WIDTH / 2)
            line.AddPoint_2D(p[0], p[1])
    f = ogr.Feature(lyr.GetLayerDefn())
    f.SetGeometry(line)
    lyr.CreateFeature(f)
    del f, lyr, ds
    return str(path) + "|layername=centreline"


def mesh_arrays(fine=2.0, coarse=4.0):
    """Quad faces over the channel: 'coarse' squares in the left half (y < middle), 'fine' squares in
    the right half, sharing no edges across the middle line (two separate blocks), with the field
    sampled at face centres."""
    nodes_x, nodes_y, faces = [], [], []
    offset = 0
    for (ylo, yhi, h) in ((Y0, Y0 + WIDTH / 2, coarse), (Y0 + WIDTH / 2, Y0 + WIDTH, fine)):
        nx = int(round(LENGTH / h)) + 1
        ny = int(round((yhi - ylo) / h)) + 1
        gx, gy = np.meshgrid(X0 + np.arange(nx) * h, ylo + np.arange(ny) * h)
        nodes_x.append(gx.ravel())
        nodes_y.append(gy.ravel())
        i, j = np.meshgrid(np.arange(nx - 1), np.arange(ny - 1))
        n0 = (j * nx + i).ravel() + offset
        faces.append(np.column_stack([n0, n0 + 1, n0 + nx + 1, n0 + nx]))
        offset += nx * ny
    node_x = np.concatenate(nodes_x)
    node_y = np.concatenate(nodes_y)
    face_nodes = np.concatenate(faces)
    fx = node_x[face_nodes].mean(axis=1)
    fy = node_y[face_nodes].mean(axis=1)
    return node_x, node_y, face_nodes, fx, fy


def write_ugrid(path, epsg: int | None = EPSG, fine=2.0, coarse=4.0, node_values=False, groups="vector"):
    """A UGRID-1.0 NetCDF mesh with depth and velocity on faces (or on nodes with node_values)."""
    import netCDF4

    node_x, node_y, fn, fx, fy = mesh_arrays(fine, coarse)
    px, py = (node_x, node_y) if node_values else (fx, fy)
    d = depth_of(px, py)
    s = speed_of(px, py)
    with netCDF4.Dataset(str(path), "w") as ds:
        ds.Conventions = "CF-1.8 UGRID-1.0"
        ds.createDimension("nMesh2_node", len(node_x))
        ds.createDimension("nMesh2_face", len(fn))
        ds.createDimension("nMaxMesh2_face_nodes", 4)
        ds.createDimension("time", 2)
        m = ds.createVariable("Mesh2", "i4")
        m.cf_role = "mesh_topology"
        m.topology_dimension = 2
        m.node_coordinates = "Mesh2_node_x Mesh2_node_y"
        m.face_node_connectivity = "Mesh2_face_nodes"
        xv = ds.createVariable("Mesh2_node_x", "f8", ("nMesh2_node",))
        yv = ds.createVariable("Mesh2_node_y", "f8", ("nMesh2_node",))
        xv.standard_name, yv.standard_name = "projection_x_coordinate", "projection_y_coordinate"
        xv.units = yv.units = "m"
        xv[:] = node_x
        yv[:] = node_y
        if epsg:
            crs = ds.createVariable("crs", "i4")
            crs.epsg = int(epsg)
            xv.grid_mapping = "crs"
            yv.grid_mapping = "crs"
        fv = ds.createVariable("Mesh2_face_nodes", "i4", ("nMesh2_face", "nMaxMesh2_face_nodes"), fill_value=-1)
        fv.cf_role = "face_node_connectivity"
        fv.start_index = 0
        fv[:] = fn
        loc = "node" if node_values else "face"
        dim = "nMesh2_node" if node_values else "nMesh2_face"
        tv = ds.createVariable("time", "f8", ("time",))
        tv.units = "seconds since 2000-01-01"
        tv[:] = [0.0, 3600.0]

        def var(name, long_name, values):
            v = ds.createVariable(name, "f4", ("time", dim), fill_value=-999.0)
            v.mesh = "Mesh2"
            v.location = loc
            v.long_name = long_name
            v.units = "m" if "depth" in long_name else "m s-1"
            v[0] = values * 0.5  # first step: a different field
            v[1] = values
            return v

        var("depth", "depth", d)
        if groups == "vector":
            var("ucx", "velocity, x-component", s * 0.8)
            var("ucy", "velocity, y-component", s * 0.6)
        elif groups == "xy":
            var("u_comp", "u velocity", s * 0.8)
            var("v_comp", "v velocity", s * 0.6)
        else:
            var("spd", "speed", s)
    return str(path)


def table(path, geometry=False):
    """(field names, rows as dicts with NULL as None[, shapely geometries]) of a vector output."""
    import shapely
    from qgis.core import QgsVectorLayer

    lyr = QgsVectorLayer(str(path), "t", "ogr")
    assert lyr.isValid(), path
    names = [f.name() for f in lyr.fields()]
    rows, geoms = [], []
    for f in lyr.getFeatures():
        rows.append({k: (None if (v is None or (hasattr(v, "isNull") and v.isNull())) else v)
                     for k, v in zip(names, f.attributes())})
        if geometry:
            g = f.geometry()
            geoms.append(None if g.isNull() else shapely.from_wkb(bytes(g.asWkb())))
    return (names, rows, geoms) if geometry else (names, rows)
