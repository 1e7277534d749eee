"""The layer a criterion is scored from: which project layer, which band, what to measure.

A vector layer can also keep only some of its features — a field and the
values ticked in a list read from the layer in the background
(:mod:`.feature_filter`) — and, for distances, count features up to a margin
outside the grid.
"""

from __future__ import annotations

from qgis.core import Qgis, QgsMapLayerProxyModel
from qgis.gui import QgsMapLayerComboBox
from qgis.PyQt.QtCore import Qt, pyqtSignal
from qgis.PyQt.QtWidgets import (
    QComboBox,
    QFormLayout,
    QGroupBox,
    QLabel,
    QListWidget,
    QListWidgetItem,
    QSpinBox,
)

from .common import notify, tr
from .feature_filter import choice_service
from .layers import UnusableLayerError, layer_for_proxy, numeric_fields, proxy_from_layer, raster_bands
from .output_folders import display_path
from .widgets import NumberBox

MEASURES = (("distance", "Distance to the features"), ("attribute", "A numeric field of the features"))


def proxy_filters():
    """Return the layer-combo filter for rasters and vector layers with geometry."""
    try:
        return Qgis.LayerFilter.RasterLayer | Qgis.LayerFilter.HasGeometry
    except AttributeError:
        return QgsMapLayerProxyModel.RasterLayer | QgsMapLayerProxyModel.HasGeometry


class ProxyFields(QGroupBox):
    """Layer, band or measure of a leaf; ``layer_chosen(layer)`` when the user picks a project layer."""

    layer_chosen = pyqtSignal(object)

    def __init__(self, controller, iface=None, parent=None) -> None:
        super().__init__(tr("Layer"), parent)
        self.controller = controller
        self.iface = iface
        self.path = ""
        self._updating = False
        form = QFormLayout(self)
        self.layer_box = QgsMapLayerComboBox()
        self.layer_box.setFilters(proxy_filters())
        self.layer_box.setAllowEmptyLayer(True)
        self.file_label = QLabel()
        self.file_label.setWordWrap(True)
        self.band_box = QSpinBox()
        self.band_box.setRange(1, 9999)
        self.band_label = QLabel(tr("Band"))
        self.measure_box = QComboBox()
        for measure, label in MEASURES:
            self.measure_box.addItem(tr(label), measure)
        self.measure_label = QLabel(tr("Measure"))
        self.field_box = QComboBox()
        self.field_box.setEditable(True)
        self.field_label = QLabel(tr("Field"))
        self.filter_box = QComboBox()
        self.filter_box.setToolTip(tr("Measure only the features whose field holds one of the values "
                                      "ticked below (faults of order 1 or 2, say)."))
        self.filter_label = QLabel(tr("Only features whose"))
        self.values_list = QListWidget()
        self.values_list.setMaximumHeight(120)
        self.values_note = QLabel()
        self.values_note.setWordWrap(True)
        self.margin_box = NumberBox(0.0, 1e12)
        self.margin_box.setToolTip(tr("Features up to this far outside the grid (map units of the grid) "
                                      "still count in the distances inside it; 0 counts only features "
                                      "on the grid."))
        self.margin_label = QLabel(tr("Margin outside the grid"))
        form.addRow(tr("Project layer"), self.layer_box)
        form.addRow(tr("File"), self.file_label)
        form.addRow(self.band_label, self.band_box)
        form.addRow(self.measure_label, self.measure_box)
        form.addRow(self.field_label, self.field_box)
        form.addRow(self.filter_label, self.filter_box)
        form.addRow("", self.values_list)
        form.addRow("", self.values_note)
        form.addRow(self.margin_label, self.margin_box)
        #: The values of the field shown, in the list's order (the list's items show them as text).
        self.values: list = []
        self.choices = choice_service(self)
        self.choices.ready.connect(self._choices_arrived)
        self.choices.failed.connect(self._choices_arrived)
        self._choice_key = None
        # Only what the user picks: the box also changes when a layer leaves the project.
        self.layer_box.activated.connect(lambda _index: self._layer_chosen(self.layer_box.currentLayer()))
        self.band_box.valueChanged.connect(self._band_chosen)
        self.measure_box.activated.connect(lambda _i: self._measure_chosen())
        self.field_box.activated.connect(lambda _i: self._measure_chosen())
        self.filter_box.activated.connect(lambda _i: self._filter_field_chosen())
        self.values_list.itemChanged.connect(lambda _item: self._values_ticked())
        self.margin_box.valueChanged.connect(self._margin_chosen)

    def show_node(self, tree, path: str, node) -> None:
        """Show the leaf's proxy (or that it has none yet)."""
        self._updating = True
        try:
            self.path = path
            proxy = node.proxy
            layer = layer_for_proxy(proxy, tree)
            self.layer_box.setLayer(layer)
            self.file_label.setText(display_path(str(proxy.resolve(tree.base_dir))) if proxy else
                                    tr("Pick a layer here, or drag one from the layers panel onto "
                                       "the criterion."))
            raster = proxy is not None and not proxy.is_vector
            vector = proxy is not None and proxy.is_vector
            bands = raster_bands(layer)
            self.band_box.setMaximum(max(1, len(bands)) if bands else 9999)
            if raster:
                self.band_box.setValue(proxy.band or 1)
                self.band_box.setToolTip(bands[(proxy.band or 1) - 1] if 0 < (proxy.band or 1) <= len(bands)
                                         else "")
            for widget in (self.band_box, self.band_label):
                widget.setVisible(raster)
            for widget in (self.measure_box, self.measure_label):
                widget.setVisible(vector)
            attribute = vector and proxy.measure == "attribute"
            for widget in (self.field_box, self.field_label):
                widget.setVisible(attribute)
            if vector:
                self.measure_box.setCurrentIndex(max(0, self.measure_box.findData(proxy.measure)))
                fields = numeric_fields(layer)
                self.field_box.clear()
                self.field_box.addItems(fields)
                self.field_box.setCurrentText(proxy.field or (fields[0] if fields else ""))
            self._show_filter(tree, proxy if vector else None)
            distance = vector and proxy.measure == "distance"
            for widget in (self.margin_box, self.margin_label):
                widget.setVisible(distance)
            if distance:
                margin = proxy.margin
                self.margin_box.set_quietly(float(margin) if isinstance(margin, (int, float))
                                            and not isinstance(margin, bool) and margin >= 0 else 0.0)
        finally:
            self._updating = False

    # -- the filter of features ---------------------------------------------------------------

    def _filter_of(self, proxy) -> tuple[str | None, list]:
        """Return the field and values of a proxy's filter, (None, []) for none or a damaged one."""
        where = proxy.where if proxy is not None else None
        if not isinstance(where, dict) or not isinstance(where.get("field"), str):
            return None, []
        values = where.get("values")
        return where["field"], list(values) if isinstance(values, list) else []

    def _show_filter(self, tree, proxy) -> None:
        """Show the filter's field and the field's values, ticked where the filter keeps them."""
        for widget in (self.filter_box, self.filter_label, self.values_list, self.values_note):
            widget.setVisible(proxy is not None)
        if proxy is None:
            self._choice_key = None
            return
        field, kept = self._filter_of(proxy)
        file = str(proxy.resolve(tree.base_dir))
        self._choice_key = (file, proxy.layer, field)
        choices = self.choices.request(file, proxy.layer, field)
        fields = list(choices.fields) if choices is not None else []
        if field and field not in fields:
            fields.append(field)
        self.filter_box.blockSignals(True)
        self.filter_box.clear()
        self.filter_box.addItem(tr("(every feature counts)"), None)
        for name in fields:
            self.filter_box.addItem(name, name)
        self.filter_box.setCurrentIndex(max(0, self.filter_box.findData(field)) if field else 0)
        self.filter_box.blockSignals(False)
        listed = list(choices.values) if choices is not None and field else []
        listed += [value for value in kept if value not in listed]
        self.values = listed
        self.values_list.blockSignals(True)
        self.values_list.clear()
        for value in listed:
            item = QListWidgetItem(_value_text(value))
            item.setFlags(item.flags() | Qt.ItemIsUserCheckable)
            item.setCheckState(Qt.Checked if value in kept else Qt.Unchecked)
            self.values_list.addItem(item)
        self.values_list.blockSignals(False)
        self.values_list.setVisible(bool(field))
        self.values_note.setText(self._values_note(field, choices))
        self.values_note.setVisible(bool(self.values_note.text()))

    def _values_note(self, field, choices) -> str:
        if not field:
            return ""
        error = self.choices.error(self._choice_key)
        if error:
            return tr("The values cannot be read: {error}").format(error=error)
        if choices is None:
            return tr("Reading the values of {field}…").format(field=field)
        if not choices.complete:
            return tr("The first {n} values found are listed.").format(n=len(choices.values))
        return ""

    def _choices_arrived(self, key, *args) -> None:
        if key != self._choice_key or not self.path or self.controller.tree is None:
            return
        try:
            node = self.controller.tree.find(self.path)
        except KeyError:
            return
        if node.proxy is not None and node.proxy.is_vector:
            self._updating = True
            try:
                self._show_filter(self.controller.tree, node.proxy)
            finally:
                self._updating = False

    def _filter_field_chosen(self) -> None:
        if self._updating or not self.path or self.controller.tree is None:
            return
        field = self.filter_box.currentData()
        try:
            node = self.controller.tree.find(self.path)
        except KeyError:
            return
        if node.proxy is None or field == self._filter_of(node.proxy)[0]:
            return
        # A new field starts with no value ticked: the node is marked until one is.
        self.controller.set_filter(self.path, {"field": field, "values": []} if field else None)

    def _values_ticked(self) -> None:
        if self._updating or not self.path or self.controller.tree is None:
            return
        field = self.filter_box.currentData()
        if not field:
            return
        ticked = [value for i, value in enumerate(self.values)
                  if self.values_list.item(i).checkState() == Qt.Checked]
        self.controller.set_filter(self.path, {"field": field, "values": ticked})

    def _margin_chosen(self, value: float) -> None:
        if not self._updating and self.path and self.controller.tree is not None:
            self.controller.set_margin(self.path, value)

    def _layer_chosen(self, layer) -> None:
        if self._updating or layer is None or not self.path or self.controller.tree is None:
            return
        try:
            proxy_from_layer(layer)
        except UnusableLayerError as exc:
            notify(self.iface, str(exc), Qgis.Warning)
            return
        self.layer_chosen.emit(layer)

    def _band_chosen(self, band: int) -> None:
        if not self._updating and self.path and self.controller.tree is not None:
            self.controller.set_band(self.path, band)

    def _measure_chosen(self) -> None:
        if self._updating or not self.path or self.controller.tree is None:
            return
        measure = self.measure_box.currentData()
        field = self.field_box.currentText() or None
        if measure == "attribute" and not field:
            fields = [self.field_box.itemText(i) for i in range(self.field_box.count())]
            field = fields[0] if fields else None
        self.controller.set_measure(self.path, measure, field)


def _value_text(value) -> str:
    """Return a field value as the list shows it: numbers tidy, text as it is."""
    if isinstance(value, float):
        return f"{value:.10g}"
    return str(value)
