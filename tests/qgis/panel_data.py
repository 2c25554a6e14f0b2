"""Synthetic inputs for the map-panel and vegetation tests (made with GDAL/OGR/shapely only).

A meandering channel 90 m wide along a 13 km axis (EPSG:28355), flowing east-south-east:
* ``classes.tif``   class raster (Byte, 4 m cells, 0 = dry) with a colour table of the velocity
                    preset's colours and category names; speed rises across and along the reach, so
                    the upstream pages hold only the slow classes;
* ``change.tif``    a float raster of speed changes (m/s), no colour table;
* ``patches.gpkg``  class polygons (field ``class``);
* ``axis.gpkg``     the axis as a LineStringM (M = chainage), ``posts.gpkg`` points with ``label``;
* ``channel.gpkg``  the channel polygon; ``vegetation.gpkg`` stands (``community``, ``stand_id``).
"""

from __future__ import annotations

import os

import numpy as np
import shapely
import shapely.ops
from osgeo import gdal, ogr, osr

gdal.UseExceptions()
ogr.UseExceptions()

EPSG = 28355
BOUNDS = (0.05, 0.20, 0.30)
NAMES = ["very slow", "slow", "moderate", "fast"]
COLOURS = ["#8E4A1C", "#E3B35F", "#5FB3C8", "#1F4E8C"]  # core/classes.py VELOCITY_COLOURS


def centreline():
    t = np.linspace(0, 1, 400)
    x = 500000.0 + 9000 * t + 600 * np.sin(2 * np.pi * 3 * t)
    y = 6000000.0 - 4000 * t + 500 * np.cos(2 * np.pi * 2.5 * t)
    return x, y


def _write_layer(path, name, gtype, fields, rows, srs):
    if os.path.exists(path):
        os.remove(path)
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(path)
    lyr = ds.CreateLayer(name, srs, gtype)
    for fn, ft in fields:
        lyr.CreateField(ogr.FieldDefn(fn, ft))
    for attrs, geom in rows:
        f = ogr.Feature(lyr.GetLayerDefn())
        for k, v in attrs.items():
            f.SetField(k, v)
        f.SetGeometry(geom if isinstance(geom, ogr.Geometry) else ogr.CreateGeometryFromWkb(shapely.to_wkb(geom)))
        lyr.CreateFeature(f)
    ds = None
    return path


def _raster(path, array, gt, wkt, nodata, colours=None, names=None):
    drv = gdal.GetDriverByName("GTiff")
    dtype = gdal.GDT_Byte if array.dtype == np.uint8 else gdal.GDT_Float32
    ds = drv.Create(path, array.shape[1], array.shape[0], 1, dtype, ["COMPRESS=DEFLATE"])
    ds.SetGeoTransform(gt)
    ds.SetProjection(wkt)
    band = ds.GetRasterBand(1)
    band.SetNoDataValue(nodata)
    if colours:
        ct = gdal.ColorTable()
        for i, c in enumerate(colours, start=1):
            ct.SetColorEntry(i, (int(c[1:3], 16), int(c[3:5], 16), int(c[5:7], 16), 255))
        band.SetRasterColorTable(ct)
    if names:
        band.SetRasterCategoryNames(names)
    band.WriteArray(array)
    band = None
    ds = None


def make_panel_inputs(out: str) -> dict:
    os.makedirs(out, exist_ok=True)
    srs = osr.SpatialReference()
    srs.ImportFromEPSG(EPSG)
    wkt = srs.ExportToWkt()
    x, y = centreline()
    line = shapely.LineString(np.column_stack([x, y]))
    chan = line.buffer(45, cap_style="flat")
    dx = 4.0
    xmin, ymin, xmax, ymax = chan.bounds
    cols, rows = int((xmax - xmin) / dx) + 2, int((ymax - ymin) / dx) + 2
    gt = (xmin - dx, dx, 0.0, ymax + dx, 0.0, -dx)
    yy, xx = np.mgrid[0:rows, 0:cols]
    cx, cy = gt[0] + (xx + 0.5) * dx, gt[3] - (yy + 0.5) * dx
    inside = shapely.contains_xy(chan, cx, cy)
    pts = shapely.points(cx[inside], cy[inside])
    dist = shapely.distance(line, pts)
    along = shapely.line_locate_point(line, pts) / line.length
    speed = 0.45 * (1 - dist / 45) * (0.4 + 0.6 * along)
    codes = np.zeros((rows, cols), np.uint8)
    codes[inside] = np.searchsorted(np.asarray(BOUNDS), speed, side="right") + 1
    _raster(f"{out}/classes.tif", codes, gt, wkt, 0, COLOURS, ["dry"] + NAMES)
    change = np.full((rows, cols), -9999.0, np.float32)
    change[inside] = (0.25 * (along - 0.5) * (1 - dist / 45)).astype(np.float32)
    _raster(f"{out}/change.tif", change, gt, wkt, -9999.0)
    # class polygons: the channel cut into bands by distance from the axis (fast in the middle)
    patches = []
    for k, (d0, d1) in enumerate(((35, 45), (20, 35), (8, 20), (0, 8))):
        ring = line.buffer(d1, cap_style="flat").difference(line.buffer(d0, cap_style="flat")) if d0 else \
            line.buffer(d1, cap_style="flat")
        patches.append(({"class": NAMES[k], "area_m2": float(ring.area)}, ring))
    _write_layer(f"{out}/patches.gpkg", "patches", ogr.wkbMultiPolygon,
                 [("class", ogr.OFTString), ("area_m2", ogr.OFTReal)],
                 [(a, shapely.MultiPolygon(list(shapely.get_parts(g)))) for a, g in patches], srs)
    ch = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(x), np.diff(y)))])
    g = ogr.Geometry(ogr.wkbLineStringM)
    for a, b, m in zip(x, y, ch):
        g.AddPointM(float(a), float(b), float(m))
    _write_layer(f"{out}/axis.gpkg", "axis", ogr.wkbLineStringM, [("reach", ogr.OFTString)],
                 [({"reach": "synthetic"}, g)], srs)
    posts = [({"chainage_m": float(c), "label": f"km {c / 1000:g}"}, line.interpolate(c))
             for c in np.arange(0.0, line.length, 1000.0)]
    _write_layer(f"{out}/posts.gpkg", "posts", ogr.wkbPoint,
                 [("chainage_m", ogr.OFTReal), ("label", ogr.OFTString)], posts, srs)
    _write_layer(f"{out}/channel.gpkg", "channel", ogr.wkbPolygon, [], [({}, chan)], srs)
    veg = []
    for i, c in enumerate(np.arange(300.0, line.length - 300, 700.0)):
        side = 1 if i % 2 else -1
        seg = shapely.ops.substring(line, c, c + 250)
        stand = seg.offset_curve(side * 55).buffer(18)
        veg.append(({"community": ["reeds", "river red gum", "lignum"][i % 3], "stand_id": i + 1}, stand))
    _write_layer(f"{out}/vegetation.gpkg", "vegetation", ogr.wkbPolygon,
                 [("community", ogr.OFTString), ("stand_id", ogr.OFTInteger)], veg, srs)
    return {"dir": out, "length_m": float(line.length), "line": line, "classes": f"{out}/classes.tif",
            "change": f"{out}/change.tif", "patches": f"{out}/patches.gpkg", "axis": f"{out}/axis.gpkg",
            "posts": f"{out}/posts.gpkg", "channel": f"{out}/channel.gpkg",
            "vegetation": f"{out}/vegetation.gpkg"}
