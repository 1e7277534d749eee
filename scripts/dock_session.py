"""Run inside QGIS desktop (``qgis --code``): open the dock on the demo, run it, take a screenshot, quit.

Started by ``scripts/screenshot_dock.py``, which passes the paths in the
``FAVOUR_DESKTOP`` environment variable (JSON: ``tree``, ``layers``,
``results``, ``screenshot``, ``status``). Steps are chained on timers so the
QGIS event loop keeps running; every step's failure is written to the status
file, and QGIS quits in every case.
"""

import json
import os
import traceback

from qgis.core import QgsProject, QgsRasterLayer, QgsVectorLayer
from qgis.PyQt.QtCore import QTimer
from qgis.PyQt.QtGui import QColor
from qgis.PyQt.QtWidgets import QApplication, QDockWidget
from qgis.utils import iface, plugins

SETTINGS = json.loads(os.environ["FAVOUR_DESKTOP"])
STATUS = {"steps": [], "error": None}
LEAF = "Favourability > Source > Dense greenstone keel"
_KEEP = []  # the run's signal handler must outlive this module's top level


def _write_status() -> None:
    with open(SETTINGS["status"], "w", encoding="utf-8") as handle:
        json.dump(STATUS, handle, indent=2)


def _quit() -> None:
    _write_status()
    # Results under the system's temporary folder count as temporary layers, and QGIS would
    # ask before closing them: close the project first (the dock empties with it).
    QgsProject.instance().clear()
    QTimer.singleShot(5000, _force_quit)
    iface.actionExit().trigger()


def _force_quit() -> None:
    """QGIS did not close (a dialog?): name what is open, then leave the event loop."""
    STATUS["still_open"] = [f"{type(w).__name__}: {w.windowTitle()} {getattr(w, 'text', str)()}"
                            for w in QApplication.topLevelWidgets() if w.isVisible()]
    _write_status()
    QApplication.instance().exit(3)


def _step(function):
    """Run one step; on any error record it and quit."""
    def run():
        try:
            function()
            STATUS["steps"].append(function.__name__)
            _write_status()
        except Exception:  # recorded for the caller, who fails the test with it
            STATUS["error"] = traceback.format_exc()
            _quit()
    return run


def _add_context_layers() -> None:
    """Show the known occurrences and the second-order faults above the result."""
    folder = SETTINGS["layers"]
    for source, name, colour, size in (
            (f"{folder}/faults.gpkg|layername=second_order", "Second-order faults", "#22304a", 0.4),
            (f"{folder}/occurrences.gpkg|layername=occurrences", "Known occurrences", "#fbfaf6", 2.6)):
        layer = QgsVectorLayer(source, name, "ogr")
        if layer.isValid():
            symbol = layer.renderer().symbol()  # fixed colours, so the screenshot is the same each time
            symbol.setColor(QColor(colour))
            if hasattr(symbol, "setWidth"):
                symbol.setWidth(size)
            else:
                symbol.setSize(size)
            QgsProject.instance().addMapLayer(layer)


@_step
def open_dock_and_run() -> None:
    """Open the dock from the plugin, load the demo tree, select a criterion, start the run."""
    main = iface.mainWindow()
    main.resize(1600, 1000)
    plugin = plugins["favour_plugin"]
    plugin.gui.action.trigger()  # as a user would: the toolbar button
    dock = plugin.gui.dock
    main.resizeDocks([dock], [600], 1)  # 1 = Qt.Horizontal
    if not dock.open_tree_file(SETTINGS["tree"]):
        raise RuntimeError("the demo tree did not open")
    dock.controller.set_run_options(SETTINGS["results"], True)
    dock.select(LEAF)
    browser = main.findChild(QDockWidget, "Browser")
    if browser is not None:
        browser.hide()  # more room for the map
    dock.run_finished.connect(_finished)
    _KEEP.append(dock)
    if dock.run() is None:
        raise RuntimeError("the dock refused to run the demo tree")


def _finished(outcome) -> None:
    STATUS["outcome"] = {"ok": outcome.ok, "output": outcome.output, "message": outcome.message}
    if not outcome.ok:
        STATUS["error"] = f"the run failed: {outcome.message}"
        _quit()
        return
    _add_context_layers()
    QTimer.singleShot(1000, _step(frame_the_map))


def frame_the_map() -> None:
    """Zoom the map to the favourability raster and bring the membership plot into view."""
    canvas = iface.mapCanvas()
    layer = QgsProject.instance().mapLayersByName("Favourability")[0]
    if isinstance(layer, QgsRasterLayer):
        canvas.setExtent(layer.extent())
    canvas.refresh()
    dock = _KEEP[0]
    dock.editor_scroll.ensureWidgetVisible(dock.editor.membership_panel.plot, 0, 0)
    QTimer.singleShot(2500, _step(screenshot))


def screenshot() -> None:
    """Save the main window, dock and map, as the user sees it."""
    iface.mapCanvas().waitWhileRendering()
    QApplication.processEvents()
    if not iface.mainWindow().grab().save(SETTINGS["screenshot"]):
        raise RuntimeError(f"could not write {SETTINGS['screenshot']}")
    QTimer.singleShot(200, _quit)


def _give_up() -> None:
    STATUS["error"] = STATUS["error"] or "timed out inside QGIS"
    _quit()


QTimer.singleShot(1500, open_dock_and_run)
QTimer.singleShot(int(SETTINGS.get("timeout", 90)) * 1000, _give_up)
