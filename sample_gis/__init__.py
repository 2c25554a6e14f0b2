"""The invented demo reach of Channel Habitat: the Figment River between the Upper Regulator and Weir F1.

Everything here is invented. ``python -m sample_gis.generate --out DIR`` (or ``generate(out_dir, ...)``)
builds a meandering lowland reach, computes steady 1D gradually-varied-flow profiles for four regimes
at a ladder of eleven discharges, spreads them across the channel and writes GeoTIFF rasters, UGRID
meshes, vector layers and tables (layout: sample_gis/README.md). The generator and its hydraulics are
development tools: they are not part of the QGIS plugin.
"""
