"""Vector layers of the demo reach: centreline, channel outline and invented bank vegetation.

GeoPackages are written with GDAL/OGR; the GDAL option OGR_CURRENT_DATE is set while writing so the
timestamps GeoPackage stores do not change from run to run (same bytes every run).
"""

from __future__ import annotations

import os
import tempfile
from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np
from osgeo import gdal, ogr, osr
from shapely.geometry import LineString, Polygon

gdal.UseExceptions()
ogr.UseExceptions()

FIXED_DATE = "2000-01-01T00:00:00Z"

COMMUNITIES = {
    "riparian woodland": "trees along the bank tops, reaching a little down the bank face",
    "bank sedgeland": "sedges and rushes on the lower bank face",
    "bench grassland": "grasses and herbs on low benches of the free-flowing reach",
    "emergent reed bed": "reeds on benches near the weir whose crest lies just above the normal pool",
}


@contextmanager
def fixed_ogr_date():
    old = gdal.GetConfigOption("OGR_CURRENT_DATE")
    gdal.SetConfigOption("OGR_CURRENT_DATE", FIXED_DATE)
    try:
        yield
    finally:
        gdal.SetConfigOption("OGR_CURRENT_DATE", old)


_OGR_TYPES = {str: ogr.OFTString, int: ogr.OFTInteger, float: ogr.OFTReal}


def write_gpkg(path: str, layer: str, geometries, fields: list[tuple[str, type]], rows: list[dict],
               epsg: int, geom_type, description: str = "") -> str:
    """Write one GeoPackage layer atomically (temporary name, then rename)."""
    d = os.path.dirname(os.path.abspath(path)) or "."
    os.makedirs(d, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".partial-", suffix=".gpkg", dir=d)
    os.close(fd)
    os.remove(tmp)
    srs = osr.SpatialReference()
    srs.ImportFromEPSG(int(epsg))
    try:
        with fixed_ogr_date():
            drv = ogr.GetDriverByName("GPKG")
            ds = drv.CreateDataSource(tmp)
            opts = ["SPATIAL_INDEX=YES", "FID=fid"]
            if description:
                opts.append(f"DESCRIPTION={description}")
            lyr = ds.CreateLayer(layer, srs, geom_type, options=opts)
            for name, typ in fields:
                lyr.CreateField(ogr.FieldDefn(name, _OGR_TYPES[typ]))
            defn = lyr.GetLayerDefn()
            lyr.StartTransaction()
            for geom, row in zip(geometries, rows):
                feat = ogr.Feature(defn)
                for name, _ in fields:
                    feat.SetField(name, row[name])
                feat.SetGeometry(ogr.CreateGeometryFromWkb(geom.wkb))
                lyr.CreateFeature(feat)
                feat = None
            lyr.CommitTransaction()
            lyr = None
            ds = None
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.remove(tmp)
        raise
    return path


def centreline_downstream_to_upstream(geom) -> LineString:
    """The centreline as digitised for the demo: from the weir (downstream) to the regulator."""
    return LineString(np.column_stack([geom.x[::-1], geom.y[::-1]]))


def channel_polygon(geom, spacing: float = 10.0) -> Polygon:
    """Bank-top outline: the left bank downstream, then the right bank back upstream."""
    _, left, right = geom.bank_lines(spacing)
    ring = np.column_stack([np.concatenate([left[0], right[0][::-1]]),
                            np.concatenate([left[1], right[1][::-1]])])
    poly = Polygon(ring)
    if not poly.is_valid:
        raise ValueError("the channel outline overlaps itself: choose another seed or fewer tight bends")
    return poly


@dataclass
class Stand:
    community: str
    bank: str
    chainage_from_m: float
    chainage_to_m: float
    inner: float  # distance from the bank top into the channel (m) of the channel-side edge
    outer: float  # distance from the bank top (m) of the other edge: < 0 is outside the channel
    polygon: Polygon = None


def _band(geom, side: int, c0: float, c1: float, inner: float, outer: float, spacing: float = 10.0) -> Polygon:
    """A strip along one bank between distances ``outer`` and ``inner`` from the bank top (positive
    into the channel), from chainage c0 to c1."""
    n = max(int(np.ceil((c1 - c0) / spacing)), 2)
    c = np.linspace(c0, c1, n + 1)
    half = 0.5 * geom.along("width", c)
    o_in = side * (half - inner)
    o_out = side * (half - outer)
    xi, yi = geom.to_xy(c, o_in)
    xo, yo = geom.to_xy(c, o_out)
    ring = np.column_stack([np.concatenate([xi, xo[::-1]]), np.concatenate([yi, yo[::-1]])])
    poly = Polygon(ring)
    if not poly.is_valid:
        poly = poly.buffer(0)
    return poly


def vegetation(geom, rng: np.random.Generator) -> list[Stand]:
    """Invented stands of four generic communities along both banks and on the benches."""
    L = geom.length_m
    stands: list[Stand] = []
    benches = geom.benches

    def on_bench(side, c0, c1):
        return any(b.side == side and c0 < b.chainage_to_m + b.taper_m and c1 > b.chainage_from_m - b.taper_m
                   for b in benches)

    for side, bank in ((1, "left"), (-1, "right")):
        # riparian woodland: bank tops, irregular stands and gaps
        c = rng.uniform(0.0, 300.0)
        while c < L - 150.0:
            length = rng.uniform(300.0, 1400.0)
            c1 = min(c + length, L - 50.0)
            if c1 - c > 100.0:
                stands.append(Stand("riparian woodland", bank, c, c1, inner=rng.uniform(2.5, 4.0),
                                    outer=-rng.uniform(14.0, 20.0)))
            c = c1 + rng.uniform(80.0, 500.0)
        # bank sedgeland: lower bank face, not where a bench is cut
        c = rng.uniform(100.0, 600.0)
        while c < L - 150.0:
            length = rng.uniform(150.0, 700.0)
            c1 = min(c + length, L - 50.0)
            if c1 - c > 80.0 and not on_bench(side, c, c1):
                stands.append(Stand("bank sedgeland", bank, c, c1, inner=rng.uniform(10.0, 13.0),
                                    outer=rng.uniform(4.5, 5.5)))
            c = c1 + rng.uniform(150.0, 900.0)
    for b in benches:
        if b.kind == "low":
            stands.append(Stand("bench grassland", b.bank, b.chainage_from_m + 20.0, b.chainage_to_m - 20.0,
                                inner=b.width_m - 1.0, outer=5.0))
        else:
            stands.append(Stand("emergent reed bed", b.bank, b.chainage_from_m + 10.0, b.chainage_to_m - 10.0,
                                inner=b.width_m + 2.0, outer=6.0))
    for s in stands:
        side = 1 if s.bank == "left" else -1
        s.polygon = _band(geom, side, s.chainage_from_m, s.chainage_to_m, s.inner, s.outer)
    stands.sort(key=lambda s: (s.chainage_from_m, s.bank, s.community))
    return stands
