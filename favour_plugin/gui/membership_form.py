"""The membership function of a criterion: its type and parameters, as a form.

The form shows one page per kind of function: numbered parameters, a table
of points, or a class → score table that lists every class of the layer with
its cells — counted over the whole raster where it can be
(:mod:`favour_plugin.raster.classes`), else found in the sampled values —
beside the classes already scored. It reports edits as whole specifications
(the tree-file form); the controller validates nothing here, the tree's
problems say what is wrong.
"""

from __future__ import annotations

import copy

from qgis.PyQt.QtCore import Qt, pyqtSignal
from qgis.PyQt.QtWidgets import (
    QCheckBox,
    QComboBox,
    QFormLayout,
    QHBoxLayout,
    QHeaderView,
    QLabel,
    QPushButton,
    QStackedWidget,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

from .common import tr
from .defaults import code_key
from .widgets import NumberBox

#: (type, label) in the order the type box lists them.
TYPES = (("linear", "Linear ramp"), ("logistic", "Logistic (S-curve)"), ("gaussian", "Gaussian (bell)"),
         ("trapezoid", "Trapezoid"), ("piecewise", "Points joined by lines"),
         ("categories", "Class scores"), ("weights", "Class weights of evidence"),
         ("identity", "Layer already holds μ"))

#: Types scored class by class (a table filled from the layer's classes).
CLASS_TYPES = ("categories", "weights")

#: Numbered parameters per type: (key, label) in form order.
PARAMETERS = {
    "linear": (("lower", "μ = 0 at"), ("upper", "μ = 1 at")),
    "logistic": (("midpoint", "μ = 0.5 at"), ("slope", "Slope (per unit)")),
    "gaussian": (("centre", "μ = 1 at"), ("spread", "Spread")),
    "trapezoid": (("a", "Rises from"), ("b", "μ = 1 from"), ("c", "μ = 1 to"), ("d", "Falls to 0 at")),
}


class _NumbersPage(QWidget):
    """Numbered parameters of one function type."""

    edited = pyqtSignal(str)

    def __init__(self, kind: str, parent=None) -> None:
        super().__init__(parent)
        self.kind = kind
        layout = QFormLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        self.boxes: dict[str, NumberBox] = {}
        for key, label in PARAMETERS[kind]:
            box = NumberBox()
            box.valueChanged.connect(lambda _value, key=key: self.edited.emit(key))
            layout.addRow(tr(label), box)
            self.boxes[key] = box

    def show_spec(self, spec: dict) -> None:
        """Show the parameters of ``spec``."""
        values = dict(zip("abcd", spec.get("points", []))) if self.kind == "trapezoid" else spec
        for key, box in self.boxes.items():
            value = values.get(key)
            if isinstance(value, (int, float)):
                box.set_quietly(float(value))

    def spec(self, old: dict) -> dict:
        """Return ``old`` with this page's numbers."""
        values = {key: _tidy(box.value()) for key, box in self.boxes.items()}
        if self.kind == "trapezoid":
            return {**old, "type": "trapezoid", "points": [values[k] for k in "abcd"]}
        return {**old, "type": self.kind, **values}


def _tidy(value: float):
    """Return a float as an int when it is whole, so files read ``500`` rather than ``500.0``."""
    return int(value) if float(value).is_integer() and abs(value) < 2**53 else float(value)


class _PointsPage(QWidget):
    """A table of (x, μ) points joined by straight lines."""

    edited = pyqtSignal(str)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        self.table = QTableWidget(0, 2)
        self.table.setHorizontalHeaderLabels([tr("Value"), tr("μ")])
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.Stretch)
        self.table.verticalHeader().setVisible(False)
        self.table.setMaximumHeight(150)
        self.table.itemChanged.connect(lambda _item: self.edited.emit("points"))
        layout.addWidget(self.table)
        buttons = QHBoxLayout()
        self.add_button = QPushButton(tr("Add point"))
        self.remove_button = QPushButton(tr("Remove point"))
        self.add_button.clicked.connect(self._add_point)
        self.remove_button.clicked.connect(self._remove_point)
        buttons.addWidget(self.add_button)
        buttons.addWidget(self.remove_button)
        buttons.addStretch(1)
        layout.addLayout(buttons)

    def show_spec(self, spec: dict) -> None:
        """Show the points of ``spec``."""
        points = [p for p in spec.get("points", []) if isinstance(p, list) and len(p) == 2]
        if [self._row(i) for i in range(self.table.rowCount())] == points:
            return
        self.table.blockSignals(True)
        self.table.setRowCount(len(points))
        for i, (x, mu) in enumerate(points):
            self.table.setItem(i, 0, QTableWidgetItem(f"{x:.8g}"))
            self.table.setItem(i, 1, QTableWidgetItem(f"{mu:.8g}"))
        self.table.blockSignals(False)

    def _row(self, i: int):
        try:
            return [_tidy(float(self.table.item(i, 0).text())), _tidy(float(self.table.item(i, 1).text()))]
        except (AttributeError, ValueError):
            return None

    def spec(self, old: dict) -> dict:
        """Return the points as a piecewise membership (rows that are not two numbers are left out)."""
        points = [row for row in (self._row(i) for i in range(self.table.rowCount())) if row is not None]
        return {**old, "type": "piecewise", "points": points}

    def _add_point(self) -> None:
        rows = [r for r in (self._row(i) for i in range(self.table.rowCount())) if r]
        x = rows[-1][0] + 1 if rows else 0
        self.table.blockSignals(True)
        row = self.table.rowCount()
        self.table.insertRow(row)
        self.table.setItem(row, 0, QTableWidgetItem(f"{x:.8g}"))
        self.table.setItem(row, 1, QTableWidgetItem(f"{rows[-1][1] if rows else 0:.8g}"))
        self.table.blockSignals(False)
        self.edited.emit("points-rows")

    def _remove_point(self) -> None:
        row = self.table.currentRow()
        if row < 0:
            row = self.table.rowCount() - 1
        if row >= 0:
            self.table.removeRow(row)
            self.edited.emit("points-rows")


class _ClassesPage(QWidget):
    """A class code → value table: the classes scored and every class found in the layer.

    ``kind`` "categories" holds each class's score μ; "weights" each class's
    weight of evidence W (μ = 1 / (1 + exp(−W)), from an analogue district).
    A class of the layer not scored yet has an empty value: it takes the
    score of the other classes until one is typed.
    """

    edited = pyqtSignal(str)
    fill_requested = pyqtSignal()

    def __init__(self, kind: str = "categories", parent=None) -> None:
        super().__init__(parent)
        self.kind = kind
        self.key = "scores" if kind == "categories" else "weights"
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        self.table = QTableWidget(0, 3)
        self.value_header = tr("Score μ") if kind == "categories" else tr("Weight W")
        self.table.setHorizontalHeaderLabels([tr("Class"), tr("Cells sampled"), self.value_header])
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.Stretch)
        self.table.verticalHeader().setVisible(False)
        self.table.verticalHeader().setDefaultSectionSize(22)
        self.table.setMaximumHeight(170)
        self.table.itemChanged.connect(lambda _item: self.edited.emit(self.key))
        layout.addWidget(self.table)
        self.count_note = QLabel()
        self.count_note.setWordWrap(True)
        layout.addWidget(self.count_note)
        row = QHBoxLayout()
        self.fill_button = QPushButton(tr("Score the layer's classes"))
        self.fill_button.setToolTip(tr("Give every class of the layer not scored yet a starting value; "
                                       "classes already scored keep their value."))
        self.fill_button.clicked.connect(self.fill_requested)
        row.addWidget(self.fill_button)
        row.addStretch(1)
        layout.addLayout(row)
        other = QHBoxLayout()
        self.nodata_box = QCheckBox(tr("Other classes are no data"))
        self.default_box = NumberBox(0.0, 1.0)
        self.default_box.setSingleStep(0.05)
        other.addWidget(self.nodata_box)
        other.addWidget(QLabel(tr("or score")))
        other.addWidget(self.default_box)
        layout.addLayout(other)
        self.nodata_box.toggled.connect(lambda _on: self.edited.emit("default-nodata"))
        self.default_box.valueChanged.connect(lambda _v: self.edited.emit("default"))
        self.counts: dict = {}

    def show_spec(self, spec: dict, counts: dict | None = None, note: str = "", whole: bool = False) -> None:
        """Show the scores of ``spec`` and a row for every class in ``counts`` (class → cells).

        ``whole`` says the counts cover every cell of the layer (else a
        sample); ``note`` says where they come from, under the table.
        """
        self.counts = dict(counts or {})
        scores = dict(spec.get(self.key) or {})
        scored = {_code_value(code) for code in scores}
        for code in self.counts:
            if code not in scored:
                scores[code_key(code)] = None
        rows = sorted(scores.items(), key=lambda kv: code_order(kv[0]))
        self.table.setHorizontalHeaderLabels([tr("Class"), tr("Cells") if whole else tr("Cells sampled"),
                                              self.value_header])
        self.count_note.setText(note)
        self.count_note.setVisible(bool(note))
        self.table.blockSignals(True)
        self.table.setRowCount(len(rows))
        for i, (code, score) in enumerate(rows):
            self.table.setItem(i, 0, QTableWidgetItem(str(code)))
            count = self.counts.get(_code_value(code))
            count_item = QTableWidgetItem("" if count is None else str(count))
            count_item.setFlags(count_item.flags() & ~Qt.ItemIsEditable)
            self.table.setItem(i, 1, count_item)
            value_item = QTableWidgetItem(f"{score:.8g}" if isinstance(score, (int, float)) else "")
            if score is None:
                value_item.setToolTip(tr("Not scored yet: the class takes the score of the other classes "
                                         "until one is typed here."))
            self.table.setItem(i, 2, value_item)
        self.table.blockSignals(False)
        default = spec.get("default")
        self.nodata_box.blockSignals(True)
        self.nodata_box.setChecked(default is None)
        self.nodata_box.blockSignals(False)
        self.default_box.setEnabled(default is not None)
        if isinstance(default, (int, float)):
            self.default_box.set_quietly(float(default))

    def spec(self, old: dict) -> dict:
        """Return the table as this page's membership (rows without a number are left out)."""
        scores = {}
        for i in range(self.table.rowCount()):
            code, score = self.table.item(i, 0), self.table.item(i, 2)
            try:
                scores[code_key(float(code.text()))] = _tidy(float(score.text()))
            except (AttributeError, ValueError):
                continue
        default = None if self.nodata_box.isChecked() else _tidy(self.default_box.value())
        return {**old, "type": self.kind, self.key: scores, "default": default}


def _code_value(code) -> float | None:
    try:
        return float(code)
    except (TypeError, ValueError):
        return None


def code_order(code) -> tuple:
    """Sort key for class codes: numbers in numeric order, then anything else."""
    value = _code_value(code)
    return (0, value, "") if value is not None else (1, 0.0, str(code))


class MembershipForm(QWidget):
    """Type and parameters of a membership function.

    Signals
    -------
    edited(dict, str)
        The whole new specification and a key naming the field edited
        (edits of one field in a row merge into one undo step).
    type_chosen(str)
        The user picked another function type (the dock fills in parameters).
    fit_requested()
        Set the parameters from the range of the sampled values.
    fill_requested()
        List the layer's classes in the class table.
    """

    edited = pyqtSignal(dict, str)
    type_chosen = pyqtSignal(str)
    fit_requested = pyqtSignal()
    fill_requested = pyqtSignal()

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.spec: dict = {}
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        top = QHBoxLayout()
        self.type_box = QComboBox()
        for kind, label in TYPES:
            self.type_box.addItem(tr(label), kind)
        self.type_box.activated.connect(self._type_activated)
        self.fit_button = QPushButton(tr("Fit to data"))
        self.fit_button.setToolTip(tr("Set the parameters from the 2nd to 98th percentile of the "
                                      "sampled values, keeping the direction."))
        self.fit_button.clicked.connect(self.fit_requested)
        top.addWidget(QLabel(tr("Function")))
        top.addWidget(self.type_box, 1)
        top.addWidget(self.fit_button)
        layout.addLayout(top)
        self.pages = QStackedWidget()
        self._page_of: dict[str, QWidget] = {}
        for kind in PARAMETERS:
            self._add_page(kind, _NumbersPage(kind))
        self._add_page("piecewise", _PointsPage())
        for kind in ("categories", "weights"):
            classes = _ClassesPage(kind)
            classes.fill_requested.connect(self.fill_requested)
            self._add_page(kind, classes)
        note = QLabel(tr("The layer's values are used as μ as they are; they must lie in [0, 1]."))
        note.setWordWrap(True)
        self._add_page("identity", note)
        layout.addWidget(self.pages)

    def insert_below_type(self, widget: QWidget) -> None:
        """Place ``widget`` (the plot) between the type row and the parameters."""
        self.layout().insertWidget(1, widget)

    def _add_page(self, kind: str, page: QWidget) -> None:
        self._page_of[kind] = page
        self.pages.addWidget(page)
        if hasattr(page, "edited"):
            page.edited.connect(lambda key, kind=kind: self._page_edited(kind, key))

    def show_spec(self, spec: dict | None, class_counts: dict | None = None, count_note: str = "",
                  whole: bool = False) -> None:
        """Show a membership specification (None: a linear ramp still to be set).

        ``class_counts`` (class → cells), ``count_note`` and ``whole`` go to the
        class table (see :meth:`_ClassesPage.show_spec`).
        """
        self.spec = copy.deepcopy(spec) if spec else {}
        kind = self.spec.get("type", "linear")
        index = self.type_box.findData(kind)
        self.type_box.setCurrentIndex(max(0, index))
        page = self._page_of.get(kind)
        if page is None:
            return
        self.pages.setCurrentWidget(page)
        if kind in CLASS_TYPES:
            page.show_spec(self.spec, class_counts, count_note, whole)
        elif hasattr(page, "show_spec"):
            page.show_spec(self.spec)
        self.fit_button.setEnabled(kind not in (*CLASS_TYPES, "identity"))

    def _type_activated(self, index: int) -> None:
        kind = self.type_box.itemData(index)
        if kind != self.spec.get("type"):
            self.type_chosen.emit(kind)

    def _page_edited(self, kind: str, key: str) -> None:
        page = self._page_of[kind]
        spec = page.spec(self.spec)
        self.spec = spec
        self.edited.emit(spec, key)
