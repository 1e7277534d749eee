"""The dock's workshop page in a headless QGIS (pytest-qgis): rounds, aggregate, flags, pairwise, runs.

Outside references: numpy and scipy.stats (mean, median, ``trim_mean``,
``average`` with weights, ``iqr``) for the numbers the table shows, and
``numpy.linalg.eig`` for the pairwise dialog's principal eigenvector and
λmax. The rest are properties that must hold: the table shows exactly
:func:`favour_plugin.core.workshop.aggregate`'s numbers and flags, "use the
aggregate" and Apply are each one undo step that undo gives back exactly, and
a bad sheet changes nothing. The demo layers and the demo workshop (five
invented experts, two rounds) are generated into a temporary folder.
"""

from __future__ import annotations

import csv
import importlib.util
import shutil
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import scipy.stats
from qgis.core import Qgis, QgsApplication, QgsProject, QgsVectorLayer
from qgis.PyQt.QtCore import QEvent, Qt
from qgis.PyQt.QtWidgets import QDialogButtonBox

from favour_plugin.core.pairwise import RANDOM_INDEX, matrix_from_judgements, pairwise_weights
from favour_plugin.core.scoring import node_items
from favour_plugin.core.sheet_import import read_sheets
from favour_plugin.core.workshop import STATISTICS, aggregate, aggregate_tree
from favour_plugin.gui.algorithm_job import algorithm_available
from favour_plugin.gui.common import STRAW
from favour_plugin.gui.controller import TreeController
from favour_plugin.gui.dock import FavourDock
from favour_plugin.gui.ensemble_job import MONTE_CARLO, SENSITIVITY
from favour_plugin.gui.project_store import ProjectStore
from favour_plugin.gui.workshop_model import FLAG_ROLE, KEY_ROLE, VALUE_ROLE, number_text
from tests.test_dock import DEMO, TREE_FILE, generate, idle, messages, wait

pytestmark = pytest.mark.usefixtures("favour_provider")

PATHWAY = "Favourability > Pathway"
DISPUTED = "Favourability > Pathway > Fault mesh"
MAGNETITE = "Favourability > Pathway > Alteration footprint > Magnetite destruction"


def _load_workshop_script():
    """Import resources/demo/workshop.py (a script, not a package)."""
    spec = importlib.util.spec_from_file_location("favour_demo_workshop_dock", DEMO / "workshop.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


demo_workshop = _load_workshop_script()


@pytest.fixture(scope="module")
def district(tmp_path_factory) -> Path:
    """The demo tree file beside freshly generated layers and the demo workshop's sheets."""
    folder = tmp_path_factory.mktemp("workshop-demo")
    generate.generate(folder / "layers", generate.DEFAULT_SEED)
    shutil.copy(TREE_FILE, folder / TREE_FILE.name)
    demo_workshop.generate_workshop(folder / "workshop")
    return folder


@pytest.fixture()
def rounds(district) -> tuple[list[str], list[str]]:
    """The demo workshop's round-1 and round-2 sheet files."""
    folder = district / "workshop"
    return ([str(folder / f"E{k}.csv") for k in range(1, 6)],
            [str(folder / "round2" / f"E{k}-round2.csv") for k in range(1, 6)])


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
def dock(qgis_iface, project, district):
    """A dock with the demo tree open, as wide as the dock usually is; torn down once idle."""
    controller = TreeController()
    store = ProjectStore(controller, project, qgis_iface)
    widget = FavourDock(controller, qgis_iface, project)
    widget.resize(600, 900)
    assert widget.open_tree_file(str(district / TREE_FILE.name))
    yield widget
    wait(lambda: idle(widget) and not (widget.workshop.uncertainty.job and
                                       widget.workshop.uncertainty.job.running), 120)
    widget.shutdown()
    store.disconnect_all()
    widget.deleteLater()
    QgsApplication.sendPostedEvents(None, QEvent.DeferredDelete)
    QgsApplication.processEvents()


def table(view) -> dict:
    """Return (node, item) → {column title: (number, text)} as the workshop table shows them."""
    model = view.model
    titles = model.columns()
    out = {}
    for row in range(model.rowCount()):
        key = model.data(model.index(row, 0), KEY_ROLE)
        out[key] = {titles[c]: (model.data(model.index(row, c), VALUE_ROLE),
                                model.data(model.index(row, c), Qt.DisplayRole))
                    for c in range(2, len(titles))}
    return out


def flagged_rows(view) -> set:
    """Return the (node, item) of the rows the table flags."""
    model = view.model
    return {model.data(model.index(r, 0), KEY_ROLE) for r in range(model.rowCount())
            if model.data(model.index(r, 0), FLAG_ROLE)}


# -- the table -----------------------------------------------------------------------------


def test_the_table_shows_the_aggregate_of_each_statistic(dock, rounds):
    """Each statistic, IQR and CV equal core.workshop.aggregate's; the disputed row equals numpy/scipy's.

    Outside reference: numpy mean, median, average (weights), scipy.stats.trim_mean(0.2) and
    scipy.stats.iqr on the five experts' importances of the fault mesh.
    """
    view = dock.workshop
    assert view.load_round(rounds[0])
    expected = aggregate(read_sheets(rounds[0], dock.controller.tree))
    columns = {"pool": "Pooled", "mean": "Mean", "median": "Median", "trimmed": "Trimmed"}
    for statistic in STATISTICS:
        view.set_statistic(statistic)
        shown = table(view)
        assert list(shown) == list(expected.summaries)
        for key, summary in expected.summaries.items():
            value, text = shown[key][columns[statistic]]
            assert value == summary.statistic(statistic) and text == number_text(value)
            assert shown[key]["IQR"][0] == summary.iqr and shown[key]["CV"][0] == summary.cv
            for expert, x in zip(summary.experts, summary.values):
                assert shown[key][expert][0] == x
    x = np.array([table(view)[(DISPUTED, "importance")][e][0] for e in ("E1", "E2", "E3", "E4", "E5")])
    reference = {"pool": np.average(x, weights=np.ones(5)), "mean": np.mean(x), "median": np.median(x),
                 "trimmed": scipy.stats.trim_mean(x, 0.2)}
    for statistic in STATISTICS:
        view.set_statistic(statistic)
        row = table(view)[(DISPUTED, "importance")]
        assert row[columns[statistic]][0] == pytest.approx(reference[statistic], rel=1e-12)
        assert row["IQR"][0] == pytest.approx(scipy.stats.iqr(x), rel=1e-12)
        assert row["CV"][0] == pytest.approx(np.std(x) / abs(np.mean(x)), rel=1e-12)


def test_expert_weights_change_the_pool_at_once(dock, rounds):
    """A weight typed in an expert's box gives the weighted mean of numpy.average on every row.

    Outside reference: numpy.average with the weights (3, 0, 1, 1, 1), and the CV as
    the weighted standard deviation over the pool.
    """
    view = dock.workshop
    assert view.load_round(rounds[0])
    view.weight_boxes["E1"].setValue(3.0)
    view.weight_boxes["E2"].setValue(0.0)
    weights = np.array([3.0, 0.0, 1.0, 1.0, 1.0])
    shown = table(view)
    for key, row in shown.items():
        x = np.array([row[e][0] for e in ("E1", "E2", "E3", "E4", "E5")])
        assert not np.isnan(x).any(), key  # every demo expert scores every item
        pool = np.average(x, weights=weights)
        assert row["Pooled"][0] == pytest.approx(pool, rel=1e-12, abs=1e-15)
    x = np.array([shown[(DISPUTED, "importance")][e][0] for e in ("E1", "E2", "E3", "E4", "E5")])
    pool = np.average(x, weights=weights)
    cv = np.sqrt(np.average((x - pool) ** 2, weights=weights)) / abs(pool)
    assert shown[(DISPUTED, "importance")]["CV"][0] == pytest.approx(cv, rel=1e-12)
    assert view.state.weights_text(view.state.scores()) == "E1=3, E2=0, E3=1, E4=1, E5=1"


def test_flagged_rows_are_exactly_the_aggregates_flags_and_marked_beyond_colour(dock, rounds):
    """Flagged rows equal Aggregate.flagged at the default and a user's threshold; bold, icon, colour."""
    view = dock.workshop
    assert view.load_round(rounds[0])
    scores = view.state.scores()
    expected = {(s.node, s.item) for s in aggregate(scores).flagged}
    assert expected == {(DISPUTED, "importance")}  # the demo's planted disagreement
    assert flagged_rows(view) == expected
    model = view.model
    for row in range(model.rowCount()):
        index = model.index(row, 0)
        if model.data(index, FLAG_ROLE):
            assert model.data(index, Qt.BackgroundRole) == STRAW
            assert model.data(index, Qt.FontRole).bold()
            assert not model.data(index, Qt.DecorationRole).isNull()
            assert "Flagged for discussion" in model.data(index, Qt.ToolTipRole)
        else:
            assert model.data(index, Qt.BackgroundRole) is None
            assert model.data(index, Qt.DecorationRole) is None
    view.threshold_box.setValue(0.02)
    assert flagged_rows(view) == {(s.node, s.item) for s in aggregate(scores, threshold=0.02).flagged}
    assert len(flagged_rows(view)) > 1
    assert f"{len(flagged_rows(view))} flagged for discussion (CV above 0.02)" in view.summary.text()


def test_weights_all_zero_are_named_and_nothing_is_pooled(dock, rounds):
    """Every expert weighted 0: the line under the table says why, and the aggregate cannot be used."""
    view = dock.workshop
    assert view.load_round(rounds[0])
    for expert in ("E1", "E2", "E3", "E4", "E5"):
        view.weight_boxes[expert].setValue(0.0)
    assert "expert weights are all 0" in view.summary.text()
    assert not view.use_button.isEnabled()
    before = dock.controller.tree.to_dict()
    assert not view.use_aggregate()
    assert dock.controller.tree.to_dict() == before
    view.weight_boxes["E4"].setValue(1.0)
    assert view.use_button.isEnabled()
    assert {k: v["Pooled"][0] for k, v in table(view).items()} == \
        {k: v["E4"][0] for k, v in table(view).items()}


def test_round_two_is_shown_beside_round_one_with_the_change(dock, rounds):
    """After round 2 the round box offers both; the change column is round 2's aggregate minus round 1's."""
    view = dock.workshop
    assert view.load_round(rounds[0]) and view.load_round(rounds[1])
    assert [view.round_box.itemText(k) for k in range(view.round_box.count())] == ["Round 1", "Round 2"]
    assert view.round_box.currentIndex() == 1
    tree = dock.controller.tree
    first = aggregate(read_sheets(rounds[0], tree))
    second = aggregate(read_sheets(rounds[1], tree, round_number=2))
    view.set_statistic("median")
    shown = table(view)
    assert view.model.columns()[-1] == "Change"
    for key, summary in second.summaries.items():
        assert shown[key]["Median"][0] == summary.median
        assert shown[key]["Change"][0] == summary.median - first.get(*key).median
    assert shown[(DISPUTED, "importance")]["Change"][0] != 0
    view.round_box.setCurrentIndex(0)
    assert "Change" not in view.model.columns()
    assert {k: v["Median"][0] for k, v in table(view).items()} == \
        {k: s.median for k, s in first.summaries.items()}


def test_changing_weights_reads_no_sheet_and_is_quick(dock, rounds, tmp_path):
    """Once loaded the sheets may vanish: weights, statistic, threshold and round still show; each < 0.2 s."""
    view = dock.workshop
    copies = []
    for k, path in enumerate(rounds[0] + rounds[1]):
        copies.append(str(shutil.copy(path, tmp_path / f"{k}-{Path(path).name}")))
    assert view.load_round(copies[:5]) and view.load_round(copies[5:])
    for path in copies:
        Path(path).unlink()
    slowest = 0.0
    steps = [lambda: view.set_expert_weight("E3", 2.5), lambda: view.set_statistic("trimmed"),
             lambda: view.set_threshold(0.1), lambda: view.select_round(0),
             lambda: view.set_expert_weight("E1", 0.5), lambda: view.select_round(1)]
    for step in steps:
        start = time.perf_counter()
        step()
        slowest = max(slowest, time.perf_counter() - start)
    assert slowest < 0.2, f"a workshop handler took {slowest:.3f} s"
    assert view.model.rowCount() == len(aggregate(view.state.scores()).summaries)


def test_a_bad_sheet_changes_nothing_and_names_file_row_and_column(dock, rounds, tmp_path):
    """An importance of 12 in one round-2 sheet: refused, naming file, row and column; round 1 stays."""
    view = dock.workshop
    assert view.load_round(rounds[0])
    before_table = table(view)
    before_tree = dock.controller.tree.to_dict()
    steps = dock.controller.undo_stack.count()
    bad = tmp_path / "E3-round2.csv"
    lines = Path(rounds[1][2]).read_text(encoding="utf-8").splitlines()
    row = next(k for k, line in enumerate(lines, start=1) if ",importance," in line)
    cells = lines[row - 1].split(",")
    cells[3] = "12"
    lines[row - 1] = ",".join(cells)
    bad.write_text("\n".join(lines) + "\n", encoding="utf-8")
    assert not view.load_round([*rounds[1][:2], str(bad), *rounds[1][3:]])
    text = messages(dock.iface)
    assert "Round 2 was not loaded; nothing was changed" in text
    assert f"{bad} row {row}, column 'value': importance must lie between 1 and 9, got 12" in text
    assert len(view.state.rounds) == 1 and view.round_box.count() == 1
    assert table(view) == before_table
    assert dock.controller.tree.to_dict() == before_tree
    assert dock.controller.undo_stack.count() == steps


# -- the aggregate into the tree -------------------------------------------------------------


def test_use_the_aggregate_is_one_undo_step_starts_a_quick_look_and_reruns(dock, project, rounds):
    """Use: aggregate_tree's tree, one undo step, a quick look; a new weight and Use again re-run it."""
    view = dock.workshop
    controller = dock.controller
    original = controller.tree.to_dict()
    steps = controller.undo_stack.count()
    assert view.load_round(rounds[0])
    outcomes = []
    dock.run_finished.connect(outcomes.append)
    expected = aggregate_tree(controller.tree, aggregate(view.state.scores()), "pool").to_dict()
    assert view.use_aggregate()
    assert controller.tree.to_dict() == expected != original
    assert controller.undo_stack.count() == steps + 1
    assert dock.job is not None and dock.job.quick
    assert wait(lambda: any(o.ok for o in outcomes), 60), [o.message for o in outcomes]
    first = next(o for o in outcomes if o.ok)
    assert first.quick

    view.set_expert_weight("E1", 0.0)
    weights = {"E1": 0.0, "E2": 1.0, "E3": 1.0, "E4": 1.0, "E5": 1.0}
    again = aggregate_tree(controller.tree, aggregate(view.state.scores(), weights), "pool").to_dict()
    assert view.use_aggregate()
    assert controller.tree.to_dict() == again != expected
    assert controller.undo_stack.count() == steps + 2
    assert wait(lambda: sum(o.ok for o in outcomes) == 2, 60), [o.message for o in outcomes]
    quick = [layer for layer in project.mapLayers().values() if layer.customProperty("favour/quick_look")]
    assert [layer.source() for layer in quick] == [[o for o in outcomes if o.ok][-1].output]
    dock.run_finished.disconnect(outcomes.append)
    controller.undo()
    assert controller.tree.to_dict() == expected
    controller.undo()
    assert controller.tree.to_dict() == original


def test_a_quick_look_asked_for_while_one_runs_follows_the_latest_tree(dock, rounds):
    """Two presses in a row: the first quick look is cancelled, the second runs on the tree after both."""
    view = dock.workshop
    assert view.load_round(rounds[0])
    outcomes = []
    dock.run_finished.connect(outcomes.append)
    assert view.use_aggregate()
    view.set_statistic("median")
    assert view.use_aggregate()
    assert wait(lambda: any(o.ok for o in outcomes), 60)
    assert wait(lambda: idle(dock), 60)
    dock.run_finished.disconnect(outcomes.append)
    assert [o.ok for o in outcomes][-1] and sum(o.ok for o in outcomes) == 1
    assert all(o.cancelled for o in outcomes if not o.ok)


def test_an_aggregate_that_makes_an_invalid_membership_is_refused_naming_the_node(dock, tmp_path):
    """Two experts with opposite ramps pool to lower == upper: refused, node named, nothing changed."""
    sheet = tmp_path / "ramps.csv"
    sheet.write_text(
        "expert,node,item,value,low,high,confidence\n"
        f"E1,{MAGNETITE},membership.lower,20,,,high\n"
        f"E1,{MAGNETITE},membership.upper,-80,,,high\n"
        f"E2,{MAGNETITE},membership.lower,-80,,,high\n"
        f"E2,{MAGNETITE},membership.upper,20,,,high\n", encoding="utf-8")
    view = dock.workshop
    assert view.load_round([str(sheet)])
    before = dock.controller.tree.to_dict()
    steps = dock.controller.undo_stack.count()
    assert not view.use_aggregate()
    text = messages(dock.iface)
    assert "The aggregate was not used; the tree is unchanged" in text and MAGNETITE in text
    assert dock.controller.tree.to_dict() == before and dock.controller.undo_stack.count() == steps
    assert dock.job is None
    view.set_statistic("median")  # the median of two is their mean: refused the same way
    assert not view.use_aggregate()


# -- sheets out ------------------------------------------------------------------------------


def test_sheets_exported_from_the_dock_read_back_as_the_trees_values(dock, rounds, tmp_path):
    """First-round sheets hold the tree's values exactly; next-round ones each expert's and the spread."""
    view = dock.workshop
    tree = dock.controller.tree
    paths = view.export_sheets(str(tmp_path / "r1"), 3)
    assert [Path(p).name for p in paths] == ["E1.csv", "E2.csv", "E3.csv"]
    scores = read_sheets(paths, tree)
    items = node_items(tree)
    for expert, node, item, score in scores.entries():
        assert score.value == items[node][item].value, (expert, node, item)
    named = view.export_sheets(str(tmp_path / "named"), ["Ana", "Ben"])
    assert [Path(p).name for p in named] == ["Ana.csv", "Ben.csv"]
    assert view.export_sheets(str(tmp_path / "none"), 2, next_round=True) is None
    assert "load a round first" in messages(dock.iface)
    assert view.load_round(rounds[0])
    nxt = view.export_sheets(str(tmp_path / "r2"), None, next_round=True)
    assert [Path(p).name for p in nxt] == [f"E{k}-round2.csv" for k in range(1, 6)]
    assert "group_median" in Path(nxt[0]).read_text(encoding="utf-8")
    again = read_sheets(nxt, tree, round_number=2)
    first = view.state.scores()
    assert {(e, n, i): s.value for e, n, i, s in again.entries()} == \
        {(e, n, i): s.value for e, n, i, s in first.entries()}


def test_sheets_are_never_written_over(dock, tmp_path):
    """A folder already holding E2.csv: refused, naming it; E2.csv keeps its bytes, no other sheet appears."""
    folder = tmp_path / "r1"
    folder.mkdir()
    (folder / "E2.csv").write_text("an expert's scores\n", encoding="utf-8")
    assert dock.workshop.export_sheets(str(folder), 3) is None
    text = messages(dock.iface)
    assert "No sheets were written" in text and str(folder / "E2.csv") in text
    assert sorted(p.name for p in folder.iterdir()) == ["E2.csv"]
    assert (folder / "E2.csv").read_text(encoding="utf-8") == "an expert's scores\n"


# -- pairwise weights ------------------------------------------------------------------------


def principal(matrix: np.ndarray) -> tuple[np.ndarray, float]:
    """Return the principal eigenvector (summing to 1) and eigenvalue by numpy.linalg.eig."""
    values, vectors = np.linalg.eig(matrix)
    k = int(np.argmax(values.real))
    vector = np.abs(vectors[:, k].real)
    return vector / vector.sum(), float(values[k].real)


def test_pairwise_dialog_shows_the_principal_eigenvector_and_flags_inconsistency(dock):
    """Weights, λmax, CI, CR equal pairwise_weights' and numpy.linalg.eig's; CR ≥ 0.10 flagged, pair named.

    Outside reference: numpy.linalg.eig's principal eigenpair of the judgement matrix;
    RI(4) = 0.90 from Saaty's table (from memory, as in core/pairwise.py).
    """
    dialog = dock.open_pairwise(PATHWAY)
    assert dialog is not None
    names = dialog.names
    assert names == [child.name for child in dock.controller.tree.find(PATHWAY).children]
    assert len(names) == 4
    judged = {(0, 1): 1 / 3, (0, 2): 2.0, (0, 3): 1.0, (1, 2): 5.0, (1, 3): 3.0, (2, 3): 1 / 2}
    for (i, j), value in judged.items():
        dialog.set_judgement(i, j, value)
    expected = pairwise_weights(matrix_from_judgements(names, dialog.judgements()))
    assert np.array_equal(dialog.result.weights, expected.weights)
    vector, lam = principal(expected.matrix)
    assert np.allclose(dialog.result.weights, vector, atol=1e-10)
    assert dialog.result.lambda_max == pytest.approx(lam, abs=1e-9)
    ci = (lam - 4) / 3
    assert dialog.result.cr == pytest.approx(ci / RANDOM_INDEX[4], abs=1e-9)
    shown = [dialog.table.item(k, 2).data(Qt.UserRole) for k in range(4)]
    assert shown == [float(w) for w in expected.weights]
    assert f"λmax {expected.lambda_max:.4f}" in dialog.numbers.text()
    assert f"CI {expected.ci:.4f}" in dialog.numbers.text()
    assert expected.cr < 0.10 and not dialog.consistency.font().bold()
    # One careless judgement: splays only equal to the fault mesh.
    dialog.set_judgement(1, 2, 1 / 5)
    bad = pairwise_weights(matrix_from_judgements(names, dialog.judgements()))
    assert bad.cr >= 0.10 and dialog.result.cr == bad.cr
    assert dialog.consistency.text().startswith("⚑") and dialog.consistency.font().bold()
    assert f"CR {bad.cr:.3f}" in dialog.consistency.text()
    i, j = bad.worst_pair
    assert f"{names[i]} is" in dialog.worst.text() and names[j] in dialog.worst.text()
    dialog.reject()


def test_pairwise_apply_is_one_undo_step_and_undo_gives_the_tree_back(dock):
    """Apply puts the weights on the children of the node; one undo step restores the tree exactly."""
    controller = dock.controller
    before = controller.tree.to_dict()
    steps = controller.undo_stack.count()
    dialog = dock.open_pairwise(PATHWAY)
    dialog.set_judgement(0, 1, 1 / 3)
    dialog.set_judgement(1, 2, 5.0)
    weights = [float(w) for w in dialog.result.weights]
    dialog.buttons.button(QDialogButtonBox.Apply).click()
    assert [child.weight for child in controller.tree.find(PATHWAY).children] == weights
    assert controller.undo_stack.count() == steps + 1
    controller.undo()
    assert controller.tree.to_dict() == before


def test_pairwise_needs_a_node_with_two_criteria_under_it(dock):
    """A leaf has nothing to compare: no dialog, a message; the toolbar action follows the selection."""
    assert dock.open_pairwise(MAGNETITE) is None
    assert "two or more criteria" in messages(dock.iface, Qgis.Warning)
    dock.select(MAGNETITE)
    assert not dock.actions.pairwise.isEnabled()
    dock.select(PATHWAY)
    assert dock.actions.pairwise.isEnabled()


def test_the_workshop_is_a_tab_that_fits_the_dock(dock):
    """The tree editor and the workshop are two tabs; the workshop fits a 600 px dock."""
    assert [dock.tabs.tabText(k) for k in range(dock.tabs.count())] == ["Tree", "Workshop", "Results"]
    dock.tabs.setCurrentIndex(1)
    assert dock.workshop.minimumSizeHint().width() <= 600


# -- uncertainty runs ------------------------------------------------------------------------


def finish(panel, start, timeout: float = 300.0):
    """Start a run on the panel and return its outcome."""
    outcomes = []
    panel.finished.connect(outcomes.append)
    job = start()
    assert job is not None, "the panel refused to run"
    assert wait(lambda: outcomes, timeout), "the run did not finish"
    panel.finished.disconnect(outcomes.append)
    return outcomes[0]


def test_monte_carlo_needs_a_round_of_sheets(dock):
    """With no round loaded the Monte Carlo is refused with a message and writes nothing."""
    assert dock.workshop.uncertainty.run_monte_carlo() is None
    assert "Load a round of score sheets first" in messages(dock.iface, Qgis.Warning)


def test_monte_carlo_from_the_dock_adds_its_rasters_from_a_new_folder(dock, project, rounds, tmp_path):
    """Eight draws of round 1 write six rasters into montecarlo-… in the results folder, added as layers."""
    results = tmp_path / "results"
    dock.controller.set_run_options(str(results))
    view = dock.workshop
    assert view.load_round(rounds[0])
    panel = view.uncertainty
    assert algorithm_available(MONTE_CARLO)  # registered by the favour_provider fixture
    panel.realisations.setValue(8)
    outcome = finish(panel, panel.run_monte_carlo)
    assert outcome.ok, outcome.message
    folder = Path(outcome.folder)
    assert folder.parent == results and folder.name.startswith("montecarlo-")
    names = [layer.name() for layer in panel.last_layers]
    assert names[0] == "Mean favourability" and len(names) == 6
    for layer in panel.last_layers:
        assert Path(layer.source()).parent == folder and Path(layer.source()).exists()
        assert layer.id() in project.mapLayers()


def test_sensitivity_from_the_dock_writes_its_table_and_chart_into_a_new_folder(dock, project, district,
                                                                                tmp_path):
    """Sensitivity with the demo's occurrences writes a table with AUCs and a chart into sensitivity-…."""
    results = tmp_path / "results"
    dock.controller.set_run_options(str(results))
    panel = dock.workshop.uncertainty
    occurrences = QgsVectorLayer(f"{district / 'layers' / 'occurrences.gpkg'}", "occurrences", "ogr")
    assert occurrences.isValid()
    project.addMapLayer(occurrences)
    panel.deposits.setLayer(occurrences)
    assert algorithm_available(SENSITIVITY)  # registered by the favour_provider fixture
    outcome = finish(panel, panel.run_sensitivity)
    assert outcome.ok, outcome.message
    folder = Path(outcome.folder)
    assert folder.parent == results and folder.name.startswith("sensitivity-")
    assert (folder / "sensitivity.csv").exists() and (folder / "tornado.png").exists()
    with open(folder / "sensitivity.csv", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert rows[0]["label"] == "base tree" and 0.5 < float(rows[0]["auc"]) <= 1.0
    assert panel.chart.pixmap() is not None and not panel.chart.pixmap().isNull()


def test_a_cancelled_monte_carlo_leaves_no_folder_and_no_layer(dock, project, rounds, tmp_path):
    """Cancel right after the start: the outcome says cancelled, the run folder is gone, no layer added."""
    results = tmp_path / "results"
    dock.controller.set_run_options(str(results))
    view = dock.workshop
    assert view.load_round(rounds[0])
    panel = view.uncertainty
    assert algorithm_available(MONTE_CARLO)
    layers = set(project.mapLayers())
    panel.realisations.setValue(400)

    def start_and_cancel():
        job = panel.run_monte_carlo()
        assert panel.cancel_button.isEnabled() and not panel.mc_button.isEnabled()
        panel.cancel()
        return job

    outcome = finish(panel, start_and_cancel)
    assert outcome.cancelled and not outcome.ok
    assert not Path(outcome.folder).exists()
    assert set(project.mapLayers()) == layers and panel.last_layers == []
    assert panel.status.text() == "Cancelled; nothing was written."
    assert panel.mc_button.isEnabled() and not panel.cancel_button.isEnabled()
