"""Why here? A map tool and a panel: click a cell, see every node's value down the tree for that cell.

The values come from :class:`favour_plugin.raster.probe.Probe`, which reads
the cell from the inputs through the same preparation and plan as the
evaluation; nothing is computed here. The probe runs in a QGIS task
(:class:`~.tasks.FunctionTask`): the first question prepares the inputs
(slow for a large grid with distance criteria), with progress and Cancel in
the panel; later questions reuse them until the layers, the grid or a file
change. Clicks made while a question is answered are not lost: the last one
is answered next.

:class:`WhyHereTool` only reports clicks; :class:`WhyHere` asks the probe;
:class:`WhyHerePanel` shows the answer: each node's name, its operator (or
membership) and weight, its μ, and for criteria read from a layer the
layer's value there with its units where known.
"""

from __future__ import annotations

import math

from qgis.core import Qgis, QgsMessageLog
from qgis.gui import QgsMapTool
from qgis.PyQt.QtCore import QObject, Qt, pyqtSignal
from qgis.PyQt.QtGui import QBrush
from qgis.PyQt.QtWidgets import (
    QDialog,
    QGridLayout,
    QHeaderView,
    QLabel,
    QProgressBar,
    QPushButton,
    QTreeWidget,
    QTreeWidgetItem,
)

from ..core.feedback import Feedback
from ..core.tree import PATH_SEPARATOR, Tree
from ..raster.probe import CellValues, NodeValue, Probe
from .common import LOG_TAG, icon, ramp_colour, tr
from .tasks import FunctionTask, start
from .tree_view import OPERATOR_LABELS

#: Columns of the panel's tree.
COLUMNS = ("Node", "How", "μ", "Value")
#: Operator names as the panel shows them.
class TaskFeedback(Feedback):
    """Progress and cancel of a probe's preparation, through the QGIS task running it."""

    def __init__(self, task=None) -> None:
        super().__init__()
        self.task = task

    def set_progress(self, fraction: float) -> None:
        """Show the fraction done on the task (QGIS passes it on to the panel)."""
        if self.task is not None:
            self.task.setProgress(100.0 * min(1.0, max(0.0, fraction)))

    def is_cancelled(self) -> bool:
        """Return True once the task was cancelled."""
        return self.task is not None and self.task.isCanceled()


class WhyHereTool(QgsMapTool):
    """A map tool that reports each left click as ``clicked(x, y, crs_wkt)`` in the canvas's CRS."""

    clicked = pyqtSignal(float, float, str)

    def __init__(self, canvas) -> None:
        super().__init__(canvas)
        self.setCursor(Qt.WhatsThisCursor)

    def canvasReleaseEvent(self, event) -> None:  # noqa: N802 (QGIS API name)
        """Report a left click (a slot: never raises)."""
        try:
            if event.button() != Qt.LeftButton:
                return
            point = event.mapPoint()
            crs = self.canvas().mapSettings().destinationCrs()
            self.clicked.emit(point.x(), point.y(), crs.toWkt() if crs.isValid() else "")
        except Exception as exc:  # PyQt aborts QGIS on an exception in a slot
            QgsMessageLog.logMessage(f"Why here?: the click was not read: {exc}", LOG_TAG, Qgis.Warning)


def operator_text(operator: dict | None) -> str:
    """Return a node's operator as the panel shows it: ``gamma γ = 0.6``, ``fuzzy OR (missing: ignored)``."""
    if not isinstance(operator, dict):
        return ""
    kind = operator.get("type", "")
    text = tr(OPERATOR_LABELS.get(kind, str(kind)))
    if kind == "gamma" and "gamma" in operator:
        text += f" γ = {operator['gamma']:g}"
    if operator.get("nodata") == "ignore":
        text += tr(" (missing: ignored)")
    return text


def membership_text(membership: dict | None) -> str:
    """Return a leaf's membership as the panel shows it: its type and parameters."""
    if not isinstance(membership, dict):
        return ""
    kind = str(membership.get("type", ""))
    numbers = [f"{key} {value:g}" for key, value in membership.items()
               if key != "type" and isinstance(value, (int, float)) and not isinstance(value, bool)]
    return f"{kind} ({', '.join(numbers)})" if numbers else kind


def value_text(node: NodeValue) -> str:
    """Return a leaf's layer value with its units ("no value" for nodata)."""
    if node.kind != "leaf" and node.membership is None:
        return ""
    if node.value is None:
        return tr("no value")
    text = f"{node.value:.6g}"
    if node.units:
        text += f" {node.units}"
    if node.measure == "distance":
        text = tr("{distance} to the nearest feature").format(distance=text)
    return text


def mu_text(mu: float | None) -> str:
    """Return μ with three decimals, or "no value"."""
    return tr("no value") if mu is None or not math.isfinite(mu) else f"{mu:.3f}"


class WhyHerePanel(QDialog):
    """A small window: where the cell is, the tree with each node's value there, progress and Cancel.

    Signals
    -------
    cancel_requested()
    """

    cancel_requested = pyqtSignal()

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.setWindowTitle(tr("Favour: why here?"))
        self.setWindowIcon(icon("why-here"))
        self.setModal(False)
        self.resize(560, 420)
        grid = QGridLayout(self)
        self.where = QLabel(tr("Click a cell on the map."))
        self.where.setWordWrap(True)
        self.where.setTextInteractionFlags(Qt.TextSelectableByMouse)
        self.tree = QTreeWidget()
        self.tree.setColumnCount(len(COLUMNS))
        self.tree.setHeaderLabels([tr(c) for c in COLUMNS])
        self.tree.header().setSectionResizeMode(0, QHeaderView.ResizeToContents)
        self.tree.setUniformRowHeights(True)
        self.progress = QProgressBar()
        self.progress.setRange(0, 100)
        self.cancel_button = QPushButton(icon("cancel"), tr("Cancel"))
        self.status = QLabel()
        self.status.setWordWrap(True)
        self.status.setTextInteractionFlags(Qt.TextSelectableByMouse)
        grid.addWidget(self.where, 0, 0, 1, 2)
        grid.addWidget(self.tree, 1, 0, 1, 2)
        grid.addWidget(self.progress, 2, 0)
        grid.addWidget(self.cancel_button, 2, 1)
        grid.addWidget(self.status, 3, 0, 1, 2)
        grid.setColumnStretch(0, 1)
        grid.setRowStretch(1, 1)
        self.cancel_button.clicked.connect(self.cancel_requested)
        self.set_busy(False)

    def set_busy(self, busy: bool, text: str = "") -> None:
        """Show that a question is being answered (Cancel enabled), or not."""
        self.cancel_button.setEnabled(busy)
        self.progress.setVisible(busy)
        if busy:
            self.progress.setValue(0)
        self.status.setText(text)

    def set_progress(self, percent: float) -> None:
        """Show how far the preparation has come."""
        self.progress.setValue(int(percent))

    def show_answer(self, answer: CellValues) -> None:
        """Show every node's value at the cell, the tree as in the dock."""
        self.where.setText(tr("Cell at row {row}, column {col} (from 0 at the upper left); its centre "
                              "at {x:.10g}, {y:.10g} in {crs}.").format(
            row=answer.row, col=answer.col, x=answer.x, y=answer.y, crs=answer.crs))
        self.tree.clear()
        items: dict[str, QTreeWidgetItem] = {}
        weighted = {n.path for n in answer.nodes if (n.operator or {}).get("type") == "weighted_mean"}
        for node in answer.nodes:
            parent_path = node.path.rpartition(PATH_SEPARATOR)[0]
            how = (membership_text(node.membership) if node.membership is not None
                   else operator_text(node.operator))
            if parent_path in weighted:
                how += tr("; weight {weight:g}").format(weight=node.weight) if how else \
                    tr("weight {weight:g}").format(weight=node.weight)
            row = [node.name, how, mu_text(node.mu), value_text(node) if node.membership is not None else ""]
            parent = items.get(parent_path)
            item = QTreeWidgetItem(parent if parent is not None else self.tree, row)
            item.setToolTip(0, node.path)
            item.setIcon(0, icon({"root": "node-root", "component": "node-component",
                                  "criterion": "node-group"}.get(
                node.kind, "node-vector" if node.measure else "node-raster")))
            item.setTextAlignment(2, int(Qt.AlignRight | Qt.AlignVCenter))
            if node.mu is not None:
                colour = ramp_colour(node.mu)
                item.setBackground(2, QBrush(colour))
                item.setForeground(2, QBrush(Qt.white if colour.lightness() < 128 else Qt.black))
            items[node.path] = item
        self.tree.expandAll()
        for column in range(1, len(COLUMNS)):
            self.tree.resizeColumnToContents(column)
        note = tr(" The inputs were prepared for this question; the next ones reuse them.") \
            if answer.prepared else ""
        self.set_busy(False, tr("Values read from the layers through the model's own evaluation.") + note)

    def show_message(self, text: str) -> None:
        """Show why there is no answer (the tree of the last answer is cleared)."""
        self.tree.clear()
        self.where.setText(tr("No answer for this place."))
        self.set_busy(False, text)

    def rows(self) -> dict[str, list[str]]:
        """Return node path → the texts of its row, as shown (for scripts and tests)."""
        found = {}
        stack = [self.tree.topLevelItem(k) for k in range(self.tree.topLevelItemCount())]
        while stack:
            item = stack.pop()
            found[item.toolTip(0)] = [item.text(c) for c in range(len(COLUMNS))]
            stack.extend(item.child(k) for k in range(item.childCount()))
        return found


class WhyHere(QObject):
    """Asks a :class:`~favour_plugin.raster.probe.Probe` in a QGIS task; the last click waits its turn.

    Signals
    -------
    answered(CellValues)
        In the main thread, when a question is answered.
    failed(str)
        In the main thread, with why a question has no answer (outside the
        grid, a problem of the tree, cancelled).
    progress_changed(float)
        Percentage of the preparation done.
    """

    answered = pyqtSignal(object)
    failed = pyqtSignal(str)
    progress_changed = pyqtSignal(float)

    def __init__(self, parent: QObject | None = None) -> None:
        super().__init__(parent)
        self.probe = Probe()
        self.task: FunctionTask | None = None
        self._waiting: tuple | None = None
        self._release = False

    def busy(self) -> bool:
        """Return True while a question is being answered."""
        return self.task is not None

    def ask(self, tree: Tree, x: float, y: float, crs_wkt: str, work_parent: str) -> FunctionTask | None:
        """Answer for the cell at (x, y) in a task; if one is being answered, this one comes next.

        Returns the task started, or None when the question waits its turn.
        """
        if self.task is not None:
            self._waiting = (tree, x, y, crs_wkt, work_parent)
            return None
        self.probe.work_parent = work_parent
        feedback = TaskFeedback()
        task = FunctionTask(tr("Favour: why here?"), self.probe.value_at, (tree, x, y, crs_wkt, feedback),
                            self._done)
        feedback.task = task
        task.progressChanged.connect(self.progress_changed)
        self.task = task
        start(task)
        return task

    def prepared_for(self, tree: Tree) -> bool:
        """Return True when a question about ``tree`` reuses the prepared inputs (no progress to show)."""
        return self.probe.is_prepared_for(tree)

    def cancel(self) -> None:
        """Cancel the question being answered and forget the one waiting."""
        self._waiting = None
        if self.task is not None:
            self.task.cancel()

    def release(self) -> None:
        """Cancel any question and remove the prepared inputs (the model is gone)."""
        self._waiting = None
        if self.task is None:
            self.probe.close()
            return
        self._release = True
        self.task.cancel()

    def _done(self, result, error) -> None:  # main thread
        self.task = None
        if self._release:
            self._release = False
            self.probe.close()
        waiting, self._waiting = self._waiting, None
        if waiting is not None:  # a later click replaces this answer
            self.ask(*waiting)
            return
        if error is not None:
            self.failed.emit(str(error))
        elif result is not None:
            self.answered.emit(result)
        else:
            self.failed.emit(tr("cancelled"))

    def shutdown(self) -> None:
        """Stop answering and remove the prepared inputs (once a running question has stopped)."""
        self._waiting = None
        task, self.task = self.task, None
        probe = self.probe
        if task is None:
            probe.close()
            return
        task.on_done = lambda _result, _error: probe.close()  # in the main thread, touches no widget
        task.cancel()
