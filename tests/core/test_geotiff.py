"""GeoTIFF writer: atomic, tiled, compressed, nodata, colour table and class names kept."""

import os

import numpy as np
from osgeo import gdal

from plugin.gis import geotiff

WKT = 'PROJCS["WGS 84 / UTM zone 44S",GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563]],PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433]],PROJECTION["Transverse_Mercator"],PARAMETER["latitude_of_origin",0],PARAMETER["central_meridian",81],PARAMETER["scale_factor",0.9996],PARAMETER["false_easting",500000],PARAMETER["false_northing",10000000],UNIT["metre",1]]'  # noqa: E501


def test_write_class_raster_round_trip(tmp_path):
    path = str(tmp_path / "classes.tif")
    a = np.array([[0, 1, 2], [3, 4, 0]], dtype=np.uint8)
    geotiff.write(path, a, (100.0, 5.0, 0.0, 200.0, 0.0, -5.0), WKT, nodata=0,
                  colours={1: "#8E4A1C", 4: "#1F4E8C"}, category_names=["", "very slow", "slow", "moderate", "fast"])
    assert sorted(os.listdir(tmp_path)) in (["classes.tif"], ["classes.tif", "classes.tif.aux.xml"])
    ds = gdal.Open(path)
    b = ds.GetRasterBand(1)
    assert np.array_equal(b.ReadAsArray(), a)
    assert b.GetNoDataValue() == 0
    assert b.GetColorTable().GetColorEntry(4)[:3] == (0x1F, 0x4E, 0x8C)
    assert ds.GetMetadata("IMAGE_STRUCTURE").get("COMPRESSION") == "DEFLATE"
    assert b.GetBlockSize() == [256, 256]
    del b, ds
    assert geotiff.category_names(path)[1:] == ["very slow", "slow", "moderate", "fast"]
    # Without the side file the names still come from the file's own metadata.
    if os.path.exists(path + ".aux.xml"):
        os.remove(path + ".aux.xml")
    assert geotiff.category_names(path)[1:] == ["very slow", "slow", "moderate", "fast"]


def test_failed_write_leaves_nothing(tmp_path):
    path = str(tmp_path / "bad.tif")
    try:
        geotiff.write(path, np.zeros((2, 2), np.float32), (0, 1, 0, 0, 0, -1), "not a crs")
    except Exception:
        pass
    assert not [f for f in os.listdir(tmp_path) if f.startswith(".partial")]
    assert not os.path.exists(path)
