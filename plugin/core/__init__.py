"""The science of Channel Habitat: numpy, shapely, pyproj and scipy only.

Nothing in this package imports qgis: it can run in a plain Python script or on a cluster.
Data flows one way: source -> HydraulicField -> ReachAxis.locate -> classes -> summaries.
"""
