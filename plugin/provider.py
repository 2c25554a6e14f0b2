"""The Processing provider `channelhabitat`: lists every algorithm in plugin/algorithms/."""

from __future__ import annotations

import importlib
import pkgutil
from pathlib import Path

from qgis.core import QgsProcessingProvider
from qgis.PyQt.QtGui import QIcon

from .resources import resource_path

PROVIDER_ID = "channelhabitat"
IMPORT_ERRORS: dict = {}  # module name -> traceback of algorithm modules that failed to import


def provider_icon() -> QIcon:
    return QIcon(str(resource_path("icons", "channel_habitat.svg")))


SHAPELY_HINT = ('install it into the Python QGIS uses: python -m pip install "shapely>=2.0,<2.1" '
                '(Debian/Ubuntu: python3 -m pip install --user --break-system-packages "shapely>=2.0,<2.1")')


def dependency_problem() -> str | None:
    """What is missing for the algorithms to load (None when all is there)."""
    try:
        import shapely
    except ImportError:
        return f"Channel Habitat needs shapely 2.0, which is not installed: {SHAPELY_HINT}"
    if int(shapely.__version__.split(".")[0]) < 2:
        return f"Channel Habitat needs shapely 2.0; shapely {shapely.__version__} is installed: {SHAPELY_HINT}"
    return None


def algorithm_classes() -> list:
    """Every algorithm class: each module in algorithms/ (not starting with '_') defines one or
    more subclasses of ChannelHabitatAlgorithm with an ALG_ID."""
    from . import algorithms
    from .algorithms.base import ChannelHabitatAlgorithm

    found = []
    for mod in sorted(pkgutil.iter_modules([str(Path(algorithms.__file__).parent)]), key=lambda m: m.name):
        if mod.name.startswith("_") or mod.name == "base":
            continue
        try:
            module = importlib.import_module(f"{algorithms.__name__}.{mod.name}")
        except Exception:  # one broken module must not hide every other algorithm
            import traceback

            from qgis.core import Qgis, QgsMessageLog

            QgsMessageLog.logMessage(f"algorithm module {mod.name} failed to load:\n{traceback.format_exc()}",
                                     "Channel Habitat", Qgis.Critical)
            IMPORT_ERRORS[mod.name] = traceback.format_exc()
            continue
        for obj in vars(module).values():
            if (isinstance(obj, type) and issubclass(obj, ChannelHabitatAlgorithm)
                    and obj is not ChannelHabitatAlgorithm and getattr(obj, "ALG_ID", "")
                    and obj.__module__ == module.__name__):
                found.append(obj)
    return found


class ChannelHabitatProvider(QgsProcessingProvider):
    def id(self):
        return PROVIDER_ID

    def name(self):
        return "Channel Habitat"

    def longName(self):  # noqa: N802
        return "Channel Habitat — habitat evidence from 2D hydraulic model results"

    def icon(self):
        return provider_icon()

    def svgIconPath(self):  # noqa: N802
        return str(resource_path("icons", "channel_habitat.svg"))

    def loadAlgorithms(self):  # noqa: N802
        problem = dependency_problem()
        if problem:
            from qgis.core import Qgis, QgsMessageLog

            QgsMessageLog.logMessage(problem, "Channel Habitat", Qgis.Critical)
            return
        for cls in algorithm_classes():
            self.addAlgorithm(cls())
