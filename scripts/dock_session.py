"""Run inside QGIS desktop (``qgis --code``): the dock on the demo, a run, a quick look, File › New, Exit.

Started by ``scripts/screenshot_dock.py``, which passes the paths in the
``FAVOUR_DESKTOP`` environment variable (JSON: ``tree``, ``layers``,
``screenshot``, ``results_screenshot``, ``keep_screenshot``, ``status``,
``timeout``). Steps are
chained on timers so the QGIS event loop keeps running; every step's failure
is written to the status file, and QGIS quits in every case.

1. In the new, unsaved project QGIS starts with, open the dock from its
   toolbar button, open the demo tree file (it lies in the temporary folder)
   and run it with no results folder chosen: the run goes to the default.
2. Frame the map (the project takes the demo's CRS) and save the dock's
   screenshot.
3. On the Results tab, with the known occurrences as deposits, validate the
   map, find targets and write the report, one after the other as a user
   would press the three buttons; save the screenshot of the tab with the
   targets on the map.
4. Make a quick look (temporary), then choose File › New as a user would.
   Every dialog that opens is recorded; QGIS's own questions are answered
   (discard, go on), and while Favour's keep question is open the screen is
   saved, then *Keep* is pressed.
5. Open the tree again, make another quick look and choose Project › Exit;
   the keep question is answered *Discard* and QGIS closes.

Project signals and the number of layers at each are recorded, to show
which signal fires while the layers are still there.
"""

import json
import os
import traceback

from qgis.core import QgsApplication, QgsCoordinateReferenceSystem, QgsProject, QgsRasterLayer, QgsVectorLayer
from qgis.PyQt.QtCore import QTimer
from qgis.PyQt.QtGui import QColor
from qgis.PyQt.QtWidgets import QApplication, QDockWidget, QMessageBox
from qgis.utils import iface, plugins

SETTINGS = json.loads(os.environ["FAVOUR_DESKTOP"])
STATUS = {"steps": [], "error": None, "dialogs": [], "signals": []}
LEAF = "Favourability > Source > Dense greenstone keel"
KEEP_DIALOG = "FavourKeepResults"
_KEEP = []  # signal handlers and the dialog timer must outlive this module's top level
_DOCK = []
_PHASE = ["start"]
_ANSWERED = "favour_session_answered"


def _write_status() -> None:
    with open(SETTINGS["status"], "w", encoding="utf-8") as handle:
        json.dump(STATUS, handle, indent=2)


def _plugin():
    return plugins["favour_plugin"]


def _quit() -> None:
    """Leave after an error or time-out: discard temporary results, close the project, exit."""
    _write_status()
    _PHASE[0] = "quit"
    keeper = getattr(_plugin().gui, "keeper", None)
    if keeper is not None:
        keeper.asker = lambda results, folder: False
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


# -- what QGIS does while a project closes -------------------------------------------------


def _record_signal(name: str):
    def record(*args) -> None:
        STATUS["signals"].append({"phase": _PHASE[0], "signal": name,
                                  "layers": len(QgsProject.instance().mapLayers())})
        _write_status()
    return record


def _follow_project_signals() -> None:
    project = QgsProject.instance()
    for name in ("removeAll", "layersWillBeRemoved", "cleared", "aboutToBeCleared"):
        signal = getattr(project, name, None)
        if signal is not None:
            handler = _record_signal(name)
            _KEEP.append(handler)
            signal.connect(handler)


def _answer_dialogs() -> None:
    """Answer the modal dialog on top, once: Favour's keep question as the phase says, QGIS's to go on."""
    try:
        box = QApplication.activeModalWidget()
        if box is None or box.property(_ANSWERED):
            return
        box.setProperty(_ANSWERED, True)  # not id(): a later dialog's wrapper may reuse it
        record = {"phase": _PHASE[0], "name": box.objectName(), "title": box.windowTitle(),
                  "layers_in_project": len(QgsProject.instance().mapLayers())}
        if isinstance(box, QMessageBox):
            record.update(text=box.text(), informative=box.informativeText(),
                          buttons=[b.text().replace("&", "") for b in box.buttons()])
        STATUS["dialogs"].append(record)
        _write_status()
        if box.objectName() == KEEP_DIALOG:
            keep = _PHASE[0] == "new"
            QTimer.singleShot(1200, lambda: _answer_keep(box, keep))
        elif isinstance(box, QMessageBox):
            roles = {box.buttonRole(b): b for b in box.buttons()}
            for role in (QMessageBox.DestructiveRole, QMessageBox.YesRole, QMessageBox.AcceptRole):
                if role in roles:
                    roles[role].click()
                    break
        else:
            box.reject()
    except Exception:  # recorded; the session goes on to its time-out
        STATUS["error"] = STATUS["error"] or traceback.format_exc()
        _write_status()


def _answer_keep(box, keep: bool) -> None:
    """Save the screen with the question open (first time only), then press Keep or Discard."""
    try:
        if keep and "keep_screenshot" not in STATUS:
            STATUS["keep_screenshot"] = SETTINGS["keep_screenshot"]
            QApplication.processEvents()
            if not QApplication.primaryScreen().grabWindow(0).save(SETTINGS["keep_screenshot"]):
                raise RuntimeError(f"could not write {SETTINGS['keep_screenshot']}")
        wanted = "Keep" if keep else "Discard"
        for button in box.buttons():
            if button.text().replace("&", "") == wanted:
                button.click()
                return
        raise RuntimeError(f"the keep question has no {wanted} button")
    except Exception:
        STATUS["error"] = STATUS["error"] or traceback.format_exc()
        box.reject()


def _start_answering() -> None:
    timer = QTimer()
    timer.timeout.connect(_answer_dialogs)
    timer.start(200)
    _KEEP.append(timer)


# -- the steps --------------------------------------------------------------------------------


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
    """Open the dock from the plugin, open the demo tree, start the run with no folder chosen."""
    main = iface.mainWindow()
    main.move(0, 0)  # no window manager places it: the screen grab of the keep question needs it there
    main.resize(1600, 1000)
    _follow_project_signals()
    _start_answering()
    STATUS["project_file"] = QgsProject.instance().fileName()
    plugin = _plugin()
    plugin.gui.action.trigger()  # as a user would: the toolbar button
    dock = plugin.gui.dock
    main.resizeDocks([dock], [600], 1)  # 1 = Qt.Horizontal
    if not dock.open_tree_file(SETTINGS["tree"]):
        raise RuntimeError("the demo tree did not open")
    dock.controller.set_run_options(component_rasters=True)  # no folder: the default
    dock.select(LEAF)
    browser = main.findChild(QDockWidget, "Browser")
    if browser is not None:
        browser.hide()  # more room for the map
    STATUS["destination"] = dock.run_bar.destination.text()
    STATUS["default_folder"] = dock.default_folder()
    dock.run_finished.connect(_finished)
    _DOCK.append(dock)
    if dock.run() is None:
        raise RuntimeError("the dock refused to run the demo tree")


def _finished(outcome) -> None:
    """Record each run; go on to the step that follows it."""
    key = {"start": "outcome", "quick": "quick_outcome", "again": "second_quick_outcome"}[_PHASE[0]]
    STATUS[key] = {"ok": outcome.ok, "quick": outcome.quick, "folder": outcome.folder,
                   "output": outcome.output, "lineage": outcome.lineage, "message": outcome.message,
                   "status": _DOCK[0].run_bar.status.text()}
    _write_status()
    if not outcome.ok:
        STATUS["error"] = f"the run failed: {outcome.message}"
        _quit()
        return
    if _PHASE[0] == "start":
        _add_context_layers()
        QTimer.singleShot(1000, _step(frame_the_map))
    elif _PHASE[0] == "quick":
        QTimer.singleShot(1500, _step(new_project))
    else:
        QTimer.singleShot(1500, _step(exit_qgis))


def _demo_crs(crs: QgsCoordinateReferenceSystem) -> QgsCoordinateReferenceSystem:
    """Return the demo's CRS saved as a custom CRS of the (session's own) profile, as a user would.

    QGIS 3.22's status bar names a CRS by its authority id and shows
    "Unknown CRS" for one without; a custom CRS gets a ``USER:`` id.
    """
    registry = QgsApplication.coordinateReferenceSystemRegistry()
    srsid = registry.addUserCrs(crs, crs.description() or "Tarrowin local grid")
    saved = QgsCoordinateReferenceSystem(f"USER:{srsid}") if srsid > 0 else crs
    return saved if saved.isValid() else crs


def frame_the_map() -> None:
    """Give the project the demo's CRS, zoom to the favourability, bring the membership plot into view."""
    canvas = iface.mapCanvas()
    layer = QgsProject.instance().mapLayersByName("Favourability")[0]
    if isinstance(layer, QgsRasterLayer):
        QgsProject.instance().setCrs(_demo_crs(layer.crs()))
        canvas.setExtent(layer.extent())
    canvas.refresh()
    dock = _DOCK[0]
    dock.editor_scroll.ensureWidgetVisible(dock.editor.membership_panel.plot, 0, 0)
    QTimer.singleShot(2500, _step(screenshot))


def screenshot() -> None:
    """Save the main window, dock and map, as the user sees it; then make a quick look."""
    iface.mapCanvas().waitWhileRendering()
    QApplication.processEvents()
    crs = QgsProject.instance().crs()
    STATUS["project_crs"] = {"authid": crs.authid(), "description": crs.description()}
    if not iface.mainWindow().grab().save(SETTINGS["screenshot"]):
        raise RuntimeError(f"could not write {SETTINGS['screenshot']}")
    QTimer.singleShot(200, _step(results_tab))


def results_tab() -> None:
    """Open the Results tab, choose the known occurrences as deposits and press Validate."""
    from favour_plugin.gui.handover_job import REPORT, TARGETS, VALIDATE

    _PHASE[0] = "results"
    dock = _DOCK[0]
    dock.tabs.setCurrentWidget(dock.handover_scroll)
    view = dock.handover
    occurrences = QgsProject.instance().mapLayersByName("Known occurrences")
    if not occurrences:
        raise RuntimeError("the known occurrences did not load")
    view.deposits_box.setLayer(occurrences[0])
    # As the demo does (resources/demo/run_demo.py): zones of at least 0.25 km², merged within 50 m;
    # with the defaults (0, 0) every speck of one cell in the top 10 % is a zone of its own.
    view.min_area_box.setValue(0.25)
    view.merge_box.setValue(50.0)
    nxt = {VALIDATE: view.run_targets, TARGETS: view.run_report}

    def finished(outcome) -> None:
        STATUS.setdefault("handover", {})[outcome.algorithm] = {
            "ok": outcome.ok, "folder": outcome.folder, "message": outcome.message,
            "status": view.controls(outcome.algorithm).status.text(),
            "files": {k: v for k, v in outcome.results.items() if isinstance(v, str)}}
        _write_status()
        if not outcome.ok:
            STATUS["error"] = f"the {outcome.algorithm} run failed: {outcome.message}"
            _quit()
        elif outcome.algorithm == REPORT:
            STATUS["figures"] = view.figures.text()
            QTimer.singleShot(1500, _step(results_screenshot))
        elif nxt[outcome.algorithm]() is None:
            STATUS["error"] = f"the dock refused the run after {outcome.algorithm}"
            _quit()

    _KEEP.append(finished)
    view.finished.connect(finished)
    if view.run_validation() is None:
        raise RuntimeError("the dock refused to validate the demo map")


def results_screenshot() -> None:
    """Save the window with the Results tab and the targets on the map; then make a quick look."""
    iface.mapCanvas().refresh()
    iface.mapCanvas().waitWhileRendering()
    QApplication.processEvents()
    if not iface.mainWindow().grab().save(SETTINGS["results_screenshot"]):
        raise RuntimeError(f"could not write {SETTINGS['results_screenshot']}")
    dock = _DOCK[0]
    dock.tabs.setCurrentIndex(0)
    QTimer.singleShot(200, _step(quick_look))


def quick_look() -> None:
    """Make a quick look: it lives in QGIS's temporary folder."""
    _PHASE[0] = "quick"
    if _DOCK[0].run(quick=True) is None:
        raise RuntimeError("the dock refused the quick look")


def new_project() -> None:
    """File › New, as a user would; the dialogs are answered by the dialog timer."""
    _PHASE[0] = "new"
    iface.actionNewProject().trigger()
    keeper = _plugin().gui.keeper
    kept = keeper.last_kept
    STATUS["kept"] = kept
    STATUS["kept_files"] = sorted(os.path.relpath(os.path.join(here, f), kept)
                                  for here, _, files in os.walk(kept) for f in files) if kept else []
    STATUS["layers_after_new"] = len(QgsProject.instance().mapLayers())
    QTimer.singleShot(500, _step(quick_look_again))


def quick_look_again() -> None:
    """Open the tree again and make another quick look, to see what Exit does with it."""
    dock = _DOCK[0]
    if not dock.open_tree_file(SETTINGS["tree"]):
        raise RuntimeError("the demo tree did not open again")
    _PHASE[0] = "again"
    if dock.run(quick=True) is None:
        raise RuntimeError("the dock refused the second quick look")


def exit_qgis() -> None:
    """Project › Exit QGIS, as a user would; the keep question is answered Discard."""
    _PHASE[0] = "exit"
    QTimer.singleShot(20000, _force_quit)
    iface.actionExit().trigger()


def _give_up() -> None:
    STATUS["error"] = STATUS["error"] or "timed out inside QGIS"
    _quit()


QTimer.singleShot(1500, open_dock_and_run)
QTimer.singleShot(int(SETTINGS.get("timeout", 90)) * 1000, _give_up)
