"""Workshop sheets and aggregation: numpy/scipy.stats references, hand-computed pools, round trips.

Every bad sheet and every other workshop refusal is a row of the table in tests/test_refusals.py.
"""

from __future__ import annotations

import csv
import importlib.util
import io
import math
from pathlib import Path

import numpy as np
import pytest
import scipy.stats
from hypothesis import given, settings
from hypothesis import strategies as st

from favour_plugin.core.pairwise import pairwise_weights
from favour_plugin.core.scoring import Score, Scores, Workshop, apply_values, node_items, normalised_weights
from favour_plugin.core.sheet_import import import_round, read_sheets
from favour_plugin.core.sheets import GROUP_COLUMNS, export_sheets, sheet_rows, xlsx_available
from favour_plugin.core.tree import Tree
from favour_plugin.core.workshop import (
    DEFAULT_THRESHOLD,
    aggregate,
    aggregate_tree,
    compare_rounds,
    summarise,
    tree_with_weights,
    trimmed_mean,
)
from tests.helpers import leaf, scored_tree, sheet_edit, tree_doc

ROOT = Path(__file__).resolve().parent.parent
SETTINGS = settings(max_examples=60, deadline=2000, derandomize=True)
SPLAYS, SOURCE = "Favourability > Pathway > Splays", "Favourability > Source"
KEEL = "Favourability > Source > Keel"


@pytest.fixture
def good_sheet(tmp_path):
    """A first-round sheet of the test tree for expert E1, as written by export_sheets."""
    tree = scored_tree()
    (path,) = export_sheets(tree, tmp_path, ["E1"])
    return tree, path


# -- round trips ------------------------------------------------------------------------


def _assert_tree_values(scores: Scores, tree: Tree, experts):
    items = node_items(tree)
    assert scores.experts == tuple(experts)
    for expert in experts:
        for node, specs in items.items():
            for item, spec in specs.items():
                score = scores.table[expert][node][item]
                assert score.value == spec.value and not score.has_range and score.confidence is None


@pytest.mark.parametrize("fmt", ["csv", "xlsx"])
def test_export_import_round_trip_gives_the_tree_back(tmp_path, fmt):
    """Export → import gives every value of the tree exactly; the aggregate tree keeps the weight ratios."""
    if fmt == "xlsx" and not xlsx_available():
        pytest.skip("openpyxl is not installed")
    for tree in (scored_tree(), Tree.load(ROOT / "resources" / "demo" / "district.favour.json")):
        before = tree.to_dict()
        paths = export_sheets(tree, tmp_path / fmt / tree.root.children[0].name, 3, fmt=fmt)
        scores = read_sheets(paths, tree)
        _assert_tree_values(scores, tree, ["E1", "E2", "E3"])
        rebuilt = aggregate_tree(tree, aggregate(scores))
        assert tree.to_dict() == before
        expected, got = normalised_weights(tree), normalised_weights(rebuilt)
        assert got == pytest.approx(expected, rel=1e-14)
        for (path, node), (_, new) in zip(tree.walk(), rebuilt.walk()):
            assert new.membership == node.membership, path


def test_semicolon_csv_with_byte_order_mark_is_read(tmp_path):
    """A sheet saved by a spreadsheet with ';' separators and a UTF-8 byte-order mark reads the same."""
    tree = scored_tree()
    (path,) = export_sheets(tree, tmp_path, ["E1"])
    rows = list(csv.reader(path.read_text(encoding="utf-8").split("\n")))
    out = io.StringIO()
    csv.writer(out, delimiter=";", lineterminator="\r\n").writerows(r for r in rows if r)
    path.write_bytes(b"\xef\xbb\xbf" + out.getvalue().encode("utf-8"))
    _assert_tree_values(read_sheets([path], tree), tree, ["E1"])


def test_blank_value_is_no_opinion_and_ranges_and_confidence_are_kept(good_sheet):
    """A blank value abstains; a range, confidence and note read back as written."""
    tree, path = good_sheet
    text = sheet_edit(SOURCE, "importance", value="")(path.read_text(encoding="utf-8"))
    text = sheet_edit(SPLAYS, "membership.lower", value="750", low="600", high="900", confidence="High",
                 note="from the mapped splays")(text)
    path.write_text(text, encoding="utf-8")
    scores = read_sheets([path], tree)
    assert "importance" not in scores.table["E1"].get(SOURCE, {})
    assert scores.table["E1"][SPLAYS]["membership.lower"] == Score(
        750.0, 600.0, 900.0, "high", "from the mapped splays", f"{path} row 16")


def test_second_round_carries_the_group_spread_and_keeps_both_rounds(tmp_path):
    """Round 2 sheets carry round 1's median, IQR and n; importing them keeps rounds 1 and 2 side by side."""
    tree = scored_tree()
    paths = export_sheets(tree, tmp_path / "r1", 4)
    for k, path in enumerate(paths):
        text = sheet_edit(SOURCE, "importance", value=str(2 * k + 3))(path.read_text(encoding="utf-8"))
        path.write_text(text, encoding="utf-8")
    workshop = import_round(Workshop(), paths, tree)
    first = aggregate(workshop.latest)
    assert first.get(SOURCE, "importance").flagged            # 3, 5, 7, 9
    rows = sheet_rows(tree, "E2", previous=workshop.latest, group=first)
    row = next(r for r in rows if r["node"] == SOURCE and r["item"] == "importance")
    assert (row["value"], row["group_median"], row["group_iqr"], row["group_n"]) == ("5", "6", "3", "4")
    second_paths = export_sheets(tree, tmp_path / "r2", 4, previous=workshop.latest, group=first,
                                 round_number=2)
    assert second_paths[0].name == "E1-round2.csv"
    header = next(line for line in second_paths[0].read_text(encoding="utf-8").split("\n")
                  if not line.startswith("#"))
    assert header.endswith(",".join(GROUP_COLUMNS))
    for path in second_paths:
        path.write_text(sheet_edit(SOURCE, "importance", value="6")(path.read_text(encoding="utf-8")),
                        encoding="utf-8")
    workshop = import_round(workshop, second_paths, tree)
    assert [r.round_number for r in workshop.rounds] == [1, 2]
    assert workshop.rounds[0].table["E1"][SOURCE]["importance"].value == 3.0
    assert workshop.rounds[1].table["E1"][SOURCE]["importance"].value == 6.0
    change = next(c for c in compare_rounds(first, aggregate(workshop.latest))
                  if (c.node, c.item) == (SOURCE, "importance"))
    assert change.settled and change.after.iqr == 0.0


# -- aggregation ------------------------------------------------------------------------


@SETTINGS
@given(st.lists(st.floats(0.1, 1000.0), min_size=1, max_size=15), st.sampled_from([0.0, 0.1, 0.2, 0.3, 0.45]))
def test_summaries_match_numpy_and_scipy_stats(values, trim):
    """Mean, median: numpy; trimmed: scipy.stats.trim_mean; IQR: scipy.stats.iqr; CV: stats.variation."""
    experts = [f"E{k}" for k in range(len(values))]
    s = summarise("n", "importance", dict(zip(experts, values)), dict.fromkeys(experts, 1.0), trim=trim)
    x = np.array(values)
    assert s.mean == pytest.approx(np.mean(x), rel=1e-12)
    assert s.median == pytest.approx(np.median(x), rel=1e-12)
    assert s.trimmed == pytest.approx(scipy.stats.trim_mean(x, trim), rel=1e-12)
    assert trimmed_mean(x, trim) == pytest.approx(scipy.stats.trim_mean(x, trim), rel=1e-12)
    assert s.iqr == pytest.approx(scipy.stats.iqr(x), rel=1e-12, abs=1e-9)
    assert s.pool == pytest.approx(np.mean(x), rel=1e-12)
    assert s.cv == pytest.approx(scipy.stats.variation(x), rel=1e-9, abs=1e-12)
    assert s.flagged == (s.cv > DEFAULT_THRESHOLD)


def test_linear_pool_by_hand():
    """Linear pool of 2, 4, 9 weighted 1, 1, 2 is 6, SD √9.5; range ends and an abstainer's weight by hand."""
    weights = {"E1": 1.0, "E2": 1.0, "E3": 2.0, "E4": 4.0}
    s = summarise("n", "membership.lower", {"E1": 2.0, "E2": 4.0, "E3": 9.0}, weights,
                  ranges={"E1": (1.0, 3.0), "E3": (7.0, 13.0)})
    assert s.pool == pytest.approx(6.0, rel=1e-15)                    # (2 + 4 + 2·9) / 4
    assert s.cv == pytest.approx(math.sqrt(9.5) / 6.0, rel=1e-14)     # ¼·16 + ¼·4 + ½·9 = 9.5
    assert s.weights == pytest.approx((0.25, 0.25, 0.5))
    assert (s.low, s.high) == pytest.approx((5.0, 29.0 / 3.0))       # (1 + 2·7)/3, (3 + 2·13)/3
    assert s.mean == 5.0 and s.median == 4.0


def test_flags_follow_the_threshold():
    """3, 5, 7, 9 (CV 0.37) is flagged at 0.25 and not at 0.4; 5, 6, 6, 7 (CV 0.12) is not; zero mean is."""
    w = {f"E{k}": 1.0 for k in range(4)}

    def cv_flag(values, threshold=DEFAULT_THRESHOLD):
        s = summarise("n", "i", dict(zip(w, values)), w, threshold=threshold)
        return round(s.cv, 2), s.flagged

    assert cv_flag([3, 5, 7, 9]) == (0.37, True)
    assert cv_flag([3, 5, 7, 9], 0.4) == (0.37, False)
    assert cv_flag([5, 6, 6, 7]) == (0.12, False)
    assert cv_flag([-1, 1, -1, 1]) == (math.inf, True)
    assert cv_flag([0, 0, 0, 0]) == (0.0, False)


def test_identical_values_aggregate_exactly():
    """When every expert gives the same value, each statistic is that value bit for bit."""
    value = 0.1 + 0.2
    w = {"A": 0.3, "B": 0.3, "C": 0.4}
    s = summarise("n", "i", dict.fromkeys(w, value), w)
    assert (s.mean, s.median, s.trimmed, s.pool, s.iqr, s.cv) == (value, value, value, value, 0.0, 0.0)


def _scores(table: dict) -> Scores:
    return Scores(table={e: {n: {i: Score(v) for i, v in items.items()} for n, items in nodes.items()}
                         for e, nodes in table.items()}, experts=tuple(table))


def test_aggregate_tree_puts_normalised_weights_and_pooled_parameters_in_a_new_tree():
    """Importances 9 and 3 → weights 0.75 and 0.25; the pooled lower goes in; the input tree is unchanged."""
    tree = scored_tree()
    before = tree.to_dict()
    scores = _scores({
        "E1": {KEEL: {"importance": 9}, "Favourability > Source > Pile": {"importance": 2},
               SPLAYS: {"membership.lower": 700}},
        "E2": {KEEL: {"importance": 9}, "Favourability > Source > Pile": {"importance": 4},
               SPLAYS: {"membership.lower": 900}},
    })
    new = aggregate_tree(tree, aggregate(scores))
    assert tree.to_dict() == before
    assert new.find(KEEL).weight == 0.75 and new.find("Favourability > Source > Pile").weight == 0.25
    assert new.find(SPLAYS).membership == {"type": "linear", "lower": 800.0, "upper": 100}
    assert aggregate_tree(tree, aggregate(scores), "median").find(SPLAYS).membership["lower"] == 800.0
    new.compile()


def test_partly_scored_siblings_share_the_weight_they_hold():
    """Children weighted 1, 1, 2 with only the first two scored 9 and 3: 0.375, 0.125, 0.5 (by hand)."""
    doc = tree_doc([{"name": "P", "operator": {"type": "weighted_mean"}, "children": [
        {**leaf(name, "x.tif", {"type": "linear", "lower": 0, "upper": 1}), "weight": w}
        for name, w in (("A", 1), ("B", 1), ("C", 2))]}])
    tree = Tree.from_dict(doc)
    new = apply_values(tree, {"Favourability > P > A": {"importance": 9},
                              "Favourability > P > B": {"importance": 3}})
    assert [c.weight for c in new.find("Favourability > P").children] == [0.375, 0.125, 0.5]


def test_pairwise_weights_go_into_a_new_tree():
    """Pairwise-comparison weights become the children's weights in a new tree; the tree is unchanged."""
    tree = scored_tree()
    result = pairwise_weights([[1, 3], [1 / 3, 1]])
    new = tree_with_weights(tree, "Favourability > Source", result.weights)
    assert [c.weight for c in new.find("Favourability > Source").children] == pytest.approx([0.75, 0.25])
    assert tree.find(KEEL).weight == 2


def _load_demo_workshop():
    spec = importlib.util.spec_from_file_location("demo_workshop", ROOT / "resources/demo/workshop.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_demo_workshop_flags_only_the_disputed_node(tmp_path):
    """The seeded demo workshop: five experts, both rounds import, only the planted dispute is flagged."""
    demo = _load_demo_workshop()
    manifest = demo.generate_workshop(tmp_path, seed=demo.DEFAULT_SEED)
    assert len(manifest["experts"]) >= 4
    assert manifest["flagged_round1"] == [demo.DISPUTED]
    tree = Tree.load(demo.TREE_FILE)
    first = read_sheets([tmp_path / name for name in manifest["round1"]], tree)
    second = read_sheets([tmp_path / name for name in manifest["round2"]], tree, round_number=2)
    a1, a2 = aggregate(first), aggregate(second)
    assert a1.flagged_nodes == [demo.DISPUTED]
    disputed = (demo.DISPUTED, "importance")
    assert a2.summaries[disputed].iqr < a1.summaries[disputed].iqr
    again = tmp_path / "again"
    demo.generate_workshop(again, seed=demo.DEFAULT_SEED)
    assert all((again / n).read_bytes() == (tmp_path / n).read_bytes() for n in manifest["round1"])
    aggregate_tree(tree, a1).compile()
