"""The class GeoTIFF of a raster run, encoded in the background and moved into place when written.

``start_class_raster(path, field, codes, scheme, run_label)`` builds the class grid (codes at the wet
cells, 0 = dry = nodata; ``field`` may still be being read, and the codes computed there) and encodes
it (tiled, DEFLATE, colour table, class names and rules in the band's metadata: ``gis/geotiff.write``)
into a hidden temporary file beside ``path``, in a background thread (GDAL compresses with Python's
lock released), so the algorithm locates and computes its statistics and patches meanwhile.
``ClassRaster.finish()`` waits for it and renames the file (and its PAM side file) into place: outputs
still appear only once everything is computed, and ``discard()`` (or a failed run, which removes the
registered ``temporary_paths``) leaves nothing behind.
"""

from __future__ import annotations

import os
import tempfile
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from . import geotiff


def class_grid(field, codes) -> np.ndarray:
    """The full (rows, cols) uint8 class grid: ``codes`` at the wet cells of a raster run, 0 elsewhere."""
    sup = field.support
    rows, cols = sup.shape
    grid = np.zeros(rows * cols, dtype=np.uint8)
    grid[sup.index] = codes
    return grid.reshape(rows, cols)


def raster_metadata(scheme, run_label: str) -> dict:
    return {"scheme": scheme.name,
            "classes": "; ".join(f"{i + 1} {c.name}: {c.describe()}" for i, c in enumerate(scheme.classes)),
            "run": run_label}


class ClassRaster:
    """A class GeoTIFF being encoded in the background (see the module doc)."""

    def __init__(self, path: str, tmp: str, future, codes_future=None):
        self.path = path
        self.tmp = tmp
        self._future = future
        self._codes = codes_future

    def codes(self) -> np.ndarray:
        """The class code of every element (computed in the background when not given)."""
        return self._codes.result()

    @property
    def temporary_paths(self) -> tuple:
        return self.tmp, self.tmp + ".aux.xml"

    def finish(self) -> str:
        """Wait for the encoding and move the file (and its side file) into place; returns the path."""
        self._future.result()
        os.replace(self.tmp, self.path)
        if os.path.exists(self.tmp + ".aux.xml"):
            os.replace(self.tmp + ".aux.xml", self.path + ".aux.xml")
        elif os.path.exists(self.path + ".aux.xml"):  # a stale side file of an earlier output
            os.remove(self.path + ".aux.xml")
        return self.path

    def discard(self) -> None:
        try:
            self._future.result()
        except Exception:  # noqa: BLE001 - the run failed already; only clean up
            pass
        for p in self.temporary_paths:
            if os.path.exists(p):
                os.remove(p)


def start_class_raster(path: str, field, codes, scheme, run_label: str | None = "") -> ClassRaster:
    """Encode the class GeoTIFF of a raster run in a background thread (see the module doc).

    ``field`` may be a Future of the HydraulicField (the encoding starts once it is read); ``codes``
    None: ``scheme.classify(depth, speed)`` in the background (``ClassRaster.codes()`` gives them).
    ``run_label`` None: the field's name."""
    from concurrent.futures import Future

    d = os.path.dirname(os.path.abspath(path)) or "."
    os.makedirs(d, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".partial-classes-", suffix=".tif", dir=d)
    os.close(fd)
    colours = {i + 1: c for i, c in enumerate(scheme.colours)}
    description = f"habitat class ({scheme.name})"
    codes_ready = Future()

    def job():
        try:
            fld = field.result() if isinstance(field, Future) else field
            c = scheme.classify(fld.depth, fld.speed) if codes is None else np.asarray(codes, dtype=np.uint8)
            codes_ready.set_result(c)
        except BaseException as exc:
            codes_ready.set_exception(exc)
            raise
        metadata = raster_metadata(scheme, fld.name if run_label is None else run_label)
        return geotiff.write(tmp, class_grid(fld, c), fld.support.transform, fld.crs_wkt, nodata=0, colours=colours,
                             description=description, metadata=metadata)

    pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="class-raster")
    future = pool.submit(job)
    pool.shutdown(wait=False)
    return ClassRaster(path, tmp, future, codes_ready)
