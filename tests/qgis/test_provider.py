"""The plugin loads headless and its provider lists every algorithm of DESIGN.md section 3."""

from qgis.core import QgsApplication

DESIGNED_IDS = {
    "buildreach", "maphabitat", "compareregimes", "flowhabitat", "usablearea", "driftresidence",
    "habitatseries", "fitrating", "vegetationoverlay", "mappanels",
}


def test_class_factory_headless(qgis_app, qgis_processing):
    import plugin

    instance = plugin.classFactory(None)
    instance.initProcessing()
    instance.initGui()  # no iface: registers the provider only
    reg = QgsApplication.processingRegistry()
    assert reg.providerById("channelhabitat") is not None
    instance.unload()
    assert reg.providerById("channelhabitat") is None


def test_every_algorithm_has_name_group_help(provider):
    algs = provider.algorithms()
    assert algs, "the provider lists no algorithms"
    for alg in algs:
        assert alg.id() == f"channelhabitat:{alg.name()}"
        assert alg.displayName().strip()
        assert alg.group().strip() and alg.groupId().strip()
        help_text = alg.shortHelpString()
        assert len(help_text) > 200, f"{alg.name()} help is too short"
        assert "licensed professional practice" in help_text
        assert not alg.icon().isNull()


def test_algorithm_ids_are_the_designed_ones(provider):
    ids = {a.name() for a in provider.algorithms()}
    unknown = ids - DESIGNED_IDS
    assert not unknown, f"algorithm ids not in DESIGN.md: {unknown}"
