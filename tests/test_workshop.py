"""Workshop sheets and aggregation: numpy/scipy.stats references, hand-computed pools, every bad sheet."""

from __future__ import annotations

import copy
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

from favour_plugin.core.errors import ParameterError, SheetError
from favour_plugin.core.pairwise import pairwise_weights
from favour_plugin.core.scoring import Score, Scores, Workshop, apply_values, node_items, normalised_weights
from favour_plugin.core.sheet_import import import_round, read_sheets
from favour_plugin.core.sheets import GROUP_COLUMNS, export_sheets, sheet_rows, write_sheet, xlsx_available
from favour_plugin.core.tree import Tree
from favour_plugin.core.workshop import (
    DEFAULT_THRESHOLD,
    aggregate,
    aggregate_tree,
    check_expert_weights,
    compare_rounds,
    summarise,
    tree_with_weights,
    trimmed_mean,
)
from tests.helpers import leaf, tree_doc

ROOT = Path(__file__).resolve().parent.parent
SETTINGS = settings(max_examples=60, deadline=2000, derandomize=True)
DISTANCE = {"measure": "distance", "layer": "lines"}

TREE_DOC = tree_doc([
    {"name": "Source", "operator": {"type": "weighted_mean"}, "children": [
        {**leaf("Keel", "gravity.tif", {"type": "logistic", "midpoint": 2.0, "slope": 0.6}), "weight": 2},
        leaf("Pile", "litho.tif", {"type": "categories", "scores": {"1": 0.5, "2": 0.9}, "default": None}),
    ]},
    {"name": "Pathway", "operator": {"type": "weighted_mean"}, "children": [
        {**leaf("Splays", "faults.gpkg", {"type": "linear", "lower": 800, "upper": 100}, **DISTANCE),
         "weight": 3},
        {**leaf("Mesh", "faults.gpkg", {"type": "trapezoid", "points": [0, 300, 3000, 7000]}, **DISTANCE),
         "weight": 0.5},
    ]},
    {"name": "Trap", "operator": {"type": "or"}, "children": [
        leaf("Hinges", "hinges.gpkg", {"type": "gaussian", "centre": 0, "spread": 700}, **DISTANCE),
        leaf("Arsenic", "as.tif", {"type": "piecewise", "points": [[6, 0.0], [15, 0.75], [40, 0.95]]}),
    ]},
    {"name": "Preservation", "operator": {"type": "weighted_mean"}, "children": [
        {**leaf("Cover", "cover.tif", {"type": "linear", "lower": 300, "upper": 0}), "weight": 10},
        leaf("Granite", "granite.gpkg", {"type": "linear", "lower": 0, "upper": 1500}, **DISTANCE),
    ]},
])

# Sheet layout of TREE_DOC: five comment lines, the header on row 6, then one row per node and
# item in tree order. The rows the bad-sheet cases break:
ROWS = {
    ("Favourability > Source", "importance"): 7,
    ("Favourability > Source > Keel", "membership.midpoint"): 9,
    ("Favourability > Source > Keel", "membership.slope"): 10,
    ("Favourability > Source > Pile", "membership.scores.1"): 12,
    ("Favourability > Pathway > Splays", "membership.lower"): 16,
    ("Favourability > Pathway > Splays", "membership.upper"): 17,
    ("Favourability > Trap > Hinges", "membership.spread"): 26,
    ("Favourability > Preservation > Cover", "weight"): 35,
    ("Favourability > Preservation > Granite", "weight"): 38,
}
LAST_ROW = 40
SPLAYS, SOURCE = "Favourability > Pathway > Splays", "Favourability > Source"
KEEL = "Favourability > Source > Keel"
COVER, GRANITE = "Favourability > Preservation > Cover", "Favourability > Preservation > Granite"


def make_tree() -> Tree:
    """The small test tree of this module."""
    return Tree.from_dict(copy.deepcopy(TREE_DOC))


# -- editing sheet text, for the bad-sheet table ----------------------------------------


def _edit(node_path: str, item_name: str, /, **cells):
    """Return a function that sets ``cells`` on the row of (node, item) in a sheet's text."""
    def change(text: str) -> str:
        lines = text.split("\n")
        header = next(csv.reader([next(line for line in lines if line and not line.startswith("#"))]))
        for k, line in enumerate(lines):
            if not line or line.startswith("#"):
                continue
            row = next(csv.reader([line]))
            if row[1] == node_path and row[2] == item_name:
                for column, value in cells.items():
                    row[header.index(column)] = value
                out = io.StringIO()
                csv.writer(out, lineterminator="").writerow(row)
                lines[k] = out.getvalue()
                return "\n".join(lines)
        raise AssertionError(f"no row for {node_path} / {item_name}")
    return change


def _then(*changes):
    def change(text: str) -> str:
        for one in changes:
            text = one(text)
        return text
    return change


def _duplicate(node: str, item: str):
    def change(text: str) -> str:
        line = next(line for line in text.split("\n") if line.startswith(f"E1,{node},{item},"))
        return text + line + "\n"
    return change


def _latin1_note(text: str) -> bytes:
    data = _edit(KEEL, "membership.midpoint", note="XNOTEX")(text).encode("utf-8")
    return data.replace(b"XNOTEX", "gneiss à grenat".encode("latin-1"))


# (id, how the sheet text is broken, the message regex). Every message names the file, the row
# (as a spreadsheet numbers it) and, for a bad cell, the column.
BAD_SHEETS = [
    ("unknown node", _edit(SPLAYS, "membership.lower", node="Favourability > Pathway > Splay"),
     r"E1\.csv row 16, column 'node': unknown node 'Favourability > Pathway > Splay'"),
    ("item the node lacks", _edit(SPLAYS, "membership.lower", item="membership.spread"),
     r"E1\.csv row 16, column 'item': node 'Favourability > Pathway > Splays' has no item "
     r"'membership\.spread'"),
    ("item on the root", _edit(SOURCE, "importance", node="Favourability"),
     r"E1\.csv row 7, column 'item': node 'Favourability' has no item 'importance': it has nothing to "
     r"score"),
    ("importance above 9", _edit(SOURCE, "importance", value="12"),
     r"E1\.csv row 7, column 'value': importance must lie between 1 and 9, got 12"),
    ("importance below 1", _edit(SOURCE, "importance", value="0.5"),
     r"E1\.csv row 7, column 'value': importance must lie between 1 and 9, got 0\.5"),
    ("negative weight", _edit(COVER, "weight", value="-1"),
     r"E1\.csv row 35, column 'value': weight must be 0 or more, got -1"),
    ("not a number", _edit(KEEL, "membership.midpoint", value="two"),
     r"E1\.csv row 9, column 'value': 'two' is not a number"),
    ("decimal comma", _edit(KEEL, "membership.midpoint", value="2,5"),
     r"E1\.csv row 9, column 'value': '2,5' is not a number \(use a decimal point\)"),
    ("NaN", _edit(KEEL, "membership.midpoint", value="nan"),
     r"E1\.csv row 9, column 'value': must be a finite number, got 'nan'"),
    ("infinity", _edit(KEEL, "membership.midpoint", value="-inf"),
     r"E1\.csv row 9, column 'value': must be a finite number, got '-inf'"),
    ("μ above 1", _edit("Favourability > Source > Pile", "membership.scores.1", value="1.5"),
     r"E1\.csv row 12, column 'value': membership\.scores\.1 must lie between 0 and 1, got 1\.5"),
    ("spread 0", _edit("Favourability > Trap > Hinges", "membership.spread", value="0"),
     r"E1\.csv row 26, column 'value': membership\.spread must be above 0, got 0"),
    ("slope 0", _edit(KEEL, "membership.slope", value="0"),
     r"E1\.csv row 10, column 'value': membership\.slope must not be 0"),
    ("duplicate row", _duplicate(KEEL, "membership.midpoint"),
     rf"E1\.csv row {LAST_ROW + 1}, column 'item': duplicate of .*E1\.csv row 9 "
     r"\(same expert, node and item\)"),
    ("missing expert id", _edit(KEEL, "membership.midpoint", expert=""),
     r"E1\.csv row 9, column 'expert': missing expert id"),
    ("range low above high", _edit(SPLAYS, "membership.lower", low="900", high="700"),
     r"E1\.csv row 16, column 'low': low 900 is above high 700"),
    ("range with one end", _edit(SPLAYS, "membership.lower", low="700"),
     r"E1\.csv row 16, column 'high': a range needs both low and high"),
    ("range on an item that takes none", _edit(SOURCE, "importance", low="5", high="8"),
     r"E1\.csv row 7, column 'low': item 'importance' takes no range"),
    ("value outside its range", _edit(SPLAYS, "membership.lower", low="100", high="500"),
     r"E1\.csv row 16, column 'value': 800 lies outside its own range 100 to 500"),
    ("range without a value", _edit(SPLAYS, "membership.lower", value="", low="700", high="900"),
     r"E1\.csv row 16, column 'value': a range needs a value"),
    ("confidence not low/medium/high", _edit(KEEL, "membership.midpoint", confidence="sure"),
     r"E1\.csv row 9, column 'confidence': 'sure' is not low, medium or high"),
    ("invalid membership from one expert", _edit(SPLAYS, "membership.upper", value="800"),
     r"E1\.csv row 16, column 'value': with E1's values the membership of "
     r"'Favourability > Pathway > Splays' is invalid: .*'lower' and 'upper' are both 800"),
    ("siblings on two scales", _edit(COVER, "weight", item="importance", value="9"),
     r"E1\.csv row 38, column 'item': 'weight' for 'Favourability > Preservation > Granite', but a "
     r"sibling is scored by 'importance' \(.*E1\.csv row 35\)"),
    ("every weight 0", _then(_edit(COVER, "weight", value="0"), _edit(GRANITE, "weight", value="0")),
     r"E1\.csv row 35, column 'value': E1 weights every child of 'Favourability > Preservation' 0"),
    ("wrong header", lambda text: text.replace("expert,node,item,value,", "expert,node,item,score,"),
     r"E1\.csv row 6: not a score sheet: the header row lacks column\(s\) 'value'"),
    ("not a sheet", lambda text: "name,colour\nkeel,blue\n",
     r"E1\.csv row 1: not a score sheet: the header row lacks column\(s\) 'expert', 'node'"),
    ("only comments", lambda text: "".join(line + "\n" for line in text.split("\n") if line.startswith("#")),
     r"E1\.csv: not a score sheet: no header row"),
    ("non-UTF-8 bytes", _latin1_note,
     r"E1\.csv row 9: byte 0xe0 at position \d+ is not UTF-8; save the sheet as CSV with UTF-8"),
    ("empty file", lambda text: "",
     r"E1\.csv: the file is empty"),
    ("blank lines only", lambda text: "\n \n\n",
     r"E1\.csv: the file is empty"),
]


@pytest.fixture
def good_sheet(tmp_path):
    """A first-round sheet of the test tree for expert E1, as written by export_sheets."""
    tree = make_tree()
    (path,) = export_sheets(tree, tmp_path, ["E1"])
    return tree, path


def test_sheet_layout_matches_the_rows_the_cases_break(good_sheet):
    """The rows named in BAD_SHEETS are where the exporter puts those items (tree order, header row 6)."""
    tree, path = good_sheet
    rows = list(csv.reader(path.read_text(encoding="utf-8").split("\n")))
    assert rows[5][:4] == ["expert", "node", "item", "value"]
    for (node, item), number in ROWS.items():
        assert rows[number - 1][1:3] == [node, item]
    assert len([r for r in rows if r]) == LAST_ROW


@pytest.mark.parametrize("breaker, pattern", [(b, p) for _, b, p in BAD_SHEETS],
                         ids=[c[0] for c in BAD_SHEETS])
def test_bad_sheet_is_refused_naming_file_row_column_and_the_tree_is_unchanged(good_sheet, breaker, pattern):
    """Each bad sheet raises SheetError naming file, row and column; the tree's document is unchanged."""
    tree, path = good_sheet
    broken = breaker(path.read_text(encoding="utf-8"))
    if isinstance(broken, bytes):
        path.write_bytes(broken)
    else:
        path.write_text(broken, encoding="utf-8")
    before = tree.to_dict()
    with pytest.raises(SheetError, match=pattern) as caught:
        read_sheets([path], tree)
    assert "nothing was changed" in str(caught.value)
    assert tree.to_dict() == before


def test_every_problem_of_a_file_is_listed_up_to_twenty(good_sheet):
    """Many bad cells give one message listing twenty, then '… and N more'."""
    tree, path = good_sheet
    lines = path.read_text(encoding="utf-8").split("\n")
    # an extra comma after the item shifts every importance value into 'low': three problems a row
    bad = [line.replace(",importance,", ",importance,,", 1) for line in lines]
    bad += [f"E1,Favourability > Nowhere {k},importance,5,,,,," for k in range(25)]
    path.write_text("\n".join(bad), encoding="utf-8")
    with pytest.raises(SheetError) as caught:
        read_sheets([path], tree)
    message = str(caught.value)
    assert message.count("\n  - ") == 21 and message.rstrip().endswith("more")
    assert "problem(s)" in message and "row 7, column" in message


def test_problems_in_several_files_are_reported_together(tmp_path):
    """Two bad files: one message names both, and a duplicate across files names the first file."""
    tree = make_tree()
    first, second = export_sheets(tree, tmp_path, ["E1", "E2"])
    second.write_text(second.read_text(encoding="utf-8").replace("E2,", "E1,"), encoding="utf-8")
    first.write_text(_edit(SOURCE, "importance", value="10")(first.read_text(encoding="utf-8")),
                     encoding="utf-8")
    with pytest.raises(SheetError) as caught:
        read_sheets([first, second], tree)
    message = str(caught.value)
    assert "E1.csv row 7, column 'value'" in message
    assert "E2.csv row 8, column 'item': duplicate of" in message and "E1.csv row 8" in message


def test_not_a_workbook_and_wrong_suffix_are_refused(tmp_path):
    """A file named .xlsx that is not a workbook, and a .txt file, are refused naming the file."""
    tree = make_tree()
    fake = tmp_path / "E1.xlsx"
    fake.write_text("expert,node\n", encoding="utf-8")
    other = tmp_path / "E1.txt"
    other.write_text("x", encoding="utf-8")
    if xlsx_available():
        with pytest.raises(SheetError, match=r"E1\.xlsx: not an XLSX workbook"):
            read_sheets([fake], tree)
    with pytest.raises(SheetError, match=r"E1\.txt: a score sheet is a \.csv or \.xlsx file"):
        read_sheets([other], tree)
    with pytest.raises(SheetError, match=r"missing\.csv: no such file"):
        read_sheets([tmp_path / "missing.csv"], tree)


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
    for tree in (make_tree(), Tree.load(ROOT / "resources" / "demo" / "district.favour.json")):
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
    tree = make_tree()
    (path,) = export_sheets(tree, tmp_path, ["E1"])
    rows = list(csv.reader(path.read_text(encoding="utf-8").split("\n")))
    out = io.StringIO()
    csv.writer(out, delimiter=";", lineterminator="\r\n").writerows(r for r in rows if r)
    path.write_bytes(b"\xef\xbb\xbf" + out.getvalue().encode("utf-8"))
    _assert_tree_values(read_sheets([path], tree), tree, ["E1"])


def test_blank_value_is_no_opinion_and_ranges_and_confidence_are_kept(good_sheet):
    """A blank value abstains; a range, confidence and note read back as written."""
    tree, path = good_sheet
    text = _edit(SOURCE, "importance", value="")(path.read_text(encoding="utf-8"))
    text = _edit(SPLAYS, "membership.lower", value="750", low="600", high="900", confidence="High",
                 note="from the mapped splays")(text)
    path.write_text(text, encoding="utf-8")
    scores = read_sheets([path], tree)
    assert "importance" not in scores.table["E1"].get(SOURCE, {})
    assert scores.table["E1"][SPLAYS]["membership.lower"] == Score(
        750.0, 600.0, 900.0, "high", "from the mapped splays", f"{path} row 16")


def test_second_round_carries_the_group_spread_and_keeps_both_rounds(tmp_path):
    """Round 2 sheets carry round 1's median, IQR and n; importing them keeps rounds 1 and 2 side by side."""
    tree = make_tree()
    paths = export_sheets(tree, tmp_path / "r1", 4)
    for k, path in enumerate(paths):
        path.write_text(_edit(SOURCE, "importance", value=str(2 * k + 3))(path.read_text(encoding="utf-8")),
                        encoding="utf-8")
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
        path.write_text(_edit(SOURCE, "importance", value="6")(path.read_text(encoding="utf-8")),
                        encoding="utf-8")
    workshop = import_round(workshop, second_paths, tree)
    assert [r.round_number for r in workshop.rounds] == [1, 2]
    assert workshop.rounds[0].table["E1"][SOURCE]["importance"].value == 3.0
    assert workshop.rounds[1].table["E1"][SOURCE]["importance"].value == 6.0
    change = next(c for c in compare_rounds(first, aggregate(workshop.latest))
                  if (c.node, c.item) == (SOURCE, "importance"))
    assert change.settled and change.after.iqr == 0.0
    with pytest.raises(ParameterError, match="must be round 3, got round 1"):
        workshop.add_round(workshop.rounds[0])


def test_write_sheet_refuses_other_suffixes_and_bad_ids(tmp_path):
    """Sheets are .csv or .xlsx; expert ids must be usable and distinct."""
    tree = make_tree()
    with pytest.raises(ParameterError, match=r"\.csv or \.xlsx, got 'E1\.ods'"):
        write_sheet(tmp_path / "E1.ods", tree, "E1")
    with pytest.raises(ParameterError, match="repeated: E1"):
        export_sheets(tree, tmp_path, ["E1", "E1"])
    with pytest.raises(ParameterError, match="not start with '#'"):
        export_sheets(tree, tmp_path, ["#1"])
    assert not list(tmp_path.iterdir())


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


@pytest.mark.parametrize("weights, pattern", [
    ({"E1": 1, "E2": 1, "E9": 1}, r"name E9, who gave no scores"),
    ({"E1": 1}, r"lack E2"),
    ({"E1": -1, "E2": 1}, r"expert weight of E1 must be a finite number >= 0, got -1"),
    ({"E1": float("nan"), "E2": 1}, r"expert weight of E1 must be a finite number >= 0, got nan"),
    ({"E1": 0, "E2": 0}, r"all 0"),
])
def test_expert_weight_refusals(weights, pattern):
    """Expert weights that name nobody, miss someone, are negative, NaN or all zero are refused."""
    with pytest.raises(ParameterError, match=pattern):
        check_expert_weights(("E1", "E2"), weights)


def _scores(table: dict) -> Scores:
    return Scores(table={e: {n: {i: Score(v) for i, v in items.items()} for n, items in nodes.items()}
                         for e, nodes in table.items()}, experts=tuple(table))


def test_aggregate_tree_puts_normalised_weights_and_pooled_parameters_in_a_new_tree():
    """Importances 9 and 3 → weights 0.75 and 0.25; the pooled lower goes in; the input tree is unchanged."""
    tree = make_tree()
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


def test_aggregate_that_would_make_an_invalid_membership_is_refused_naming_the_node():
    """Two valid ramps that pool to lower == upper are refused, naming the node; the tree is unchanged."""
    tree = make_tree()
    before = tree.to_dict()
    scores = _scores({"E1": {SPLAYS: {"membership.lower": 800, "membership.upper": 100}},
                      "E2": {SPLAYS: {"membership.lower": 100, "membership.upper": 800}}})
    with pytest.raises(ParameterError, match=r"^Favourability > Pathway > Splays: these values make an "
                                             r"invalid membership \(lower = 450, upper = 450\)"):
        aggregate_tree(tree, aggregate(scores))
    assert tree.to_dict() == before


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
    """Pairwise-comparison weights become the children's weights in a new tree; refusals name the node."""
    tree = make_tree()
    result = pairwise_weights([[1, 3], [1 / 3, 1]])
    new = tree_with_weights(tree, "Favourability > Source", result.weights)
    assert [c.weight for c in new.find("Favourability > Source").children] == pytest.approx([0.75, 0.25])
    assert tree.find(KEEL).weight == 2
    with pytest.raises(ParameterError, match=r"Favourability > Source: 2 children but 3 weights"):
        tree_with_weights(tree, "Favourability > Source", [1, 2, 3])
    with pytest.raises(ParameterError, match=r"Favourability > Source > Keel: weight must be"):
        tree_with_weights(tree, "Favourability > Source", {"Keel": -1, "Pile": 1})
    with pytest.raises(ParameterError, match=r"Favourability > Source: the weights are all 0"):
        tree_with_weights(tree, "Favourability > Source", [0, 0])


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
