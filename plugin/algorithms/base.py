"""Base class of every Channel Habitat algorithm.

Subclasses set the class attributes and implement ``define(config)`` (declare parameters) and
``compute(parameters, context, feedback)`` (parameters -> gis -> core -> outputs; returns the
results dict). (Not ``run``: QgsProcessingAlgorithm.run is QGIS's own entry point.) The base
class turns core errors into QgsProcessingException messages that name the parameter, turns a
cancel into a clean stop, and removes any file output it had started.
"""

from __future__ import annotations

import traceback

from qgis.core import QgsProcessingAlgorithm, QgsProcessingException
from qgis.PyQt.QtGui import QIcon

from ..core.errors import Cancelled, ChannelHabitatError, Progress
from ..resources import resource_path

GROUPS = {
    "reach": "Reach axis",
    "habitat": "Habitat",
    "flow": "Flow and time",
    "hydrology": "Hydrology",
    "maps": "Map output",
}

CAUTION = (
    "Results are only as good as the hydraulic model behind them. Class thresholds are "
    "indicative and should be set with local ecological advice. Not for flood-safety, navigation "
    "or public-safety decisions. Local regulations and licensed professional practice prevail."
)


class ChannelHabitatAlgorithm(QgsProcessingAlgorithm):
    ALG_ID = ""
    DISPLAY_NAME = ""
    GROUP_ID = "habitat"
    HELP = ""  # short help (HTML allowed); the caution is appended
    ICON = "channel_habitat.svg"

    # --- QGIS API ----------------------------------------------------------------------------
    def name(self):
        return self.ALG_ID

    def displayName(self):  # noqa: N802
        return self.DISPLAY_NAME

    def group(self):
        return GROUPS[self.GROUP_ID]

    def groupId(self):  # noqa: N802
        return self.GROUP_ID

    def shortHelpString(self):  # noqa: N802
        return f"{self.HELP}<p><i>Caution.</i> {CAUTION}</p>"

    def icon(self):
        return QIcon(str(resource_path("icons", self.ICON)))

    def createInstance(self):  # noqa: N802
        return type(self)()

    def initAlgorithm(self, config=None):  # noqa: N802
        self.define(config or {})

    def processAlgorithm(self, parameters, context, feedback):  # noqa: N802
        self._cleanup = []
        try:
            return self.compute(parameters, context, feedback)
        except ChannelHabitatError as err:
            self._remove_partial(feedback)
            prefix = f"{err.parameter}: " if err.parameter else ""
            raise QgsProcessingException(f"{prefix}{err}") from None
        except Cancelled:
            self._remove_partial(feedback)
            feedback.reportError("Cancelled: no outputs were written.", fatalError=False)
            raise QgsProcessingException("Cancelled by the user; no outputs were written.") from None
        except QgsProcessingException:
            self._remove_partial(feedback)
            raise
        except MemoryError:
            self._remove_partial(feedback)
            raise QgsProcessingException(
                "Out of memory. Use a coarser grid, a smaller extent or fewer runs at once.") from None
        except Exception as exc:  # a bug: say so plainly, with the traceback in the log
            self._remove_partial(feedback)
            feedback.reportError(traceback.format_exc(), fatalError=False)
            raise QgsProcessingException(
                f"Internal error in {self.ALG_ID}: {exc!r}. Please report it with the log above.") from None

    # --- for subclasses ----------------------------------------------------------------------
    def define(self, config):  # pragma: no cover - abstract
        raise NotImplementedError

    def compute(self, parameters, context, feedback):  # pragma: no cover - abstract
        """The algorithm's work: read the parameters, call the core, write the outputs; return them."""
        raise NotImplementedError(f"{type(self).__name__} must implement compute()")

    def progress(self, feedback, start: float = 0.0, end: float = 1.0) -> Progress:
        """A core Progress that reports to ``feedback`` (0-100 %) and stops on cancel."""

        def report(fraction, message):
            feedback.setProgress(100.0 * fraction)
            if message:
                feedback.setProgressText(message)

        return Progress(report, feedback.isCanceled, start, end)

    def will_write(self, path) -> None:
        """Register a file output: deleted again if the run fails or is cancelled."""
        self._cleanup.append(str(path))

    def _remove_partial(self, feedback):
        import os

        for p in getattr(self, "_cleanup", []):
            for q in (p, p + ".aux.xml", p + "-journal", p + "-wal", p + "-shm"):
                try:
                    if os.path.exists(q):
                        os.remove(q)
                except OSError as exc:  # pragma: no cover
                    feedback.reportError(f"could not remove partial output {q}: {exc}", False)
