"""The gaps a user met in the dock: moves, description, filter, margin, the whole class table.

Nodes are dragged to move them; the model's description and each node's
rationale are typed in the dock; a vector criterion keeps only some of its
features and counts features within a margin outside the grid; the class
table lists every class of the whole raster.

Headless QGIS (pytest-qgis) on small layers made here. Outside references:
``numpy.unique`` over the whole class raster (the table's classes and cells);
the tree file written and read back, and QGIS's own project round trip
(``QgsProject.write``/``read``); the values written into the fault layer (the
values offered to tick). Moves are checked by the property that must hold: a
drop is one undo step, and a refused drop leaves the tree exactly as it was.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from osgeo import ogr
from qgis.core import Qgis, QgsApplication, QgsProject, QgsVectorLayer
from qgis.PyQt.QtCore import QMimeData, QPoint, Qt
from qgis.PyQt.QtGui import QDragEnterEvent, QDragMoveEvent, QDropEvent

from favour_plugin.core.errors import ParameterError
from favour_plugin.core.tree import Tree
from favour_plugin.gui.controller import TreeController
from favour_plugin.gui.dock import FavourDock
from favour_plugin.gui.layers import UnusableLayerError, proxy_from_layer
from favour_plugin.gui.project_store import SCOPE, ProjectStore
from favour_plugin.gui.tree_view import NODE_MIME, drop_destination, drop_place
from tests.helpers import ORIGIN, leaf, srs, tree_doc, write_raster, write_tree
from tests.test_dock import idle, messages, wait

ROOT = "Favourability"
LINEAR = {"type": "linear", "lower": 0, "upper": 1}


@pytest.fixture()
def project(qgis_iface):
    """The QGIS project, cleared before and after; the mock message bar emptied."""
    p = QgsProject.instance()
    p.clear()
    bar = qgis_iface.messageBar()
    for level in bar.messages:
        bar.messages[level] = []
    yield p
    p.clear()


@pytest.fixture()
def dock(qgis_iface, project):
    """A dock on a fresh controller, linked to the project; torn down once its tasks are done."""
    controller = TreeController()
    store = ProjectStore(controller, project, qgis_iface)
    widget = FavourDock(controller, qgis_iface, project)
    widget.store = store
    widget.resize(480, 900)
    yield widget
    wait(lambda: idle(widget) and widget.editor.proxy_fields.choices.pending() == 0
         and widget.editor.membership_panel.classes.pending() == 0, 60)
    widget.shutdown()
    store.disconnect_all()
    widget.deleteLater()
    QgsApplication.processEvents()


@pytest.fixture()
def layers(tmp_path) -> Path:
    """A class raster with a rare class, a magnetic raster and faults with an order and a kind."""
    rng = np.random.default_rng(4)
    classes = rng.choice([1, 2, 5], size=(300, 1100), p=[0.5, 0.3, 0.2]).astype(np.uint8)
    classes[10, 10] = classes[290, 1090] = 7  # two cells: a sample of a quarter of the cells may miss them
    write_raster(tmp_path / "litho.tif", classes, nodata=0)
    write_raster(tmp_path / "mag.tif", rng.normal(50, 10, (300, 1100)).astype(np.float32))
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(tmp_path / "faults.gpkg"))
    out = ds.CreateLayer("faults", srs(), ogr.wkbLineString)
    out.CreateField(ogr.FieldDefn("order", ogr.OFTInteger))
    out.CreateField(ogr.FieldDefn("kind", ogr.OFTString))
    x, y = ORIGIN
    for order, kind, wkt in [(1, "major", f"LINESTRING ({x + 2013} {y - 1007}, {x + 9021} {y - 25011})"),
                             (2, "minor", f"LINESTRING ({x + 40017} {y - 3009}, {x + 60007} {y - 20513})"),
                             (3, "minor", f"LINESTRING ({x + 80011} {y - 1003}, {x + 90519} {y - 28007})")]:
        feature = ogr.Feature(out.GetLayerDefn())
        feature.SetGeometry(ogr.CreateGeometryFromWkt(wkt))
        feature.SetField("order", order)
        feature.SetField("kind", kind)
        out.CreateFeature(feature)
    ds = None
    return tmp_path


def small_tree(folder: Path) -> Tree:
    """Root over Source (two leaves: litho classes, magnetics) and Pathway (faults, and a group)."""
    doc = tree_doc([
        {"name": "Source", "component": "source", "operator": {"type": "weighted_mean"}, "children": [
            leaf("Host", "litho.tif", {"type": "categories", "scores": {"1": 0.2, "5": 0.9}, "default": 0.1}),
            leaf("Mag", "mag.tif", {"type": "linear", "lower": 30, "upper": 70})]},
        {"name": "Pathway", "component": "pathway", "operator": {"type": "weighted_mean"}, "children": [
            leaf("Faults", "faults.gpkg", {"type": "linear", "lower": 5000, "upper": 0}, layer="faults",
                 measure="distance"),
            {"name": "Structures", "operator": {"type": "or"}, "children": [
                leaf("Mag", "mag.tif", {"type": "linear", "lower": 40, "upper": 60})]}]},
    ], grid={"reference": "mag.tif"})
    return Tree.from_dict(doc, base_dir=folder)


def opened(dock: FavourDock, folder: Path) -> Tree:
    """Open the small tree from a tree file in ``folder``; return the controller's tree."""
    assert dock.open_tree_file(write_tree(folder / "model.favour.json", small_tree(folder).to_dict()))
    return dock.controller.tree


def names(tree: Tree, path: str) -> list[str]:
    """Return the children's names of the node at ``path``."""
    return [child.name for child in tree.find(path).children]


# -- dragging nodes -----------------------------------------------------------------------------


def test_drop_places_follow_qts_bands_of_a_row():
    """Near the top edge above, near the bottom below, else onto the row (Qt's 5.5th, 2–12 px)."""
    assert [drop_place(100, 22, y) for y in (100, 103, 104, 111, 117, 118, 121)] == \
        ["above", "above", "on", "on", "on", "below", "below"]
    assert drop_place(0, 6, 2) == "on" and drop_place(0, 6, 1) == "above"


def test_drop_destinations_count_siblings_without_the_node_moved(tmp_path):
    """Above, on and below give Tree.move's parent and index, the node itself left out of the count."""
    tree = small_tree(tmp_path)
    source, pathway = f"{ROOT} > Source", f"{ROOT} > Pathway"
    assert drop_destination(tree, f"{source} > Host", f"{source} > Mag", "below") == (source, 1)
    assert drop_destination(tree, f"{source} > Mag", f"{source} > Host", "above") == (source, 0)
    assert drop_destination(tree, f"{source} > Host", pathway, "on") == (pathway, 2)
    assert drop_destination(tree, f"{source} > Host", source, "on") == (source, 1)
    assert drop_destination(tree, f"{source} > Host", f"{pathway} > Faults", "above") == (pathway, 0)
    assert drop_destination(tree, f"{source} > Host", f"{source} > Host", "on") is None
    with pytest.raises(ParameterError, match="beside the root"):
        drop_destination(tree, f"{source} > Host", ROOT, "below")


def _drop(view, mime, path: str, place: str) -> QDropEvent:
    """Drag ``mime`` over the row of ``path`` and drop it there, ``place`` on the row; return the drop."""
    rect = view.visualItemRect(view.item_for(path))
    y = {"above": rect.top(), "on": rect.center().y(), "below": rect.bottom()}[place]
    point = QPoint(rect.center().x(), y)
    enter = QDragEnterEvent(point, Qt.MoveAction, mime, Qt.LeftButton, Qt.NoModifier)
    view.dragEnterEvent(enter)
    move = QDragMoveEvent(point, Qt.MoveAction, mime, Qt.LeftButton, Qt.NoModifier)
    view.dragMoveEvent(move)
    assert enter.isAccepted() and move.isAccepted()
    drop = QDropEvent(point, Qt.MoveAction, mime, Qt.LeftButton, Qt.NoModifier)
    view.dropEvent(drop)
    return drop


def test_a_dragged_node_is_reordered_and_reparented_one_undo_step_each(dock, project, layers):
    """Dropping below a sibling reorders, onto a group re-parents; each drop is one step undo takes back."""
    tree = opened(dock, layers)
    before = tree.to_dict()
    dock.show()
    view, stack = dock.tree_view, dock.controller.undo_stack
    source, pathway = f"{ROOT} > Source", f"{ROOT} > Pathway"
    steps = stack.count()
    _drop(view, view.node_mime(f"{source} > Host"), f"{source} > Mag", "below")
    assert names(dock.controller.tree, source) == ["Mag", "Host"]
    assert stack.count() == steps + 1
    _drop(view, view.node_mime(f"{source} > Host"), f"{pathway} > Structures", "on")
    assert names(dock.controller.tree, f"{pathway} > Structures") == ["Mag", "Host"]
    assert names(dock.controller.tree, source) == ["Mag"]
    assert dock.selected_path() == f"{pathway} > Structures > Host"
    moved = dock.controller.tree.find(f"{pathway} > Structures > Host")
    assert moved.membership == before["root"]["children"][0]["children"][0]["membership"]
    _drop(view, view.node_mime(f"{pathway} > Structures"), f"{pathway} > Faults", "above")
    assert names(dock.controller.tree, pathway) == ["Structures", "Faults"]
    assert stack.count() == steps + 3
    for _ in range(3):
        dock.controller.undo()
    assert dock.controller.tree.to_dict() == before
    dock.controller.redo()
    assert names(dock.controller.tree, source) == ["Mag", "Host"]
    dock.hide()


@pytest.mark.parametrize("dragged, target, place, why", [
    ("Pathway", "Pathway > Structures", "on", "cannot be moved under itself"),
    ("Pathway > Structures", "Source > Host", "on", "a criterion scored from a layer cannot take criteria"),
    ("Source > Mag", "Pathway > Structures", "on", "already has a criterion named 'Mag'"),
    ("Source > Mag", "", "above", "cannot stand beside the root"),
    ("", "Source", "on", "the root of the tree cannot be moved"),
])
def test_a_refused_drop_changes_nothing_and_says_why(dock, project, layers, qgis_iface, dragged, target,
                                                     place, why):
    """A drop under itself, under a leaf with a layer, beside a namesake or the root: tree as it was."""
    opened(dock, layers)
    before = dock.controller.tree.to_dict()
    dock.show()
    steps = dock.controller.undo_stack.count()
    path = " > ".join(p for p in (ROOT, dragged) if p)
    _drop(dock.tree_view, dock.tree_view.node_mime(path), " > ".join(p for p in (ROOT, target) if p), place)
    assert dock.controller.tree.to_dict() == before
    assert dock.controller.undo_stack.count() == steps
    assert why in messages(qgis_iface, Qgis.Warning)
    dock.hide()


def test_nodes_from_elsewhere_are_not_taken_and_layer_drops_stay_layer_drops(dock, project, layers):
    """Only this view's nodes move; a layer's MIME type still goes to layers_dropped, never a move."""
    opened(dock, layers)
    dock.show()
    view = dock.tree_view
    stranger = QMimeData()
    stranger.setData(NODE_MIME, json.dumps({"view": "another", "path": f"{ROOT} > Source"}).encode())
    assert view.dragged_path(stranger) is None
    rect = view.visualItemRect(view.item_for(f"{ROOT} > Pathway"))
    enter = QDragEnterEvent(rect.center(), Qt.MoveAction, stranger, Qt.LeftButton, Qt.NoModifier)
    view.dragEnterEvent(enter)
    assert not enter.isAccepted()
    moved, layer_drops = [], []
    view.node_dropped.connect(lambda *args: moved.append(args))
    view.layers_dropped.connect(lambda *args: layer_drops.append(args))
    uri = QMimeData()
    uri.setData("application/x-vnd.qgis.qgis.uri", b"")
    view.dropEvent(QDropEvent(rect.center(), Qt.CopyAction, uri, Qt.LeftButton, Qt.NoModifier))
    assert moved == [] and [path for path, _ in layer_drops] == [f"{ROOT} > Pathway"]
    dock.hide()


def test_the_controllers_move_is_one_step_and_a_refused_one_pushes_nothing():
    """move_to moves as Tree.move does, one undo step; a refused move raises and leaves no step."""
    controller = TreeController()
    controller.reset(Tree.from_dict(tree_doc([
        leaf("A", "a.tif", LINEAR), {"name": "G", "operator": {"type": "or"},
                                     "children": [leaf("B", "b.tif", LINEAR)]}])))
    before = controller.tree.to_dict()
    assert controller.move_to(f"{ROOT} > A", f"{ROOT} > G", 0) == f"{ROOT} > G > A"
    assert controller.undo_stack.count() == 1
    with pytest.raises(ParameterError, match="scored from a layer"):
        controller.move_to(f"{ROOT} > G > B", f"{ROOT} > G > A", 0)
    assert controller.undo_stack.count() == 1
    controller.undo()
    assert controller.tree.to_dict() == before


# -- the description and the rationales -------------------------------------------------------------


def test_description_and_rationales_typed_in_the_dock_go_to_the_file_and_the_project(
        dock, project, layers, tmp_path):
    """Typing is one undo step per field; the text is in the saved tree file and in the project."""
    opened(dock, layers)
    stack = dock.controller.undo_stack
    steps = stack.count()
    dock.select(ROOT)
    box = dock.editor.model_fields.description_edit
    assert box.isVisibleTo(dock.editor) or not dock.isVisible()
    for word in ("Orogenic gold", " in the Tarrowin", " greenstone belt."):
        box.insertPlainText(word)
    assert dock.controller.tree.description == "Orogenic gold in the Tarrowin greenstone belt."
    assert stack.count() == steps + 1
    component = f"{ROOT} > Pathway"
    dock.select(component)
    rationale = dock.editor.rationale_edit
    assert "summary" in rationale.placeholderText()
    for word in ("Faults focus", " the fluids."):
        rationale.insertPlainText(word)
    assert dock.controller.tree.find(component).rationale == "Faults focus the fluids."
    assert stack.count() == steps + 2
    dock.select(f"{component} > Faults")
    dock.editor.rationale_edit.setPlainText("Second-order splays host the lodes.")
    saved = dock.save_tree_file(str(tmp_path / "saved.favour.json"))
    doc = json.loads(Path(saved).read_text(encoding="utf-8"))
    assert doc["description"] == "Orogenic gold in the Tarrowin greenstone belt."
    assert doc["root"]["children"][1]["rationale"] == "Faults focus the fluids."
    assert doc["root"]["children"][1]["children"][0]["rationale"] == "Second-order splays host the lodes."
    assert Tree.load(saved).description == doc["description"]
    project_file = tmp_path / "model.qgz"
    assert project.write(str(project_file))
    assert json.loads(project.readEntry(SCOPE, "tree")[0])["description"] == doc["description"]
    project.clear()
    assert dock.controller.tree is None
    assert project.read(str(project_file))
    tree = dock.controller.tree
    assert tree.description == doc["description"]
    assert tree.find(component).rationale == "Faults focus the fluids."
    dock.select(ROOT)
    assert dock.editor.model_fields.description_edit.toPlainText() == doc["description"]
    dock.controller.set_description("")
    assert "description" not in dock.controller.tree.to_dict()


# -- a filter of features, a margin -----------------------------------------------------------------


def test_the_filter_is_chosen_from_the_layers_fields_and_values_and_undone(dock, project, layers):
    """Pick a field, tick values read from the layer: the proxy keeps them; each step undoes."""
    opened(dock, layers)
    faults = f"{ROOT} > Pathway > Faults"
    dock.select(faults)
    fields = dock.editor.proxy_fields
    assert fields.filter_box.isVisibleTo(fields) and fields.margin_box.isVisibleTo(fields)
    assert wait(lambda: fields.filter_box.findData("order") >= 0)
    offered = [fields.filter_box.itemData(i) for i in range(fields.filter_box.count())]
    assert offered == [None, "order", "kind"]
    steps = dock.controller.undo_stack.count()
    fields.filter_box.setCurrentIndex(fields.filter_box.findData("order"))
    fields.filter_box.activated.emit(fields.filter_box.currentIndex())
    assert dock.controller.tree.find(faults).proxy.where == {"field": "order", "values": []}
    assert wait(lambda: fields.values == [1, 2, 3])  # the values written into the layer
    assert wait(lambda: any("tick at least one value" in p.message
                            for p in dock.checker.by_node().get(faults, [])))
    for i in (0, 1):
        fields.values_list.item(i).setCheckState(Qt.Checked)
    assert dock.controller.tree.find(faults).proxy.where == {"field": "order", "values": [1, 2]}
    assert dock.controller.undo_stack.count() == steps + 3
    assert dock.tree_view.item_for(faults).text(1).endswith("distance to faults (order: 1, 2)")
    assert wait(lambda: not dock.checker.busy())
    assert not [p for p in dock.checker.by_node().get(faults, []) if p.level == "error"]
    # Going back to the node shows the values ticked.
    dock.select(ROOT)
    dock.select(faults)
    assert [fields.values_list.item(i).checkState() == Qt.Checked for i in range(3)] == [True, True, False]
    dock.controller.undo()
    assert dock.controller.tree.find(faults).proxy.where == {"field": "order", "values": [1]}
    fields.filter_box.setCurrentIndex(0)
    fields.filter_box.activated.emit(0)
    assert dock.controller.tree.find(faults).proxy.where is None


def test_a_layer_filtered_in_qgis_is_refused_pointing_to_the_criterions_own_filter(layers):
    """A QGIS subset string cannot go into the tree file: refused, naming the layer and the way out."""
    layer = QgsVectorLayer(f"{layers / 'faults.gpkg'}|layername=faults", "Faults of order 1", "ogr")
    assert layer.isValid() and layer.setSubsetString('"order" = 1')
    with pytest.raises(UnusableLayerError) as refused:
        proxy_from_layer(layer)
    message = str(refused.value)
    assert message.startswith("Faults of order 1 has a QGIS filter")
    assert "'Only features whose'" in message and "save the filtered features to a file" in message
    layer.setSubsetString("")
    assert proxy_from_layer(layer).path.endswith("faults.gpkg")  # the same layer unfiltered is taken


def test_the_margin_is_set_in_map_units_dropped_with_distance_and_saved(dock, project, layers, tmp_path):
    """The margin box writes the proxy's margin (stepping is one step); an attribute measure drops it."""
    opened(dock, layers)
    faults = f"{ROOT} > Pathway > Faults"
    dock.select(faults)
    box = dock.editor.proxy_fields.margin_box
    steps = dock.controller.undo_stack.count()
    for value in (100, 250, 500):
        box.setValue(value)
    assert dock.controller.tree.find(faults).proxy.margin == 500
    assert dock.controller.undo_stack.count() == steps + 1
    saved = json.loads(Path(dock.save_tree_file(str(tmp_path / "m.favour.json"))).read_text())
    assert saved["root"]["children"][1]["children"][0]["proxy"]["margin"] == 500
    box.setValue(0)
    assert dock.controller.tree.find(faults).proxy.margin is None
    dock.controller.set_margin(faults, 300)
    dock.controller.set_measure(faults, "attribute", "order")
    assert dock.controller.tree.find(faults).proxy.margin is None
    assert not dock.editor.proxy_fields.margin_box.isVisibleTo(dock.editor.proxy_fields)


def test_a_wrong_filter_field_is_marked_at_the_node(dock, project, layers):
    """A tree file whose filter names a field the layer lacks shows it at the node, with the fields."""
    tree = small_tree(layers)
    tree.find(f"{ROOT} > Pathway > Faults").proxy.where = {"field": "rank", "values": [1]}
    assert dock.open_tree_file(write_tree(layers / "bad.favour.json", tree.to_dict()))
    assert wait(lambda: not dock.checker.busy())
    found = dock.checker.by_node().get(f"{ROOT} > Pathway > Faults", [])
    assert [p.message for p in found if p.level == "error"] == [
        "the filter's field 'rank' is not a field of layer faults; it has order, kind"]


# -- the class table of the whole raster --------------------------------------------------------


def test_the_class_table_lists_every_class_of_the_whole_raster_with_its_cells(dock, project, layers):
    """The table's classes and cells are numpy.unique over every cell; the rare class is there to score."""
    opened(dock, layers)
    host = f"{ROOT} > Source > Host"
    dock.select(host)
    panel = dock.editor.membership_panel
    assert wait(lambda: panel.classes.get(panel.count_key) is not None)
    from osgeo import gdal

    ds = gdal.Open(str(layers / "litho.tif"))
    band = ds.GetRasterBand(1)
    full = band.ReadAsArray()
    band = ds = None
    codes, counts = np.unique(full[full != 0], return_counts=True)
    page = panel.form.pages.currentWidget()
    assert wait(lambda: page.table.rowCount() == codes.size)
    table = {page.table.item(i, 0).text(): (page.table.item(i, 1).text(), page.table.item(i, 2).text())
             for i in range(page.table.rowCount())}
    assert {code: int(cells) for code, (cells, _) in table.items()} == \
        {str(c): int(n) for c, n in zip(codes, counts)}
    assert table["7"] == ("2", "") and table["5"][1] == "0.9"  # the rare class, not scored yet
    assert page.table.horizontalHeaderItem(1).text() == "Cells"
    assert "Every class of the whole raster" in page.count_note.text()
    # Scoring the layer's classes gives the rare class a starting score; the others keep theirs.
    panel.form.fill_requested.emit()
    scores = dock.controller.tree.find(host).membership["scores"]
    assert scores == {"1": 0.2, "2": 0.5, "5": 0.9, "7": 0.5}
    # A score typed into the rare class's empty cell is written for it.
    dock.controller.undo()
    page = panel.form.pages.currentWidget()
    row = [page.table.item(i, 0).text() for i in range(page.table.rowCount())].index("7")
    page.table.item(row, 2).setText("0.75")
    assert dock.controller.tree.find(host).membership["scores"] == {"1": 0.2, "5": 0.9, "7": 0.75}


def test_a_continuous_raster_keeps_its_sample_and_says_why(dock, project, layers):
    """Class scores on a float raster: the whole raster is not counted, and the note says it is continuous."""
    opened(dock, layers)
    mag = f"{ROOT} > Source > Mag"
    dock.select(mag)
    dock.controller.set_membership(mag, {"type": "categories", "scores": {"50": 1.0}, "default": 0})
    panel = dock.editor.membership_panel
    assert wait(lambda: panel.classes.error(panel.count_key) is not None)
    page = panel.form.pages.currentWidget()
    assert wait(lambda: "continuous data" in page.count_note.text())
    assert page.table.horizontalHeaderItem(1).text() == "Cells sampled"
