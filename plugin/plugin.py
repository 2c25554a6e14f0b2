"""The plugin object: registers the Processing provider and, with a GUI, a menu and toolbar."""

from __future__ import annotations

from functools import partial

from qgis.core import QgsApplication

from .provider import ChannelHabitatProvider, provider_icon

MENU = "&Channel Habitat"


class ChannelHabitatPlugin:
    def __init__(self, iface):
        self.iface = iface
        self.provider = None
        self.actions = []
        self.toolbar = None

    # Called by QGIS (also headless) before initGui.
    def initProcessing(self):  # noqa: N802
        if self.provider is None:
            provider = ChannelHabitatProvider()
            # addProvider refuses (and deletes) a second provider with the same id, e.g. when a
            # test or script registered one already: keep ours only if it was accepted.
            if QgsApplication.processingRegistry().addProvider(provider):
                self.provider = provider

    def initGui(self):  # noqa: N802
        self.initProcessing()
        if self.iface is None:
            return
        from .provider import dependency_problem

        problem = dependency_problem()
        if problem:
            self.iface.messageBar().pushCritical("Channel Habitat", problem)
        from qgis.PyQt.QtWidgets import QAction

        self.toolbar = self.iface.addToolBar("Channel Habitat")
        self.toolbar.setObjectName("ChannelHabitatToolbar")
        toolbox = QAction(provider_icon(), "Channel Habitat algorithms…", self.iface.mainWindow())
        toolbox.triggered.connect(self.show_toolbox)
        self.iface.addPluginToMenu(MENU, toolbox)
        self.toolbar.addAction(toolbox)
        self.actions.append(toolbox)
        for alg in sorted(self.provider.algorithms(), key=lambda a: (a.group(), a.displayName())):
            act = QAction(alg.icon(), f"{alg.group()}: {alg.displayName()}…", self.iface.mainWindow())
            act.triggered.connect(partial(self.open_algorithm, alg.id()))
            self.iface.addPluginToMenu(MENU, act)
            self.actions.append(act)

    def show_toolbox(self):
        """Open the Processing toolbox filtered to this provider's algorithms."""
        try:
            from processing.gui.ProcessingToolbox import ProcessingToolbox  # noqa: F401
            from qgis.utils import plugins

            proc = plugins.get("processing")
            if proc is not None and getattr(proc, "toolbox", None) is not None:
                proc.toolbox.setVisible(True)
                proc.toolbox.raise_()
                proc.toolbox.searchBox.setText("Channel Habitat")
                return
        except Exception:  # pragma: no cover - GUI only
            pass
        self.iface.showProcessingToolbox() if hasattr(self.iface, "showProcessingToolbox") else None

    def open_algorithm(self, alg_id: str, _checked=False):
        import processing

        processing.execAlgorithmDialog(alg_id, {})

    def unload(self):
        for act in self.actions:
            if self.iface is not None:
                self.iface.removePluginMenu(MENU, act)
        self.actions = []
        if self.toolbar is not None:
            self.toolbar.deleteLater()
            self.toolbar = None
        if self.provider is not None:
            QgsApplication.processingRegistry().removeProvider(self.provider)
            self.provider = None
