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


def pytest_sessionfinish(session, exitstatus):
    session.config._channel_habitat_exit = int(exitstatus)


@pytest.hookimpl(trylast=True)
def pytest_unconfigure(config):
    """End the process right after pytest-qgis has shut QGIS down, skipping the interpreter's
    final clean-up.

    PyQGIS keeps the Python exception of the last algorithm that failed (a test that checks an
    error message), and with it the test's frames and the layers they hold. Python would destroy
    those layers only during its own shutdown, after QGIS and GDAL are gone, and crash (a
    segmentation fault after a green run). The tests are over at this point; nothing is lost."""
    code = getattr(config, "_channel_habitat_exit", None)
    if code is None:
        return
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(code)


@pytest.fixture(autouse=True)
def _collect_qgis_objects():
    """Free each test's Processing contexts (and the layers they hold) while QGIS is still up.

    Contexts caught in reference cycles would otherwise be destroyed by the final garbage
    collection after QgsApplication.exitQgis(), closing OGR datasets after GDAL has shut down
    (a segmentation fault at exit that turns a green run red)."""
    yield
    import gc

    gc.collect()
