"""Pairwise-comparison weights for the children of one node, judged on Saaty's scale.

The dialog lists every pair of the node's children as "A [is … than] B", one
combo box per pair holding the 17 values of Saaty's scale (9 … 1 … 1/9). It
starts from the ratios of the children's current weights (each rounded to the
nearest value on the scale), and after each change shows the weights, λmax,
CI and CR that :func:`favour_plugin.core.pairwise.pairwise_weights` returns;
CR at or above :data:`~favour_plugin.core.pairwise.CR_LIMIT` is flagged
(icon, bold text and colour) and the most inconsistent judgement is named.
Apply puts the weights into the tree as one undoable edit
(:func:`favour_plugin.core.workshop.tree_with_weights`). Computing is a
15 × 15 matrix at most: it runs in the slot.
"""

from __future__ import annotations

import copy
import math

from qgis.core import Qgis
from qgis.PyQt.QtCore import Qt
from qgis.PyQt.QtWidgets import (
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QGridLayout,
    QHeaderView,
    QLabel,
    QScrollArea,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from ..core.errors import FavourError
from ..core.pairwise import CR_LIMIT, RANDOM_INDEX, SAATY_SCALE, matrix_from_judgements, pairwise_weights
from ..core.workshop import tree_with_weights
from .common import SLATE, STRAW, icon, notify, tr

#: Saaty's words for the odd values of the scale (Saaty 1980).
WORDS = {1: "equally important as", 3: "moderately more important than", 5: "strongly more important than",
         7: "very strongly more important than", 9: "extremely more important than"}
LESS = {3: "moderately less important than", 5: "strongly less important than",
        7: "very strongly less important than", 9: "extremely less important than"}
#: The scale from 9 down to 1/9, as the combo boxes list it.
SCALE = tuple(sorted(SAATY_SCALE, reverse=True))


def scale_text(value: float) -> str:
    """Return how a combo box shows one value of the scale: ``3 · moderately more important than``."""
    if value >= 1:
        k = round(value)
        words = WORDS.get(k, "more important than (between)")
        return f"{k} · {tr(words)}"
    k = round(1 / value)
    return f"1/{k} · {tr(LESS.get(k, 'less important than (between)'))}"


def nearest_on_scale(ratio: float) -> float:
    """Return the value of Saaty's scale nearest ``ratio`` on a log scale (1 for no finite ratio)."""
    if not math.isfinite(ratio) or ratio <= 0:
        return 1.0
    return min(SCALE, key=lambda v: abs(math.log(v) - math.log(ratio)))


class PairwiseDialog(QDialog):
    """Judge the children of ``path`` two at a time; Apply sets their weights in one undoable edit.

    Attributes
    ----------
    names : list of str
        The children compared, in the tree's order.
    combos : dict of (int, int) → QComboBox
        The judgement of each pair i < j: how much more important child i is than child j.
    result : PairwiseResult or None
        The numbers shown; None while the judgements cannot be computed.
    """

    def __init__(self, controller, path: str, iface=None, parent=None) -> None:
        super().__init__(parent)
        self.controller = controller
        self.path = path
        self.iface = iface
        node = controller.tree.find(path)
        self.names = [child.name for child in node.children]
        if not 2 <= len(self.names) <= max(RANDOM_INDEX):
            raise ValueError(tr("pairwise comparison needs 2 to {most} children under {path}; it has "
                                "{n}").format(most=max(RANDOM_INDEX), path=path, n=len(self.names)))
        self.result = None
        self.setWindowTitle(tr("Pairwise weights: {name}").format(name=node.name))
        self.setWindowIcon(icon("pairwise"))
        self._build(node)
        self._update()

    def _build(self, node) -> None:
        layout = QVBoxLayout(self)
        intro = QLabel(tr("Compare the criteria under {name} two at a time: how much more important "
                          "is the one on the left than the one on the right?").format(name=node.name))
        intro.setWordWrap(True)
        layout.addWidget(intro)
        operator = (node.operator or {}).get("type")
        if operator != "weighted_mean":
            note = QLabel(tr("{name} combines with '{op}': weights change the map only under a weighted "
                             "mean.").format(name=node.name, op=operator))
            note.setWordWrap(True)
            layout.addWidget(note)
        pairs = QWidget()
        grid = QGridLayout(pairs)
        weights = [max(float(child.weight), 0.0) for child in node.children]
        self.combos: dict[tuple[int, int], QComboBox] = {}
        row = 0
        for i in range(len(self.names)):
            for j in range(i + 1, len(self.names)):
                combo = QComboBox()
                for value in SCALE:
                    combo.addItem(scale_text(value), value)
                both = weights[i] > 0 and weights[j] > 0
                start = nearest_on_scale(weights[i] / weights[j]) if both else 1.0
                combo.setCurrentIndex(SCALE.index(start))
                combo.currentIndexChanged.connect(self._update)
                grid.addWidget(QLabel(self.names[i]), row, 0)
                grid.addWidget(combo, row, 1)
                grid.addWidget(QLabel(self.names[j]), row, 2)
                self.combos[(i, j)] = combo
                row += 1
        grid.setColumnStretch(1, 1)
        scroll = QScrollArea()
        scroll.setWidgetResizable(True)
        scroll.setWidget(pairs)
        scroll.setMinimumHeight(min(len(self.combos), 6) * (self.fontMetrics().height() + 16))
        layout.addWidget(scroll, 1)
        self.table = QTableWidget(len(self.names), 3)
        self.table.setHorizontalHeaderLabels([tr("Criterion"), tr("Weight now"), tr("Pairwise weight")])
        self.table.verticalHeader().setVisible(False)
        self.table.setEditTriggers(QTableWidget.NoEditTriggers)
        total = sum(weights)
        for k, name in enumerate(self.names):
            self.table.setItem(k, 0, QTableWidgetItem(name))
            now = weights[k] / total if total > 0 else 1.0 / len(weights)
            self.table.setItem(k, 1, _number_item(now))
            self.table.setItem(k, 2, _number_item(None))
        header = self.table.horizontalHeader()
        header.setSectionResizeMode(0, QHeaderView.Stretch)
        for column in (1, 2):
            header.setSectionResizeMode(column, QHeaderView.ResizeToContents)
        self.table.verticalHeader().setDefaultSectionSize(self.table.fontMetrics().height() + 8)
        self.table.setFixedHeight(header.sizeHint().height() + 4
                                  + len(self.names) * self.table.verticalHeader().defaultSectionSize())
        layout.addWidget(self.table)
        self.numbers = QLabel()
        self.consistency = QLabel()
        self.consistency.setAutoFillBackground(True)
        self.worst = QLabel()
        self.worst.setWordWrap(True)
        for label in (self.numbers, self.consistency, self.worst):
            label.setTextInteractionFlags(Qt.TextSelectableByMouse)
            layout.addWidget(label)
        self.buttons = QDialogButtonBox(QDialogButtonBox.Apply | QDialogButtonBox.Cancel)
        self.buttons.button(QDialogButtonBox.Apply).clicked.connect(self.apply)
        self.buttons.rejected.connect(self.reject)
        layout.addWidget(self.buttons)
        self.resize(600, 620)

    # -- judgements and numbers ----------------------------------------------------------

    def judgements(self) -> list[tuple[str, str, float]]:
        """Return every judgement as (a, b, value): a is ``value`` times as important as b."""
        return [(self.names[i], self.names[j], float(combo.currentData()))
                for (i, j), combo in self.combos.items()]

    def set_judgement(self, a: int, b: int, value: float) -> None:
        """Judge child ``a`` ``value`` times as important as child ``b`` (a value of Saaty's scale)."""
        if a > b:
            a, b, value = b, a, 1.0 / value
        combo = self.combos[(a, b)]
        combo.setCurrentIndex(SCALE.index(nearest_on_scale(value)))

    def _update(self, *args) -> None:
        try:
            self.result = pairwise_weights(matrix_from_judgements(self.names, self.judgements()))
        except (FavourError, ValueError) as exc:  # not expected from the scale; a slot must not raise
            self.result = None
            self.numbers.setText(str(exc))
            self.buttons.button(QDialogButtonBox.Apply).setEnabled(False)
            return
        r = self.result
        for k, weight in enumerate(r.weights):
            self.table.item(k, 2).setText(f"{weight:.3f}")
            self.table.item(k, 2).setData(Qt.UserRole, float(weight))
        self.numbers.setText(tr("λmax {lam:.4f}   CI {ci:.4f}   (n = {n}, RI = {ri:.2f})").format(
            lam=r.lambda_max, ci=r.ci, n=r.n, ri=r.random_index))
        palette = self.consistency.palette()
        font = self.consistency.font()
        if r.consistent:
            self.consistency.setText(tr("CR {cr:.3f}: below {limit:.2f}, consistent enough to use").format(
                cr=r.cr, limit=CR_LIMIT))
            palette.setColor(self.consistency.backgroundRole(), self.palette().color(self.backgroundRole()))
            palette.setColor(self.consistency.foregroundRole(), self.palette().color(self.foregroundRole()))
            font.setBold(False)
        else:
            self.consistency.setText("⚑ " + tr("CR {cr:.3f}: {limit:.2f} or more, the judgements are "
                                              "inconsistent; revisit the one named below first").format(
                cr=r.cr, limit=CR_LIMIT))
            palette.setColor(self.consistency.backgroundRole(), STRAW)
            palette.setColor(self.consistency.foregroundRole(), SLATE)
            font.setBold(True)
        self.consistency.setPalette(palette)
        self.consistency.setFont(font)
        i, j = r.worst_pair
        if r.n > 2:
            said = float(r.matrix[i, j])
            self.worst.setText(tr("Most inconsistent judgement: {a} is {said} as important as {b}; the "
                                  "other judgements imply about {implied:.2g} times.").format(
                a=self.names[i], b=self.names[j], said=_ratio_text(said), implied=r.worst_consistent_value))
        else:
            self.worst.setText(tr("Two criteria are always consistent."))
        self.buttons.button(QDialogButtonBox.Apply).setEnabled(True)

    def apply(self) -> bool:
        """Put the pairwise weights into the tree as one undoable edit and close; say why not if refused."""
        if self.result is None or self.controller.tree is None:
            return False
        try:
            weights = [float(w) for w in self.result.weights]
            new = tree_with_weights(self.controller.tree, self.path, weights)
            self.controller.edit(tr("Pairwise weights"),
                                 lambda t: setattr(t, "root", copy.deepcopy(new.root)), focus=self.path)
        except (FavourError, ValueError, KeyError) as exc:
            notify(self.iface, tr("The pairwise weights were not applied; the tree is unchanged: "
                                  "{error}").format(error=exc), Qgis.Critical)
            return False
        self.accept()
        return True


def _ratio_text(value: float) -> str:
    return f"{value:g} times" if value >= 1 else f"1/{1 / value:g}"


def _number_item(value: float | None) -> QTableWidgetItem:
    item = QTableWidgetItem("" if value is None else f"{value:.3f}")
    item.setTextAlignment(int(Qt.AlignRight | Qt.AlignVCenter))
    if value is not None:
        item.setData(Qt.UserRole, float(value))
    return item
