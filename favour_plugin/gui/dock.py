"""The Favour dock: the criteria tree, the editor of the selected node, and the run controls.

The dock assembles the views and connects them to the
:class:`~.controller.TreeController`; it computes nothing. Checks, samples and
runs go to QGIS tasks, so the interface stays responsive. Its public methods
(:meth:`FavourDock.add_layer`, :meth:`FavourDock.run`,
:meth:`FavourDock.why_here`, …) are what the toolbar, drag and drop, the map
tool, scripts and tests use alike.

Three tabs: *Tree* (the editor), *Workshop* (score sheets, Monte Carlo,
sensitivity) and *Results* (validation, targets and the report, taking the
last full run and the last uncertainty runs). *Why here?* on the toolbar
turns the map into a probe: a click shows every node's value at that cell.
"""

from __future__ import annotations

import os

from qgis.core import Qgis, QgsProject, QgsRasterLayer, QgsVectorLayer
from qgis.gui import QgsDockWidget
from qgis.PyQt.QtCore import Qt, pyqtSignal
from qgis.PyQt.QtWidgets import (
    QFileDialog,
    QLabel,
    QPushButton,
    QScrollArea,
    QSplitter,
    QStackedWidget,
    QTabWidget,
    QVBoxLayout,
    QWidget,
)

from ..core.errors import FavourError, TreeFileError
from ..core.lineage import CAUTION
from ..core.tree import PATH_SEPARATOR, Proxy
from .actions import DockActions
from .algorithm_job import remove_empty_folders
from .common import icon, notify, tr
from .defaults import starting_for_proxy
from .handover_view import HandoverView
from .histogram import SampleService
from .layers import UnusableLayerError, dropped_layers, layer_value_range, proxy_from_layer
from .node_editor import NodeEditor
from .output_folders import DefaultFolder, default_output, display_path, ensure_writable, quick_look_folder
from .pairwise_dialog import PairwiseDialog
from .problems import ProblemChecker
from .results import add_results
from .run_bar import RunBar
from .run_job import RunJob, run_folder
from .tree_view import CriteriaTreeView, drop_destination
from .why_here import WhyHere, WhyHerePanel, WhyHereTool
from .workshop_view import WorkshopView


class FavourDock(QgsDockWidget):
    """The dock panel. ``run_finished(RunOutcome)`` after every run, after its layers are added."""

    run_finished = pyqtSignal(object)

    def __init__(self, controller, iface=None, project: QgsProject | None = None, parent=None) -> None:
        super().__init__(tr("Favour: criteria tree"), parent)
        self.setObjectName("FavourDock")
        self.controller = controller
        self.iface = iface
        self.project = project or QgsProject.instance()
        self.job: RunJob | None = None
        self.last_layers: list = []
        self.pairwise: PairwiseDialog | None = None
        self._quick_again = False
        self.why = WhyHere(self)
        self.why_panel: WhyHerePanel | None = None
        self.why_tool: WhyHereTool | None = None
        self.last_answer = None
        self.samples = SampleService(self)
        self.checker = ProblemChecker(controller, self.project, self)
        self.actions = DockActions(self, controller.undo_stack)
        self._build()
        self._connect()
        self.refresh()

    # -- building ------------------------------------------------------------------

    def _build(self) -> None:
        body = QWidget()
        layout = QVBoxLayout(body)
        layout.setContentsMargins(2, 2, 2, 2)
        layout.addWidget(self.actions.toolbar(body))
        self.pages = QStackedWidget()
        empty = QWidget()
        empty_layout = QVBoxLayout(empty)
        text = QLabel(tr("No model yet. Start one with the four components of a mineral system, "
                         "or open a tree file."))
        text.setWordWrap(True)
        self.new_button = QPushButton(tr("New model"))
        self.open_button = QPushButton(tr("Open tree file…"))
        for widget in (text, self.new_button, self.open_button):
            empty_layout.addWidget(widget)
        empty_layout.addStretch(1)
        self.pages.addWidget(empty)
        splitter = QSplitter(Qt.Vertical)
        self.tree_view = CriteriaTreeView()
        self.editor = NodeEditor(self.controller, self.samples, self.iface)
        self.editor_scroll = QScrollArea()
        self.editor_scroll.setWidgetResizable(True)
        self.editor_scroll.setWidget(self.editor)
        splitter.addWidget(self.tree_view)
        splitter.addWidget(self.editor_scroll)
        splitter.setStretchFactor(0, 1)
        splitter.setStretchFactor(1, 1)
        splitter.setSizes([380, 420])
        # The tree editor and the workshop are tabs, so the workshop never crowds the editor.
        self.tabs = QTabWidget()
        self.tabs.setDocumentMode(True)
        self.tabs.addTab(splitter, icon("node-root"), tr("Tree"))
        self.workshop = WorkshopView(self.controller, self.iface, self.project, self.next_folder)
        self.workshop_scroll = QScrollArea()
        self.workshop_scroll.setWidgetResizable(True)
        self.workshop_scroll.setWidget(self.workshop)
        self.tabs.addTab(self.workshop_scroll, icon("workshop"), tr("Workshop"))
        self.handover = HandoverView(self.controller, self.iface, self.project, self.next_folder)
        self.handover_scroll = QScrollArea()
        self.handover_scroll.setWidgetResizable(True)
        self.handover_scroll.setWidget(self.handover)
        self.tabs.addTab(self.handover_scroll, icon("results"), tr("Results"))
        self.pages.addWidget(self.tabs)
        layout.addWidget(self.pages, 1)
        self.run_bar = RunBar()
        layout.addWidget(self.run_bar)
        self.setWidget(body)

    def _connect(self) -> None:
        a, c = self.actions, self.controller
        a.new.triggered.connect(lambda: c.new_model())
        self.new_button.clicked.connect(lambda: c.new_model())
        a.open.triggered.connect(self._open_dialog)
        self.open_button.clicked.connect(self._open_dialog)
        a.save.triggered.connect(lambda: self.save_tree_file())
        a.save_as.triggered.connect(self._save_dialog)
        a.add_criterion.triggered.connect(lambda: self._add_under(c.add_criterion))
        a.add_group.triggered.connect(lambda: self._add_under(c.add_group))
        for kind, action in a.component_actions.items():
            action.triggered.connect(lambda _checked=False, kind=kind: self._guard(c.add_component, kind))
        a.layer_menu.aboutToShow.connect(self._fill_layer_menu)
        a.remove.triggered.connect(self._remove_selected)
        a.up.triggered.connect(lambda: self._move_selected(-1))
        a.down.triggered.connect(lambda: self._move_selected(1))
        a.pairwise.triggered.connect(lambda: self.open_pairwise())
        a.why_here.toggled.connect(self._why_tool_toggled)
        self.why.answered.connect(self._why_answered)
        self.why.failed.connect(self._why_failed)
        self.why.progress_changed.connect(lambda percent: self.why_panel is not None
                                          and self.why_panel.set_progress(percent))
        canvas = self._canvas()
        if canvas is not None:
            self.why_tool = WhyHereTool(canvas)
            self.why_tool.clicked.connect(lambda x, y, wkt: self.why_here(x, y, wkt))
            self.why_tool.deactivated.connect(self._why_tool_deactivated)
        self.run_finished.connect(self.handover.set_last_run)
        self.workshop.uncertainty.finished.connect(self.handover.set_uncertainty)
        self.workshop.pairwise_requested.connect(lambda: self.open_pairwise())
        self.workshop.quick_look_requested.connect(self.request_quick_look)
        c.changed.connect(self.refresh)
        c.focus_requested.connect(self.tree_view.select_path)
        self.checker.updated.connect(self._problems_updated)
        self.tree_view.path_selected.connect(lambda _path: self._show_selected())
        self.tree_view.layers_dropped.connect(self.drop_layers)
        self.tree_view.node_dropped.connect(self.move_node)
        self.editor.layer_chosen.connect(self.add_layer)
        self.run_bar.run_requested.connect(lambda quick: self.run(quick))
        self.run_bar.cancel_requested.connect(self.cancel_run)
        self.run_bar.folder_changed.connect(lambda folder: c.set_run_options(output_folder=folder))
        self.run_bar.components_toggled.connect(lambda on: c.set_run_options(component_rasters=on))
        c.options_changed.connect(self._show_options)
        # Saving the project (or Save As) moves the default folder beside it; QgsProject.write(path)
        # sets the file name without fileNameChanged, so projectSaved is followed too.
        self._project_links = [(self.project.fileNameChanged, self._show_options),
                               (self.project.homePathChanged, self._show_options),
                               (self.project.projectSaved, self._show_options)]
        for signal, slot in self._project_links:
            signal.connect(slot)

    def shutdown(self) -> None:
        """Stop listening and drop pending work (the plugin is unloading)."""
        self.checker.disconnect_all()
        self.samples.forget()
        self.editor.proxy_fields.choices.forget()
        self.editor.membership_panel.classes.forget()
        self.workshop.shutdown()
        self.handover.shutdown()
        self.why.shutdown()
        canvas = self._canvas()
        if self.why_tool is not None and canvas is not None and canvas.mapTool() is self.why_tool:
            canvas.unsetMapTool(self.why_tool)
        if self.why_panel is not None:
            self.why_panel.close()
        self._quick_again = False
        if self.job is not None and self.job.running:
            self.job.finished.disconnect(self._run_finished)
            self.job.cancel()
        links = [(self.controller.changed, self.refresh),
                 (self.controller.options_changed, self._show_options), *self._project_links]
        self._project_links = []
        for signal, slot in links:
            try:
                signal.disconnect(slot)
            except TypeError:
                pass

    # -- showing -------------------------------------------------------------------

    def refresh(self) -> None:
        """Show the controller's tree again (after any change)."""
        tree = self.controller.tree
        if tree is None and self.job is not None and self.job.running:
            self.job.cancel()  # the project was closed: its results have nowhere to go
        if tree is None:
            self.why.release()  # the prepared inputs belong to a model that is gone
            self.actions.why_here.setChecked(False)
        self.pages.setCurrentIndex(0 if tree is None else 1)
        for action in (self.actions.save, self.actions.save_as, self.actions.add_criterion,
                       self.actions.add_group, self.actions.add_component, self.actions.add_layer,
                       self.actions.remove, self.actions.up, self.actions.down, self.actions.why_here):
            action.setEnabled(tree is not None)
        self.workshop.tree_changed()
        self.handover.refresh()
        self.tree_view.show_tree(tree, self.checker.by_node())
        if tree is not None and not self.tree_view.selected_path():
            self.tree_view.select_path(tree.root.name)
        self._show_selected()
        self._show_options()
        title = tr("Favour: criteria tree")
        if tree is not None and tree.name:
            title += f" — {tree.name}"
        self.setWindowTitle(title)

    def _show_options(self, *args) -> None:
        self.run_bar.show_options(self.controller.output_folder, self.default_destination(),
                                  self.controller.component_rasters)

    def _show_selected(self) -> None:
        path = self.selected_path()
        node = self._node_at(path)
        self.actions.pairwise.setEnabled(node is not None and len(node.children) >= 2)
        self.editor.show_node(self.controller.tree, path, self.checker.by_node().get(path, []))

    def _problems_updated(self) -> None:
        self.tree_view.mark_problems(self.checker.by_node())
        path = self.selected_path()
        self.editor.show_node(self.controller.tree, path, self.checker.by_node().get(path, []))

    def selected_path(self) -> str:
        """Return the path of the selected node ('' for none)."""
        return self.tree_view.selected_path() if self.controller.tree is not None else ""

    def select(self, path: str) -> None:
        """Select the node at ``path``."""
        self.tree_view.select_path(path)

    def _node_at(self, path: str):
        try:
            return self.controller.tree.find(path) if path and self.controller.tree is not None else None
        except (KeyError, ValueError, FavourError):
            return None

    # -- the workshop -----------------------------------------------------------------------

    def open_pairwise(self, path: str | None = None) -> PairwiseDialog | None:
        """Open the pairwise-weights dialog for the children of ``path`` (default: the selected node).

        Returns the dialog (window-modal, not blocking), or None with a
        message when the node has fewer than two children.
        """
        path = path or self.selected_path()
        node = self._node_at(path)
        if node is None or len(node.children) < 2:
            notify(self.iface, tr("Select a node with two or more criteria under it to weigh them "
                                  "pairwise."), Qgis.Warning)
            return None
        try:
            self.pairwise = PairwiseDialog(self.controller, path, self.iface, self)
        except ValueError as exc:
            notify(self.iface, str(exc), Qgis.Warning)
            return None
        self.pairwise.open()
        return self.pairwise

    def request_quick_look(self) -> None:
        """Make a quick look now; if a run is going on, make it once that run ends.

        A quick look still running is cancelled first, so the map follows the
        latest tree when the workshop changes it faster than a quick look runs.
        """
        if self.job is not None and self.job.running:
            self._quick_again = True
            if self.job.quick:
                self.job.cancel()
            else:
                self.run_bar.status.setText(tr("A quick look follows when this run ends."))
            return
        self.run(quick=True)

    # -- files -----------------------------------------------------------------------

    def open_tree_file(self, path: str) -> bool:
        """Open a tree file; on failure keep the current tree and say why. Return success."""
        try:
            self.controller.open_file(path)
        except TreeFileError as exc:
            notify(self.iface, tr("The tree file was not opened; the current tree is unchanged. "
                                  "{error}").format(error=exc), Qgis.Critical, 0)
            return False
        self.samples.forget()
        self.editor.proxy_fields.choices.forget()
        self.editor.membership_panel.classes.forget()
        return True

    def save_tree_file(self, path: str | None = None) -> str | None:
        """Save the tree (to its own file by default); return the path, or None if it failed."""
        if not path and not self.controller.file_path:
            return self._save_dialog()
        try:
            saved = self.controller.save_file(path)
        except (FavourError, OSError, ValueError) as exc:
            notify(self.iface, tr("The tree was not saved: {error}").format(error=exc), Qgis.Critical)
            return None
        notify(self.iface, tr("Tree saved to {path}").format(path=saved), Qgis.Success, 4)
        self._show_options()  # the default folder may now be beside the tree file
        return saved

    def _open_dialog(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, tr("Open tree file"), self._dialog_folder(),
                                              tr("Favour tree files (*.json)"))
        if path:
            self.open_tree_file(path)

    def _save_dialog(self) -> str | None:
        path, _ = QFileDialog.getSaveFileName(self, tr("Save tree file"), self._dialog_folder(),
                                              tr("Favour tree files (*.json)"))
        if not path:
            return None
        if not path.lower().endswith(".json"):
            path += ".favour.json"
        return self.save_tree_file(path)

    def _dialog_folder(self) -> str:
        if self.controller.file_path:
            return os.path.dirname(self.controller.file_path)
        return self.project.absolutePath() or os.path.expanduser("~")

    # -- editing the structure ---------------------------------------------------------

    def _guard(self, method, *args):
        try:
            return method(*args)
        except (FavourError, ValueError, KeyError) as exc:
            notify(self.iface, str(exc), Qgis.Warning)
            return None

    def _combining_target(self) -> str:
        """Return where new criteria go: the selected combining node, or the selected leaf's parent."""
        tree = self.controller.tree
        path = self.selected_path() or tree.root.name
        node = tree.find(path)
        if node.is_leaf and path != tree.root.name:
            return path.rpartition(PATH_SEPARATOR)[0]
        return path

    def _add_under(self, method) -> None:
        if self.controller.tree is not None:
            self._guard(method, self._combining_target())

    def _remove_selected(self) -> None:
        path = self.selected_path()
        if path and path != self.controller.tree.root.name:
            self._guard(self.controller.remove, path)

    def _move_selected(self, delta: int) -> None:
        path = self.selected_path()
        if path and path != self.controller.tree.root.name:
            self._guard(self.controller.move_by, path, delta)

    def move_node(self, path: str, target: str, place: str) -> str | None:
        """Move the node at ``path`` "above", "on" (under, last) or "below" the node ``target``.

        What a drag in the tree view does: one undoable step. A refused move
        (under itself, under a criterion that reads a layer, beside a sibling
        of the same name, beside the root, the root itself) changes nothing and
        the message bar says why. Returns the node's new path, or None.
        """
        tree = self.controller.tree
        if tree is None:
            return None
        try:
            destination = drop_destination(tree, path, target, place)
            if destination is None:
                return None
            moved = self.controller.move_to(path, *destination)
        except (FavourError, ValueError, KeyError) as exc:
            message = exc.args[0] if isinstance(exc, KeyError) and exc.args else exc
            notify(self.iface, tr("{path} was not moved: {why}").format(path=path, why=message),
                   Qgis.Warning)
            return None
        self.select(moved)
        return moved

    def _fill_layer_menu(self) -> None:
        menu = self.actions.layer_menu
        menu.clear()
        layers = [layer for layer in self.project.mapLayers().values()
                  if isinstance(layer, (QgsRasterLayer, QgsVectorLayer))]
        if not layers:
            menu.addAction(tr("(the project has no raster or vector layer)")).setEnabled(False)
        for layer in sorted(layers, key=lambda lyr: lyr.name().lower()):
            action = menu.addAction(layer.name())
            action.triggered.connect(lambda _checked=False, layer=layer:
                                     self.add_layer(self.selected_path(), layer))

    # -- layers as criteria ---------------------------------------------------------------

    def add_layer(self, path: str, layer) -> str | None:
        """Score a project layer at ``path``: a leaf takes it as its layer, a group gets a new criterion.

        Returns the path of the criterion that reads the layer (None if refused).
        """
        try:
            proxy = proxy_from_layer(layer)
        except UnusableLayerError as exc:
            notify(self.iface, str(exc), Qgis.Warning)
            return None
        return self.add_proxy(path, layer.name(), proxy, layer_value_range(layer))

    def add_proxy(self, path: str, name: str, proxy: Proxy, value_range=None) -> str | None:
        """Score ``proxy`` at ``path`` (see :meth:`add_layer`); returns the criterion's path."""
        tree = self.controller.tree
        if tree is None:
            self.controller.new_model()
            tree = self.controller.tree
        path = path or self.selected_path() or tree.root.name
        node = tree.find(path)
        low, high = value_range or (None, None)
        membership = starting_for_proxy(proxy.is_vector, low, high)
        if node.is_leaf and path != tree.root.name:
            try:
                self.controller.set_proxy(path, proxy, membership)
            except (FavourError, ValueError, KeyError) as exc:
                notify(self.iface, str(exc), Qgis.Warning)
                return None
            self.select(path)
            return path
        created = self._guard(self.controller.add_layer_criterion, path, name, proxy, membership)
        if created:
            self.select(created)
        return created

    def drop_layers(self, path: str, mime) -> list[str]:
        """Add the layers dropped onto the node at ``path``; one drop is one undo step."""
        dropped = dropped_layers(mime, self.project)
        done: list[str] = []
        stack = self.controller.undo_stack
        stack.beginMacro(tr("Add layers"))
        try:
            for i, (name, layer, proxy) in enumerate(dropped):
                if isinstance(proxy, str):
                    notify(self.iface, proxy, Qgis.Warning)
                    continue
                target = path
                if i > 0 and self.controller.tree.find(path).is_leaf:
                    target = path.rpartition(PATH_SEPARATOR)[0]
                created = self.add_proxy(target, name, proxy, layer_value_range(layer) if layer else None)
                if created:
                    done.append(created)
        finally:
            stack.endMacro()
        return done

    # -- why here? --------------------------------------------------------------------------

    def _canvas(self):
        """Return QGIS's map canvas, or None without an interface (qgis_process, scripts)."""
        get = getattr(self.iface, "mapCanvas", None) if self.iface is not None else None
        return get() if get is not None else None

    def _why_tool_toggled(self, on: bool) -> None:
        canvas = self._canvas()
        if self.why_tool is None or canvas is None:
            if on:
                self.actions.why_here.setChecked(False)
            return
        if on:
            canvas.setMapTool(self.why_tool)
            self.why_panel_shown().set_busy(False, tr("Click a cell on the map."))
        elif canvas.mapTool() is self.why_tool:
            canvas.unsetMapTool(self.why_tool)

    def _why_tool_deactivated(self) -> None:
        # Another map tool was chosen: the action follows, without setting the tool again.
        self.actions.why_here.blockSignals(True)
        self.actions.why_here.setChecked(False)
        self.actions.why_here.blockSignals(False)

    def why_panel_shown(self) -> WhyHerePanel:
        """Return the "Why here?" panel, made on first use and shown."""
        if self.why_panel is None:
            self.why_panel = WhyHerePanel(self)
            self.why_panel.cancel_requested.connect(self.why.cancel)
        self.why_panel.show()
        self.why_panel.raise_()
        return self.why_panel

    def why_here(self, x: float, y: float, crs_wkt: str = ""):
        """Show every node's value at the cell holding the point (x, y) in ``crs_wkt``; return the task.

        What a click with the *Why here?* map tool does. The values are read
        in the background (:class:`~.why_here.WhyHere`) from the tree as it is
        now, through the evaluation's own preparation and plan, and shown in
        the panel; the first question prepares the inputs, with progress and
        Cancel. Returns None, with a message, when there is no tree, the tree
        cannot be evaluated, or the results folder (where the prepared inputs
        are kept) cannot be written; also when the question waits for one
        being answered (it is answered next).
        """
        tree = self.controller.tree
        if tree is None:
            notify(self.iface, tr("There is no tree to ask about."), Qgis.Warning)
            return None
        errors = [p for p in tree.problems() if p.level == "error"]
        if errors:
            text = tr("The tree cannot be evaluated yet: {problems}").format(
                problems="; ".join(str(p) for p in errors[:3]))
            notify(self.iface, text, Qgis.Warning, 10)
            self.why_panel_shown().show_message(text)
            return None
        try:
            parent = ensure_writable(self.next_folder())
        except OSError as exc:
            notify(self.iface, tr("Why here? needs a folder to prepare the layers in: {error}").format(
                error=exc), Qgis.Critical, 0)
            return None
        copy = self.controller.run_copy()
        panel = self.why_panel_shown()
        if self.why.prepared_for(copy):
            panel.set_busy(True, tr("Reading the cell…"))
        else:
            panel.set_busy(True, tr("Preparing the layers on the model's grid (once; later clicks reuse "
                                    "them)…"))
        return self.why.ask(copy, float(x), float(y), crs_wkt or "", parent)

    def _why_answered(self, answer) -> None:
        self.last_answer = answer
        self.why_panel_shown().show_answer(answer)

    def _why_failed(self, message: str) -> None:
        self.last_answer = None
        self.why_panel_shown().show_message(message)

    # -- running --------------------------------------------------------------------------

    def default_destination(self) -> DefaultFolder:
        """Return where full runs write when no folder is chosen, and why (never a temporary folder)."""
        return default_output(self.project, self.controller.file_path)

    def default_folder(self) -> str:
        """Return where full runs write when no folder is chosen."""
        return self.default_destination().path

    def next_folder(self) -> str:
        """Return the folder the next full run writes a run folder in (chosen, else the default)."""
        return self.controller.output_folder or self.default_folder()

    def run(self, quick: bool = False) -> RunJob | None:
        """Evaluate the tree in the background (``quick``: on a coarse grid); return the job.

        Returns None, with a message, when there is no tree, a run is going on,
        the tree has problems that stop an evaluation, or the results folder
        cannot be made or written (the message names it). A full run writes
        to a new folder ``run-YYYYMMDD-HHMMSS`` in :meth:`next_folder`; a
        quick look to a temporary folder.
        """
        tree = self.controller.tree
        if tree is None:
            notify(self.iface, tr("There is no tree to run."), Qgis.Warning)
            return None
        if self.job is not None and self.job.running:
            notify(self.iface, tr("A run is already going on; wait for it or cancel it."), Qgis.Warning)
            return None
        errors = [p for p in tree.problems() if p.level == "error"]
        if errors:
            shown = "; ".join(str(p) for p in errors[:3])
            more = tr(" (and {n} more)").format(n=len(errors) - 3) if len(errors) > 3 else ""
            notify(self.iface, tr("The tree cannot run yet: {problems}{more}").format(
                problems=shown, more=more), Qgis.Critical, 10)
            return None
        try:
            base = quick_look_folder() if quick else ensure_writable(self.next_folder())
            folder = run_folder(base, quick)
        except OSError as exc:  # OutputError names the folder; a bare OSError names its file
            notify(self.iface, tr("The run did not start: {error}").format(error=exc), Qgis.Critical, 0)
            return None
        job = RunJob(self.controller.run_copy(), folder, self.controller.component_rasters, quick)
        job.progress_changed.connect(self.run_bar.set_progress)
        job.finished.connect(self._run_finished)
        try:
            job.start()
        except (RuntimeError, FavourError, OSError) as exc:
            remove_empty_folders(folder)
            notify(self.iface, str(exc), Qgis.Critical)
            return None
        self.job = job
        self.run_bar.set_running(True, tr("Quick look on a coarser grid…") if quick else tr("Running…"))
        return job

    def cancel_run(self) -> None:
        """Cancel the run going on, if any."""
        if self.job is not None and self.job.running:
            self.run_bar.status.setText(tr("Cancelling…"))
            self.job.cancel()

    def _run_finished(self, outcome) -> None:
        self.run_bar.set_running(False)
        self.last_layers = []
        if outcome.ok:
            name = self.controller.tree.name if self.controller.tree is not None else ""
            try:
                self.last_layers = add_results(outcome, name, self.project)
            except RuntimeError as exc:
                notify(self.iface, str(exc), Qgis.Critical)
            self.run_bar.set_progress(100)
            if outcome.quick:
                self.run_bar.status.setText(tr("Quick look in a temporary folder: {folder}").format(
                    folder=display_path(outcome.folder)))
            else:
                self.run_bar.status.setText(tr("Run written to {folder}").format(
                    folder=display_path(outcome.folder)))
                notify(self.iface, tr("Favourability written to {path}, with its lineage. {caution}")
                       .format(path=display_path(outcome.output), caution=tr(CAUTION)), Qgis.Success, 8)
        elif outcome.cancelled:
            self.run_bar.status.setText(tr("Cancelled; nothing was written."))
        else:
            self.run_bar.status.setText(tr("The run failed."))
            notify(self.iface, tr("The run failed: {error}").format(error=outcome.message),
                   Qgis.Critical, 0)
        self.run_finished.emit(outcome)
        if self._quick_again and self.controller.tree is not None:
            self._quick_again = False
            self.run(quick=True)
