"""The editor of the selected node: its name, weight and rationale, then what its kind needs.

Every node has a rationale box (typing in it is one undo step); the model's
root shows the model's name, description and grid; a combining node its
operator; a leaf its layer and membership function with the plot. The
editor shows the controller's tree and sends every edit to the controller;
it is refreshed after each change without losing what is being typed.
"""

from __future__ import annotations

from qgis.core import Qgis
from qgis.PyQt.QtCore import pyqtSignal
from qgis.PyQt.QtWidgets import QFormLayout, QLabel, QLineEdit, QPlainTextEdit, QVBoxLayout, QWidget

from ..core.errors import ParameterError
from ..core.tree import PATH_SEPARATOR
from .common import RUST, notify, tr
from .group_fields import GroupFields, ModelFields
from .membership_panel import MembershipPanel
from .proxy_fields import ProxyFields
from .widgets import NumberBox


class NodeEditor(QWidget):
    """Fields of one node; ``layer_chosen(path, layer)`` when a layer is picked for a leaf."""

    layer_chosen = pyqtSignal(str, object)

    def __init__(self, controller, samples, iface=None, parent=None) -> None:
        super().__init__(parent)
        self.controller = controller
        self.iface = iface
        self.path = ""
        self._updating = False
        layout = QVBoxLayout(self)
        layout.setContentsMargins(4, 4, 4, 4)
        self.problem_label = QLabel()
        self.problem_label.setWordWrap(True)
        self.problem_label.setStyleSheet(f"color: {RUST.name()};")
        layout.addWidget(self.problem_label)
        form = QFormLayout()
        self.name_edit = QLineEdit()
        self.weight_box = NumberBox(0.0, 1e9)
        self.weight_box.setToolTip(tr("Counts when the node above takes a weighted mean."))
        self.weight_label = QLabel(tr("Weight"))
        self.rationale_edit = QPlainTextEdit()
        self.rationale_edit.setFixedHeight(84)
        form.addRow(tr("Name"), self.name_edit)
        form.addRow(self.weight_label, self.weight_box)
        form.addRow(tr("Rationale"), self.rationale_edit)
        layout.addLayout(form)
        self.model_fields = ModelFields(controller, iface)
        self.group_fields = GroupFields(controller)
        self.proxy_fields = ProxyFields(controller, iface)
        self.membership_panel = MembershipPanel(controller, samples)
        for widget in (self.model_fields, self.group_fields, self.proxy_fields, self.membership_panel):
            layout.addWidget(widget)
        layout.addStretch(1)
        self.name_edit.editingFinished.connect(self._name_edited)
        self.weight_box.valueChanged.connect(self._weight_edited)
        self.rationale_edit.textChanged.connect(self._rationale_edited)
        self.proxy_fields.layer_chosen.connect(lambda layer: self.layer_chosen.emit(self.path, layer))

    def show_node(self, tree, path: str, problems: list) -> None:
        """Show the node at ``path`` of ``tree`` with its problems (nothing when path is '')."""
        self._updating = True
        try:
            self.path = path
            node = tree.find(path) if tree is not None and path else None
            self.setEnabled(node is not None)
            if node is None:
                for widget in (self.model_fields, self.group_fields, self.proxy_fields,
                               self.membership_panel):
                    widget.setVisible(False)
                self.problem_label.setText(tr("Select a node of the tree to edit it."))
                return
            is_root = path == tree.root.name
            self.problem_label.setText("\n".join(
                ("✖ " if p.level == "error" else "⚠ ") + p.message for p in problems))
            self.problem_label.setVisible(bool(problems))
            if self.name_edit.text() != node.name:
                self.name_edit.setText(node.name)
            self.weight_box.set_quietly(float(node.weight) if isinstance(node.weight, (int, float)) else 1.0)
            self.weight_box.setVisible(not is_root)
            self.weight_label.setVisible(not is_root)
            if self.rationale_edit.toPlainText() != node.rationale:
                self.rationale_edit.setPlainText(node.rationale)
            self.rationale_edit.setPlaceholderText(_rationale_hint(node, is_root))
            self.model_fields.setVisible(is_root)
            if is_root:
                self.model_fields.show_tree(tree)
            combining = not node.is_leaf
            self.group_fields.setVisible(combining)
            if combining:
                self.group_fields.show_node(path, node)
            self.proxy_fields.setVisible(node.is_leaf)
            self.membership_panel.setVisible(node.is_leaf)
            if node.is_leaf:
                self.proxy_fields.show_node(tree, path, node)
                self.membership_panel.show_node(tree, path, node)
        finally:
            self._updating = False

    def _name_edited(self) -> None:
        if self._updating or not self.path or self.controller.tree is None:
            return
        name = self.name_edit.text().strip()
        if name == self.path.rpartition(PATH_SEPARATOR)[2]:
            return
        try:
            self.controller.rename(self.path, name)
        except ParameterError as exc:
            notify(self.iface, str(exc), Qgis.Warning)
            self.name_edit.setText(self.path.rpartition(PATH_SEPARATOR)[2])

    def _weight_edited(self, value: float) -> None:
        if not self._updating and self.path and self.controller.tree is not None:
            self.controller.set_weight(self.path, value)

    def _rationale_edited(self) -> None:
        if not self._updating and self.path and self.controller.tree is not None:
            self.controller.set_rationale(self.path, self.rationale_edit.toPlainText())


def _rationale_hint(node, is_root: bool) -> str:
    """Return what the rationale box asks for: of the model's root, a component or a criterion."""
    if is_root:
        return tr("Why the components are combined this way.")
    if node.component:
        return tr("Why this process matters for the deposits sought: a summary of the argument for "
                  "its criteria.")
    return tr("Why this matters: the argument for the criterion, and for its scores.")
