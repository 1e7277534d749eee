"""The dock's place in QGIS: the menu entry and toolbar button, the dock, and the project link.

:class:`DockManager` is what the plugin starts in ``initGui`` and stops in
``unload``; everything it adds it removes again. It also owns the offer to
keep Favour results from a temporary folder when the project closes
(:class:`~.keep_results.KeepResults`).
"""

from __future__ import annotations

from qgis.core import QgsProject
from qgis.PyQt.QtCore import Qt
from qgis.PyQt.QtWidgets import QAction

from .common import icon, tr
from .controller import TreeController
from .dock import FavourDock
from .keep_results import Asker, KeepResults
from .project_store import ProjectStore

MENU = "&Favour"


class DockManager:
    """Owns the controller, the dock, the project store, the keep offer and the action that shows the dock.

    Parameters
    ----------
    iface : QgisInterface
        QGIS's interface.
    asker : callable, optional
        The question asked before temporary results are dropped,
        ``asker(results, folder) -> bool`` (default: a message box).
    """

    def __init__(self, iface, asker: Asker | None = None) -> None:
        self.iface = iface
        self.asker = asker
        self.controller: TreeController | None = None
        self.store: ProjectStore | None = None
        self.dock: FavourDock | None = None
        self.keeper: KeepResults | None = None
        self.action: QAction | None = None

    def start(self) -> None:
        """Add the action to the plugin menu and toolbar, and the (hidden) dock to the window."""
        main = self.iface.mainWindow()
        self.controller = TreeController()
        self.store = ProjectStore(self.controller, QgsProject.instance(), self.iface)
        self.dock = FavourDock(self.controller, self.iface, QgsProject.instance(), main)
        self.keeper = KeepResults(QgsProject.instance(), self.iface, self.controller, self.asker)
        self.action = QAction(icon("dock"), tr("Criteria tree"), main)
        self.action.setToolTip(tr("Show the Favour criteria tree: build, argue and run a "
                                  "source–pathway–trap–preservation model"))
        self.action.setCheckable(True)
        self.action.toggled.connect(self._toggled)
        self.dock.visibilityChanged.connect(self.action.setChecked)
        self.iface.addPluginToMenu(MENU, self.action)
        self.iface.addToolBarIcon(self.action)
        self.iface.addDockWidget(Qt.RightDockWidgetArea, self.dock)
        self.dock.hide()
        if QgsProject.instance().fileName():  # plugin enabled with a project already open
            self.store.read()

    def show_dock(self) -> FavourDock:
        """Show and raise the dock; return it."""
        self.dock.show()
        self.dock.raise_()
        return self.dock

    def _toggled(self, on: bool) -> None:
        if self.dock is not None and on == self.dock.isHidden():
            self.dock.setVisible(on)

    def stop(self) -> None:
        """Remove the action, the dock, the keep offer and the project link."""
        if self.action is not None:
            _call(self.iface, "removePluginMenu", MENU, self.action)
            _call(self.iface, "removeToolBarIcon", self.action)
            self.action.deleteLater()
            self.action = None
        if self.dock is not None:
            self.dock.shutdown()
            if not _call(self.iface, "removeDockWidget", self.dock):
                self.iface.mainWindow().removeDockWidget(self.dock)
            self.dock.deleteLater()
            self.dock = None
        if self.keeper is not None:
            self.keeper.disconnect_all()
            self.keeper.deleteLater()
            self.keeper = None
        if self.store is not None:
            self.store.disconnect_all()
            self.store = None
        self.controller = None


def _call(iface, name: str, *args) -> bool:
    """Call ``iface.<name>(*args)`` if the interface has it (test stand-ins may not); say if it did."""
    method = getattr(iface, name, None)
    if method is None:
        return False
    method(*args)
    return True
