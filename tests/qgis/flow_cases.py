"""Helpers for the flowhabitat and usablearea tests: the demo reach axis (upstream -> downstream), an
independent recomputation of a run's wet cells, chainage (shapely, a reference library), zones and
classes with numpy, and reading output layers."""

from __future__ import annotations

import csv
import math

import numpy as np
import shapely
from osgeo import gdal, ogr

gdal.UseExceptions()
ogr.UseExceptions()

ZONES = "0 upper, 12000 middle, 25000 lower"
ZONE_STARTS = (0.0, 12000.0, 25000.0)
ZONE_NAMES = ("upper", "middle", "lower")
SEGMENT_M = 1000.0
VELOCITY_BOUNDS = (0.05, 0.20, 0.30)  # DESIGN.md section 4
CLASSES = ("very slow", "slow", "moderate", "fast")


def write_axis(sample_dir, path) -> str:
    """The demo centreline is digitised downstream -> upstream; write it upstream -> downstream."""
    src = ogr.Open(str(sample_dir / "centreline.gpkg"))
    lyr = src.GetLayer(0)
    feat = lyr.GetNextFeature()
    pts = feat.GetGeometryRef().GetPoints()[::-1]
    drv = ogr.GetDriverByName("GPKG")
    ds = drv.CreateDataSource(str(path))
    out = ds.CreateLayer("axis", lyr.GetSpatialRef(), ogr.wkbLineString)
    line = ogr.Geometry(ogr.wkbLineString)
    for p in pts:
        line.AddPoint_2D(p[0], p[1])
    f = ogr.Feature(out.GetLayerDefn())
    f.SetGeometry(line)
    out.CreateFeature(f)
    del f, out, ds, feat, lyr, src
    return str(path) + "|layername=axis"


def axis_line(path) -> shapely.LineString:
    ds = ogr.Open(str(path).split("|")[0])
    lyr = ds.GetLayer(0)
    feat = lyr.GetNextFeature()  # keep the feature while its geometry is used
    line = shapely.LineString(feat.GetGeometryRef().GetPoints())
    del feat, lyr, ds
    return line


def raster_cells(depth_path, speed_path, wet=0.05):
    """(x, y, area, depth, speed) of the wet cells, read with GDAL and numpy only."""
    out = []
    for p in (depth_path, speed_path):
        ds = gdal.Open(str(p))
        b = ds.GetRasterBand(1)
        a = b.ReadAsArray().astype(np.float32)
        nd = b.GetNoDataValue()
        gt = ds.GetGeoTransform()
        del b, ds
        out.append(np.where(a == nd, np.nan, a) if nd is not None else a)
    d, s = out
    m = np.isfinite(d) & (d >= wet) & np.isfinite(s)
    rr, cc = np.nonzero(m)
    x = gt[0] + (cc + 0.5) * gt[1]
    y = gt[3] + (rr + 0.5) * gt[5]
    return x, y, np.full(x.size, abs(gt[1] * gt[5])), d[m], s[m]


def locate(line, x, y):
    """(chainage, outside): the nearest point on the line, exactly, by a certified candidate search
    (scipy cKDTree, a reference library): the nearest segment lies within d0 + h of the point, d0 its
    distance to the nearest vertex and h the largest segment half-length, measured from the segment
    midpoints; every such segment is projected on exactly. Points whose nearest point is an end of the
    line are outside the reach. (Equal to shapely.line_locate_point: checked in the tests on a sample.)"""
    from scipy.spatial import cKDTree

    v = np.asarray(line.coords)
    a, b = v[:-1], v[1:]
    seg = b - a
    seg_len = np.hypot(seg[:, 0], seg[:, 1])
    cum = np.concatenate([[0.0], np.cumsum(seg_len)])
    p = np.column_stack([x, y])
    d0, _ = cKDTree(v).query(p)
    mids = cKDTree((a + b) / 2.0)
    cand = mids.query_ball_point(p, d0 + seg_len.max() / 2.0 + 1e-6)
    counts = np.fromiter((len(c) for c in cand), np.int64, len(cand))
    pid = np.repeat(np.arange(len(cand)), counts)
    sid = np.fromiter((i for c in cand for i in c), np.int64, int(counts.sum()))
    w = p[pid] - a[sid]
    t = np.clip((w * seg[sid]).sum(axis=1) / seg_len[sid] ** 2, 0.0, 1.0)
    foot = a[sid] + t[:, None] * seg[sid]
    d2 = ((p[pid] - foot) ** 2).sum(axis=1)
    order = np.lexsort((sid, d2, pid))  # per point: the nearest, ties to the upstream segment
    first = order[np.r_[0, np.flatnonzero(np.diff(pid[order])) + 1]]
    s_best, t_best = sid[first], t[first]
    ch = cum[s_best] + t_best * seg_len[s_best]
    outside = ((s_best == 0) & (t_best <= 0.0)) | ((s_best == len(seg) - 1) & (t_best >= 1.0))
    return ch, outside


def zone_of(ch, length):
    edges = np.array(list(ZONE_STARTS) + [length])
    return np.clip(np.searchsorted(edges, ch, side="right") - 1, 0, len(ZONE_STARTS) - 1)


def segment_of(ch, length):
    n = int(math.ceil(length / SEGMENT_M - 1e-9))
    return np.clip(np.floor(ch / SEGMENT_M).astype(int), 0, n - 1)


def velocity_class(speed):
    """0..3 = very slow .. fast; bounds lower-inclusive at their float32 value (the rasters' type)."""
    return np.searchsorted(np.asarray(VELOCITY_BOUNDS, dtype=np.float32), speed.astype(np.float32), side="right")


def read_layer(path):
    """(field names, rows as dicts) of an output table (GeoPackage or CSV) through QGIS."""
    from qgis.core import QgsVectorLayer

    lyr = QgsVectorLayer(str(path), "t", "ogr")
    assert lyr.isValid(), path
    names = [f.name() for f in lyr.fields()]
    rows = []
    for f in lyr.getFeatures():
        vals = []
        for v in f.attributes():
            vals.append(None if v is None or (hasattr(v, "isNull") and v.isNull()) else v)
        rows.append(dict(zip(names, vals)))
    return names, rows


def scenario_rows(sample_dir):
    with open(sample_dir / "scenarios.csv", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def write_table(path, rows, columns=("regime", "discharge", "unit", "depth", "speed")):
    with open(path, "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(columns)
        for r in rows:
            w.writerow([r.get(c, "") for c in columns])
    return str(path)


def run(alg_id, params, feedback=None):
    """processing.run with a fresh context (usable from module-scoped fixtures)."""
    import processing
    from qgis.core import QgsProcessingContext, QgsProcessingFeedback

    return processing.run(f"channelhabitat:{alg_id}", params, context=QgsProcessingContext(),
                          feedback=feedback or QgsProcessingFeedback())


class LogFeedback:
    """A QgsProcessingFeedback that keeps the log lines (made on demand: needs QGIS initialised)."""

    @staticmethod
    def make():
        from qgis.core import QgsProcessingFeedback

        class _F(QgsProcessingFeedback):
            def __init__(self):
                super().__init__()
                self.lines = []

            def pushInfo(self, info):  # noqa: N802
                self.lines.append(info)
                super().pushInfo(info)

        return _F()
