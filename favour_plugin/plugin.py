"""The plugin's lifecycle: what QGIS starts and stops.

``initProcessing`` registers the processing provider (qgis_process calls only
this, with ``iface`` None); ``initGui`` does that too when the desktop starts
the plugin, and adds the criteria-tree dock with its menu entry and toolbar
button; ``unload`` removes what either added.
"""

from __future__ import annotations

from qgis.core import QgsApplication


class FavourPlugin:
    """Favour's plugin object, created by :func:`favour_plugin.classFactory`."""

    def __init__(self, iface) -> None:
        self.iface = iface
        self.provider = None
        self.gui = None

    def initProcessing(self) -> None:  # noqa: N802 (QGIS calls it by this name)
        """Register the ``favour`` processing provider once."""
        if self.provider is not None:
            return
        from .processing.provider import FavourProvider

        provider = FavourProvider()
        if QgsApplication.processingRegistry().addProvider(provider):
            self.provider = provider

    def initGui(self) -> None:  # noqa: N802 (QGIS calls it by this name)
        """Start the plugin in the desktop: register the provider, add the dock, menu and toolbar."""
        self.initProcessing()
        if self.iface is None or self.gui is not None:
            return
        from .gui.manager import DockManager

        self.gui = DockManager(self.iface)
        self.gui.start()

    def unload(self) -> None:
        """Remove everything :meth:`initProcessing` and :meth:`initGui` added."""
        if self.gui is not None:
            self.gui.stop()
            self.gui = None
        if self.provider is not None:
            QgsApplication.processingRegistry().removeProvider(self.provider)
            self.provider = None
