"""A channel extent as a shapely polygon: from a polygon layer, or the wet area of a run.

The wet area of a raster run is the union of its wet cells (GDAL Polygonize of the wet mask, so
the outline follows the cell edges exactly); of a mesh run, the union of its wet faces.
"""

from __future__ import annotations

import numpy as np
from osgeo import gdal, ogr, osr
from qgis.core import QgsCoordinateReferenceSystem, QgsFeatureRequest

from ..core.errors import ChannelHabitatError, as_progress
from ..core.field import GridSupport, MeshSupport

gdal.UseExceptions()


def layer_extent(source, crs_wkt: str, context, param: str = "EXTENT"):
    """Union of the polygons of a feature source, in ``crs_wkt``. Returns (geometry, transformed)."""
    import shapely

    req = QgsFeatureRequest()
    transformed = False
    if crs_wkt:
        target = QgsCoordinateReferenceSystem.fromWkt(crs_wkt)
        if source.sourceCrs().isValid() and source.sourceCrs() != target:
            transformed = True
        req.setDestinationCrs(target, context.transformContext())
    geoms = []
    for feat in source.getFeatures(req):
        g = feat.geometry()
        if g is None or g.isNull() or g.isEmpty():
            continue
        geoms.append(shapely.make_valid(shapely.from_wkb(bytes(g.asWkb()))))
    if not geoms:
        raise ChannelHabitatError("the channel extent layer has no polygons", param)
    polys = [p for g in geoms for p in shapely.get_parts(g) if p.geom_type in ("Polygon", "MultiPolygon")]
    if not polys:
        raise ChannelHabitatError("the channel extent layer has no polygons with an area", param)
    return shapely.union_all(polys), transformed


def wet_extent(fld, progress=None):
    """The wet area of a HydraulicField (its CRS) as a shapely (multi)polygon."""
    import shapely

    progress = as_progress(progress)
    sup = fld.support
    if fld.n == 0:
        raise ChannelHabitatError("the run is dry: it has no wet area to use as the channel extent", "RUN_DEPTH")
    if isinstance(sup, GridSupport):
        rows, cols = np.divmod(sup.index, sup.shape[1])
        r0, r1, c0, c1 = int(rows.min()), int(rows.max()) + 1, int(cols.min()), int(cols.max()) + 1
        mask = np.zeros((r1 - r0, c1 - c0), dtype=np.uint8)
        mask[rows - r0, cols - c0] = 1
        x0, dx, _, y0, _, dy = sup.transform
        ds = gdal.GetDriverByName("MEM").Create("", c1 - c0, r1 - r0, 1, gdal.GDT_Byte)
        ds.SetGeoTransform((x0 + c0 * dx, dx, 0.0, y0 + r0 * dy, 0.0, dy))
        band = ds.GetRasterBand(1)
        band.WriteArray(mask)
        drv = ogr.GetDriverByName("Memory")
        vds = drv.CreateDataSource("wet")
        srs = osr.SpatialReference()
        if fld.crs_wkt:
            srs.ImportFromWkt(fld.crs_wkt)
        lyr = vds.CreateLayer("wet", srs=srs if fld.crs_wkt else None, geom_type=ogr.wkbPolygon)
        lyr.CreateField(ogr.FieldDefn("v", ogr.OFTInteger))
        progress(0.2, "outlining the wet area")
        gdal.Polygonize(band, band, lyr, 0, [], callback=None)
        polys = []
        for feat in lyr:
            polys.append(shapely.from_wkb(bytes(feat.GetGeometryRef().ExportToWkb())))
        del band, ds, lyr, vds
        progress(0.8, None)
        polys = shapely.make_valid(np.array(polys, dtype=object)) if polys else []
        try:
            out = shapely.coverage_union_all(polys) if len(polys) else shapely.Polygon()
        except shapely.errors.GEOSException:  # cells touching only at a corner: the general union
            out = shapely.union_all(polys)
    elif isinstance(sup, MeshSupport):
        fn = sup.face_nodes[sup.index]
        valid = fn >= 0
        counts = valid.sum(axis=1)
        nodes = fn[valid]
        owner = np.repeat(np.arange(len(fn)), counts)
        coords = np.column_stack([sup.node_x[nodes], sup.node_y[nodes]])
        rings = shapely.linearrings(coords, indices=owner)
        faces = shapely.make_valid(shapely.polygons(rings))
        progress(0.5, "outlining the wet area")
        out = shapely.union_all(faces)
    else:
        raise ChannelHabitatError("the run has no grid or mesh to outline its wet area", "RUN_DEPTH")
    progress(1.0)
    return out
