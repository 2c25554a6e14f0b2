"""A cross-section-aligned mesh of the demo channel and its UGRID-1.0 NetCDF writer.

Rows of nodes lie on cross-sections every ``face_size`` metres of chainage, from bank top to bank
top. The number of faces across follows the channel width; where it changes between two rows, one
triangle in the middle of the row takes up the difference, and the faces against each bank are
split into two triangles, so the mesh mixes quadrilaterals and triangles as real model meshes do.

The file follows the UGRID 1.0 conventions (https://ugrid-conventions.github.io/ugrid-conventions/)
with CF-1.8 attributes: a ``mesh_topology`` variable with ``topology_dimension = 2``, node
coordinates carrying ``grid_mapping`` -> a variable with an integer ``epsg`` attribute (how QGIS's
mesh reader finds the CRS), ``face_node_connectivity`` with ``start_index`` 0 and ``_FillValue`` -1
for the unused fourth node of triangles, a time dimension of length 1, face-centred ``depth`` and a
velocity vector pair whose long names end in ", x-component" / ", y-component", plus the bed level at
the nodes. Dry faces hold the fill value. No creation date is written (same bytes every run).
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass

import numpy as np

FILL = -999.0
INT_FILL = -1


@dataclass
class ChannelMesh:
    node_x: np.ndarray
    node_y: np.ndarray
    node_c: np.ndarray  # chainage of each node
    node_o: np.ndarray  # offset of each node (+ left)
    face_nodes: np.ndarray  # (F, 4) int32, -1 padded, anticlockwise
    face_c: np.ndarray
    face_o: np.ndarray

    @property
    def n_faces(self) -> int:
        return len(self.face_nodes)

    @property
    def n_triangles(self) -> int:
        return int(np.count_nonzero(self.face_nodes[:, 3] < 0))


def _split(f):
    """A quadrilateral (anticlockwise) as two anticlockwise triangles."""
    return [(f[0], f[1], f[2], -1), (f[0], f[2], f[3], -1)]


def build_mesh(geom, face_size: float = 10.0, min_across: int = 4) -> ChannelMesh:
    """Rows of nodes on cross-sections ``face_size`` apart, about ``face_size`` between nodes across."""
    L = geom.length_m
    n_rows = max(int(np.ceil(L / face_size)), 1)
    rc = np.linspace(0.0, L, n_rows + 1)
    width = geom.along("width", rc)
    want = np.maximum(np.rint(width / face_size).astype(int), min_across)
    m = np.empty_like(want)
    m[0] = want[0]
    for j in range(1, len(want)):  # at most one face more or less from one row to the next
        m[j] = int(np.clip(want[j], m[j - 1] - 1, m[j - 1] + 1))
    starts = np.concatenate([[0], np.cumsum(m + 1)])
    node_c = np.repeat(rc, m + 1)
    frac = np.concatenate([np.linspace(-0.5, 0.5, k + 1) for k in m])
    node_o = frac * np.repeat(width, m + 1)
    node_x, node_y = geom.to_xy(node_c, node_o)

    faces = []
    for j in range(n_rows):
        a0, b0 = starts[j], starts[j + 1]
        ma, mb = m[j], m[j + 1]
        k = ma // 2
        row = []
        if mb == ma:
            for i in range(ma):
                row.append((a0 + i, b0 + i, b0 + i + 1, a0 + i + 1))
        elif mb == ma + 1:
            for i in range(ma):
                if i < k:
                    row.append((a0 + i, b0 + i, b0 + i + 1, a0 + i + 1))
                else:
                    if i == k:
                        row.append((a0 + k, b0 + k, b0 + k + 1, -1))
                    row.append((a0 + i, b0 + i + 1, b0 + i + 2, a0 + i + 1))
        else:  # mb == ma - 1
            for i in range(ma):
                if i < k:
                    row.append((a0 + i, b0 + i, b0 + i + 1, a0 + i + 1))
                elif i == k:
                    row.append((a0 + k, b0 + k, a0 + k + 1, -1))
                else:
                    row.append((a0 + i, b0 + i - 1, b0 + i, a0 + i + 1))
        # split the quadrilaterals against each bank into two triangles
        first = _split(row[0]) if row[0][3] >= 0 else [row[0]]
        last = _split(row[-1]) if row[-1][3] >= 0 else [row[-1]]
        row = first + row[1:-1] + last
        faces.extend(row)
    fn = np.asarray(faces, dtype=np.int32)
    valid = fn >= 0
    cnt = valid.sum(axis=1)
    safe = np.where(valid, fn, 0)
    face_c = np.where(valid, node_c[safe], 0.0).sum(axis=1) / cnt
    face_o = np.where(valid, node_o[safe], 0.0).sum(axis=1) / cnt
    return ChannelMesh(node_x, node_y, node_c, node_o, fn, face_c, face_o)


def write_ugrid(path: str, mesh: ChannelMesh, epsg: int, crs_wkt: str, depth, u, v, node_bed, title: str,
                comment: str = "") -> str:
    """Write one run as a UGRID-1.0 NetCDF file, atomically (temporary name, then rename)."""
    import netCDF4

    d = os.path.dirname(os.path.abspath(path)) or "."
    os.makedirs(d, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".partial-", suffix=".nc", dir=d)
    os.close(fd)
    try:
        with netCDF4.Dataset(tmp, "w", format="NETCDF4") as ds:
            ds.Conventions = "CF-1.8 UGRID-1.0"
            ds.title = title
            ds.institution = "Channel Habitat demo data (invented)"
            ds.source = "sample_gis.generate: 1D standard-step profile spread across the channel"
            if comment:
                ds.comment = comment
            nn, nf = len(mesh.node_x), mesh.n_faces
            ds.createDimension("nMesh2d_node", nn)
            ds.createDimension("nMesh2d_face", nf)
            ds.createDimension("nMaxMesh2d_face_nodes", 4)
            ds.createDimension("time", 1)

            crs = ds.createVariable("crs", "i4")
            crs.epsg = np.int32(epsg)
            crs.EPSG_code = f"EPSG:{epsg}"
            crs.grid_mapping_name = "transverse_mercator"
            crs.crs_wkt = crs_wkt
            crs.long_name = "coordinate reference system"

            topo = ds.createVariable("mesh2d", "i4")
            topo.cf_role = "mesh_topology"
            topo.long_name = "Topology data of 2D mesh"
            topo.topology_dimension = np.int32(2)
            topo.node_coordinates = "mesh2d_node_x mesh2d_node_y"
            topo.face_node_connectivity = "mesh2d_face_nodes"
            topo.face_dimension = "nMesh2d_face"
            topo.face_coordinates = "mesh2d_face_x mesh2d_face_y"
            topo.max_face_nodes_dimension = "nMaxMesh2d_face_nodes"

            def coord(name, values, dim, std, long_name):
                var = ds.createVariable(name, "f8", (dim,), zlib=True, complevel=4)
                var.standard_name = std
                var.long_name = long_name
                var.units = "m"
                var.grid_mapping = "crs"
                var[:] = values

            coord("mesh2d_node_x", mesh.node_x, "nMesh2d_node", "projection_x_coordinate", "x of mesh nodes")
            coord("mesh2d_node_y", mesh.node_y, "nMesh2d_node", "projection_y_coordinate", "y of mesh nodes")
            fx, fy = face_centroids(mesh.node_x, mesh.node_y, mesh.face_nodes)
            coord("mesh2d_face_x", fx, "nMesh2d_face", "projection_x_coordinate", "x of face centres")
            coord("mesh2d_face_y", fy, "nMesh2d_face", "projection_y_coordinate", "y of face centres")

            fnv = ds.createVariable("mesh2d_face_nodes", "i4", ("nMesh2d_face", "nMaxMesh2d_face_nodes"),
                                    zlib=True, complevel=4, fill_value=np.int32(INT_FILL))
            fnv.cf_role = "face_node_connectivity"
            fnv.long_name = "Vertex nodes of mesh faces (anticlockwise)"
            fnv.start_index = np.int32(0)
            fnv[:] = mesh.face_nodes

            t = ds.createVariable("time", "f8", ("time",))
            t.standard_name = "time"
            t.long_name = "time"
            t.units = "seconds since 2000-01-01 00:00:00"
            t.calendar = "standard"
            t.axis = "T"
            t[:] = [0.0]

            def data(name, values, long_name, units, location="face", with_time=True, std=None):
                dim = "nMesh2d_face" if location == "face" else "nMesh2d_node"
                dims = ("time", dim) if with_time else (dim,)
                var = ds.createVariable(name, "f4", dims, zlib=True, complevel=4, fill_value=np.float32(FILL))
                var.long_name = long_name
                if std:
                    var.standard_name = std
                var.units = units
                var.mesh = "mesh2d"
                var.location = location
                var.coordinates = "mesh2d_face_x mesh2d_face_y" if location == "face" else \
                    "mesh2d_node_x mesh2d_node_y"
                var.grid_mapping = "crs"
                a = np.asarray(values, dtype=np.float32)
                a = np.where(np.isfinite(a), a, np.float32(FILL))
                var[:] = a[None, :] if with_time else a

            data("depth", depth, "depth", "m")
            data("velocity_x", u, "velocity, x-component", "m s-1", std="eastward_sea_water_velocity")
            data("velocity_y", v, "velocity, y-component", "m s-1", std="northward_sea_water_velocity")
            data("bed_level", node_bed, "bed elevation", "m", location="node", with_time=False)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise
    return path


def face_centroids(node_x, node_y, face_nodes):
    """Area centroids of polygon faces (shoelace), relative to the first node for accuracy."""
    fn = face_nodes
    valid = fn >= 0
    nn = valid.sum(axis=1)
    safe = np.where(valid, fn, 0)
    col = np.arange(fn.shape[1])[None, :]
    nxt = np.take_along_axis(safe, np.where(col + 1 < nn[:, None], col + 1, 0), axis=1)
    ox, oy = node_x[safe[:, 0]], node_y[safe[:, 0]]
    x0, y0 = node_x[safe] - ox[:, None], node_y[safe] - oy[:, None]
    x1, y1 = node_x[nxt] - ox[:, None], node_y[nxt] - oy[:, None]
    cr = np.where(valid, x0 * y1 - x1 * y0, 0.0)
    a2 = cr.sum(axis=1)
    cx = np.where(valid, (x0 + x1) * cr, 0.0).sum(axis=1) / (3.0 * a2)
    cy = np.where(valid, (y0 + y1) * cr, 0.0).sum(axis=1) / (3.0 * a2)
    return ox + cx, oy + cy
