"""The run's values read in the background while an algorithm reads its other inputs.

``start_run_parameters(alg, parameters, context, feedback)`` resolves the "one run" parameters as
``runinput.read_run_parameters`` does and, for a raster run, starts reading the rasters in a
background thread: GDAL decodes and copies blocks with Python's lock released, so the algorithm can
meanwhile read its centreline and other layers through the QGIS API (Python-bound work). The run's CRS
is known at once from the depth raster's header (``.crs_wkt``), e.g. to transform the reach into it.
``.result()`` waits for the values and returns (HydraulicField, RunSource) after the same checks and
log notes as ``runinput.read_run_parameters``. Mesh runs are read at once (their CRS comes with the
mesh), and so is everything when the parameters are wrong (errors name the parameter as usual).

The background thread only asks whether to stop (it never reports progress from outside the
algorithm's thread).
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

from osgeo import gdal

from ..core.errors import ChannelHabitatError, Progress
from ..core.field import DEFAULT_WET_DEPTH_M, require_wet
from . import runinput
from .runs import read_run

gdal.UseExceptions()


class RunRead:
    """A run being read: ``src``, ``crs_wkt`` now; ``result()`` -> (HydraulicField, RunSource)."""

    def __init__(self, src, crs_wkt: str, future=None, fld=None, feedback=None, need_vectors: bool = False):
        self.src = src
        self.crs_wkt = crs_wkt
        self._future = future
        self._fld = fld
        self._feedback = feedback
        self._need_vectors = need_vectors
        self._checked = False

    def result(self):
        if self._fld is None:
            self._fld = self._future.result()
        if not self._checked:
            _check(self._fld, self.src, self._feedback, self._need_vectors)
            self._checked = True
        return self._fld, self.src


def _check(fld, src, feedback, need_vectors: bool) -> None:
    """The checks and notes of ``runinput.read_run_parameters`` after reading (raster runs)."""
    require_wet(fld, src.params["depth"])
    if need_vectors and (fld.u is None or fld.v is None):
        raise ChannelHabitatError("this algorithm needs velocity vectors: give u and v rasters, or a "
                                  "mesh vector group (or x/y groups)", src.params["u"])
    for note in fld.notes:
        feedback.pushInfo(note)
    if not fld.crs_wkt:
        raise ChannelHabitatError("the run has no CRS; set one on the layer (or the mesh CRS parameter)",
                                  src.params["depth"])


def _header_crs(path: str) -> str:
    ds = gdal.Open(str(path))
    wkt = ds.GetProjection() or ""
    del ds
    return wkt


def start_run_parameters(alg, parameters, context, feedback, prefix: str = "", label: str = "",
                         progress=None, need_vectors: bool = False) -> RunRead:
    """Resolve the run parameters and start reading a raster run in the background (see the module
    doc). ``progress`` is only asked whether to stop while reading in the background."""
    src, mesh_layer = runinput.run_source(alg, parameters, context, prefix, label)
    if mesh_layer is not None:
        fld, src = runinput.read_run_parameters(alg, parameters, context, feedback, prefix, label, progress,
                                                need_vectors)
        return RunRead(src, fld.crs_wkt, fld=fld, feedback=feedback, need_vectors=need_vectors)
    wet = alg.parameterAsDouble(parameters, runinput.WET_DEPTH, context) \
        if runinput.WET_DEPTH in parameters or alg.parameterDefinition(runinput.WET_DEPTH) is not None \
        else DEFAULT_WET_DEPTH_M
    try:
        crs = _header_crs(src.depth)
    except RuntimeError:  # unreadable: let the reader raise its usual error, at once
        fld = read_run(src, wet, progress, require=False)
        return RunRead(src, fld.crs_wkt, fld=fld, feedback=feedback, need_vectors=need_vectors)
    stop = Progress(None, getattr(progress, "_cancelled", None)) if progress is not None else None
    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="read-run")
    future = pool.submit(read_run, src, wet, stop, False)
    pool.shutdown(wait=False)
    return RunRead(src, crs, future=future, feedback=feedback, need_vectors=need_vectors)
