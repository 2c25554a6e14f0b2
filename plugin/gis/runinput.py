"""Processing parameters for "one run" (rasters or a mesh layer) and reading them.

Used by every algorithm that reads a run. ``prefix`` lets an algorithm take two runs
(``BASE_``/``ALT_`` in compareregimes). Parameter names (with prefix):

DEPTH, SPEED, VELOCITY_U, VELOCITY_V    rasters (depth + speed, or depth + u and v)
MESH                                    a mesh layer instead of rasters
MESH_DEPTH_GROUP, MESH_VELOCITY_GROUP   dataset group names (empty: found by name)
MESH_U_GROUP, MESH_V_GROUP              x and y scalar groups instead of a vector group
MESH_TIME_INDEX                         time-step index, -1 = last
MESH_CRS                                CRS for a mesh that carries none
"""

from __future__ import annotations

import os

import numpy as np
from qgis.core import (
    QgsCoordinateReferenceSystem,
    QgsMesh,
    QgsMeshDatasetIndex,
    QgsProcessingParameterCrs,
    QgsProcessingParameterDefinition,
    QgsProcessingParameterEnum,
    QgsProcessingParameterMeshLayer,
    QgsProcessingParameterNumber,
    QgsProcessingParameterRasterLayer,
    QgsProcessingParameterString,
    QgsProviderRegistry,
)

from ..core.errors import ChannelHabitatError
from ..core.field import DEFAULT_WET_DEPTH_M, require_wet
from .runs import RunSource, face_geometry, field_from_faces, read_run

WET_DEPTH = "WET_DEPTH"


def _names(prefix: str) -> dict:
    return {
        "depth": f"{prefix}DEPTH", "speed": f"{prefix}SPEED", "u": f"{prefix}VELOCITY_U",
        "v": f"{prefix}VELOCITY_V", "mesh": f"{prefix}MESH",
        "depth_group": f"{prefix}MESH_DEPTH_GROUP", "velocity_group": f"{prefix}MESH_VELOCITY_GROUP",
        "u_group": f"{prefix}MESH_U_GROUP", "v_group": f"{prefix}MESH_V_GROUP",
        "time_index": f"{prefix}MESH_TIME_INDEX", "mesh_crs": f"{prefix}MESH_CRS",
    }


DISCHARGE_UNITS = ("ML/d", "m3/s")  # the DISCHARGE_UNIT choices, in this order


def add_run_label_parameters(alg, regime: str = "Regime of the single run [empty: its file name]",
                             discharge: str = "Discharge of the single run [empty: not stated]") -> None:
    """REGIME, DISCHARGE and DISCHARGE_UNIT: what a single run is called in tables, reports and captions."""
    alg.addParameter(QgsProcessingParameterString("REGIME", regime, optional=True))
    alg.addParameter(QgsProcessingParameterNumber(
        "DISCHARGE", discharge, QgsProcessingParameterNumber.Type.Double, optional=True, minValue=0.0))
    alg.addParameter(QgsProcessingParameterEnum("DISCHARGE_UNIT", "Discharge unit", list(DISCHARGE_UNITS),
                                                defaultValue=0))


def read_run_label(alg, parameters, context) -> tuple:
    """(regime text, stripped; discharge or None when not given; its unit) from add_run_label_parameters."""
    unit = DISCHARGE_UNITS[alg.parameterAsEnum(parameters, "DISCHARGE_UNIT", context)]
    q_raw = parameters.get("DISCHARGE")
    q = None if q_raw in (None, "") else alg.parameterAsDouble(parameters, "DISCHARGE", context)
    return alg.parameterAsString(parameters, "REGIME", context).strip(), q, unit


def add_run_parameters(alg, prefix: str = "", label: str = "", need_vectors: bool = False,
                       wet_depth: bool = True) -> None:
    """Declare the run parameters on ``alg`` (all optional; validated when read)."""
    n = _names(prefix)
    lab = f"{label}: " if label else ""
    alg.addParameter(QgsProcessingParameterRasterLayer(n["depth"], f"{lab}Depth raster (m)", optional=True))
    if not need_vectors:
        alg.addParameter(QgsProcessingParameterRasterLayer(
            n["speed"], f"{lab}Speed raster (m/s) [or give u and v]", optional=True))
    for key, comp in (("u", "x"), ("v", "y")):
        alg.addParameter(QgsProcessingParameterRasterLayer(
            n[key], f"{lab}Velocity {comp}-component raster {key} (m/s)", optional=True))
    alg.addParameter(QgsProcessingParameterMeshLayer(n["mesh"], f"{lab}Mesh layer [instead of rasters]", optional=True))
    alg.addParameter(QgsProcessingParameterString(
        n["depth_group"], f"{lab}Mesh depth dataset group (empty: the group named like 'depth')",
        optional=True))
    alg.addParameter(QgsProcessingParameterString(
        n["velocity_group"], f"{lab}Mesh velocity dataset group, vector or speed (empty: named like 'velocity')",
        optional=True))
    adv = []
    adv.append(QgsProcessingParameterString(
        n["u_group"], f"{lab}Mesh velocity x-component group (instead of a vector group)", optional=True))
    adv.append(QgsProcessingParameterString(
        n["v_group"], f"{lab}Mesh velocity y-component group", optional=True))
    adv.append(QgsProcessingParameterNumber(n["time_index"], f"{lab}Mesh time-step index (-1 = last)",
                                            QgsProcessingParameterNumber.Type.Integer, -1))
    adv.append(QgsProcessingParameterCrs(n["mesh_crs"], f"{lab}Mesh CRS (when the mesh carries none)", optional=True))
    for p in adv:
        p.setFlags(p.flags() | QgsProcessingParameterDefinition.FlagAdvanced)
        alg.addParameter(p)
    if wet_depth and alg.parameterDefinition(WET_DEPTH) is None:
        alg.addParameter(QgsProcessingParameterNumber(
            WET_DEPTH, "Wet-depth threshold (m): shallower is dry", QgsProcessingParameterNumber.Type.Double,
            DEFAULT_WET_DEPTH_M, minValue=0.0))


def _raster_path(alg, parameters, context, name):
    layer = alg.parameterAsRasterLayer(parameters, name, context)
    if layer is None:
        return None
    if layer.providerType() != "gdal":
        raise ChannelHabitatError(f"layer '{layer.name()}' is not a file raster (provider "
                                  f"{layer.providerType()}); save it as GeoTIFF first", name)
    return layer.source()


def mesh_file_of(layer) -> str | None:
    """The file behind a mesh layer when MDAL reads it (None otherwise)."""
    if layer.providerType() != "mdal":
        return None
    parts = QgsProviderRegistry.instance().decodeUri("mdal", layer.source())
    path = parts.get("path") or layer.source()
    return path if os.path.exists(path) else None


def run_source(alg, parameters, context, prefix: str = "", label: str = "") -> tuple:
    """(RunSource, mesh layer or None) from the parameters. Validates which inputs were given."""
    n = _names(prefix)
    src = RunSource(params=n, label=label)
    mesh_layer = alg.parameterAsMeshLayer(parameters, n["mesh"], context)
    raster_given = any(parameters.get(n[k]) not in (None, "") for k in ("depth", "speed", "u", "v")
                       if n[k] in parameters)
    if mesh_layer is not None and raster_given:
        raise ChannelHabitatError("give either rasters or a mesh layer for this run, not both", n["mesh"])
    if mesh_layer is None and not raster_given:
        raise ChannelHabitatError("give the run: a depth raster with speed (or u and v) rasters, or a mesh layer",
                                  n["depth"])
    if mesh_layer is not None:
        src.mesh = mesh_file_of(mesh_layer) or ""
        src.depth_group = alg.parameterAsString(parameters, n["depth_group"], context) or None
        src.velocity_group = alg.parameterAsString(parameters, n["velocity_group"], context) or None
        src.u_group = alg.parameterAsString(parameters, n["u_group"], context) or None
        src.v_group = alg.parameterAsString(parameters, n["v_group"], context) or None
        if bool(src.u_group) != bool(src.v_group):
            raise ChannelHabitatError("give both the x- and y-component groups, or neither", n["u_group"])
        src.time_index = alg.parameterAsInt(parameters, n["time_index"], context)
        crs = alg.parameterAsCrs(parameters, n["mesh_crs"], context)
        if crs.isValid():
            src.mesh_crs_wkt = crs.toWkt(QgsCoordinateReferenceSystem.WKT_PREFERRED_GDAL)
        elif mesh_layer.crs().isValid():
            src.mesh_crs_wkt = mesh_layer.crs().toWkt(QgsCoordinateReferenceSystem.WKT_PREFERRED_GDAL)
        src.label = label or mesh_layer.name()
        return src, mesh_layer
    src.depth = _raster_path(alg, parameters, context, n["depth"])
    if n["speed"] in parameters:
        src.speed = _raster_path(alg, parameters, context, n["speed"])
    src.u = _raster_path(alg, parameters, context, n["u"])
    src.v = _raster_path(alg, parameters, context, n["v"])
    if not src.depth:
        raise ChannelHabitatError("a depth raster is needed with velocity rasters", n["depth"])
    if bool(src.u) != bool(src.v):
        raise ChannelHabitatError("give both u and v velocity rasters, or neither", n["u"])
    if not src.speed and not src.u:
        raise ChannelHabitatError("give a speed raster or u and v velocity rasters", n.get("speed", n["u"]))
    src.label = label or os.path.splitext(os.path.basename(src.depth.split("|")[0]))[0]
    return src, None


def read_run_parameters(alg, parameters, context, feedback, prefix: str = "", label: str = "",
                        progress=None, need_vectors: bool = False):
    """(HydraulicField, RunSource) for the run given in the parameters. Notes go to the log."""
    src, mesh_layer = run_source(alg, parameters, context, prefix, label)
    wet = alg.parameterAsDouble(parameters, WET_DEPTH, context) if WET_DEPTH in parameters or \
        alg.parameterDefinition(WET_DEPTH) is not None else DEFAULT_WET_DEPTH_M
    if mesh_layer is not None and not src.mesh:
        fld = read_mesh_layer(mesh_layer, src, wet)
    else:
        fld = read_run(src, wet, progress, require=False)
    check_run(fld, src, feedback, need_vectors, is_mesh=src.is_mesh or mesh_layer is not None)
    return fld, src


def check_run(fld, src, feedback, need_vectors: bool = False, is_mesh: bool | None = None) -> None:
    """After reading a run: refuse a dry run, a run without vectors where they are needed, or one
    without a CRS (naming the parameter); pass the reader's notes to the log."""
    is_mesh = src.is_mesh if is_mesh is None else is_mesh
    require_wet(fld, src.params["depth_group" if is_mesh else "depth"])
    if need_vectors and (fld.u is None or fld.v is None):
        raise ChannelHabitatError("this algorithm needs velocity vectors: give u and v rasters, or a "
                                  "mesh vector group (or x/y groups)", src.params["u"])
    for note in fld.notes:
        feedback.pushInfo(note)
    if not fld.crs_wkt:
        raise ChannelHabitatError("the run has no CRS; set one on the layer (or the mesh CRS parameter)",
                                  src.params["mesh_crs"] if src.is_mesh else src.params["depth"])


def read_mesh_layer(layer, src: RunSource, wet_depth_m: float):
    """Generic (slower) path for mesh layers that are not UGRID NetCDF files: via the QGIS API."""
    dp = layer.dataProvider()
    mesh = QgsMesh()
    dp.populateMesh(mesh)
    nv, nf = mesh.vertexCount(), mesh.faceCount()
    node_x = np.fromiter((mesh.vertex(i).x() for i in range(nv)), float, nv)
    node_y = np.fromiter((mesh.vertex(i).y() for i in range(nv)), float, nv)
    faces = [mesh.face(i) for i in range(nf)]
    width = max((len(f) for f in faces), default=3)
    fn = np.full((nf, width), -1, dtype=np.int64)
    for i, f in enumerate(faces):
        fn[i, : len(f)] = f
    fx, fy, fa = face_geometry(node_x, node_y, fn)
    groups = {dp.datasetGroupMetadata(g).name(): g for g in range(dp.datasetGroupCount())}

    def pick(name, words, param):
        if name:
            for gname, g in groups.items():
                if gname.lower() == name.lower():
                    return g
            raise ChannelHabitatError(f"the mesh has no dataset group '{name}'; its groups are: "
                                      f"{', '.join(sorted(groups))}", param)
        for gname, g in groups.items():
            if any(w in gname.lower() for w in words):
                return g
        raise ChannelHabitatError(f"no dataset group found by name ({'/'.join(words)}); name one "
                                  f"(groups: {', '.join(sorted(groups))})", param)

    def values(g):
        meta = dp.datasetGroupMetadata(g)
        nt = dp.datasetCount(g)
        t = src.time_index if src.time_index >= 0 else nt + src.time_index
        if not 0 <= t < nt:
            raise ChannelHabitatError(f"time-step index {src.time_index} outside 0..{nt - 1}",
                                      src.params["time_index"])
        on_faces = meta.dataType() == meta.DataOnFaces
        count = nf if on_faces else nv
        block = dp.datasetValues(QgsMeshDatasetIndex(g, t), 0, count)
        raw = np.asarray(block.values(), dtype=np.float64)
        comps = [raw[0::2], raw[1::2]] if meta.isVector() else [raw]
        out = []
        for a in comps:
            if not on_faces:
                valid = fn >= 0
                a = np.where(valid, a[np.where(valid, fn, 0)], 0.0).sum(axis=1) / valid.sum(axis=1)
            out.append(a)
        return out

    p = src.params
    depth = values(pick(src.depth_group, ("depth",), p["depth_group"]))[0]
    u = v = None
    if src.u_group:
        u = values(pick(src.u_group, (), p["u_group"]))[0]
        v = values(pick(src.v_group, (), p["v_group"]))[0]
        speed = np.hypot(u, v)
    else:
        comps = values(pick(src.velocity_group, ("velocity", "speed", "current"), p["velocity_group"]))
        if len(comps) == 2:
            u, v = comps
            speed = np.hypot(u, v)
        else:
            speed = comps[0]
    return field_from_faces(node_x, node_y, fn, fx, fy, fa, depth, speed, u, v,
                            src.mesh_crs_wkt or "", wet_depth_m, name=src.label, params=p)
