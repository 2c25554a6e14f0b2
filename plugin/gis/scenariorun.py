"""Running every row of a scenario table: read each run, locate it on the reach, hand it to a work
function, on both cores, with per-row progress, prompt cancel and messages that name the row.

GDAL and numpy only (no qgis import), so scripts and benchmarks can use it too. Algorithms that go
over a scenario table (flowhabitat, usablearea; driftresidence and vegetationoverlay may) call::

    from ..gis import scenariorun

    def work(run: scenariorun.RunInput):            # runs in a worker thread, once per row
        analysis = habitat.analyse_run(run.field, run.reach, scheme, location=run.location)
        return small_result_of(analysis)             # keep it small: the field is dropped after

    table = scenariorun.run_scenarios(rows, work, wet_depth_m=0.05, reach=reach,
                                      progress=self.progress(feedback, 0.0, 0.8), log=feedback.pushInfo)
    table.results[i]        # what work returned for rows[i] (table order)
    table.reach             # the reach in the runs' CRS (reprojected once if it was not)
    table.crs_wkt, table.notes, table.grids, table.timings

What it does, in order:

1. **Pre-flight** (:func:`preflight`, milliseconds per row): the CRS and grid of every row from the
   file headers only (GDAL for rasters, netCDF4 for UGRID meshes). Rows without a CRS, mixed CRS
   (the message names both rows) and geographic or non-metre CRS are refused before anything
   heavy is read.
2. The reach (if given) is reprojected once to the runs' CRS when the two differ (said in
   ``notes``).
3. Rows are worked on by a pool of ``workers`` threads (default 2: both cores of the design's
   reference machine). Threads, not processes: reading a compressed raster (GDAL) and the numpy
   work on the wet cells release the interpreter lock, so two threads use two cores; threads
   share one chainage cache and pass nothing through pickling; and a QGIS process is neither
   safely forked (a thread may hold one of GDAL's locks at the fork: a fork-based pool started after
   GDAL had read rasters from threads deadlocked in its children while this was developed) nor
   re-spawned (``sys.executable`` is QGIS itself on some platforms). Memory stays at about
   ``workers`` runs at a time (plus GDAL's shared block cache).
4. Per row: :func:`gis.runblocks.read_raster_blocks` (tiled GeoTIFFs: the dry blocks are found by
   their compressed bytes and never decoded; the same field as read_run, bit for bit), else
   :func:`gis.runs.read_run` (speed raster only when the row also lists u and v and
   vectors are not needed); ``core.reach.locate_field`` for the chainage, which caches per grid or
   mesh geometry. Calls are made one at a time (the cache is shared), so the second run of a grid
   waits for the first and is then served from the cache instead of both computing it; rows are
   ordered by grid and, within a grid, from the highest discharge down (the largest wet area
   first: later runs find their cells located). The time
   of every locate call is kept per grid (``grids``) so the log can show that later runs were
   served from the cache.
5. ``work(RunInput)`` with the field, the reach, the location and a row-scoped Progress.

Progress and log callbacks are called on the calling thread only (QGIS feedback objects are not
meant to be fed from several threads); workers check the shared stop flag at every progress call,
so a cancel (``progress`` raising ``core.errors.Cancelled``) stops the pool within one raster strip.
A failure in any row stops the others and is raised with the row named
(``row 7 (regime weir, 3000 ML/d): ...``).
"""

from __future__ import annotations

import dataclasses
import os
import queue
import threading
import time
from concurrent.futures import FIRST_COMPLETED, ThreadPoolExecutor, wait
from dataclasses import dataclass, field

import numpy as np
from osgeo import gdal

from ..core.errors import Cancelled, ChannelHabitatError, Progress, as_progress
from ..core.field import GridSupport, HydraulicField
from ..core.habitat import check_metric_crs, crs_name, reach_in_crs
from ..core.reach import locate_field
from ..core.scenario import ScenarioRow, check_same_crs
from .runblocks import read_raster_blocks
from .runs import read_run, same_crs

gdal.UseExceptions()

PARAMETER = "SCENARIOS"
DEFAULT_WORKERS = 2
# Errors raised with these parameters while a row is worked on are about the row's files: they are
# re-raised with SCENARIOS (and the row named). Others (CENTRELINE, a scheme or curve parameter)
# keep their parameter.
_RUN_PARAMETERS = {None, "", "DEPTH", "SPEED", "VELOCITY_U", "VELOCITY_V", "MESH", "MESH_DEPTH_GROUP",
                   "MESH_VELOCITY_GROUP", "MESH_U_GROUP", "MESH_V_GROUP", "MESH_TIME_INDEX", "MESH_CRS"}


# ============================================================================================
# Pre-flight: CRS and grid of every row from the file headers
# ============================================================================================

@dataclass
class RowInfo:
    """What the headers of a row's files say: its CRS and the grid or mesh it is on."""

    crs_wkt: str
    grid_key: str  # same grid or mesh file -> same key
    grid_text: str  # '3813 x 782 cells of 5 m' / 'mesh q03000.nc'


def _raster_info(path: str) -> RowInfo:
    ds = gdal.Open(path)
    gt = tuple(ds.GetGeoTransform())
    shape = (ds.RasterYSize, ds.RasterXSize)
    wkt = ds.GetProjection() or ""
    del ds
    key = GridSupport(gt, shape, np.zeros(0, np.int64)).geometry_key()
    return RowInfo(wkt, key, f"{shape[1]} x {shape[0]} cells of {abs(gt[1]):g} x {abs(gt[5]):g} m")


def _mesh_crs(path: str) -> str:
    """The CRS of a UGRID file (grid_mapping of the node x variable), read without the topology."""
    import netCDF4

    from .runs import _crs_of_ugrid

    with netCDF4.Dataset(path) as ds:
        for var in ds.variables.values():
            if getattr(var, "cf_role", "") == "mesh_topology":
                xname = str(getattr(var, "node_coordinates", "")).split()[:1]
                if xname and xname[0] in ds.variables:
                    return _crs_of_ugrid(ds, ds.variables[xname[0]])
    return ""


def row_info(row: ScenarioRow) -> RowInfo:
    """CRS and grid of one row from its file headers (raises ChannelHabitatError naming the row)."""
    src = row.source
    try:
        if src.is_mesh:
            wkt = src.mesh_crs_wkt or _mesh_crs(src.mesh)
            info = RowInfo(wkt, f"mesh:{os.path.abspath(src.mesh)}", f"mesh {os.path.basename(src.mesh)}")
        else:
            info = _raster_info(src.depth)
    except (RuntimeError, OSError) as exc:
        what = "mesh" if src.is_mesh else "depth raster"
        raise ChannelHabitatError(f"{row.where}: cannot open the {what}: {exc}", PARAMETER) from None
    if not info.crs_wkt:
        what = ("the mesh file carries no CRS (no grid_mapping with an EPSG code); assign one when exporting the "
                "mesh" if src.is_mesh else
                "the depth raster has no CRS; assign one (Raster > Projections > Assign Projection)")
        raise ChannelHabitatError(f"{row.where}: {what}", PARAMETER)
    return info


def preflight(rows: list[ScenarioRow], parameter: str = PARAMETER) -> list[RowInfo]:
    """RowInfo of every row; refuses rows without a CRS, mixed CRS and non-metric CRS."""
    infos = [row_info(r) for r in rows]
    check_same_crs(rows, [i.crs_wkt for i in infos], same=same_crs, parameter=parameter)
    if infos:
        try:
            check_metric_crs(infos[0].crs_wkt, parameter)
        except ChannelHabitatError as err:
            raise ChannelHabitatError(f"the runs' CRS: {err}", parameter) from None
    return infos


# ============================================================================================
# The run
# ============================================================================================

@dataclass
class RunInput:
    """What a work function gets for one row. ``reach`` is in the runs' CRS; ``location`` is the
    chainage/offset of every element of ``field`` (None without a reach). ``progress`` is scoped to
    the row's work (0..1) and raises Cancelled when the run is stopped."""

    index: int  # position of the row in the table
    row: ScenarioRow
    field: HydraulicField
    reach: object | None
    location: object | None
    progress: Progress


@dataclass
class GridUse:
    """One grid or mesh geometry and the chainage look-ups made on it."""

    key: str
    text: str
    runs: int = 0
    locate_seconds: list = field(default_factory=list)  # one per call, in call order
    elements: list = field(default_factory=list)  # wet elements of each call

    @property
    def first_s(self) -> float:
        return self.locate_seconds[0] if self.locate_seconds else float("nan")

    @property
    def later_mean_s(self) -> float:
        later = self.locate_seconds[1:]
        return float(np.mean(later)) if later else float("nan")

    def describe(self) -> str:
        if not self.locate_seconds:
            return f"{self.text}: {self.runs} run(s), no chainage needed"
        s = f"{self.text}: {self.runs} run(s); chainage {self.first_s:.2f} s for the first"
        if len(self.locate_seconds) > 1:
            s += f", {self.later_mean_s:.3f} s on average for the {len(self.locate_seconds) - 1} other(s)"
        return s


@dataclass
class TableRun:
    """Everything :func:`run_scenarios` gives back. ``results[i]`` belongs to ``rows[i]``."""

    rows: list
    results: list
    infos: list
    crs_wkt: str
    reach: object | None
    notes: list
    grids: list
    timings: dict

    @property
    def n(self) -> int:
        return len(self.rows)


def _source_for(row: ScenarioRow, need_vectors: bool):
    src = row.source
    if not src.is_mesh and src.speed and src.u and src.v and not need_vectors:
        return dataclasses.replace(src, u=None, v=None)  # the speed raster is enough
    return src


def _reraise_for_row(row: ScenarioRow, err: ChannelHabitatError):
    msg = str(err)
    if not msg.startswith(row.where):
        msg = f"{row.where}: {msg}"
    param = PARAMETER if err.parameter in _RUN_PARAMETERS else err.parameter
    raise ChannelHabitatError(msg, param) from None


def _release_gdal_frames(exc: BaseException) -> None:
    """Free the frames of ``exc``'s traceback with every GDAL dataset outliving its bands.

    GDAL 3.6's Python bands do not keep their dataset alive; a reader frame left by an exception holds
    both, and clearing it releases its variables in their order of first use (the dataset before its
    band), which frees a band after its dataset: heap corruption. Holding the datasets here while the
    frames are cleared, then letting them go, releases the bands first."""
    import traceback

    keep = []
    tb = exc.__traceback__
    while tb is not None:
        for value in tb.tb_frame.f_locals.values():
            items = value.values() if isinstance(value, dict) else (value,)
            keep.extend(v for v in items if isinstance(v, gdal.Dataset))
        tb = tb.tb_next
    traceback.clear_frames(exc.__traceback__)
    exc.__traceback__ = None
    del keep


def run_scenarios(rows: list[ScenarioRow], work, *, wet_depth_m: float, reach=None, workers: int = DEFAULT_WORKERS,
                  need_vectors: bool = False, progress: Progress | None = None, log=None,
                  infos: list | None = None, parameter: str = PARAMETER) -> TableRun:
    """Run ``work(RunInput)`` for every row (see the module docstring). Returns a TableRun.

    ``reach``: a core.reach.Reach (any CRS; reprojected once to the runs' CRS) or None (no chainage).
    ``workers``: threads (1 = one row at a time). ``need_vectors``: the work needs u and v (rows
    without them are refused). ``progress``: a core Progress (called on this thread; raising
    Cancelled stops everything). ``log(text)``: messages, on this thread. ``infos``: a
    :func:`preflight` result, if already made."""
    progress = as_progress(progress)
    log = log or (lambda text: None)
    t_start = time.perf_counter()
    rows = list(rows)
    if not rows:
        raise ChannelHabitatError("the scenario table has no runs to work on", parameter)
    infos = infos if infos is not None else preflight(rows, parameter)
    crs_wkt = infos[0].crs_wkt
    notes = []
    if reach is not None:
        reach, note = reach_in_crs(reach, crs_wkt)
        if note:
            notes.append(note)
            log(note)
    grids: dict[str, GridUse] = {}
    for info in infos:
        g = grids.setdefault(info.grid_key, GridUse(info.grid_key, info.grid_text))
        g.runs += 1
    # Largest wet area first within a grid: later runs of the grid find their cells located.
    first_seen = {k: i for i, k in reversed(list(enumerate(i.grid_key for i in infos)))}
    order = sorted(range(len(rows)), key=lambda i: (first_seen[infos[i].grid_key], -rows[i].q_mld, i))

    n = len(rows)
    workers = max(1, min(int(workers or 1), n))
    stop = threading.Event()
    fractions = np.zeros(n)
    messages: queue.Queue = queue.Queue()
    locate_lock = threading.Lock()
    timing = {"read_s": 0.0, "locate_s": 0.0, "work_s": 0.0}
    timing_guard = threading.Lock()

    def one(i):
        row = rows[i]

        def report(f, _msg):
            fractions[i] = f

        rp = Progress(report, stop.is_set)
        rp(0.0)
        # The reader gets a progress that never raises: a stop is honoured right after the read. An
        # exception leaving the reader while its GDAL bands are alive would free them after their
        # datasets (see _release_gdal_frames).
        read_progress = Progress(lambda f, _m: report(0.5 * f, None))
        try:
            t0 = time.perf_counter()
            src = _source_for(row, need_vectors)
            # dry blocks skipped unread; None when that shortcut does not apply (read_run then reads and
            # says what needs saying)
            fld = read_raster_blocks(src, wet_depth_m, read_progress)
            if fld is None:
                fld = read_run(src, wet_depth_m, read_progress)
            rp.check()
            if need_vectors and (fld.u is None or fld.v is None):
                raise ChannelHabitatError("this algorithm needs velocity vectors: give u and v rasters (or a mesh "
                                          "vector group) on every row", parameter)
            if infos[i].crs_wkt and fld.crs_wkt and not same_crs(infos[i].crs_wkt, fld.crs_wkt):
                raise ChannelHabitatError(f"is in {crs_name(fld.crs_wkt)}, not in {crs_name(crs_wkt)} like the "
                                          "other runs; reproject it", parameter)
            t1 = time.perf_counter()
            loc = None
            if reach is not None:
                rp(0.5, None)
                with locate_lock:  # one at a time: the cache is shared (and not made for threads)
                    rp.check()
                    ta = time.perf_counter()
                    loc = locate_field(reach, fld)
                    dt = time.perf_counter() - ta
                g = grids[infos[i].grid_key]
                with timing_guard:
                    g.locate_seconds.append(dt)
                    g.elements.append(fld.n)
            t2 = time.perf_counter()
            res = work(RunInput(i, row, fld, reach, loc, rp.sub(0.6, 1.0)))
            t3 = time.perf_counter()
            with timing_guard:
                timing["read_s"] += t1 - t0
                timing["locate_s"] += t2 - t1
                timing["work_s"] += t3 - t2
            messages.put(f"{row.label}: {fld.n:,} wet elements; read {t1 - t0:.2f} s, chainage {t2 - t1:.2f} s, "
                         f"work {t3 - t2:.2f} s")
            for note in fld.notes:
                messages.put(f"{row.label}: {note}")
            del fld, loc
            fractions[i] = 1.0
            return res
        except ChannelHabitatError as err:
            _reraise_for_row(row, err)
        except Cancelled:
            raise
        except (RuntimeError, OSError) as exc:  # GDAL / netCDF4: a file that opens but cannot be read
            msg = f"{row.where}: cannot read the run's files: {exc}"
            _release_gdal_frames(exc)
            del exc
            raise ChannelHabitatError(msg, parameter) from None

    def overall():
        return float(fractions.sum()) / n

    results: list = [None] * n
    failure = None
    pool = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="scenario-run")
    futures = {}
    try:
        for i in order:
            futures[pool.submit(one, i)] = i
        pending = set(futures)
        done_count = 0
        while pending:
            done, pending = wait(pending, timeout=0.1, return_when=FIRST_COMPLETED)
            while not messages.empty():
                log(messages.get_nowait())
            for f in done:
                exc = f.exception()
                if exc is not None:
                    if failure is None or (isinstance(failure, Cancelled) and not isinstance(exc, Cancelled)):
                        failure = exc
                    continue
                results[futures[f]] = f.result()
                done_count += 1
            if failure is not None:
                break
            progress(overall(), f"runs: {done_count} of {n} done")
    except BaseException as exc:  # Cancelled from progress, KeyboardInterrupt, ...
        failure = exc
    finally:
        if failure is not None:
            stop.set()
        pool.shutdown(wait=True, cancel_futures=True)
        while not messages.empty():
            log(messages.get_nowait())
    if failure is not None:
        raise failure
    wall = time.perf_counter() - t_start
    timings = {**timing, "wall_s": wall, "workers": workers, "runs": n}
    grid_list = list(grids.values())
    log(f"{n} runs in {wall:.2f} s, {workers} at a time (summed over the runs: reading {timing['read_s']:.2f} s, "
        f"chainage {timing['locate_s']:.2f} s, work {timing['work_s']:.2f} s)")
    if reach is not None:
        for g in grid_list:
            log(f"chainage on {g.describe()}")
    return TableRun(rows, results, infos, crs_wkt, reach, notes, grid_list, timings)
