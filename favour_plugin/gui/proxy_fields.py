"""The layer a criterion is scored from: which project layer, which band, what to measure."""

from __future__ import annotations

from qgis.core import Qgis, QgsMapLayerProxyModel
from qgis.gui import QgsMapLayerComboBox
from qgis.PyQt.QtCore import pyqtSignal
from qgis.PyQt.QtWidgets import QComboBox, QFormLayout, QGroupBox, QLabel, QSpinBox

from .common import notify, tr
from .layers import UnusableLayerError, layer_for_proxy, numeric_fields, proxy_from_layer, raster_bands
from .output_folders import display_path

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
        form.addRow(tr("Project layer"), self.layer_box)
        form.addRow(tr("File"), self.file_label)
        form.addRow(self.band_label, self.band_box)
        form.addRow(self.measure_label, self.measure_box)
        form.addRow(self.field_label, self.field_box)
        # Only what the user picks: the box also changes when a layer leaves the project.
        self.layer_box.activated.connect(lambda _index: self._layer_chosen(self.layer_box.currentLayer()))
        self.band_box.valueChanged.connect(self._band_chosen)
        self.measure_box.activated.connect(lambda _i: self._measure_chosen())
        self.field_box.activated.connect(lambda _i: self._measure_chosen())

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
        finally:
            self._updating = False

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
