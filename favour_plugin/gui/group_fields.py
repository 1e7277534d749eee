"""The fields of a combining node (component, operator, γ, nodata rule) and of the model.

The model's fields are its name, its description (what the model is for and
the mineral system it stands for, kept in the tree file and the project) and
the grid every layer is aligned to.
"""

from __future__ import annotations

import os

from qgis.core import Qgis, QgsMapLayerProxyModel
from qgis.gui import QgsMapLayerComboBox
from qgis.PyQt.QtWidgets import (
    QCheckBox,
    QComboBox,
    QFormLayout,
    QGroupBox,
    QLabel,
    QLineEdit,
    QPlainTextEdit,
)

from ..core.tree import COMPONENTS, Proxy, Tree
from .common import notify, tr
from .layers import UnusableLayerError, layer_for_proxy, proxy_from_layer
from .widgets import NumberBox

#: (operator type, label) in the order the box lists them.
OPERATORS = (("and", "Fuzzy AND (weakest child)"), ("or", "Fuzzy OR (strongest child)"),
             ("product", "Product"), ("sum", "Algebraic sum"), ("gamma", "Gamma (between product and sum)"),
             ("weighted_mean", "Weighted mean"))
NODATA = (("propagate", "No data if any child has none"), ("ignore", "Use the children that have data"))


def raster_filter():
    """Return the layer-combo filter for raster layers (enum moved in newer QGIS)."""
    try:
        return Qgis.LayerFilter.RasterLayer
    except AttributeError:
        return QgsMapLayerProxyModel.RasterLayer


class GroupFields(QGroupBox):
    """How a node combines its children; edits go straight to the controller."""

    def __init__(self, controller, parent=None) -> None:
        super().__init__(tr("Combining"), parent)
        self.controller = controller
        self.path = ""
        self._updating = False
        form = QFormLayout(self)
        self.component_box = QComboBox()
        self.component_box.addItem(tr("(not a component)"), None)
        for kind in COMPONENTS:
            self.component_box.addItem(tr(kind.capitalize()), kind)
        self.operator_box = QComboBox()
        for kind, label in OPERATORS:
            self.operator_box.addItem(tr(label), kind)
        self.gamma_box = NumberBox(0.0, 1.0)
        self.gamma_box.setSingleStep(0.05)
        self.gamma_label = QLabel(tr("γ"))
        self.nodata_box = QComboBox()
        for rule, label in NODATA:
            self.nodata_box.addItem(tr(label), rule)
        self.save_box = QCheckBox(tr("Write this node's raster with the component rasters"))
        form.addRow(tr("Component"), self.component_box)
        form.addRow(tr("Operator"), self.operator_box)
        form.addRow(self.gamma_label, self.gamma_box)
        form.addRow(tr("Missing data"), self.nodata_box)
        form.addRow(self.save_box)
        self.component_box.activated.connect(
            lambda i: self._do(self.controller.set_component, self.component_box.itemData(i)))
        self.operator_box.activated.connect(
            lambda i: self._do(self.controller.set_operator_type, self.operator_box.itemData(i)))
        self.gamma_box.valueChanged.connect(lambda v: self._do(self.controller.set_gamma, v))
        self.nodata_box.activated.connect(
            lambda i: self._do(self.controller.set_nodata, self.nodata_box.itemData(i)))
        self.save_box.toggled.connect(lambda on: self._do(self.controller.set_save_output, on))

    def _do(self, method, value) -> None:
        if not self._updating and self.path and self.controller.tree is not None:
            method(self.path, value)

    def show_node(self, path: str, node) -> None:
        """Show a combining node's fields."""
        self._updating = True
        try:
            self.path = path
            spec = node.operator or {}
            self.component_box.setCurrentIndex(max(0, self.component_box.findData(node.component)))
            self.operator_box.setCurrentIndex(max(0, self.operator_box.findData(spec.get("type"))))
            gamma = spec.get("type") == "gamma"
            self.gamma_box.setVisible(gamma)
            self.gamma_label.setVisible(gamma)
            if gamma and isinstance(spec.get("gamma"), (int, float)):
                self.gamma_box.set_quietly(float(spec["gamma"]))
            self.nodata_box.setCurrentIndex(max(0, self.nodata_box.findData(spec.get("nodata",
                                                                                      "propagate"))))
            self.save_box.setChecked(bool(node.save_output))
            self.save_box.setVisible(node.component is None)
        finally:
            self._updating = False


class ModelFields(QGroupBox):
    """The model's name, its description and the grid every layer is aligned to."""

    def __init__(self, controller, iface=None, parent=None) -> None:
        super().__init__(tr("Model"), parent)
        self.controller = controller
        self.iface = iface
        self._updating = False
        form = QFormLayout(self)
        self.name_edit = QLineEdit()
        self.name_edit.setPlaceholderText(tr("A name for the model"))
        self.description_edit = QPlainTextEdit()
        self.description_edit.setPlaceholderText(tr("What the model is for: the deposit type, the "
                                                    "mineral system it stands for, its sources."))
        self.description_edit.setFixedHeight(84)
        self.grid_box = QgsMapLayerComboBox()
        self.grid_box.setFilters(raster_filter())
        self.grid_box.setAllowEmptyLayer(True)
        self.grid_box.setToolTip(tr("Every layer is aligned to this raster's cells; left empty, the "
                                    "first raster criterion gives the grid."))
        self.grid_label = QLabel()
        self.grid_label.setWordWrap(True)
        form.addRow(tr("Name"), self.name_edit)
        form.addRow(tr("Description"), self.description_edit)
        form.addRow(tr("Grid from"), self.grid_box)
        form.addRow("", self.grid_label)
        self.name_edit.editingFinished.connect(self._name_edited)
        self.description_edit.textChanged.connect(self._description_edited)
        # Only what the user picks: the box also changes when a layer leaves the project.
        self.grid_box.activated.connect(lambda _index: self._grid_chosen(self.grid_box.currentLayer()))

    def show_tree(self, tree: Tree) -> None:
        """Show the model's fields."""
        self._updating = True
        try:
            if self.name_edit.text() != tree.name:
                self.name_edit.setText(tree.name)
            if self.description_edit.toPlainText() != tree.description:
                self.description_edit.setPlainText(tree.description)
            reference = (tree.grid or {}).get("reference")
            layer = None
            if reference:
                layer = layer_for_proxy(Proxy(path=reference), tree)
                self.grid_label.setText(os.path.basename(str(tree.resolve(reference))))
            else:
                self.grid_label.setText(tr("the first raster criterion") if not tree.grid
                                        else tr("the grid written in the tree file"))
            self.grid_box.setLayer(layer)
        finally:
            self._updating = False

    def _name_edited(self) -> None:
        if not self._updating and self.controller.tree is not None and \
                self.name_edit.text() != self.controller.tree.name:
            self.controller.set_tree_name(self.name_edit.text())

    def _description_edited(self) -> None:
        if not self._updating and self.controller.tree is not None and \
                self.description_edit.toPlainText() != self.controller.tree.description:
            self.controller.set_description(self.description_edit.toPlainText())

    def _grid_chosen(self, layer) -> None:
        if self._updating or self.controller.tree is None:
            return
        if layer is None:
            self.controller.set_grid_reference(None)
            return
        try:
            self.controller.set_grid_reference(proxy_from_layer(layer).path)
        except UnusableLayerError as exc:
            notify(self.iface, str(exc), Qgis.Warning)
