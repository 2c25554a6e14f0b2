"""The run's values read in the background while an algorithm reads its other inputs and locates.

``start_run_parameters(alg, parameters, context, feedback)`` resolves the "one run" parameters as
``runinput.read_run_parameters`` does and, for a raster run, starts reading the rasters in a
background thread: GDAL decodes and copies blocks with Python's lock released, so the algorithm can
meanwhile read its centreline and other layers through the QGIS API (Python-bound work). The run's CRS
is known at once from the depth raster's header (``.crs_wkt``), e.g. to transform the reach into it.

The raster read has two steps (``runs.RasterRunReader``): first the depth raster, giving the wet cells;
then the velocity rasters at those cells. ``.cells()`` waits for the first step only: the wet cells
(x, y, area, depth; no speed yet) can be located along the reach while the velocities are read.
``.field_future`` is a Future of the whole field, for work that can start as soon as it is read (in
another background thread). ``.result()`` waits for the values and returns (HydraulicField, RunSource)
after the same checks and log notes as ``runinput.read_run_parameters``; ``.align(location, field)``
fits a location of ``.cells()`` to the field (wet cells without a velocity value are dropped).

Mesh runs are read at once (their CRS comes with the mesh), and so is everything when the parameters
are wrong (errors name the parameter as usual). The background thread only asks whether to stop (it
never reports progress from outside the algorithm's thread).
"""

from __future__ import annotations

from concurrent.futures import Future, ThreadPoolExecutor

import numpy as np
from osgeo import gdal

from ..core.errors import Progress
from ..core.field import DEFAULT_WET_DEPTH_M, GridSupport, require_wet
from . import runinput
from .runs import RasterRunReader, read_run

gdal.UseExceptions()


def _done(value) -> Future:
    f = Future()
    f.set_result(value)
    return f


class RunRead:
    """A run being read: ``src``, ``crs_wkt`` now; ``cells()``, ``field_future``, ``result()``."""

    def __init__(self, src, crs_wkt: str, future=None, cells_future=None, fld=None, feedback=None,
                 need_vectors: bool = False, is_raster: bool = True):
        self.src = src
        self.crs_wkt = crs_wkt
        self.is_raster = is_raster  # a raster run (a GridSupport field)
        self.field_future = future if future is not None else _done(fld)
        self._cells = cells_future if cells_future is not None else _done(fld)
        self._feedback = feedback
        self._need_vectors = need_vectors
        self._checked = False

    def cells(self):
        """The wet cells (a HydraulicField whose speed may still be NaN), as soon as they are known.
        A run that is dry everywhere is refused here."""
        cells = self._cells.result()
        if cells.n == 0:
            require_wet(cells, self.src.params["depth"])
        return cells

    def result(self):
        fld = self.field_future.result()
        if not self._checked:
            runinput.check_run(fld, self.src, self._feedback, self._need_vectors)
            self._checked = True
        return fld, self.src

    @staticmethod
    def align(location, cells, fld):
        """``location`` of ``cells`` for the elements of ``fld`` (the same, or a subset when wet cells
        without a velocity value were dropped)."""
        if fld is cells or fld.n == cells.n:
            return location
        pos = np.searchsorted(cells.support.index, fld.support.index)  # both ascending, fld's a subset
        return location.take(pos)




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
        return RunRead(src, fld.crs_wkt, fld=fld, feedback=feedback, need_vectors=need_vectors, is_raster=False)
    wet = alg.parameterAsDouble(parameters, runinput.WET_DEPTH, context) \
        if runinput.WET_DEPTH in parameters or alg.parameterDefinition(runinput.WET_DEPTH) is not None \
        else DEFAULT_WET_DEPTH_M
    try:
        crs = _header_crs(src.depth)
    except RuntimeError:  # unreadable: let the reader raise its usual error, at once
        fld = read_run(src, wet, progress, require=False)
        return RunRead(src, fld.crs_wkt, fld=fld, feedback=feedback, need_vectors=need_vectors,
                       is_raster=isinstance(fld.support, GridSupport))
    stop = Progress(None, getattr(progress, "_cancelled", None)) if progress is not None else None
    cells = Future()

    def job():
        try:
            reader = RasterRunReader(src.depth, src.speed, src.u, src.v, wet, src.label, src.params, stop)
            cells.set_result(reader.read_depth())
        except BaseException as exc:
            cells.set_exception(exc)
            raise
        return reader.read_velocity()

    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="read-run")
    future = pool.submit(job)
    pool.shutdown(wait=False)
    return RunRead(src, crs, future=future, cells_future=cells, feedback=feedback, need_vectors=need_vectors)
