"""The plugin object QGIS creates: registers and removes the Processing provider."""

from __future__ import annotations

from qgis.core import Qgis, QgsApplication, QgsMessageLog

INSTALL_HINT = ("curvescan is not installed in the Python QGIS uses ({error}); install it with "
                "'python -m pip install curvescan' for that Python (see docs/qgis.md)")


class CurvescanPlugin:
    """Registers the curvescan Processing provider (also under ``qgis_process``)."""

    def __init__(self, iface) -> None:
        self.iface = iface
        self.provider = None

    def initProcessing(self) -> None:  # noqa: N802 - QGIS hook
        """Create the provider and add it to the Processing registry."""
        try:
            from .provider import CurvescanProvider
        except ImportError as exc:  # curvescan (or one of its libraries) is missing
            message = INSTALL_HINT.format(error=exc)
            QgsMessageLog.logMessage(message, "curvescan", Qgis.Critical)
            if self.iface is not None:
                self.iface.messageBar().pushCritical("curvescan", message)
            return
        self.provider = CurvescanProvider()
        QgsApplication.processingRegistry().addProvider(self.provider)

    def initGui(self) -> None:  # noqa: N802 - QGIS hook
        """Desktop start: the toolbox is the whole interface."""
        self.initProcessing()

    def unload(self) -> None:
        """Remove the provider when the plugin is unloaded."""
        if self.provider is not None:
            QgsApplication.processingRegistry().removeProvider(self.provider)
            self.provider = None
