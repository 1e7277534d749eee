"""The dock's workshop page: load rounds of score sheets, read the aggregate, use it, run the uncertainty.

The page shows one round at a time (:class:`~.workshop_model.WorkshopTableModel`):
the experts' values per node and item, the chosen aggregate, IQR and CV, and
from round 2 on the change since the round before. Expert weights (equal by
default), the statistic and the disagreement threshold update the table at
once; that is the aggregate of a small table, the only computing done in the
main thread. Sheets are read once, when a round is loaded; a round that fails
to read changes nothing and the message bar names each bad file, row and
column.

"Use the aggregate" puts :func:`~favour_plugin.core.workshop.aggregate_tree`
into the tree as one undoable edit and asks the dock for a quick look, so a
group can watch the map move as weights change; an aggregate that makes an
invalid membership is refused and the node named.
"""

from __future__ import annotations

import copy
import os
from collections.abc import Callable, Sequence

from qgis.core import Qgis, QgsProject
from qgis.PyQt.QtCore import pyqtSignal
from qgis.PyQt.QtWidgets import (
    QAbstractItemView,
    QComboBox,
    QDialog,
    QDoubleSpinBox,
    QFileDialog,
    QGridLayout,
    QHBoxLayout,
    QLabel,
    QPushButton,
    QTableView,
    QVBoxLayout,
    QWidget,
)

from ..core.errors import FavourError
from ..core.workshop import aggregate_tree, compare_rounds
from ..raster.workshop_jobs import write_score_sheets
from .common import icon, notify, tr
from .sheet_export_dialog import SheetExportDialog
from .uncertainty_panel import UncertaintyPanel
from .workshop_model import WorkshopState, WorkshopTableModel, statistic_names

#: Expert weight boxes per row of the weights grid (the dock is about 600 px wide).
WEIGHTS_PER_ROW = 3
#: Rows the table always shows (the page scrolls below that).
TABLE_ROWS = 12
#: Widest the node column starts, in pixels (the full path is in its tooltip).
NODE_COLUMN_WIDTH = 220


class WorkshopView(QWidget):
    """The workshop page of the dock.

    Signals
    -------
    quick_look_requested
        The aggregate went into the tree: show the map it makes.
    pairwise_requested
        The user asked for pairwise weights of the selected node's children.
    """

    quick_look_requested = pyqtSignal()
    pairwise_requested = pyqtSignal()

    def __init__(self, controller, iface=None, project: QgsProject | None = None,
                 results_folder: Callable[[], str] | None = None, parent=None) -> None:
        super().__init__(parent)
        self.controller = controller
        self.iface = iface
        self.project = project or QgsProject.instance()
        self.state = WorkshopState()
        self.model = WorkshopTableModel(self)
        self.weight_boxes: dict[str, QDoubleSpinBox] = {}
        self.last_folder = ""
        self._has_aggregate = False
        self._build(results_folder or (lambda: os.path.expanduser("~")))
        self.refresh()

    def _build(self, results_folder) -> None:
        layout = QVBoxLayout(self)
        layout.setContentsMargins(2, 2, 2, 2)
        files = QHBoxLayout()
        self.load_button = QPushButton(icon("load-sheets"), tr("Load round…"))
        self.load_button.setToolTip(tr("Read the score sheets of the next round (several files)"))
        self.export_button = QPushButton(icon("export-sheets"), tr("Export sheets…"))
        self.export_button.setToolTip(tr("Write one score sheet per expert from the current tree, or "
                                         "the next round's sheets with the group's spread"))
        self.clear_button = QPushButton(tr("Start over"))
        self.clear_button.setToolTip(tr("Forget the rounds read (the tree is not changed)"))
        for button in (self.load_button, self.export_button, self.clear_button):
            files.addWidget(button)
        files.addStretch(1)
        layout.addLayout(files)
        options = QGridLayout()
        self.round_box = QComboBox()
        self.statistic_box = QComboBox()
        self.statistic_box.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
        self.statistic_box.setMinimumContentsLength(12)
        for name, text in statistic_names().items():
            self.statistic_box.addItem(text, name)
        self.threshold_box = QDoubleSpinBox()
        self.threshold_box.setRange(0.0, 10.0)
        self.threshold_box.setSingleStep(0.05)
        self.threshold_box.setDecimals(2)
        self.threshold_box.setKeyboardTracking(False)
        self.threshold_box.setValue(self.state.threshold)
        self.threshold_box.setToolTip(tr("Flag an item for discussion when the coefficient of variation "
                                         "of the experts' values is above this"))
        options.addWidget(QLabel(tr("Round")), 0, 0)
        options.addWidget(self.round_box, 0, 1)
        options.addWidget(QLabel(tr("Aggregate")), 0, 2)
        options.addWidget(self.statistic_box, 0, 3)
        options.addWidget(QLabel(tr("Flag CV above")), 1, 0)
        options.addWidget(self.threshold_box, 1, 1)
        options.setColumnStretch(3, 1)
        layout.addLayout(options)
        self.weights_label = QLabel(tr("Expert weights (only ratios count)"))
        layout.addWidget(self.weights_label)
        self.weights_widget = QWidget()
        self.weights_grid = QGridLayout(self.weights_widget)
        self.weights_grid.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.weights_widget)
        self.table = QTableView()
        self.table.setModel(self.model)
        self.table.setSelectionBehavior(QAbstractItemView.SelectRows)
        self.table.setEditTriggers(QAbstractItemView.NoEditTriggers)
        self.table.setAlternatingRowColors(True)
        self.table.setWordWrap(False)
        self.table.verticalHeader().setVisible(False)
        self.table.verticalHeader().setDefaultSectionSize(self.table.fontMetrics().height() + 6)
        self.table.setMinimumHeight(TABLE_ROWS * (self.table.fontMetrics().height() + 6))
        layout.addWidget(self.table, 1)
        self.summary = QLabel()
        self.summary.setWordWrap(True)
        layout.addWidget(self.summary)
        actions = QHBoxLayout()
        self.use_button = QPushButton(icon("use-aggregate"), tr("Use the aggregate"))
        self.use_button.setToolTip(tr("Put the aggregate's weights and parameters into the tree (one undo "
                                      "step) and make a quick look"))
        self.pairwise_button = QPushButton(icon("pairwise"), tr("Pairwise weights…"))
        self.pairwise_button.setToolTip(tr("Weigh the children of the selected node by comparing them "
                                           "two at a time"))
        actions.addWidget(self.use_button)
        actions.addWidget(self.pairwise_button)
        actions.addStretch(1)
        layout.addLayout(actions)
        self.uncertainty = UncertaintyPanel(self.controller, self.state, self.iface, self.project,
                                            results_folder)
        layout.addWidget(self.uncertainty)
        self.load_button.clicked.connect(self._load_dialog)
        self.export_button.clicked.connect(self._export_dialog)
        self.clear_button.clicked.connect(self.clear)
        self.use_button.clicked.connect(lambda: self.use_aggregate())
        self.pairwise_button.clicked.connect(self.pairwise_requested)
        self.round_box.currentIndexChanged.connect(self._round_chosen)
        self.statistic_box.currentIndexChanged.connect(
            lambda _i: self.set_statistic(self.statistic_box.currentData()))
        self.threshold_box.valueChanged.connect(self.set_threshold)

    # -- showing -------------------------------------------------------------------------

    def refresh(self) -> None:
        """Show the round chosen with the current weights, statistic and threshold."""
        scores = self.state.scores()
        error = ""
        try:
            result, before = self.state.aggregate(), self.state.previous()
        except FavourError as exc:
            result, before, error = None, None, str(exc)
        self.model.show(scores, result, before, self.state.statistic)
        if scores is not None:
            self.table.resizeColumnsToContents()
            if self.table.columnWidth(0) > NODE_COLUMN_WIDTH:
                self.table.setColumnWidth(0, NODE_COLUMN_WIDTH)
        self._has_aggregate = result is not None
        self._enable()
        self.weights_label.setVisible(bool(self.weight_boxes))
        self.summary.setText(error or self._summary_text(scores, result, before))

    def _enable(self) -> None:
        has_tree = self.controller.tree is not None
        self.use_button.setEnabled(self._has_aggregate and has_tree)
        for button in (self.export_button, self.load_button, self.pairwise_button):
            button.setEnabled(has_tree)
        self.clear_button.setEnabled(bool(self.state.rounds))

    def _summary_text(self, scores, result, before) -> str:
        if scores is None:
            return tr("No score sheets yet. Export one sheet per expert from the tree, let the experts "
                      "fill them in, then load them as round 1.")
        text = tr("Round {k} of {n}: {experts} experts, {items} items; {flagged} flagged for discussion "
                  "(CV above {threshold:g}).").format(
            k=scores.round_number, n=len(self.state.rounds), experts=len(scores.experts),
            items=len(result.summaries), flagged=len(result.flagged), threshold=result.threshold)
        if before is not None:
            settled = sum(change.settled for change in compare_rounds(before, result))
            text += " " + tr("Settled since round {k}: {n}.").format(k=before.round_number, n=settled)
        return text

    def _show_rounds(self) -> None:
        self.round_box.blockSignals(True)
        self.round_box.clear()
        for scores in self.state.rounds:
            self.round_box.addItem(tr("Round {k}").format(k=scores.round_number))
        self.round_box.setCurrentIndex(self.state.round_index)
        self.round_box.blockSignals(False)

    def _show_weights(self) -> None:
        while self.weights_grid.count():
            widget = self.weights_grid.takeAt(0).widget()
            if widget is not None:
                widget.hide()
                widget.deleteLater()
        self.weight_boxes = {}
        experts = list(dict.fromkeys(e for scores in self.state.rounds for e in scores.experts))
        for k, expert in enumerate(experts):
            box = QDoubleSpinBox()
            box.setRange(0.0, 1000.0)
            box.setDecimals(2)
            box.setSingleStep(0.5)
            box.setKeyboardTracking(False)
            box.setValue(self.state.weights.get(expert, 1.0))
            box.valueChanged.connect(lambda value, expert=expert: self.set_expert_weight(expert, value))
            row, column = divmod(k, WEIGHTS_PER_ROW)
            self.weights_grid.addWidget(QLabel(expert), row, 2 * column)
            self.weights_grid.addWidget(box, row, 2 * column + 1)
            self.weight_boxes[expert] = box

    # -- what the user sets ----------------------------------------------------------------

    def select_round(self, index: int) -> None:
        """Show round ``index`` (0-based)."""
        if 0 <= index < len(self.state.rounds):
            self.state.round_index = index
            self._show_rounds()
            self.refresh()

    def _round_chosen(self, index: int) -> None:
        if index >= 0:
            self.select_round(index)

    def set_statistic(self, name: str) -> None:
        """Aggregate with ``pool``, ``mean``, ``median`` or ``trimmed``."""
        if name and name != self.state.statistic:
            self.state.statistic = name
            self.statistic_box.blockSignals(True)
            self.statistic_box.setCurrentIndex(self.statistic_box.findData(name))
            self.statistic_box.blockSignals(False)
            self.refresh()

    def set_threshold(self, value: float) -> None:
        """Flag items whose CV is above ``value``."""
        self.state.threshold = float(value)
        if self.threshold_box.value() != value:
            self.threshold_box.blockSignals(True)
            self.threshold_box.setValue(value)
            self.threshold_box.blockSignals(False)
        self.refresh()

    def set_expert_weight(self, expert: str, weight: float) -> None:
        """Give one expert a weight (≥ 0; only ratios count)."""
        self.state.weights[expert] = float(weight)
        box = self.weight_boxes.get(expert)
        if box is not None and box.value() != weight:
            box.blockSignals(True)
            box.setValue(weight)
            box.blockSignals(False)
        self.refresh()

    def clear(self) -> None:
        """Forget every round (the tree is not changed)."""
        self.state.clear()
        self.threshold_box.blockSignals(True)
        self.threshold_box.setValue(self.state.threshold)
        self.threshold_box.blockSignals(False)
        self.statistic_box.blockSignals(True)
        self.statistic_box.setCurrentIndex(self.statistic_box.findData(self.state.statistic))
        self.statistic_box.blockSignals(False)
        self._show_rounds()
        self._show_weights()
        self.refresh()

    # -- sheets ------------------------------------------------------------------------------

    def load_round(self, paths: Sequence[str]) -> bool:
        """Read the next round's sheets; on any problem say what and where, and change nothing."""
        tree = self.controller.tree
        if tree is None or not paths:
            return False
        k = len(self.state.rounds) + 1
        try:
            scores = self.state.add_round(paths, tree)
        except (FavourError, ValueError) as exc:
            notify(self.iface, tr("Round {k} was not loaded; nothing was changed. {error}").format(
                k=k, error=exc), Qgis.Critical, 0)
            return False
        self.last_folder = os.path.dirname(os.path.abspath(paths[0]))
        self._show_rounds()
        self._show_weights()
        self.refresh()
        notify(self.iface, tr("Round {k} loaded: {n} experts from {files} file(s).").format(
            k=k, n=len(scores.experts), files=len(scores.files)), Qgis.Success, 4)
        return True

    def export_sheets(self, folder: str, experts=4, fmt: str = "csv", next_round: bool = False):
        """Write score sheets into ``folder``; return their paths (None, with a message, if refused).

        ``experts`` is a number of anonymous experts or a list of ids. With
        ``next_round`` the sheets carry each expert's values of the last round
        read and the group's median, IQR and count (the experts are that
        round's). Written by :func:`~favour_plugin.raster.workshop_jobs.write_score_sheets`,
        as the processing algorithm writes them: never over an existing sheet,
        all or none.
        """
        tree = self.controller.tree
        if tree is None:
            return None
        try:
            if next_round:
                scores = self.state.scores(len(self.state.rounds) - 1)
                if scores is None:
                    raise ValueError(tr("load a round first: the next round's sheets carry its spread"))
                paths = write_score_sheets(tree, folder, fmt=fmt, previous_sheets=list(scores.files),
                                           expert_weights=self.state.expert_weights(scores))
            else:
                paths = write_score_sheets(tree, folder, experts, fmt=fmt)
        except (FavourError, ValueError, OSError) as exc:
            notify(self.iface, tr("No sheets were written: {error}").format(error=exc), Qgis.Critical)
            return None
        self.last_folder = os.path.abspath(folder)
        notify(self.iface, tr("{n} score sheet(s) written to {folder}").format(n=len(paths), folder=folder),
               Qgis.Success, 6)
        return paths

    def _dialog_folder(self) -> str:
        if self.last_folder:
            return self.last_folder
        if self.controller.file_path:
            return os.path.dirname(self.controller.file_path)
        return self.project.absolutePath() or os.path.expanduser("~")

    def _load_dialog(self) -> None:
        k = len(self.state.rounds) + 1
        paths, _ = QFileDialog.getOpenFileNames(self, tr("Load round {k}: score sheets").format(k=k),
                                                self._dialog_folder(), tr("Score sheets (*.csv *.xlsx)"))
        if paths:
            self.load_round(paths)

    def _export_dialog(self) -> None:
        latest = self.state.scores(len(self.state.rounds) - 1)
        dialog = SheetExportDialog(self._dialog_folder(), len(self.state.rounds) + 1 if latest else 0,
                                   latest.experts if latest else (), self)
        if dialog.exec_() == QDialog.Accepted and dialog.folder.filePath():
            self.export_sheets(dialog.folder.filePath(), dialog.experts(), dialog.format.currentData(),
                               dialog.next_round.isChecked())

    # -- the aggregate into the tree ----------------------------------------------------------

    def use_aggregate(self) -> bool:
        """Put the aggregate into the tree as one undoable edit and ask for a quick look.

        Refused, with a message and the tree unchanged, when there is no
        round or the aggregate makes an invalid tree (the node is named).
        """
        tree = self.controller.tree
        if tree is None:
            return False
        try:
            result = self.state.aggregate()
            if result is None:
                raise ValueError(tr("load a round of score sheets first"))
            new = aggregate_tree(tree, result, self.state.statistic)
        except (FavourError, ValueError) as exc:
            notify(self.iface, tr("The aggregate was not used; the tree is unchanged: {error}").format(
                error=exc), Qgis.Critical, 0)
            return False
        self.controller.edit(tr("Use the workshop aggregate"),
                             lambda t: setattr(t, "root", copy.deepcopy(new.root)))
        self.quick_look_requested.emit()
        return True

    def tree_changed(self) -> None:
        """Follow the controller: with no tree (the project closed) the rounds go too.

        Called on every edit, so it only enables buttons; the table stays as it is.
        """
        if self.controller.tree is None and self.state.rounds:
            self.clear()
        else:
            self._enable()

    def shutdown(self) -> None:
        """Stop a run going on (the dock is closing)."""
        self.uncertainty.shutdown()
