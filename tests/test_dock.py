"""The dock in a headless QGIS (pytest-qgis): build, check, run, store, undo, cancel.

Outside references: ``favour:evaluatetree`` run by QGIS's processing framework
on the demo tree file (the cells the dock's run must reproduce), QGIS's own
project file round trip (``QgsProject.write``/``read``), and numpy's count of
the classes in the full litho raster (what the sampled histogram must show).
The demo layers are generated into a temporary folder.
"""

from __future__ import annotations

import importlib.util
import json
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest
from osgeo import gdal
from qgis.core import (
    Qgis,
    QgsApplication,
    QgsLayerTreeModel,
    QgsProcessingFeedback,
    QgsProcessingUtils,
    QgsProject,
    QgsRasterLayer,
    QgsVectorLayer,
)
from qgis.PyQt.QtCore import QObject, QTimer

from favour_plugin.core.tree import Node, Tree
from favour_plugin.gui import tasks
from favour_plugin.gui.controller import LAYER_ID_KEY, TreeController
from favour_plugin.gui.dock import FavourDock
from favour_plugin.gui.output_folders import DOCUMENTS_FOLDER, RESULTS
from favour_plugin.gui.project_store import SCOPE, ProjectStore
from favour_plugin.gui.results import GROUP
from tests.helpers import read_raster

pytestmark = pytest.mark.usefixtures("favour_provider")

DEMO = Path(__file__).resolve().parent.parent / "resources" / "demo"
TREE_FILE = DEMO / "district.favour.json"
ROOT = "Favourability"


def _load_generator():
    """Import resources/demo/generate.py (a script, not a package)."""
    spec = importlib.util.spec_from_file_location("favour_demo_generate_dock", DEMO / "generate.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


generate = _load_generator()


def wait(condition, timeout: float = 30.0) -> bool:
    """Process events until ``condition()`` holds or ``timeout`` seconds pass."""
    end = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > end:
            return False
        QgsApplication.processEvents()
        time.sleep(0.005)
    return True


def idle(dock: FavourDock) -> bool:
    """True once the dock's checks, samples and runs have all finished."""
    return (not dock.checker.busy() and dock.samples.pending() == 0 and tasks.live_tasks() == 0
            and (dock.job is None or not dock.job.running)
            and QgsApplication.taskManager().countActiveTasks() == 0)


@pytest.fixture(scope="module")
def district(tmp_path_factory) -> Path:
    """The demo tree file beside freshly generated layers."""
    folder = tmp_path_factory.mktemp("dock-demo")
    generate.generate(folder / "layers", generate.DEFAULT_SEED)
    shutil.copy(TREE_FILE, folder / TREE_FILE.name)
    return folder


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
    wait(lambda: idle(widget), 60)
    widget.shutdown()
    store.disconnect_all()
    widget.deleteLater()
    QgsApplication.processEvents()


def messages(qgis_iface, level=Qgis.Critical) -> str:
    """Return the mock message bar's messages of one level, joined."""
    return "\n".join(qgis_iface.messageBar().get_messages(level))


class LayerSet:
    """Project layers for the demo's proxies, one per file and vector layer."""

    def __init__(self, project: QgsProject, folder: Path) -> None:
        self.project, self.folder, self.layers = project, folder, {}

    def get(self, path: str, layer_name: str | None = None):
        """Return (adding it once) the project layer for a demo file and layer name."""
        key = (path, layer_name)
        if key not in self.layers:
            file = str(self.folder / path)
            if layer_name:
                layer = QgsVectorLayer(f"{file}|layername={layer_name}", layer_name, "ogr")
            else:
                layer = QgsRasterLayer(file, Path(file).stem)
            assert layer.isValid(), file
            self.project.addMapLayer(layer)
            self.layers[key] = layer
        return self.layers[key]


def replay(dock: FavourDock, source: Tree, layers: LayerSet) -> None:
    """Build ``source`` through the dock's own API: new model, layers as criteria, edits."""
    c = dock.controller
    c.new_model(source.name)
    assert c.tree.root.name == source.root.name

    def build(src: Node, path: str) -> None:
        if src.operator is not None:
            c.set_operator_type(path, src.operator["type"])
            if "gamma" in src.operator:
                c.set_gamma(path, src.operator["gamma"])
            c.set_nodata(path, src.operator.get("nodata", "propagate"))
        if path != c.tree.root.name:
            c.set_weight(path, src.weight)
            c.set_save_output(path, src.save_output)
            c.set_component(path, src.component)
        c.set_rationale(path, src.rationale)
        for child in src.children:
            if child.is_leaf:
                made = dock.add_layer(path, layers.get(child.proxy.path, child.proxy.layer))
                made = c.rename(made, child.name)
                c.set_membership(made, child.membership)
                build(child, made)
            else:
                made = f"{path} > {child.name}"
                if child.name not in [n.name for n in c.tree.find(path).children]:
                    made = c.add_group(path, child.name)
                build(child, made)

    build(source.root, source.root.name)
    # The grid, through the root's editor as a user would pick it.
    dock.select(c.tree.root.name)
    box = dock.editor.model_fields.grid_box
    box.setLayer(layers.get(source.grid["reference"]))
    box.activated.emit(box.currentIndex())


def absolute_doc(tree: Tree) -> dict:
    """Return the tree document with absolute paths and no project layer ids."""
    copy = Tree.from_draft(tree.to_dict(), tree.base_dir)
    copy.absolute_paths()
    for _, node in copy.walk():
        if node.proxy is not None:
            node.proxy.extra.pop(LAYER_ID_KEY, None)
    return copy.to_dict()


def run_and_wait(dock: FavourDock, quick: bool = False, timeout: float = 60.0):
    """Start a run from the dock and return its outcome."""
    outcomes = []
    dock.run_finished.connect(outcomes.append)
    job = dock.run(quick)
    assert job is not None, "the dock refused to run"
    assert wait(lambda: outcomes, timeout), "the run did not finish"
    dock.run_finished.disconnect(outcomes.append)
    return outcomes[0]


def evaluatetree(tree_file: Path, output: Path) -> np.ndarray:
    """Run favour:evaluatetree through QGIS processing and return the cells."""
    import processing

    processing.run("favour:evaluatetree", {"TREE": str(tree_file), "OUTPUT": str(output)},
                   feedback=QgsProcessingFeedback())
    return read_raster(output)


# -- building and running --------------------------------------------------------------


def test_demo_tree_built_in_the_dock_runs_to_the_cells_of_evaluatetree(dock, project, district, tmp_path):
    """The demo tree rebuilt through the dock equals the file, and its run gives evaluatetree's cells."""
    demo = Tree.load(district / TREE_FILE.name)
    replay(dock, demo, LayerSet(project, district))
    expected = absolute_doc(demo)
    expected.pop("description")
    assert absolute_doc(dock.controller.tree) == expected
    dock.controller.set_run_options(str(tmp_path / "results"), True)
    outcome = run_and_wait(dock)
    assert outcome.ok, outcome.message
    reference = evaluatetree(district / TREE_FILE.name, tmp_path / "reference.tif")
    cells = read_raster(outcome.output)
    assert cells.shape == (generate.HEIGHT, generate.WIDTH)
    assert np.array_equal(cells, reference, equal_nan=True)
    # Results in a group, styled from the .qml, with the lineage in the metadata.
    group = project.layerTreeRoot().findGroup(GROUP)
    assert group is not None
    names = [layer.name() for layer in dock.last_layers]
    assert names[0] == "Favourability"
    assert {"Source", "Pathway", "Trap", "Preservation", "Alteration footprint"} <= set(names)
    favourability = dock.last_layers[0]
    assert favourability.renderer().type() == "singlebandpseudocolor"
    history = "\n".join(favourability.metadata().history())
    assert "lineage" in history and outcome.lineage in history
    assert "not a resource estimate" in favourability.metadata().abstract()


def test_quick_look_is_coarse_quick_and_replaces_the_last(dock, project, district):
    """A quick look on the demo (1.08 M cells) runs coarsened by 2 in under 2 s; a second replaces it."""
    assert dock.open_tree_file(str(district / TREE_FILE.name))
    wait(lambda: idle(dock))
    start = time.monotonic()
    outcome = run_and_wait(dock, quick=True)
    elapsed = time.monotonic() - start
    assert outcome.ok, outcome.message
    assert elapsed < 2.0, f"quick look took {elapsed:.2f} s"
    ds = gdal.Open(outcome.output)
    assert (ds.RasterXSize, ds.RasterYSize) == (generate.WIDTH // 2, generate.HEIGHT // 2)
    ds = None
    dock.controller.set_gamma(ROOT, 0.5)
    second = run_and_wait(dock, quick=True)
    assert second.ok
    quick = [layer for layer in project.mapLayers().values() if layer.customProperty("favour/quick_look")]
    assert [layer.source() for layer in quick] == [second.output]
    assert not os.path.exists(outcome.folder)


@pytest.mark.parametrize("when", ["at once", "at the first progress"])
def test_cancelled_run_leaves_no_layer_and_no_file(dock, project, district, tmp_path, when):
    """Cancelling a run adds no layer to the project and leaves the output folder empty."""
    assert dock.open_tree_file(str(district / TREE_FILE.name))
    out = tmp_path / "results"
    dock.controller.set_run_options(str(out), True)
    layers_before = set(project.mapLayers())
    outcomes = []
    dock.run_finished.connect(outcomes.append)
    job = dock.run()
    if when == "at once":
        dock.cancel_run()
    else:
        job.progress_changed.connect(lambda percent: percent > 0 and dock.cancel_run())
    assert wait(lambda: outcomes, 60)
    dock.run_finished.disconnect(outcomes.append)
    assert outcomes[0].cancelled and not outcomes[0].ok
    assert set(project.mapLayers()) == layers_before
    assert project.layerTreeRoot().findGroup(GROUP) is None
    leftovers = [os.path.join(here, f) for here, _, files in os.walk(out) for f in files] \
        if out.exists() else []
    assert leftovers == []
    assert not out.exists() or os.listdir(out) == []
    assert dock.run_bar.run_button.isEnabled()


# -- the project -------------------------------------------------------------------------


def test_tree_is_saved_with_the_project_cleared_with_it_and_read_back(dock, project, district, tmp_path):
    """Write the project, clear it (dock empties), read it again: the same tree, layer ids and options."""
    assert dock.open_tree_file(str(district / TREE_FILE.name))
    layers = LayerSet(project, district)
    added = dock.add_layer("Favourability > Trap", layers.get("layers/arsenic.tif"))
    dock.controller.set_rationale(added, "A second look at the soil.")
    dock.controller.set_run_options(str(tmp_path / "runs"), True)
    expected = dock.controller.tree.to_dict()
    expected_absolute = absolute_doc(dock.controller.tree)
    layer_id = dock.controller.tree.find(added).proxy.extra[LAYER_ID_KEY]
    project_file = district / f"dock-{tmp_path.name}.qgz"
    assert project.isDirty()
    assert project.write(str(project_file))
    stored = json.loads(project.readEntry(SCOPE, "tree")[0])
    assert stored["grid"]["reference"] == "layers/litho.tif"  # inside the project folder: relative

    project.clear()
    assert dock.controller.tree is None
    assert dock.pages.currentIndex() == 0
    assert dock.controller.output_folder == ""

    assert project.read(str(project_file))
    tree = dock.controller.tree
    assert tree is not None
    assert absolute_doc(tree) == expected_absolute
    assert tree.find(added).proxy.extra[LAYER_ID_KEY] == layer_id
    assert project.mapLayer(layer_id) is not None
    assert dock.controller.output_folder == str(tmp_path / "runs")
    assert dock.controller.component_rasters is True
    assert dock.controller.undo_stack.count() == 0
    assert not project.isDirty()
    assert {k: v for k, v in tree.to_dict().items() if k != "root"} == \
        {k: v for k, v in expected.items() if k != "root"}
    os.unlink(project_file)


# -- undo and redo ------------------------------------------------------------------------


def test_undo_and_redo_walk_a_chain_of_edits_back_and_forth(dock, project, district):
    """Every state of a chain of edits comes back on undo, in reverse, and again on redo."""
    c = dock.controller
    assert dock.open_tree_file(str(district / TREE_FILE.name))
    layers = LayerSet(project, district)
    states = [c.tree.to_dict()]
    marks = [c.undo_stack.index()]

    def step():
        states.append(c.tree.to_dict())
        marks.append(c.undo_stack.index())

    c.rename("Favourability > Source > Dense greenstone keel", "Gravity keel")
    step()
    c.set_gamma(ROOT, 0.6)
    c.set_gamma(ROOT, 0.65)  # stepping one field: one undo step
    step()
    for text in ("Re", "Rea", "Reason"):  # typing: one undo step
        c.set_rationale("Favourability > Trap", text)
    step()
    new = c.add_criterion("Favourability > Trap")
    step()
    model = QgsLayerTreeModel(project.layerTreeRoot())
    cover = layers.get("layers/cover_depth.tif")
    mime = model.mimeData([model.node2index(project.layerTreeRoot().findLayer(cover.id()))])
    assert dock.drop_layers(new, mime) == [new]  # dropped onto the empty criterion: it reads the layer
    step()
    c.set_membership(new, {"type": "linear", "lower": 300, "upper": 0})
    step()
    c.set_weight(new, 2.5)
    step()
    c.move_by(new, -1)
    step()
    c.remove("Favourability > Preservation > Thin cover")
    step()
    c.set_nodata("Favourability > Source", "ignore")
    step()
    c.set_component("Favourability > Trap", None)
    step()
    assert marks == list(range(marks[0], marks[0] + len(marks)))
    assert len({json.dumps(s, sort_keys=True) for s in states}) == len(states)

    for expected in reversed(states[:-1]):
        c.undo()
        assert c.tree.to_dict() == expected
    for expected in states[1:]:
        c.redo()
        assert c.tree.to_dict() == expected
    for _ in states[1:]:
        c.undo()
    assert c.tree.to_dict() == states[0]
    c.undo()  # the open itself is a step: before it there was no tree
    assert c.tree is None


# -- bad state never loses work -----------------------------------------------------------


def test_a_tree_file_that_fails_to_load_leaves_the_tree_and_names_the_problem(dock, project, district,
                                                                              tmp_path, qgis_iface):
    """A bad parameter and broken JSON are refused with messages naming node, field and place."""
    assert dock.open_tree_file(str(district / TREE_FILE.name))
    before = dock.controller.tree.to_dict()
    steps = dock.controller.undo_stack.count()
    doc = json.loads(TREE_FILE.read_text(encoding="utf-8"))
    doc["root"]["children"][3]["children"][0]["membership"] = {"type": "linear", "lower": 5, "upper": 5}
    bad = tmp_path / "bad.favour.json"
    bad.write_text(json.dumps(doc), encoding="utf-8")
    assert not dock.open_tree_file(str(bad))
    text = messages(qgis_iface)
    assert "Favourability > Preservation > Thin cover" in text and "'lower' and 'upper'" in text
    broken = tmp_path / "broken.favour.json"
    broken.write_text('{"format": "favour-tree",\n "version": 1,\n "root": {', encoding="utf-8")
    assert not dock.open_tree_file(str(broken))
    assert "line 3" in messages(qgis_iface)
    assert dock.controller.tree.to_dict() == before
    assert dock.controller.undo_stack.count() == steps


def test_a_layer_removed_from_the_project_marks_its_proxy_and_keeps_it(dock, project, district):
    """Removing the project layer keeps the criterion and its file, and marks the node with a warning."""
    c = dock.controller
    c.new_model("Marks")
    gravity = LayerSet(project, district).get("layers/gravity.tif")
    path = dock.add_layer("Favourability > Source", gravity)
    wait(lambda: idle(dock))
    assert not [p for p in dock.checker.by_node().get(path, []) if "removed" in p.message]
    before = c.tree.to_dict()
    project.removeMapLayer(gravity.id())
    QgsApplication.processEvents()
    marks = [p for p in dock.checker.by_node().get(path, []) if "removed" in p.message]
    assert len(marks) == 1 and marks[0].level == "warning"
    assert str(district / "layers" / "gravity.tif") in marks[0].message
    assert c.tree.to_dict() == before
    assert "removed from the project" in dock.tree_view.item_for(path).toolTip(0)


def test_problems_show_at_their_node_before_any_run(dock, project, district, tmp_path):
    """A missing file, a bad parameter, another grid: each marked at its node, errors apart from warnings."""
    c = dock.controller
    assert dock.open_tree_file(str(district / TREE_FILE.name))
    missing = "Favourability > Trap > Arsenic in soil"
    c.set_proxy(missing, c.tree.find(missing).proxy.__class__(path=str(tmp_path / "gone.tif")))
    bad = "Favourability > Source > Dense greenstone keel"
    c.set_membership(bad, {"type": "gaussian", "centre": 2, "spread": -1})
    assert wait(lambda: idle(dock))
    found = dock.checker.by_node()
    assert any("does not exist" in p.message and p.level == "error" for p in found[missing])
    assert any("'spread' must be positive" in p.message for p in found[bad])
    resampled = "Favourability > Pathway > Alteration footprint > Potassic alteration"
    assert [p.level for p in found[resampled]] == ["warning"]
    item = dock.tree_view.item_for(missing)
    assert "does not exist" in item.toolTip(0)
    assert dock.tree_view.item_for(resampled).toolTip(0).startswith("⚠")
    assert dock.run() is None  # model problems stop a run before it starts
    assert "spread" in messages(dock.iface)


# -- the membership editor's histogram ----------------------------------------------------


def test_histogram_of_a_class_layer_matches_the_classes_in_the_file(dock, project, district):
    """The sampled class counts of litho.tif match numpy's count on the full raster within 1 %."""
    assert dock.open_tree_file(str(district / TREE_FILE.name))
    path = "Favourability > Source > Fertile volcanic pile"
    dock.select(path)
    panel = dock.editor.membership_panel
    assert wait(lambda: dock.samples.get(panel.key) is not None)
    sample = dock.samples.get(panel.key)
    ds = gdal.Open(str(district / "layers" / "litho.tif"))
    band = ds.GetRasterBand(1)
    full = band.ReadAsArray()
    nodata = band.GetNoDataValue()
    band = ds = None
    codes, counts = np.unique(full[full != nodata], return_counts=True)
    assert set(sample.classes) == {float(c) for c in codes}
    share = {float(c): n / counts.sum() for c, n in zip(codes, counts)}
    for code, n in sample.classes.items():
        assert abs(n / sample.count - share[code]) < 0.01
    assert panel.plot.sample is sample
    # The class table fills with the classes present, keeping scores already set.
    spec = dict(dock.controller.tree.find(path).membership)
    spec["scores"] = {"3": 0.9}
    dock.controller.set_membership(path, spec)
    panel.form.fill_requested.emit()
    scores = dock.controller.tree.find(path).membership["scores"]
    assert scores["3"] == 0.9 and set(scores) == {str(int(c)) for c in codes}
    # Class weights of evidence start at W = 0 (μ 0.5) for each class present.
    panel.form.type_chosen.emit("weights")
    spec = dock.controller.tree.find(path).membership
    assert spec == {"type": "weights", "weights": {str(int(c)): 0.0 for c in codes}, "default": None}
    assert panel.form.type_box.currentData() == "weights"


def test_histogram_of_a_distance_proxy_is_measured_on_the_grid(dock, project, district):
    """A vector proxy's sample is distances in map units: 0 on the faults, none beyond the grid's diagonal."""
    assert dock.open_tree_file(str(district / TREE_FILE.name))
    dock.select("Favourability > Pathway > Second-order splays")
    key = dock.editor.membership_panel.key
    assert wait(lambda: dock.samples.get(key) is not None or dock.samples.error(key))
    sample = dock.samples.get(key)
    assert sample is not None, dock.samples.error(key)
    diagonal = np.hypot(generate.WIDTH, generate.HEIGHT) * generate.CELL
    assert sample.edges[0] == pytest.approx(0.0, abs=2 * generate.CELL)
    assert 0 < sample.high < diagonal
    assert sample.classes is None or len(sample.classes) > 1


# -- responsiveness -----------------------------------------------------------------------


class _Ticker(QObject):
    """Records the longest gap between timer ticks of the main thread's event loop."""

    def __init__(self) -> None:
        super().__init__()
        self.last = time.monotonic()
        self.longest = 0.0
        self.timer = QTimer(self)
        self.timer.timeout.connect(self.tick)
        self.timer.start(10)

    def tick(self) -> None:
        now = time.monotonic()
        self.longest = max(self.longest, now - self.last)
        self.last = now


def test_the_dock_never_blocks_the_main_thread_on_the_demo(dock, project, district, tmp_path):
    """Edits, selection, checks, samples and a full run each return to the event loop within 0.2 s."""
    assert dock.open_tree_file(str(district / TREE_FILE.name))
    dock.controller.set_run_options(str(tmp_path / "results"))
    wait(lambda: idle(dock))
    timings = {}

    def timed(name, call):
        start = time.monotonic()
        call()
        timings[name] = time.monotonic() - start

    ticker = _Ticker()
    timed("select a leaf (starts its sample)",
          lambda: dock.select("Favourability > Trap > Host rock in a hinge > Fold hinges"))
    timed("edit (starts a check)", lambda: dock.controller.set_gamma(ROOT, 0.7))
    timed("undo", dock.controller.undo)
    outcomes = []
    dock.run_finished.connect(outcomes.append)
    timed("start a run", dock.run)
    assert wait(lambda: outcomes and idle(dock), 60)
    ticker.timer.stop()
    assert outcomes[0].ok
    slow = {name: round(t, 3) for name, t in timings.items() if t > 0.2}
    assert not slow, slow
    assert ticker.longest < 0.25, f"the event loop stalled for {ticker.longest:.3f} s"


# -- the plugin's lifecycle -----------------------------------------------------------------


class FakeInterface:
    """The parts of QgisInterface the plugin uses, recording what is added and removed."""

    def __init__(self, main_window, bar) -> None:
        self.main, self.bar = main_window, bar
        self.menu, self.toolbar, self.docks = [], [], []

    def mainWindow(self):  # noqa: N802 (QGIS API name)
        """Return the main window."""
        return self.main

    def messageBar(self):  # noqa: N802 (QGIS API name)
        """Return the message bar."""
        return self.bar

    def addPluginToMenu(self, name, action):  # noqa: N802 (QGIS API name)
        """Record a menu entry."""
        self.menu.append((name, action))

    def removePluginMenu(self, name, action):  # noqa: N802 (QGIS API name)
        """Forget a menu entry."""
        self.menu.remove((name, action))

    def addToolBarIcon(self, action):  # noqa: N802 (QGIS API name)
        """Record a toolbar button."""
        self.toolbar.append(action)

    def removeToolBarIcon(self, action):  # noqa: N802 (QGIS API name)
        """Forget a toolbar button."""
        self.toolbar.remove(action)

    def addDockWidget(self, area, dock):  # noqa: N802 (QGIS API name)
        """Record a dock."""
        self.docks.append(dock)

    def removeDockWidget(self, dock):  # noqa: N802 (QGIS API name)
        """Forget a dock."""
        self.docks.remove(dock)


def test_plugin_adds_and_removes_its_menu_toolbar_and_dock_symmetrically(qgis_iface, project):
    """initGui adds one menu entry, one button and the dock; unload removes each; no iface, no GUI."""
    from favour_plugin.plugin import FavourPlugin

    headless = FavourPlugin(None)
    headless.initGui()
    assert headless.gui is None
    headless.unload()

    iface = FakeInterface(qgis_iface.mainWindow(), qgis_iface.messageBar())
    plugin = FavourPlugin(iface)
    plugin.initGui()
    assert len(iface.menu) == 1 and len(iface.toolbar) == 1 and len(iface.docks) == 1
    dock = plugin.gui.dock
    assert dock.isHidden()
    plugin.gui.action.setChecked(True)
    assert not dock.isHidden()
    plugin.gui.action.setChecked(False)
    assert dock.isHidden()
    assert plugin.gui.show_dock() is dock and not dock.isHidden()
    plugin.gui.controller.new_model()
    assert project.isDirty()
    plugin.unload()
    assert iface.menu == [] and iface.toolbar == [] and iface.docks == []
    project.clear()  # the store is disconnected: clearing must not reach the old controller


# -- layers onto the tree, bands, files ------------------------------------------------------


def test_layers_dropped_on_the_tree_view_become_criteria(dock, project, district):
    """A drop from the layers panel onto a component adds one criterion per layer, as one undo step."""
    from qgis.PyQt.QtCore import QPoint, Qt
    from qgis.PyQt.QtGui import QDragEnterEvent, QDragMoveEvent, QDropEvent

    dock.controller.new_model("Drops")
    layers = LayerSet(project, district)
    gravity, splays = layers.get("layers/gravity.tif"), layers.get("layers/faults.gpkg", "second_order")
    model = QgsLayerTreeModel(project.layerTreeRoot())
    mime = model.mimeData([model.node2index(project.layerTreeRoot().findLayer(layer.id()))
                           for layer in (gravity, splays)])
    dock.show()
    view = dock.tree_view
    target = view.visualItemRect(view.item_for("Favourability > Pathway")).center()
    steps = dock.controller.undo_stack.count()
    for kind in (QDragEnterEvent, QDragMoveEvent):
        event = kind(target, Qt.CopyAction, mime, Qt.LeftButton, Qt.NoModifier)
        getattr(view, "dragEnterEvent" if kind is QDragEnterEvent else "dragMoveEvent")(event)
        assert event.isAccepted()
    view.dropEvent(QDropEvent(target, Qt.CopyAction, mime, Qt.LeftButton, Qt.NoModifier))
    pathway = dock.controller.tree.find("Favourability > Pathway")
    by_name = {child.name: child for child in pathway.children}  # in the layers panel's order
    assert sorted(by_name) == ["gravity", "second_order"]
    assert (by_name["second_order"].proxy.measure, by_name["second_order"].proxy.layer) == \
        ("distance", "second_order")
    assert by_name["gravity"].proxy.band == 1 and not by_name["gravity"].proxy.is_vector
    assert dock.controller.undo_stack.count() == steps + 1
    outside = QDragMoveEvent(QPoint(5, view.viewport().height() - 5), Qt.CopyAction, mime, Qt.LeftButton,
                             Qt.NoModifier)
    view.dragMoveEvent(outside)
    assert not outside.isAccepted()  # not over a node
    dock.hide()


def test_band_choice_and_another_crs_show_at_the_node(dock, project, tmp_path):
    """Band 2 of a two-band raster is chosen in the editor; a band that does not exist is an error."""
    import tests.helpers as helpers

    other_crs = helpers.TEST_CRS.replace("+lon_0=-125", "+lon_0=-124")
    first = helpers.write_raster(tmp_path / "grid.tif", np.ones((20, 30), np.float32))
    ds = gdal.GetDriverByName("GTiff").Create(str(tmp_path / "two.tif"), 30, 20, 2, gdal.GDT_Float32)
    ds.SetGeoTransform((helpers.ORIGIN[0], 100.0, 0.0, helpers.ORIGIN[1], 0.0, -100.0))
    ds.SetProjection(helpers.srs(other_crs).ExportToWkt())
    for band in (1, 2):
        ds.GetRasterBand(band).WriteArray(np.full((20, 30), band, np.float32))
    ds = None
    c = dock.controller
    c.new_model("Bands")
    c.add_layer_criterion("Favourability > Source", "Grid", dock_proxy(first), None)
    layer = QgsRasterLayer(str(tmp_path / "two.tif"), "two")
    project.addMapLayer(layer)
    path = dock.add_layer("Favourability > Trap", layer)
    dock.select(path)
    box = dock.editor.proxy_fields.band_box
    assert box.maximum() == 2
    box.setValue(2)
    assert c.tree.find(path).proxy.band == 2
    assert wait(lambda: idle(dock))
    found = dock.checker.by_node()[path]
    assert [p.level for p in found] == ["warning"] and "reprojected" in found[0].message
    c.set_band(path, 3)
    assert wait(lambda: idle(dock))
    assert any("band 3 does not exist" in p.message and p.level == "error"
               for p in dock.checker.by_node()[path])


def dock_proxy(path: str):
    """Return a raster proxy for a file (as a tree file would hold it)."""
    from favour_plugin.core.tree import Proxy

    return Proxy(path=str(path), band=1)


def test_saving_the_tree_file_writes_relative_paths_keeps_a_backup_and_no_layer_ids(dock, project,
                                                                                   district, tmp_path):
    """Saved beside its layers the file holds relative paths; it loads back to the same tree."""
    c = dock.controller
    c.new_model("Saved")
    layers = LayerSet(project, district)
    path = dock.add_layer("Favourability > Source", layers.get("layers/gravity.tif"))
    c.set_membership(path, {"type": "logistic", "midpoint": 2.0, "slope": 0.6})
    target = district / f"saved-{tmp_path.name}.favour.json"
    assert dock.save_tree_file(str(target)) == str(target)
    doc = json.loads(target.read_text(encoding="utf-8"))
    saved_proxy = doc["root"]["children"][0]["children"][0]["proxy"]
    assert saved_proxy == {"path": "layers/gravity.tif", "band": 1}
    assert c.tree.find(path).proxy.extra[LAYER_ID_KEY]  # the dock's own tree keeps the link
    assert c.undo_stack.isClean() and c.file_path == str(target)
    c.set_weight(path, 2)
    assert dock.save_tree_file() == str(target)  # to its own file again
    assert Path(str(target) + ".bak").exists()
    again = Tree.from_draft(json.loads(target.read_text(encoding="utf-8")), target.parent)
    assert absolute_doc(again) == absolute_doc(c.tree)
    outside = tmp_path / "elsewhere" / "model.favour.json"
    assert dock.save_tree_file(str(outside)) is None  # no such folder: refused, with a message
    assert "cannot write tree file" in messages(dock.iface)
    outside.parent.mkdir()
    dock.save_tree_file(str(outside))
    far = json.loads(outside.read_text(encoding="utf-8"))["root"]["children"][0]["children"][0]
    assert far["proxy"]["path"] == str(district / "layers" / "gravity.tif")
    for file in (target, Path(str(target) + ".bak")):
        file.unlink()


# -- where results go ------------------------------------------------------------------------


@pytest.fixture()
def lasting_home(tmp_path, monkeypatch):
    """Point HOME (so Qt's documents folder) into tmp_path, and the system's temporary folder too.

    QStandardPaths reads $HOME and $XDG_CONFIG_HOME on every call; the
    stand-in temporary folder keeps the rest of tmp_path from counting as
    temporary.
    """
    QgsProcessingUtils.tempFolder()  # QGIS's own temporary folder stays where it was made
    home, system_tmp = tmp_path / "home", tmp_path / "tmp"
    home.mkdir()
    system_tmp.mkdir()
    monkeypatch.setenv("HOME", str(home))
    monkeypatch.setenv("XDG_CONFIG_HOME", str(home / ".config"))
    monkeypatch.setenv("TMPDIR", str(system_tmp))
    monkeypatch.setattr(tempfile, "tempdir", str(system_tmp))
    return home


def test_the_default_folder_is_beside_the_project_else_the_tree_file_else_in_documents(
        dock, project, district, tmp_path, lasting_home):
    """Unsaved and fileless: documents/Favour; a tree file: beside it; a saved project: beside it.

    Reference: Qt's QStandardPaths documents folder for the HOME the test set
    ($HOME/Documents), and QGIS's own project folder after QgsProject.write.
    """
    documents = str(lasting_home / "Documents" / DOCUMENTS_FOLDER)
    dock.controller.reset(Tree.load(district / TREE_FILE.name))  # as an unsaved project holds it: no file
    assert (dock.default_folder(), dock.default_destination().reason) == (documents, "documents")
    text = dock.run_bar.destination.text()
    assert "~/Documents/Favour" in text and "in your documents" in text
    assert "Quick looks are temporary" in text
    assert dock.run_bar.folder_widget.lineEdit().placeholderText() == "~/Documents/Favour"

    tree_copy = tmp_path / "models" / "district.favour.json"
    tree_copy.parent.mkdir()
    dock.controller.reset(Tree.load(district / TREE_FILE.name))
    assert dock.save_tree_file(str(tree_copy)) == str(tree_copy)
    assert dock.default_folder() == str(tree_copy.parent / RESULTS)
    assert "beside the tree file" in dock.run_bar.destination.text()

    saved = tmp_path / "survey" / "survey.qgz"
    saved.parent.mkdir()
    assert project.write(str(saved))
    assert dock.default_folder() == str(saved.parent / RESULTS)
    assert "beside the project" in dock.run_bar.destination.text()

    dock.controller.set_run_options(str(tmp_path / "mine"))
    assert "(your choice)" in dock.run_bar.destination.text()
    assert dock.next_folder() == str(tmp_path / "mine")
    dock.controller.set_run_options(str(Path(tempfile.gettempdir()) / "scratch"))
    assert "your choice, a temporary folder" in dock.run_bar.destination.text()


def test_a_tree_file_in_a_temporary_folder_is_passed_over_for_documents(dock, project, district,
                                                                         lasting_home):
    """A tree opened from the system's temporary folder never sends full runs there."""
    temporary = Path(tempfile.gettempdir()) / "attachment.favour.json"
    temporary.write_text(json.dumps(Tree.load(district / TREE_FILE.name).to_dict()), encoding="utf-8")
    dock.controller.reset(Tree.load(temporary), str(temporary))
    assert dock.default_destination().reason == "documents"
    assert not dock.default_folder().startswith(tempfile.gettempdir())


def test_a_run_from_an_unsaved_project_lands_in_documents_and_the_status_names_its_folder(
        dock, project, district, lasting_home):
    """With no folder chosen, no project file and no tree file, the run's folder is in documents/Favour."""
    dock.controller.reset(Tree.load(district / TREE_FILE.name))
    outcome = run_and_wait(dock)
    assert outcome.ok, outcome.message
    folder = Path(outcome.folder)
    assert folder.parent == lasting_home / "Documents" / DOCUMENTS_FOLDER and folder.name.startswith("run-")
    assert Path(outcome.output).parent == folder and Path(outcome.lineage).exists()
    assert dock.run_bar.status.text() == f"Run written to ~/Documents/Favour/{folder.name}"
    assert f"~/Documents/Favour/{folder.name}/favourability.tif" in messages(dock.iface, Qgis.Success)


def test_a_folder_that_cannot_be_written_refuses_the_run_and_names_it(dock, project, district, tmp_path):
    """A results folder that cannot be made stops the run before it starts; the message names it."""
    assert dock.open_tree_file(str(district / TREE_FILE.name))
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder", encoding="utf-8")
    dock.controller.set_run_options(str(blocker / "results"))
    assert dock.run() is None
    assert dock.job is None
    text = messages(dock.iface)
    assert "The run did not start: cannot write results to" in text and str(blocker / "results") in text


def test_run_folders_made_in_the_same_second_differ(tmp_path, monkeypatch):
    """Sixteen run folders made at once with one time stamp are sixteen new folders (mkdir is atomic)."""
    from concurrent.futures import ThreadPoolExecutor

    from favour_plugin.gui import algorithm_job, run_job

    monkeypatch.setattr(algorithm_job, "_stamp", lambda: "20300101-000000")
    first = run_job.run_folder(str(tmp_path))
    second = run_job.run_folder(str(tmp_path))
    assert first != second and os.path.isdir(first) and os.path.isdir(second)
    with ThreadPoolExecutor(8) as pool:
        made = list(pool.map(lambda _: run_job.run_folder(str(tmp_path)), range(16)))
    every = [*made, first, second]
    assert len(set(every)) == 18
    assert sorted(os.listdir(tmp_path)) == sorted(os.path.basename(f) for f in every)


def test_paths_under_home_are_shown_from_the_tilde_and_others_as_they_are(lasting_home, tmp_path):
    """~ stands for $HOME exactly (as the shell expands it); a sibling sharing its prefix is not shortened."""
    from favour_plugin.gui.output_folders import display_path

    assert display_path(str(lasting_home / "Documents" / "Favour")) == "~/Documents/Favour"
    assert os.path.expanduser(display_path(str(lasting_home / "a b"))) == str(lasting_home / "a b")
    assert display_path(str(lasting_home)) == "~"
    sibling = str(lasting_home) + "-other"
    assert display_path(sibling) == sibling
    assert display_path("") == ""
