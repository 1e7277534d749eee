"""Favour results in a temporary folder are offered to be kept before the project drops them (headless).

Outside references: QGIS's own ``QgsProject.clear`` and ``QgsProject.read``
(the signals they emit decide when the question is asked, and the layers must
still be there), Python's ``filecmp`` (each kept file is byte for byte the
original) and the lineage's own record, replayed by ``raster.engine.reproduce``
on the kept copy (the copy is a result that still proves itself, not just a
file). The temporary folders are QGIS's processing folder and a stand-in for
the system's (``tempfile.tempdir`` and ``TMPDIR`` pointed into the test's
folder), so "lasting" folders can live in the test's folder too.
"""

from __future__ import annotations

import filecmp
import os
import tempfile
from pathlib import Path

import numpy as np
import pytest
from qgis.core import Qgis, QgsApplication, QgsProcessingUtils, QgsProject, QgsRasterLayer

from favour_plugin.core.lineage import SUFFIX
from favour_plugin.core.tree import Tree
from favour_plugin.gui import keep_results as keep_module
from favour_plugin.gui.keep_results import KeepResults, temporary_results
from favour_plugin.gui.output_folders import DOCUMENTS_FOLDER, RESULTS, quick_look_folder, temporary_roots
from favour_plugin.gui.results import add_results
from favour_plugin.gui.run_job import RunOutcome, run_folder
from favour_plugin.raster.engine import evaluate_tree, reproduce
from tests.helpers import tree_doc, write_raster

pytestmark = pytest.mark.usefixtures("favour_provider")


@pytest.fixture()
def places(tmp_path, monkeypatch):
    """A stand-in system temporary folder, a home with documents, and a lasting folder, all in tmp_path."""
    QgsProcessingUtils.tempFolder()  # QGIS's own temporary folder stays where it was made
    system_tmp = tmp_path / "tmp"
    home = tmp_path / "home"
    for folder in (system_tmp, home):
        folder.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(system_tmp))
    monkeypatch.setenv("TMPDIR", str(system_tmp))
    monkeypatch.setenv("HOME", str(home))
    monkeypatch.setenv("XDG_CONFIG_HOME", str(home / ".config"))
    lasting = tmp_path / "lasting"
    lasting.mkdir()
    return {"tmp": system_tmp, "home": home, "documents": home / "Documents", "lasting": lasting,
            "inputs": tmp_path / "inputs"}


@pytest.fixture()
def project():
    """The QGIS project, cleared before and after."""
    p = QgsProject.instance()
    p.clear()
    yield p
    p.clear()


class Asker:
    """Answers the keep question as told and records what it was asked."""

    def __init__(self, answer: bool) -> None:
        self.answer = answer
        self.calls: list[tuple[list, str]] = []
        self.layers_present: list[int] = []

    def __call__(self, results, folder) -> bool:
        """Record the question and answer it."""
        self.calls.append((list(results), folder))
        self.layers_present.append(len(QgsProject.instance().mapLayers()))
        return self.answer


@pytest.fixture()
def keeper(qgis_iface, project):
    """A KeepResults on the project whose answers a test sets; disconnected afterwards."""
    made = []

    def make(answer: bool) -> tuple[KeepResults, Asker]:
        asker = Asker(answer)
        made.append(KeepResults(project, qgis_iface, asker=asker))
        return made[-1], asker

    yield make
    for k in made:
        k.disconnect_all()


def _tree(inputs: Path) -> Tree:
    """A one-leaf tree on a small raster in the test CRS."""
    inputs.mkdir(exist_ok=True)
    values = np.arange(20 * 30, dtype=np.float32).reshape(20, 30)
    source = write_raster(inputs / "values.tif", values)
    doc = tree_doc([{"name": "Values", "proxy": {"path": str(source)},
                     "membership": {"type": "linear", "lower": 0, "upper": 599}}], operator={"type": "or"})
    return Tree.from_dict(doc)


def _dock_run(tree: Tree, base: str, quick: bool, project: QgsProject) -> QgsRasterLayer:
    """Write a run as the dock does (its folder, the engine, its layers) and return its favourability."""
    folder = run_folder(base, quick)
    output = os.path.join(folder, "favourability.tif")
    evaluate_tree(tree, output)
    layers = add_results(RunOutcome(True, False, quick, folder, output, None, output + SUFFIX), "Test",
                         project)
    return layers[0]


def _file_layer(path: str, project: QgsProject) -> QgsRasterLayer:
    layer = QgsRasterLayer(str(path), Path(path).stem)
    assert layer.isValid(), path
    project.addMapLayer(layer)
    return layer


def _fill(project: QgsProject, places: dict) -> dict:
    """Temporary Favour layers (a quick look, a toolbox output), a lasting one, a temporary plain raster."""
    tree = _tree(places["inputs"])
    quick = _dock_run(tree, quick_look_folder(), True, project)
    toolbox = places["tmp"] / "processing-output" / "favourability.tif"
    toolbox.parent.mkdir(parents=True, exist_ok=True)
    evaluate_tree(tree, str(toolbox))
    toolbox_layer = _file_layer(toolbox, project)
    lasting = _dock_run(tree, str(places["lasting"]), False, project)
    plain = _file_layer(write_raster(places["tmp"] / "plain.tif", np.ones((5, 5), np.float32)), project)
    return {"quick": quick, "toolbox": toolbox_layer, "lasting": lasting, "plain": plain}


def _files(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def test_the_temporary_roots_are_qgis_and_the_systems(places):
    """QGIS's processing folder and the system's temporary folder (as Python sees it) count as temporary."""
    roots = temporary_roots()
    assert os.path.realpath(QgsProcessingUtils.tempFolder()) in roots
    assert str(places["tmp"]) in roots
    assert str(places["lasting"]) not in roots


def test_clearing_asks_about_exactly_the_temporary_favour_layers_and_keep_copies_them(
        places, project, keeper, qgis_iface):
    """QgsProject.clear asks, layers still there, about the two temporary Favour layers only; Keep copies."""
    layers = _fill(project, places)
    originals = {name: layers[name].source() for name in ("quick", "toolbox")}
    temporary_ids = {layers["quick"].id(), layers["toolbox"].id()}
    before = {path: Path(path).read_bytes() for path in originals.values()}
    k, asker = keeper(True)
    project.clear()
    assert len(asker.calls) == 1
    results, folder = asker.calls[0]
    assert len(results) == 2 and {r.layer_id for r in results} == temporary_ids
    assert {r.path for r in results} == set(originals.values())
    assert asker.layers_present == [4]  # asked before any layer left the project
    assert folder == str(places["documents"] / DOCUMENTS_FOLDER)  # unsaved project, no tree file
    kept = Path(k.last_kept)
    assert kept.parent == places["documents"] / DOCUMENTS_FOLDER and kept.name.startswith("kept-")
    # The quick look with its whole run folder; the toolbox output with its sidecars.
    quick_folder = Path(originals["quick"]).parent
    copied_run = kept / quick_folder.name
    assert sorted(p.name for p in copied_run.iterdir()) == sorted(p.name for p in quick_folder.iterdir())
    for name in ("favourability.tif", "favourability.tif" + SUFFIX, "favourability.qml"):
        assert filecmp.cmp(copied_run / name, quick_folder / name, shallow=False), name
    toolbox = Path(originals["toolbox"])
    for name in ("favourability.tif", "favourability.tif" + SUFFIX, "favourability.qml"):
        assert filecmp.cmp(kept / name, toolbox.parent / name, shallow=False), name
    assert not (kept / "plain.tif").exists()
    # The kept copy still proves itself: its lineage reproduces every cell.
    assert reproduce(str(kept / "favourability.tif")).identical
    # The originals are untouched.
    assert {path: Path(path).read_bytes() for path in originals.values()} == before
    assert "Kept 2 Favour result(s)" in "\n".join(qgis_iface.messageBar().get_messages(Qgis.Success))


def test_discard_copies_nothing(places, project, keeper):
    """Discard lets the layers go and writes nothing anywhere."""
    _fill(project, places)
    k, asker = keeper(False)
    lasting_before = _files(places["lasting"])
    project.clear()
    assert len(asker.calls) == 1 and k.last_kept is None
    assert not places["documents"].exists()
    assert _files(places["lasting"]) == lasting_before


def test_a_second_keep_never_overwrites_the_first(places, project, keeper, monkeypatch):
    """Two keeps in the same second go to two folders; the first keeps its files as they were."""
    monkeypatch.setattr(keep_module, "_stamp", lambda: "20300101-000000")
    k, asker = keeper(True)
    _fill(project, places)
    project.clear()
    first = Path(k.last_kept)
    first_files = _files(first)
    _fill(project, places)
    project.clear()
    second = Path(k.last_kept)
    assert second != first and second.name == first.name + "-2"
    assert _files(first) == first_files
    assert len(asker.calls) == 2 and len(_files(second)) == len(first_files)


def test_reading_another_project_asks_and_keeps_beside_the_saved_project(places, project, keeper,
                                                                           qgis_iface):
    """Opening another project (QgsProject.read) asks too; copies go beside the project that closes."""
    _fill(project, places)
    saved = places["lasting"] / "survey" / "survey.qgz"
    saved.parent.mkdir()
    k, asker = keeper(True)
    assert project.write(str(saved))
    warning = "\n".join(qgis_iface.messageBar().get_messages(Qgis.Warning))
    assert "saved with 2 Favour layer(s) from a temporary folder" in warning
    other = places["lasting"] / "other.qgz"
    QgsProject().write(str(other))  # an empty project to open
    assert project.read(str(other))
    assert len(asker.calls) == 1
    assert asker.calls[0][1] == str(saved.parent / RESULTS)
    assert Path(k.last_kept).parent == saved.parent / RESULTS


def test_a_layer_is_asked_about_once_and_not_after_stop(places, project, keeper):
    """Removing all layers then clearing asks once; after disconnect_all nothing is asked."""
    k, asker = keeper(False)
    _fill(project, places)
    project.removeAllMapLayers()
    project.clear()
    assert len(asker.calls) == 1
    k.disconnect_all()
    _fill(project, places)
    project.clear()
    assert len(asker.calls) == 1


def test_an_asker_that_fails_is_reported_and_does_not_escape_the_slot(places, project, qgis_iface):
    """An error while asking or keeping goes to the message bar; the project still clears."""
    def broken(results, folder):
        raise OSError("no room")

    k = KeepResults(project, qgis_iface, asker=broken)
    try:
        _fill(project, places)
        project.clear()
        QgsApplication.processEvents()
        assert project.mapLayers() == {}
        assert "not kept: no room" in "\n".join(qgis_iface.messageBar().get_messages(Qgis.Critical))
    finally:
        k.disconnect_all()


def test_temporary_results_ignore_plain_rasters_and_lasting_favour_layers(places, project):
    """Only Favour rasters (lineage beside, or run marks) under a temporary folder are listed."""
    layers = _fill(project, places)
    found = {r.layer_id: r for r in temporary_results(project)}
    assert set(found) == {layers["quick"].id(), layers["toolbox"].id()}
    assert found[layers["quick"].id()].run_folder == os.path.dirname(layers["quick"].source())
    assert found[layers["toolbox"].id()].run_folder == ""


def test_dock_manager_owns_the_keep_offer_and_removes_it_on_stop(places, project, qgis_iface):
    """DockManager.start connects the offer with the given asker; stop disconnects it."""
    from favour_plugin.gui.manager import DockManager
    from tests.test_dock import FakeInterface

    asker = Asker(False)
    manager = DockManager(FakeInterface(qgis_iface.mainWindow(), qgis_iface.messageBar()), asker)
    manager.start()
    try:
        _fill(project, places)
        project.clear()
        assert len(asker.calls) == 1
    finally:
        manager.stop()
    _fill(project, places)
    project.clear()
    assert len(asker.calls) == 1


@pytest.mark.parametrize("button, answer", [("Keep", True), ("Discard", False)])
def test_the_default_question_lists_the_results_and_answers_as_pressed(places, button, answer):
    """The message box names each result and the folder; Keep answers True, Discard False (Qt's own box)."""
    from qgis.PyQt.QtCore import QTimer
    from qgis.PyQt.QtWidgets import QApplication

    from favour_plugin.gui.keep_results import DIALOG_NAME, TemporaryResult, ask_with_dialog

    results = [TemporaryResult("a", "Quick look: Test", str(places["tmp"] / "quick-1" / "favourability.tif"),
                               str(places["tmp"] / "quick-1")),
               TemporaryResult("b", "Toolbox output", str(places["tmp"] / "out.tif"))]
    seen = {}

    def press() -> None:
        box = QApplication.activeModalWidget()
        if box is None or box.objectName() != DIALOG_NAME:
            QTimer.singleShot(50, press)
            return
        seen["text"] = box.text() + "\n" + box.informativeText()
        next(b for b in box.buttons() if b.text() == button).click()

    QTimer.singleShot(50, press)
    assert ask_with_dialog(results, str(places["home"] / "Documents" / "Favour")) is answer
    assert "2 Favour results" in seen["text"]
    assert "Quick look: Test" in seen["text"] and "Toolbox output" in seen["text"]
    assert "~/Documents/Favour" in seen["text"]
