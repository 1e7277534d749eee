"""The dock's Results tab and its "Why here?" tool in a headless QGIS (pytest-qgis).

Outside references: the files the jobs themselves write — the validation
JSON (every number the tab shows must be that file's), the targets
GeoPackage read back with OGR (its zone count) and its lineage, the report's
lineage (the inputs it read) — and, for "Why here?", the rasters the dock's
own full run wrote through ``favour:evaluatetree`` (the panel's μ must be
their cells). The rest are properties that must hold: every run writes a new
folder under the results folder, a refused, failed or cancelled run leaves
no folder and no layer, and the probe's work folder goes when it is released.
The scene is a small invented tree on the test CRS over open ocean
(tests/helpers.py), not the demo.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from osgeo import ogr
from qgis.core import (
    Qgis,
    QgsApplication,
    QgsCoordinateReferenceSystem,
    QgsPointXY,
    QgsProject,
    QgsVectorLayer,
)
from qgis.gui import QgsMapMouseEvent
from qgis.PyQt.QtCore import QEvent, QPoint, Qt, QUrl

from favour_plugin.gui.algorithm_job import algorithm_available
from favour_plugin.gui.controller import TreeController
from favour_plugin.gui.dock import FavourDock
from favour_plugin.gui.ensemble_job import MONTE_CARLO, SENSITIVITY
from favour_plugin.gui.handover_job import REPORT, TARGETS, VALIDATE, parse_capture
from favour_plugin.gui.project_store import ProjectStore
from favour_plugin.gui.why_here import mu_text
from favour_plugin.raster.probe import WORK_PREFIX
from tests.helpers import (
    ORIGIN,
    TEST_CRS,
    leaf,
    read_raster,
    small_workshop,
    srs,
    tree_doc,
    write_raster,
    write_tree,
    write_vector,
)
from tests.test_dock import idle, messages, wait

pytestmark = pytest.mark.usefixtures("favour_provider")

SHAPE = (50, 60)
CELL = 100.0
ROOT = "Favourability"
DEPOSIT_CELLS = [(5, 7), (8, 40), (12, 22), (15, 51), (20, 9), (24, 33), (28, 18), (31, 45), (36, 27),
                 (40, 12), (44, 55), (47, 38)]
HELD_OUT_CELLS = [(10, 10), (30, 30), (45, 5)]


def centre(row: int, col: int) -> tuple[float, float]:
    """Return the centre of a cell of the scene's grid in the test CRS."""
    return ORIGIN[0] + (col + 0.5) * CELL, ORIGIN[1] - (row + 0.5) * CELL


def write_points(path: Path, cells, layer: str) -> str:
    """Write points at the centres of ``cells`` (or none) to a GeoPackage point layer."""
    if path.exists():
        path.unlink()
    ds = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    lyr = ds.CreateLayer(layer, srs(), ogr.wkbPoint)
    for row, col in cells:
        feature = ogr.Feature(lyr.GetLayerDefn())
        feature.SetGeometry(ogr.CreateGeometryFromWkt("POINT ({} {})".format(*centre(row, col))))
        lyr.CreateFeature(feature)
    lyr = None
    ds = None
    return str(path)


@pytest.fixture(scope="module")
def scene(tmp_path_factory) -> Path:
    """A three-component tree (a raster with nodata, a distance leaf, classes), deposits, an empty layer."""
    folder = tmp_path_factory.mktemp("handover")
    rng = np.random.default_rng(5)
    mag = rng.normal(100, 30, SHAPE).astype(np.float32)
    mag[:2, :2] = -9999
    write_raster(folder / "mag.tif", mag, nodata=-9999)
    write_raster(folder / "host.tif", rng.integers(1, 5, SHAPE).astype(np.uint8), nodata=0)
    x0, y0 = ORIGIN
    write_vector(folder / "faults.gpkg", [f"LINESTRING ({x0 + 1500} {y0}, {x0 + 2500} {y0 - 5000})"],
                 layer="faults")
    doc = tree_doc([
        {"name": "Source", "component": "source", "operator": {"type": "or"}, "children": [
            leaf("Mag", "mag.tif", {"type": "linear", "lower": 60, "upper": 160})]},
        {"name": "Pathway", "component": "pathway", "operator": {"type": "or"}, "children": [
            leaf("Near faults", "faults.gpkg", {"type": "linear", "lower": 3000, "upper": 0},
                 layer="faults", measure="distance")]},
        {"name": "Trap", "component": "trap", "operator": {"type": "and"}, "children": [
            leaf("Host", "host.tif", {"type": "categories", "scores": {"1": 0.2, "2": 0.9, "3": 0.5},
                                      "default": 0.1})]},
    ], {"type": "gamma", "gamma": 0.7}, name="Tarrowin test model", grid={"reference": "mag.tif"})
    write_tree(folder / "model.favour.json", doc)
    write_points(folder / "deposits.gpkg", DEPOSIT_CELLS, "deposits")
    write_points(folder / "held_out.gpkg", HELD_OUT_CELLS, "held_out")
    write_points(folder / "empty.gpkg", [], "empty")
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
def results(tmp_path) -> Path:
    """The dock's results folder for one test."""
    return tmp_path / "results"


@pytest.fixture()
def dock(qgis_iface, project, scene, results):
    """A dock with the scene's tree open, writing component rasters into ``results``."""
    controller = TreeController()
    store = ProjectStore(controller, project, qgis_iface)
    widget = FavourDock(controller, qgis_iface, project)
    widget.resize(600, 900)
    assert widget.open_tree_file(str(scene / "model.favour.json"))
    controller.set_run_options(str(results), component_rasters=True)
    yield widget
    wait(lambda: idle(widget) and not widget.handover.busy() and not widget.why.busy(), 120)
    widget.shutdown()
    store.disconnect_all()
    widget.deleteLater()
    QgsApplication.sendPostedEvents(None, QEvent.DeferredDelete)
    QgsApplication.processEvents()


def point_layer(project: QgsProject, path: Path, name: str) -> QgsVectorLayer:
    """Add a GeoPackage point layer to the project and return it."""
    layer = QgsVectorLayer(f"{path}|layername={name}", name, "ogr")
    assert layer.isValid(), path
    project.addMapLayer(layer)
    return layer


def full_run(dock: FavourDock):
    """Run the tree on its full grid from the dock and return the outcome."""
    outcomes = []
    dock.run_finished.connect(outcomes.append)
    assert dock.run(quick=False) is not None
    assert wait(lambda: outcomes, 120), "the run did not finish"
    dock.run_finished.disconnect(outcomes.append)
    assert outcomes[0].ok, outcomes[0].message
    return outcomes[0]


def finish(view, start, timeout: float = 120.0):
    """Start a run on the Results tab and return its outcome."""
    outcomes = []
    view.finished.connect(outcomes.append)
    job = start()
    assert job is not None, "the tab refused to run"
    assert wait(lambda: outcomes, timeout), "the run did not finish"
    view.finished.disconnect(outcomes.append)
    return outcomes[0]


def folders(results: Path, stem: str) -> list[Path]:
    """Return the folders of one kind of run under the results folder."""
    return sorted(p for p in results.iterdir() if p.is_dir() and p.name.startswith(stem)) \
        if results.exists() else []


def need(*algorithms):
    """Fail, not skip, when an algorithm is not registered: the favour_provider fixture registers them all."""
    for algorithm in algorithms:
        assert algorithm_available(algorithm), f"{algorithm} is not registered"


# -- the tab ----------------------------------------------------------------------------------


def test_results_is_the_third_tab_and_fits_the_dock(dock):
    """Tree, Workshop, Results; the Results page fits a 600 px dock; it takes the last full run."""
    assert [dock.tabs.tabText(k) for k in range(dock.tabs.count())] == ["Tree", "Workshop", "Results"]
    assert dock.handover.minimumSizeHint().width() <= 600
    assert dock.handover.favourability() is None
    assert "No full run yet" in dock.handover.raster_note.text()
    run = full_run(dock)
    assert dock.handover.favourability() == run.output
    assert dock.handover.components_folder() == run.node_folder
    assert dock.handover.components_check.isChecked()


def test_validation_shows_the_numbers_of_the_json_it_wrote(dock, project, scene, results):
    """AUC, interval, capture and P–A crossing shown equal the job's JSON; weak evidence is said."""
    need(VALIDATE)
    full_run(dock)
    view = dock.handover
    view.deposits_box.setLayer(point_layer(project, scene / "deposits.gpkg", "deposits"))
    view.held_out_box.setLayer(point_layer(project, scene / "held_out.gpkg", "held_out"))
    view.capture_edit.setText("5, 20")
    view.resamples_box.setValue(200)
    outcome = finish(view, view.run_validation)
    assert outcome.ok, outcome.message
    folder = Path(outcome.folder)
    assert folder.parent == results and folder.name.startswith("validation-")
    assert (folder / "validation.json").exists() and (folder / "curves.csv").exists()
    written = json.loads((folder / "validation.json").read_text(encoding="utf-8"))
    text = view.figures.text()
    assert [s["set"] for s in written["sets"]] == ["deposits", "held-out deposits"]
    for section in written["sets"]:
        low, high = section["auc_ci"]
        p, a = section["pa_crossing"]
        assert f"AUC {section['auc']:.3f}, 95 % interval {low:.3f}–{high:.3f}" in text
        assert f"({section['curve']} curve, {section['n_deposits']} deposit cells)" in text
        for item in section["capture"]:
            assert f"{item['deposits_percent']:.1f} % of the deposits in the top " \
                   f"{item['top_area_percent']:g} % of the area" in text
        assert f"{p:.1f} % of the deposits in {a:.1f} % of the area, Nd {section['nd']:.2f}" in text
    main, held = written["sets"]
    assert main["n_deposits"] == len(DEPOSIT_CELLS) and not main["warnings"]
    assert held["n_deposits"] == 3 and held["warnings"]
    assert f"Weak evidence: {held['warnings'][0]}" in text
    assert view.validation_result == written
    assert view.validation_for(view.favourability()) == str(folder / "validation.json")


def test_targets_join_the_project_styled_with_the_cut_from_the_validation(dock, project, scene, results):
    """Top 10 %: the GeoPackage's zones and the layer; then the cut at the validation's P–A threshold."""
    need(VALIDATE, TARGETS)
    full_run(dock)
    view = dock.handover
    view.deposits_box.setLayer(point_layer(project, scene / "deposits.gpkg", "deposits"))
    outcome = finish(view, view.run_targets)
    assert outcome.ok, outcome.message
    folder = Path(outcome.folder)
    assert folder.parent == results and folder.name.startswith("targets-")
    gpkg = folder / "targets.gpkg"
    ds = ogr.Open(str(gpkg))
    lyr = ds.GetLayerByName("targets")
    count = lyr.GetFeatureCount()
    fields = [lyr.GetLayerDefn().GetFieldDefn(i).GetName() for i in range(lyr.GetLayerDefn().GetFieldCount())]
    lyr = None
    ds = None
    assert count == outcome.results["ZONES"] and count > 0
    assert {"mu_source", "mu_pathway", "mu_trap", "occurrences"} <= set(fields)
    assert view.targets_controls.status.text().startswith(f"{count} zones")
    layer = view.targets_layer
    assert layer.id() in project.mapLayers() and layer.name() == "Targets: Tarrowin test model"
    assert layer.renderer().type() == "graduatedSymbol" and layer.featureCount() == count
    assert "not a resource estimate" in messages(dock.iface, Qgis.Success)

    validation = finish(view, view.run_validation)
    assert validation.ok, validation.message
    crossing = json.loads(Path(validation.file("OUTPUT_JSON")).read_text(encoding="utf-8"))["pa_threshold"]
    view.cut_box.setCurrentIndex(view.cut_box.findData("validation"))
    second = finish(view, view.run_targets)
    assert second.ok, second.message
    assert second.results["THRESHOLD_USED"] == pytest.approx(crossing["value"], rel=1e-12)
    assert len(folders(results, "targets-")) == 2


def test_report_takes_the_run_validation_and_targets_and_offers_to_open(dock, project, scene, results):
    """The report reads the run's components, the validation, the targets and the deposits; Open opens it."""
    need(VALIDATE, TARGETS, REPORT)
    full_run(dock)
    view = dock.handover
    view.deposits_box.setLayer(point_layer(project, scene / "deposits.gpkg", "deposits"))
    assert finish(view, view.run_validation).ok
    assert finish(view, view.run_targets).ok
    assert "the validation, the targets" in view.report_inputs.text()
    outcome = finish(view, view.run_report)
    assert outcome.ok, outcome.message
    folder = Path(outcome.folder)
    assert folder.parent == results and folder.name.startswith("report-")
    report = folder / "report.html"
    assert report.exists()
    lineage = json.loads(Path(str(report) + ".lineage.json").read_text(encoding="utf-8"))
    roles = {entry["node"] for entry in lineage["inputs"]}
    assert {"favourability", "validation result", "targets", "occurrences"} <= roles
    assert any(role.startswith("component") for role in roles)
    assert lineage["parameters"]["title"] == "Favourability report: Tarrowin test model"
    assert str(report) in view.report_controls.status.text() or "report.html" in \
        view.report_controls.status.text()
    opened = []
    view.open_url = lambda url: opened.append(url) or True
    assert view.open_button.isEnabled() and view.open_report()
    assert opened == [QUrl.fromLocalFile(str(report))]


# -- refusals, failures and cancels ------------------------------------------------------------


def test_nothing_to_validate_or_no_deposits_is_named_and_makes_no_folder(dock, project, scene, results):
    """No favourability, no deposits layer, no validation for the cut: named messages, no folder."""
    view = dock.handover
    assert view.run_validation() is None
    assert "There is no favourability to work on" in messages(dock.iface, Qgis.Warning)
    full_run(dock)
    assert view.run_validation() is None
    assert "Validation needs known deposits" in messages(dock.iface, Qgis.Warning)
    view.cut_box.setCurrentIndex(view.cut_box.findData("validation"))
    assert view.run_targets() is None
    assert "Validate this favourability first" in messages(dock.iface, Qgis.Warning)
    view.deposits_box.setLayer(point_layer(project, scene / "deposits.gpkg", "deposits"))
    view.capture_edit.setText("five")
    assert view.run_validation() is None
    assert "'five' are not a list of percentages" in messages(dock.iface, Qgis.Warning)
    assert [p.name.split("-")[0] for p in results.iterdir() if p.is_dir()] == ["run"]
    with pytest.raises(ValueError):
        parse_capture("")


def test_a_point_layer_with_no_features_fails_named_and_leaves_no_folder(dock, project, scene, results):
    """Deposits with no features: the job's own message in the message bar; no validation folder left."""
    need(VALIDATE)
    full_run(dock)
    view = dock.handover
    view.deposits_box.setLayer(point_layer(project, scene / "empty.gpkg", "empty"))
    outcome = finish(view, view.run_validation)
    assert not outcome.ok and not outcome.cancelled
    assert "has no features" in outcome.message
    assert "The validation run failed" in messages(dock.iface) and "has no features" in messages(dock.iface)
    assert not Path(outcome.folder).exists() and folders(results, "validation-") == []
    assert view.figures.text() == "" and view.last_validation is None
    assert view.validate_controls.status.text() == "The run failed; nothing was written."


@pytest.mark.parametrize("algorithm", [VALIDATE, TARGETS, REPORT])
def test_cancel_leaves_no_folder_and_no_layer(dock, project, scene, results, algorithm):
    """Cancel right after the start: cancelled, the run's folder gone, no layer added, buttons back."""
    need(algorithm)
    full_run(dock)
    view = dock.handover
    view.deposits_box.setLayer(point_layer(project, scene / "deposits.gpkg", "deposits"))
    layers = set(project.mapLayers())
    start = {VALIDATE: view.run_validation, TARGETS: view.run_targets, REPORT: view.run_report}[algorithm]
    controls = view.controls(algorithm)

    def start_and_cancel():
        job = start()
        assert controls.cancel_button.isEnabled() and not controls.run_button.isEnabled()
        view.cancel(algorithm)
        return job

    outcome = finish(view, start_and_cancel)
    assert outcome.cancelled and not outcome.ok
    assert not Path(outcome.folder).exists()
    assert set(project.mapLayers()) == layers
    assert controls.status.text() == "Cancelled; nothing was written."
    assert controls.run_button.isEnabled() and not controls.cancel_button.isEnabled()


# -- why here? ---------------------------------------------------------------------------------


def ask(dock: FavourDock, x: float, y: float, wkt: str = ""):
    """Ask the dock why a place scores what it does; return ("answer", CellValues) or ("failed", text)."""
    got = []

    def answered(answer):
        got.append(("answer", answer))

    def failed(text):
        got.append(("failed", text))

    dock.why.answered.connect(answered)
    dock.why.failed.connect(failed)
    try:
        dock.why_here(x, y, wkt)
        assert wait(lambda: got, 120), "no answer came"
    finally:
        dock.why.answered.disconnect(answered)
        dock.why.failed.disconnect(failed)
    return got[0]


def probe_folders(results: Path) -> list[Path]:
    """Return the probe's work folders under the results folder."""
    return [p for p in results.iterdir() if p.name.startswith(WORK_PREFIX)] if results.exists() else []


def test_why_here_shows_the_cells_of_the_dock_run(dock, project, results):
    """The panel's μ of the root and each component are the cells the dock's run wrote; leaves give values."""
    run = full_run(dock)
    fav = read_raster(run.output)
    components = {name: read_raster(Path(run.node_folder) / f"{name}.tif")
                  for name in ("source", "pathway", "trap")}
    for row, col in [(20, 30), (1, 1), (49, 0)]:
        kind, answer = ask(dock, *centre(row, col), srs(TEST_CRS).ExportToWkt())
        assert kind == "answer"
        rows = dock.why_panel.rows()
        expected = fav[row, col]
        assert rows[ROOT][2] == mu_text(answer.root.mu)
        if math.isnan(expected):
            assert answer.root.mu is None and rows[ROOT][2] == "no value"
        else:
            assert np.float32(answer.root.mu) == expected
        for name, raster in components.items():
            mu = answer.node(f"{ROOT} > {name.capitalize()}").mu
            assert (mu is None) if math.isnan(raster[row, col]) else np.float32(mu) == raster[row, col]
        faults = rows[f"{ROOT} > Pathway > Near faults"]
        assert faults[1] == "linear (lower 3000, upper 0)" and faults[3].endswith(" m to the nearest feature")
        assert rows[f"{ROOT} > Source"][1] == "fuzzy OR"
        assert rows[ROOT][1] == "gamma γ = 0.7"
        mag = rows[f"{ROOT} > Source > Mag"]
        if (row, col) == (1, 1):  # on Mag's nodata
            assert mag[2] == mag[3] == "no value"
        else:
            assert float(mag[3]) == pytest.approx(answer.node(f"{ROOT} > Source > Mag").value, rel=1e-5)
        assert answer.prepared == ((row, col) == (20, 30))
    assert len(probe_folders(results)) == 1  # prepared once, reused


def test_why_here_outside_the_grid_or_without_a_tree_says_so(dock, results):
    """A click outside the grid shows the probe's message in the panel; no tree gives a named message."""
    kind, text = ask(dock, ORIGIN[0] - 500.0, ORIGIN[1] + 500.0)
    assert kind == "failed" and "lies outside the model's grid" in text
    assert "lies outside the model's grid" in dock.why_panel.status.text()
    assert probe_folders(results) == []
    dock.controller.reset(None)
    assert dock.why_here(*centre(3, 3)) is None
    assert "There is no tree to ask about" in messages(dock.iface, Qgis.Warning)
    assert not dock.actions.why_here.isEnabled()


def test_the_map_tool_reports_a_click_and_the_answer_follows(dock, results):
    """The action sets the tool on the canvas; a click there is answered; release removes the work."""
    canvas = dock.iface.mapCanvas()
    canvas.setDestinationCrs(QgsCoordinateReferenceSystem.fromProj(TEST_CRS))
    dock.actions.why_here.setChecked(True)
    assert canvas.mapTool() is dock.why_tool
    answers = []
    dock.why.answered.connect(answers.append)
    event = QgsMapMouseEvent(canvas, QEvent.MouseButtonRelease, QPoint(5, 5), Qt.LeftButton)
    event.setMapPoint(QgsPointXY(*centre(12, 34)))
    dock.why_tool.canvasReleaseEvent(event)
    assert wait(lambda: answers, 120)
    assert (answers[0].row, answers[0].col) == (12, 34)
    assert len(probe_folders(results)) == 1
    dock.why.release()
    assert probe_folders(results) == []
    dock.actions.why_here.setChecked(False)
    assert canvas.mapTool() is not dock.why_tool


def test_cancel_while_preparing_leaves_no_work_folder(dock, scene, results, tmp_path):
    """A slow first preparation (a distance over 9 million cells) is cancelled: said, nothing left."""
    doc = tree_doc([leaf("Near faults", str(scene / "faults.gpkg"), {"type": "linear", "lower": 3000,
                                                                      "upper": 0},
                         layer="faults", measure="distance")],
                   {"type": "or"}, grid={"crs": TEST_CRS, "cell_size": 10.0,
                                         "extent": [ORIGIN[0], ORIGIN[1] - 30000, ORIGIN[0] + 30000,
                                                    ORIGIN[1]]})
    assert dock.open_tree_file(write_tree(tmp_path / "big.favour.json", doc))
    progress, got = [], []
    dock.why.progress_changed.connect(progress.append)
    dock.why.failed.connect(got.append)
    dock.why.answered.connect(got.append)
    assert dock.why_here(*centre(3, 3)) is not None
    assert dock.why_panel.cancel_button.isEnabled()
    assert wait(lambda: progress or got, 60)
    dock.why_panel.cancel_button.click()
    assert wait(lambda: got, 120)
    assert isinstance(got[0], str) and "cancel" in got[0]
    assert probe_folders(results) == []
    assert not dock.why_panel.cancel_button.isEnabled()


def test_without_an_interface_there_is_no_map_tool_but_why_here_answers(project, scene, results):
    """No iface (qgis_process, scripts): no map tool, the action stays off, why_here() still answers."""
    controller = TreeController()
    widget = FavourDock(controller, None, project)
    try:
        assert widget.open_tree_file(str(scene / "model.favour.json"))
        controller.set_run_options(str(results))
        assert widget.why_tool is None
        widget.actions.why_here.setChecked(True)
        assert not widget.actions.why_here.isChecked()
        got = []
        widget.why.answered.connect(got.append)
        assert widget.why_here(*centre(7, 8)) is not None
        assert wait(lambda: got, 120)
        assert (got[0].row, got[0].col) == (7, 8) and got[0].root.mu is not None
    finally:
        wait(lambda: not widget.why.busy(), 60)
        widget.shutdown()
        widget.deleteLater()
        QgsApplication.sendPostedEvents(None, QEvent.DeferredDelete)
        QgsApplication.processEvents()
    assert probe_folders(results) == []


def test_the_last_monte_carlo_and_sensitivity_go_into_the_targets_and_the_report(qgis_iface, project,
                                                                                  tmp_path):
    """Robustness of the dock's Monte Carlo per zone; its rasters, table and chart read by the report."""
    need(TARGETS, REPORT, MONTE_CARLO, SENSITIVITY)
    _, _, sheets = small_workshop(tmp_path)
    results = tmp_path / "results"
    controller = TreeController()
    store = ProjectStore(controller, project, qgis_iface)
    widget = FavourDock(controller, qgis_iface, project)
    try:
        assert widget.open_tree_file(str(tmp_path / "tree.json"))
        controller.set_run_options(str(results), component_rasters=True)
        full_run(widget)
        workshop, view = widget.workshop, widget.handover
        assert workshop.load_round(sheets)
        workshop.uncertainty.realisations.setValue(8)
        mc = finish(workshop.uncertainty, workshop.uncertainty.run_monte_carlo)
        assert mc.ok, mc.message
        assert finish(workshop.uncertainty, workshop.uncertainty.run_sensitivity).ok
        assert view.robustness() == mc.files["OUTPUT_ROBUSTNESS"] and view.robustness_check.isChecked()
        assert "the Monte Carlo rasters, the sensitivity table and chart" in view.report_inputs.text()
        targets = finish(view, view.run_targets)
        assert targets.ok, targets.message
        ds = ogr.Open(targets.file("OUTPUT"))
        definition = ds.GetLayerByName("targets").GetLayerDefn()
        fields = {definition.GetFieldDefn(i).GetName() for i in range(definition.GetFieldCount())}
        definition = None
        ds = None
        assert "robustness" in fields
        report = finish(view, view.run_report)
        assert report.ok, report.message
        lineage = json.loads(Path(report.file("OUTPUT") + ".lineage.json").read_text(encoding="utf-8"))
        read = {Path(f["path"]).resolve() for entry in lineage["inputs"] for f in entry["files"]}
        for key in ("OUTPUT_MEAN", "OUTPUT_STD", "OUTPUT_ROBUSTNESS", "OUTPUT_P10", "OUTPUT_P50",
                    "OUTPUT_P90"):
            assert Path(mc.files[key]).resolve() in read, key
        sensitivity = view.last_sensitivity.files
        assert {Path(sensitivity["OUTPUT_TABLE"]).resolve(), Path(sensitivity["OUTPUT_CHART"]).resolve(),
                Path(targets.file("OUTPUT")).resolve()} <= read
    finally:
        wait(lambda: idle(widget) and not widget.handover.busy(), 120)
        widget.shutdown()
        store.disconnect_all()
        widget.deleteLater()
        QgsApplication.sendPostedEvents(None, QEvent.DeferredDelete)
        QgsApplication.processEvents()
