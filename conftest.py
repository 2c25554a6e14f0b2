"""Shared pytest set-up: headless Qt, the repository on sys.path, and common fixtures."""

import os
import sys
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
ROOT = Path(__file__).resolve().parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

import pytest  # noqa: E402

SAMPLE_DIR = ROOT / "sample_gis" / "generated"


@pytest.fixture(scope="session")
def sample_dir():
    """The generated demo reach (make sample). Tests that need it fail clearly without it."""
    if not (SAMPLE_DIR / ".complete").exists():
        pytest.fail("the demo reach is not generated: run `make sample` (make test does it first)")
    return SAMPLE_DIR


@pytest.fixture(scope="session")
def provider(qgis_app, qgis_processing):
    """The Channel Habitat provider registered in the Processing registry (once per session)."""
    from qgis.core import QgsApplication

    from plugin.provider import PROVIDER_ID, ChannelHabitatProvider

    reg = QgsApplication.processingRegistry()
    prov = reg.providerById(PROVIDER_ID)
    if prov is None:
        prov = ChannelHabitatProvider()
        assert reg.addProvider(prov)
    return prov


@pytest.fixture()
def run_alg(provider):
    """Run an algorithm through Processing: run_alg('maphabitat', {...}) -> results dict."""
    import processing
    from qgis.core import QgsProcessingContext, QgsProcessingFeedback

    def _run(alg_id, params, context=None, feedback=None):
        context = context or QgsProcessingContext()
        feedback = feedback or QgsProcessingFeedback()
        return processing.run(f"channelhabitat:{alg_id}", params, context=context, feedback=feedback)

    return _run
