"""The plugin object QGIS creates through ``classFactory``: registers the Processing provider."""

from __future__ import annotations

from qgis.core import QgsApplication


class RechargeAtlasPlugin:
    """Registers the ``recharge_atlas`` provider; works headless (``iface`` None).

    ``initProcessing`` is what QGIS calls for plugins with ``hasProcessingProvider=yes`` when it
    runs without a GUI (``qgis_process``); ``initGui`` calls it in the desktop application.
    """

    def __init__(self, iface=None):
        self.iface = iface
        self.provider = None

    def initProcessing(self):  # noqa: N802 (QGIS API name)
        if self.provider is not None:
            return
        from .provider import RechargeAtlasProvider

        provider = RechargeAtlasProvider()
        if QgsApplication.processingRegistry().addProvider(provider):
            self.provider = provider

    def initGui(self):  # noqa: N802
        self.initProcessing()

    def unload(self):
        if self.provider is not None:
            QgsApplication.processingRegistry().removeProvider(self.provider)
            self.provider = None
