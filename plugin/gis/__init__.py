"""Adapters between QGIS/GDAL and the core: rasters, meshes, vectors, styles, layouts, charts.

Modules here know QGIS and GDAL; they know no hydraulics. ``geotiff`` and ``ugrid`` use GDAL and
netCDF4 only (no qgis import), so the demo generator and benchmarks can use them outside QGIS.
"""
