"""driftresidence's adapters: seed points from a layer, runs of a scenario table (on both cores when
the interpreter allows), and LineStringM geometries of particle paths.

The science is in ``core/drift.py``; this module reads and writes.
"""

from __future__ import annotations

import contextlib
import os
import sys

import numpy as np

from ..core import drift
from ..core import scenario as scn
from ..core.errors import ChannelHabitatError, as_progress
from ..core.field import require_wet
from ..core.habitat import check_metric_crs
from ..core.reach import locate_field

SEEDS = "SEEDS"


def read_seed_points(source, target_crs_wkt: str, context) -> tuple:
    """(x, y) of every point of the SEEDS layer (multi-points give all their points), in the run's
    CRS (reprojected when the layer's CRS differs). Features without geometry are skipped."""
    from qgis.core import (
        QgsCoordinateReferenceSystem,
        QgsCoordinateTransform,
        QgsProject,
    )

    target = QgsCoordinateReferenceSystem.fromWkt(target_crs_wkt) if target_crs_wkt else QgsCoordinateReferenceSystem()
    src_crs = source.sourceCrs()
    transform = None
    if target.isValid() and src_crs.isValid() and src_crs != target:
        project = context.project() if context.project() is not None else QgsProject.instance()
        transform = QgsCoordinateTransform(src_crs, target, project.transformContext())
    xs, ys = [], []
    for feat in source.getFeatures():
        geom = feat.geometry()
        if geom.isNull() or geom.isEmpty():
            continue
        if transform is not None:
            geom.transform(transform)
        for v in geom.vertices():
            xs.append(v.x())
            ys.append(v.y())
    if not xs:
        raise ChannelHabitatError("the seed layer has no points; give a point layer, or leave SEEDS empty to "
                                  "release particles across the wet width", SEEDS)
    return np.array(xs, dtype=np.float64), np.array(ys, dtype=np.float64)


def source_crs(src) -> str:
    """The CRS (WKT) of a run's files without reading its values ('' when it carries none)."""
    if src.is_mesh:
        if src.mesh_crs_wkt:
            return src.mesh_crs_wkt
        from .runs import open_ugrid

        return open_ugrid(src.mesh, src.params["mesh"]).crs_wkt
    from . import geotiff

    return geotiff.info(src.depth).crs_wkt


def path_geometries(geoms) -> list:
    """[(x, y, m)] -> QgsGeometry LineStringM (a one-vertex path is doubled so the line is valid)."""
    from .outputs import line_m

    out = []
    for x, y, m in geoms:
        if len(x) == 1:
            x, y, m = np.repeat(x, 2), np.repeat(y, 2), np.repeat(m, 2)
        out.append(line_m(x, y, m))
    return out


# ------------------------------------------------------------------------------------------------
# Runs of a scenario table
# ------------------------------------------------------------------------------------------------

def _drift_row(row, reach, scheme, options, wet_depth, seeds, progress=None):
    """(crs_wkt, notes, DriftRun) of one scenario row: read, check, drift."""
    from .runs import read_run

    progress = as_progress(progress)
    with scn.row_errors(row):
        fld = read_run(row.source, wet_depth, progress.sub(0.0, 0.1), require=False)
        require_wet(fld, "SCENARIOS")
        check_metric_crs(fld.crs_wkt, "SCENARIOS")
        run = drift.drift_run(fld, reach, scheme, options, location=locate_field(reach, fld), seeds=seeds,
                              progress=progress.sub(0.1, 1.0))
    return fld.crs_wkt, list(fld.notes), run


def _row_job(args):
    """One row in a worker process."""
    return _drift_row(*args)


@contextlib.contextmanager
def _main_not_rerun():
    """Start worker processes without re-running the caller's main script in them.

    A 'spawn' worker normally imports the parent's ``__main__`` file again; a script that calls
    Processing without an ``if __name__ == "__main__"`` guard would then run itself in every worker.
    The workers only need this module, so while they start, ``__main__`` shows no file and no spec."""
    main = sys.modules.get("__main__")
    saved = {k: getattr(main, k) for k in ("__file__", "__spec__") if main is not None and hasattr(main, k)}
    try:
        if main is not None:
            main.__spec__ = None
            if "__file__" in saved:
                del main.__file__
        yield
    finally:
        for k, v in saved.items():
            setattr(main, k, v)


def can_use_processes() -> bool:
    """Worker processes need a Python interpreter to start (scripts, qgis_process, tests); inside the
    QGIS desktop application ``sys.executable`` is QGIS itself, so rows run one after another."""
    exe = os.path.basename(sys.executable or "").lower()
    return exe.startswith("python")


def drift_rows(rows, reach, scheme, options, wet_depth: float, seeds=None, workers: int = 0, progress=None,
               log=None) -> list:
    """[(crs_wkt, notes, DriftRun)] for every scenario row, in row order.

    ``workers``: 0 = automatic (both cores when worker processes can start), 1 = in this process.
    Cancelling stops within a row in this process; with worker processes the call returns within
    half a second and the workers finish their current row in the background, unused."""
    import concurrent.futures as cf
    import multiprocessing as mp

    progress = as_progress(progress)
    n = len(rows)
    if workers <= 0:
        workers = min(2, os.cpu_count() or 1, n) if can_use_processes() else 1
    workers = max(1, min(workers, n))
    results = [None] * n
    if workers > 1:
        import pickle

        try:  # what every worker gets; a pickling failure inside the pool would leave it hanging
            pickle.dumps((rows, reach, scheme, options, wet_depth, seeds))
        except Exception as err:  # noqa: BLE001 - any reason: run the rows here instead
            if log:
                log(f"Runs drifted one after another in this process (cannot hand them to worker processes: {err})")
            workers = 1
    if workers == 1:
        for i, row in enumerate(rows):
            if log:
                log(f"Run {i + 1} of {n}: {row.label}")
            results[i] = _drift_row(row, reach, scheme, options, wet_depth, seeds, progress.sub(i / n, (i + 1) / n))
        return results
    if log:
        log(f"{n} runs on {workers} worker processes")
    progress(0.0, f"drifting {n} runs on {workers} processes")
    pool = cf.ProcessPoolExecutor(max_workers=workers, mp_context=mp.get_context("spawn"))
    try:
        with _main_not_rerun():  # workers start during submit
            futures = {pool.submit(_row_job, (row, reach, scheme, options, wet_depth, seeds)): i
                       for i, row in enumerate(rows)}
        pending = set(futures)
        while pending:
            finished, pending = cf.wait(pending, timeout=0.5, return_when=cf.FIRST_COMPLETED)
            for fut in finished:
                i = futures[fut]
                results[i] = fut.result()
                if log:
                    log(f"Run {n - len(pending)} of {n} done: {rows[i].label}")
            progress((n - len(pending)) / n, f"{n - len(pending)} of {n} runs drifted")
    except BaseException:
        pool.shutdown(wait=False, cancel_futures=True)
        raise
    pool.shutdown(wait=True)
    return results
