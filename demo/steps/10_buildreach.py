"""Demo: the reach axis of the invented Figment River (buildreach).

The demo centreline is digitised downstream to upstream on purpose. The first run says so
(DIRECTION = reversed) and cuts the bank-top outline into 1 km segments and three named zones; the
second lets the velocity of the weir regime's low-flow run decide the direction and uses that run's
wet area as the channel extent. The AXIS of the first run (demo_output/buildreach/axis.gpkg, M =
chainage) is what later steps can give as CENTRELINE. A map of the outputs is rendered to PNG with
the layers' own styles.
"""

from __future__ import annotations

TITLE = "Reach axis, km posts, segments and zones (buildreach)"


def _render(demo, paths, png):
    from qgis.core import QgsMapRendererParallelJob, QgsMapSettings, QgsVectorLayer
    from qgis.PyQt.QtCore import QSize
    from qgis.PyQt.QtGui import QColor

    from plugin.resources import resource_path

    layers = []
    for key, qml in (("POSTS", "reach_posts"), ("AXIS", "reach_axis"), ("ZONES", "reach_zones"),
                     ("SEGMENTS", "reach_segments")):
        layer = QgsVectorLayer(paths[key], key.lower(), "ogr")
        layer.loadNamedStyle(str(resource_path("styles", f"{qml}.qml")))
        layers.append(layer)
    ms = QgsMapSettings()
    ms.setLayers(layers)
    ms.setBackgroundColor(QColor("white"))
    ms.setDestinationCrs(layers[0].crs())
    ext = layers[3].extent()
    ext.scale(1.04)
    ms.setExtent(ext)
    ms.setOutputSize(QSize(2000, max(int(2000 * ext.height() / ext.width()), 200)))
    job = QgsMapRendererParallelJob(ms)
    job.start()
    job.waitForFinished()
    job.renderedImage().save(png)
    return png


def run(demo):
    s = demo.sample
    out = {k: demo.path("buildreach", f"{k.lower()}.gpkg") for k in ("AXIS", "POSTS", "SEGMENTS", "ZONES")}
    demo.log("  centreline digitised downstream -> upstream: DIRECTION = reversed; bank-top outline as extent")
    demo.run("buildreach", {
        "CENTRELINE": str(s / "centreline.gpkg") + "|layername=centreline",
        "DIRECTION": 1, "EXTENT": str(s / "channel.gpkg") + "|layername=channel",
        "SEGMENT_LENGTH": 1000.0, "ZONE_BREAKS": "0 upper, 12000 middle, 25000 lower", **out})
    png = _render(demo, out, demo.path("buildreach", "reach_map.png"))
    items = [("Reach axis (M = chainage)", out["AXIS"]), ("Km posts", out["POSTS"]),
             ("Segments (1 km, bank to bank)", out["SEGMENTS"]), ("Zones", out["ZONES"]),
             ("Map of the reach outputs", png)]
    out2 = {k: demo.path("buildreach", "from_run", f"{k.lower()}.gpkg") for k in ("AXIS", "POSTS", "SEGMENTS",
                                                                                 "ZONES")}
    r = s / "rasters" / "weir"
    demo.log("  direction inferred from the weir regime's 3000 ML/d velocities; extent = its wet area")
    demo.run("buildreach", {
        "CENTRELINE": str(s / "centreline.gpkg") + "|layername=centreline", "DIRECTION": 2,
        "RUN_DEPTH": str(r / "q03000_depth.tif"), "RUN_VELOCITY_U": str(r / "q03000_u.tif"),
        "RUN_VELOCITY_V": str(r / "q03000_v.tif"), "SEGMENT_LENGTH": 1000.0, **out2})
    png2 = _render(demo, out2, demo.path("buildreach", "from_run", "reach_map_wet_area.png"))
    items += [("Segments of the wet area at 3000 ML/d (direction from velocity)", out2["SEGMENTS"]),
              ("Map: segments of the wet area", png2)]
    return items
