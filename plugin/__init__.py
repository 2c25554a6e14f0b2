"""Channel Habitat QGIS plugin entry point."""


def classFactory(iface):  # noqa: N802 - QGIS plugin API name
    """Called by QGIS (iface is None in headless runs such as qgis_process)."""
    from .plugin import ChannelHabitatPlugin

    return ChannelHabitatPlugin(iface)
