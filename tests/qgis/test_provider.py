"""The plugin loads headless and its provider lists every algorithm of DESIGN.md section 3."""

import os
import subprocess
import sys
from pathlib import Path

from qgis.core import QgsApplication

ROOT = Path(__file__).resolve().parents[2]

DESIGNED_IDS = {
    "buildreach", "maphabitat", "compareregimes", "flowhabitat", "usablearea", "driftresidence",
    "habitatseries", "fitrating", "vegetationoverlay", "mappanels",
}


def test_class_factory_headless():
    """In a fresh QGIS (a subprocess, so no other test has registered the provider yet):
    classFactory(None) registers the provider, initGui without iface is harmless, unload removes it."""
    code = """
import sys
from qgis.core import QgsApplication
app = QgsApplication([], False); app.initQgis()
sys.path.insert(0, sys.argv[1])
import plugin
reg = QgsApplication.processingRegistry()
p = plugin.classFactory(None)
p.initProcessing(); p.initGui()
prov = reg.providerById("channelhabitat")
assert prov is not None, "provider not registered"
n = len(prov.algorithms())
p.unload()
assert reg.providerById("channelhabitat") is None, "provider not removed by unload"
print("ok", n)
"""
    res = subprocess.run([sys.executable, "-c", code, str(ROOT)], capture_output=True, text=True,
                         env={**os.environ, "QT_QPA_PLATFORM": "offscreen"}, timeout=120)
    assert res.returncode == 0, res.stderr[-2000:]
    assert res.stdout.split()[0] == "ok" and int(res.stdout.split()[1]) >= 1


def test_second_registration_is_refused_cleanly(provider):
    """With the provider already registered, a second plugin instance neither breaks it nor
    removes it on unload."""
    import plugin

    p = plugin.classFactory(None)
    p.initProcessing()
    p.unload()
    assert QgsApplication.processingRegistry().providerById("channelhabitat") is provider


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
    from plugin.provider import IMPORT_ERRORS

    assert not IMPORT_ERRORS, f"algorithm modules failed to import: {IMPORT_ERRORS}"
    ids = {a.name() for a in provider.algorithms()}
    assert ids == DESIGNED_IDS, f"missing {DESIGNED_IDS - ids}, not in DESIGN.md {ids - DESIGNED_IDS}"


def test_missing_shapely_is_explained(monkeypatch):
    """Without shapely 2 the provider says what to install instead of failing obscurely."""
    import builtins

    from plugin import provider as prov

    real_import = builtins.__import__

    def fake_import(name, *args, **kwargs):
        if name == "shapely":
            raise ImportError("no shapely")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", fake_import)
    msg = prov.dependency_problem()
    assert "shapely 2.0" in msg and "pip install" in msg
    monkeypatch.setattr(builtins, "__import__", real_import)
    assert prov.dependency_problem() is None
