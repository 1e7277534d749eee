"""Every file a user hands Favour is read safely: fuzzed trees, lineages and weights tables.

The property that must hold: whatever bytes or document a reader is given, it
returns a value or raises one of our own errors (a ``FavourError``), never
another exception and never a hang. A refusal caused inside a tree node names
at least that node's parent path; a refusal of a lineage names the file and
the field; a refusal of the text itself names the line and column, or the
byte offset. The documents are random JSON, tree-shaped random documents, and
mutations of real documents: the demo tree, a tree built with
``tests/helpers.py``, and a lineage and a weights table written by Favour from
tiny rasters here.

Hypothesis runs derandomized (the same examples every run), with no example
database, a fixed number of examples and a deadline per example, so CI is
reproducible and the file stays well under a minute. The explicit bad inputs
(a tree 5000 levels deep, a 50 MB file, a FIFO, bytes that are not UTF-8,
NaN, a 5000-digit integer...) are rows of the table in tests/test_refusals.py;
the limits that must still let a sound file through are at the end here.
"""

from __future__ import annotations

import copy
import json
import os
import re
from datetime import timedelta
from pathlib import Path

import jsonschema
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from favour_plugin.core import jsonio
from favour_plugin.core.errors import FavourError, LineageError, ParameterError, TreeFileError
from favour_plugin.core.lineage import changed_inputs, check_record, read_lineage
from favour_plugin.core.membership import MEMBERSHIP_TYPES
from favour_plugin.core.overlay import OPERATOR_TYPES
from favour_plugin.core.schema import SCHEMA_DIR, load_validator
from favour_plugin.core.tree import COMPONENTS, MAX_DEPTH, MAX_MAGNITUDE, MAX_NODES, PATH_SEPARATOR, Tree
from favour_plugin.core.wofe import WeightsTable, layer_weights
from favour_plugin.raster.engine import evaluate_tree_file, reproduce
from favour_plugin.raster.grid import Grid
from favour_plugin.raster.wofe_jobs import evidence_weights, read_weights_table
from tests.helpers import (
    ORIGIN,
    leaf,
    node_chain,
    tree_doc,
    varied_tree_doc,
    write_raster,
    write_tree,
    write_vector,
)

ROOT = Path(__file__).resolve().parent.parent
DEMO_TREE = ROOT / "resources" / "demo" / "district.favour.json"


def fuzz(examples: int, seconds: float = 2.0):
    """Hypothesis settings for a reproducible run: fixed count, deadline, derandomized, no database."""
    return settings(max_examples=examples, deadline=timedelta(seconds=seconds), derandomize=True,
                    database=None, print_blob=False,
                    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                           HealthCheck.filter_too_much])


# -- documents to start from -----------------------------------------------------------------------


BASES = [json.loads(DEMO_TREE.read_text(encoding="utf-8")), varied_tree_doc()]
for _base in BASES:  # both must be sound trees, or the mutations prove nothing
    Tree.from_dict(copy.deepcopy(_base))


def locations(doc) -> list[tuple]:
    """Every JSON path in ``doc`` (not the top level), found without recursion."""
    found, stack = [], [((), doc)]
    while stack:
        path, value = stack.pop()
        if path:
            found.append(path)
        if isinstance(value, dict):
            stack.extend(((*path, k), v) for k, v in value.items())
        elif isinstance(value, list):
            stack.extend(((*path, i), v) for i, v in enumerate(value))
    return sorted(found, key=lambda p: [str(x) for x in p])


def parent_path(doc, path: tuple) -> str | None:
    """Node path of the parent of the node holding ``path`` (None at the root or outside the tree)."""
    if not path or path[0] != "root":
        return None
    node, names, i = doc["root"], [doc["root"]["name"]], 1
    while i + 1 < len(path) and path[i] == "children" and isinstance(path[i + 1], int):
        node = node["children"][path[i + 1]]
        names.append(node["name"])
        i += 2
    return PATH_SEPARATOR.join(names[:-1]) if len(names) > 1 else None


def get(doc, path: tuple):
    """Return the value at ``path``."""
    for key in path:
        doc = doc[key]
    return doc


LOCATIONS = [locations(base) for base in BASES]
TYPE_LOCATIONS = [[p for p in locs if p[-1] == "type"] for locs in LOCATIONS]
GROUPS = [[p for p in locs if p[-1] == "children" and len(get(base, p)) >= 2]
          for base, locs in zip(BASES, LOCATIONS)]


# -- strategies ------------------------------------------------------------------------------------

SURROGATE_TEXT = st.builds(lambda a, c, b: a + chr(c) + b, st.text(max_size=3),
                           st.integers(0xD800, 0xDFFF), st.text(max_size=3))
ODD_NUMBERS = st.sampled_from([0, -1, 0.5, 1e308, -1e308, 5e-324, -0.0, 2**64, 10**20, 10**400,
                               MAX_MAGNITUDE * 10, float("nan"), float("inf"), float("-inf")])
SCALARS = st.one_of(st.none(), st.booleans(), st.integers(), st.floats(), st.text(max_size=10),
                    ODD_NUMBERS, SURROGATE_TEXT)
JSON_ANY = st.recursive(SCALARS, lambda kids: st.lists(kids, max_size=4)
                        | st.dictionaries(st.text(max_size=6), kids, max_size=4), max_leaves=12)
OTHER_TYPE = {  # random JSON of a given type, to replace a value of another type
    "null": st.none(), "bool": st.booleans(), "number": st.one_of(st.integers(), st.floats(), ODD_NUMBERS),
    "text": st.one_of(st.text(max_size=10), st.text(max_size=10), st.text(max_size=10), SURROGATE_TEXT),
    "list": st.lists(JSON_ANY, max_size=3), "object": st.dictionaries(st.text(max_size=6), JSON_ANY,
                                                                       max_size=3)}


def kind_of(value) -> str:
    """Return the JSON type name of a value."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "bool"
    if isinstance(value, (int, float)):
        return "number"
    if isinstance(value, str):
        return "text"
    return "list" if isinstance(value, list) else "object"


def nested_lists(depth: int):
    """Return ``depth`` arrays nested in each other, built without recursion."""
    value: list = []
    for _ in range(depth - 1):
        value = [value]
    return value


DEEP = st.one_of(st.sampled_from([33, 40, 99, 101, 150, 400, 5000]).map(nested_lists),
                 st.sampled_from([MAX_DEPTH - 2, MAX_DEPTH + 1, 60, 5000]).map(node_chain))
# Deep values that json.dumps (recursive) can still write, for documents that go into files.
DEEP_FOR_FILES = st.one_of(st.sampled_from([33, 99, 101, 150, 400]).map(nested_lists),
                           st.sampled_from([MAX_DEPTH + 1, 60]).map(node_chain))


@st.composite
def mutation(draw, doc, locs: list[tuple], deep=DEEP):
    """Mutate a deep copy of ``doc`` at one place; return (document, path).

    The mutation deletes the value, replaces it by random JSON of another
    type, by deep nesting, by an odd number (huge, tiny, NaN, infinite) or by
    text holding a lone surrogate.
    """
    doc = copy.deepcopy(doc)
    path = draw(st.sampled_from(locs))
    holder, key = get(doc, path[:-1]), path[-1]
    kind = draw(st.sampled_from(["delete", "delete", "retype", "retype", "retype", "deep", "huge",
                                 "surrogate"]))
    if kind == "delete":
        del holder[key]
    elif kind == "retype":
        other = draw(st.sampled_from(sorted(set(OTHER_TYPE) - {kind_of(holder[key])})))
        holder[key] = draw(OTHER_TYPE[other])
    elif kind == "deep":
        holder[key] = draw(deep)
    elif kind == "huge":
        holder[key] = draw(ODD_NUMBERS)
    else:
        holder[key] = draw(SURROGATE_TEXT)
    return doc, path


@st.composite
def mutated_tree(draw):
    """A demo or helper tree broken in one way; returns (document, path, parent node path)."""
    index = draw(st.sampled_from(range(len(BASES))))
    base = BASES[index]
    how = draw(st.sampled_from(["value", "value", "value", "operator name", "duplicate name"]))
    if how == "value":
        doc, path = draw(mutation(base, LOCATIONS[index]))
    elif how == "operator name":
        doc, path = copy.deepcopy(base), draw(st.sampled_from(TYPE_LOCATIONS[index]))
        get(doc, path[:-1])["type"] = draw(st.one_of(st.text(max_size=10), st.sampled_from(
            ["xor", "fuzzy", "AND", "linear ", "min", "sigmoid"])))
    else:
        doc, group = copy.deepcopy(base), draw(st.sampled_from(GROUPS[index]))
        children = get(doc, group)
        i, j = draw(st.permutations(range(len(children))))[:2]
        children[j]["name"] = children[i]["name"]
        path = (*group, j, "name")
    return doc, path, parent_path(base, path)


NUMBER = st.one_of(st.integers(-5, 5), st.floats(-1e3, 1e3), ODD_NUMBERS)
MEMBERSHIPS = st.one_of(
    st.fixed_dictionaries({"type": st.sampled_from([*MEMBERSHIP_TYPES, "fuzzy"])}, optional={
        "lower": NUMBER, "upper": NUMBER, "midpoint": NUMBER, "slope": NUMBER, "centre": NUMBER,
        "spread": NUMBER, "points": st.lists(NUMBER | st.lists(NUMBER, max_size=3), max_size=5),
        "scores": st.dictionaries(st.sampled_from(["1", "2", "-3", "2.5", "1e999", "nan", "x", "9" * 400]),
                                  NUMBER | JSON_ANY, max_size=3),
        "weights": st.dictionaries(st.sampled_from(["0", "1", "inf", "7"]), NUMBER, max_size=3),
        "default": NUMBER | st.none()}),
    JSON_ANY)
OPERATORS = st.one_of(
    st.fixed_dictionaries({"type": st.sampled_from([*OPERATOR_TYPES, "xor"])},
                          optional={"gamma": NUMBER,
                                    "nodata": st.sampled_from(["propagate", "ignore", "skip"])}),
    JSON_ANY)
PROXIES = st.one_of(
    st.fixed_dictionaries({"path": st.sampled_from(["a.tif", "", "../b.gpkg"]) | JSON_ANY}, optional={
        "band": NUMBER, "measure": st.sampled_from(["distance", "attribute", "density"]),
        "field": st.text(max_size=4), "layer": st.text(max_size=4) | JSON_ANY}),
    JSON_ANY)
NAMES = st.one_of(st.sampled_from(["Source", "Trap", "Fold hinge", "", "A > B"]), st.text(max_size=6),
                  JSON_ANY)
FIELDS = {"operator": OPERATORS, "proxy": PROXIES, "membership": MEMBERSHIPS, "weight": NUMBER | JSON_ANY,
          "component": st.sampled_from([*COMPONENTS, "fluid"]) | JSON_ANY,
          "rationale": st.text(max_size=5) | JSON_ANY, "save_output": st.booleans() | JSON_ANY}


def node_docs(children) -> st.SearchStrategy:
    """Tree-shaped nodes whose fields are sometimes right and sometimes anything."""
    return st.fixed_dictionaries({"name": NAMES}, optional={
        **FIELDS, "children": st.lists(children, max_size=3) | JSON_ANY})


TREE_DOCS = st.fixed_dictionaries(
    {"format": st.just("favour-tree"), "version": st.just(1) | NUMBER,
     "root": st.recursive(st.fixed_dictionaries({"name": NAMES}, optional=FIELDS), node_docs,
                          max_leaves=8)},
    optional={"grid": st.fixed_dictionaries({}, optional={
        "reference": st.text(max_size=4) | JSON_ANY, "crs": st.just("EPSG:32750") | JSON_ANY,
        "extent": st.lists(NUMBER, min_size=4, max_size=4) | JSON_ANY, "cell_size": NUMBER,
        "band": NUMBER}) | JSON_ANY, "name": st.text(max_size=5) | JSON_ANY, "notes": JSON_ANY})


# -- what each reader's callers do with the result ------------------------------------------------


def use_tree(tree: Tree) -> None:
    """Do what the dock and the engine do with a tree that was read: problems, walk, compile, to_dict."""
    problems = tree.problems()
    assert all(isinstance(p.message, str) for p in problems)
    list(tree.walk())
    tree.to_dict()
    try:
        tree.compile()
    except TreeFileError:
        assert problems, "compile() refused a tree without problems"


def read_or_refuse(read, *args):
    """Return what ``read`` returns, or None when it raises our own error; anything else fails the test."""
    try:
        return read(*args)
    except FavourError as exc:
        assert str(exc), "an error without a message"
        return None


# -- trees ---------------------------------------------------------------------------------------


@fuzz(250)
@given(doc=JSON_ANY)
def test_random_documents_give_a_result_or_our_error(doc):
    """Random JSON to every document reader: a result or a FavourError (property that must hold)."""
    for read in (Tree.from_dict, Tree.from_draft):  # the readers do not change their input
        tree = read_or_refuse(read, doc)
        if tree is not None:
            use_tree(tree)
    read_or_refuse(WeightsTable.from_dict, doc)
    read_or_refuse(check_record, doc)


@fuzz(300)
@given(doc=TREE_DOCS)
def test_tree_shaped_documents_give_a_tree_or_our_error(doc):
    """Tree-shaped documents with any field anything: a tree or a TreeFileError (property that must hold)."""
    for read in (Tree.from_dict, Tree.from_draft):
        tree = read_or_refuse(read, doc)
        if tree is not None:
            use_tree(tree)


@fuzz(400)
@given(case=mutated_tree())
def test_mutated_trees_are_refused_naming_the_parent_node(case):
    """A tree broken in a node is refused naming the node's parent path, or read (property that must hold)."""
    doc, path, parent = case
    try:
        Tree.from_dict(doc)  # the readers do not change their input; doc may be too deep to copy
    except FavourError as exc:
        assert isinstance(exc, TreeFileError)
        if parent is not None:
            assert parent in str(exc), f"mutation at {path}: the message does not name {parent!r}"
    try:
        draft = Tree.from_draft(doc)
    except FavourError as exc:
        if parent is not None:
            assert parent in str(exc), f"mutation at {path}: the message does not name {parent!r}"
    else:
        use_tree(draft)
        problems = [str(p) for p in draft.problems()]
        if problems and parent is not None:
            assert any(parent in p for p in problems), (path, problems)


_STRING_OR_NUMBER = re.compile(rb'"(?:[^"\\]|\\.)*"|(?P<number>-?\d+(?:\.\d+)?(?:[eE][+-]?\d+)?)')
BASE_TEXTS = [json.dumps(base, indent=2, ensure_ascii=False).encode("utf-8") for base in BASES]
NUMBER_SPANS = [[m.span() for m in _STRING_OR_NUMBER.finditer(text) if m.group("number")]
                for text in BASE_TEXTS]
BAD_BYTES = [b"\xff", b"\xc3\x28", b"\xed\xa0\x80", b"\xf8\x88\x80\x80\x80", b"\x80", b"\xfe\xff"]
NOT_A_NUMBER = [b"NaN", b"Infinity", b"-Infinity", b"1e999", b"-1e400", b"9" * 5000]


@st.composite
def damaged_text(draw):
    """A tree file's bytes damaged in one way; returns (bytes, what was done)."""
    index = draw(st.sampled_from(range(len(BASES))))
    text, spans = BASE_TEXTS[index], NUMBER_SPANS[index]
    kind = draw(st.sampled_from(["not a number", "bad bytes", "random bytes", "truncated", "deep",
                                 "byte-order mark"]))
    at = draw(st.integers(0, len(text)))
    if kind == "not a number":
        start, end = draw(st.sampled_from(spans))
        return text[:start] + draw(st.sampled_from(NOT_A_NUMBER)) + text[end:], kind
    if kind == "bad bytes":
        return text[:at] + draw(st.sampled_from(BAD_BYTES)) + text[at:], kind
    if kind == "random bytes":
        return text[:at] + draw(st.binary(min_size=1, max_size=8)) + text[at:], kind
    if kind == "truncated":
        return text[:at], kind
    if kind == "deep":
        start, end = draw(st.sampled_from(spans))
        depth = draw(st.sampled_from([50, 101, 1000, 5000]))
        return text[:start] + b"[" * depth + b"]" * depth + text[end:], kind
    return b"\xef\xbb\xbf" + text, kind


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    """A folder for the files the fuzzers write, one per test module run."""
    return tmp_path_factory.mktemp("fuzz")


@fuzz(200)
@given(case=damaged_text())
def test_damaged_tree_files_are_refused_naming_the_place(folder, case):
    """Damaged tree-file bytes: a tree, or our error naming the line or byte (property that must hold)."""
    data, kind = case
    path = folder / "damaged.favour.json"
    path.write_bytes(data)
    tree = read_or_refuse(Tree.load, path)
    if tree is not None:
        assert kind in ("random bytes", "byte-order mark", "deep", "truncated"), kind
        use_tree(tree)
    elif kind in ("not a number", "bad bytes"):
        with pytest.raises(TreeFileError, match=r"line \d+, column \d+|byte offset \d+"):
            Tree.load(path)
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        return
    draft = read_or_refuse(Tree.from_draft_json, text)
    if draft is not None:
        use_tree(draft)


# -- lineages --------------------------------------------------------------------------------------


def centre(row: int, col: int) -> str:
    """WKT point at the centre of a cell of the 100 m test grid."""
    return f"POINT ({ORIGIN[0] + (col + 0.5) * 100} {ORIGIN[1] - (row + 0.5) * 100})"


@pytest.fixture(scope="module")
def written(tmp_path_factory) -> dict:
    """A tiny tree evaluated by Favour (fav.tif and its lineage) and a weights table it wrote."""
    where = tmp_path_factory.mktemp("written")
    write_raster(where / "v.tif", np.arange(400, dtype=np.float32).reshape(20, 20))
    tree = write_tree(where / "t.favour.json", tree_doc(
        [leaf("Value", "v.tif", {"type": "linear", "lower": 0, "upper": 400})]))
    evaluate_tree_file(tree, str(where / "fav.tif"))
    evidence = np.zeros((20, 20), np.uint8)
    evidence[:5] = 1
    write_raster(where / "e.tif", evidence)
    write_vector(where / "d.gpkg", [centre(r, c) for r, c in [(1, 1), (2, 2), (10, 10), (15, 3)]],
                 layer="deposits")
    evidence_weights(str(where / "e.tif"), str(where / "d.gpkg"), "binary", str(where / "w.csv"),
                     unit_area_km2=0.01)
    return {"folder": where, "output": str(where / "fav.tif"),
            "record": read_lineage(where / "fav.tif"), "weights": read_lineage(where / "w.csv")}


def use_record(record: dict) -> None:
    """Do with a lineage what reproduce, changed_inputs, the layer metadata and the results loader do."""
    changed_inputs(record)
    if "grid" in record:  # jobs without a grid (aggregated scores) write none; reproduce checks
        Grid.from_dict(record["grid"])
    f"{record['tool']['name']} {record['tool']['version']}, {record['job']}, {record['created']}"
    tree = record.get("tree")
    if isinstance(tree, dict):
        tree.get("name")
        Tree.from_dict(tree, base_dir=record.get("base_dir"))
    if record.get("tree_file"):
        os.path.isfile(record["tree_file"]["path"]) and record["tree_file"]["sha256"].lower()
    for path, file in record.get("outputs", {}).get("nodes", {}).items():
        os.path.abspath(file), path.split(PATH_SEPARATOR)[-1]


def lineage_text(record) -> bytes:
    """Write a record as Favour would, except that NaN and odd strings pass (the reader must refuse them)."""
    return json.dumps(record, indent=2).encode("utf-8")


def names_the_place(message: str, path: tuple) -> bool:
    """True if a lineage message names the field's container, or the line and column of the text."""
    if re.search(r"line \d+, column \d+", message):
        return True
    return jsonio.json_path(path[:-1]) in message


@pytest.fixture(scope="module")
def lineage_locations(written) -> list[tuple]:
    """Every JSON path of the written lineage outside the tree, the statistics and the warnings."""
    return [p for p in locations(written["record"])
            if p[0] not in ("tree", "statistics", "warnings", "caution", "host", "parameters")]


@fuzz(250)
@given(data=st.data())
def test_mutated_lineages_are_refused_naming_the_file_and_field(written, lineage_locations, data):
    """A damaged lineage: LineageError naming file and field, or a usable record (property that must hold)."""
    record, path = data.draw(mutation(written["record"], lineage_locations, DEEP_FOR_FILES))
    target = written["folder"] / "mutated.tif.lineage.json"
    target.write_bytes(lineage_text(record))
    try:
        again = read_lineage(target)
    except LineageError as exc:
        assert str(target) in str(exc)
        if len(path) > 1:
            assert names_the_place(str(exc), path), f"mutation at {path}: {exc}"
    else:
        use_record(again)


@fuzz(150)
@given(data=st.data())
def test_mutated_lineage_trees_are_refused_or_used(written, data):
    """A lineage with a damaged tree: LineageError, or a usable record (property that must hold)."""
    record = written["record"]
    tree_locations = [p for p in locations(record) if p[0] == "tree"]
    mutated, _ = data.draw(mutation(record, tree_locations, DEEP_FOR_FILES))
    target = written["folder"] / "tree.tif.lineage.json"
    target.write_bytes(lineage_text(mutated))
    again = read_or_refuse(read_lineage, target)
    if again is not None:
        use_record(again)


REPRODUCE_PATHS = [("job",), ("created",), ("tool", "name"), ("tool", "version"),
                   ("inputs", 0, "files", 0, "sha256"), ("inputs", 0, "files", 0, "size"),
                   ("inputs", 0, "files", 0, "path"), ("inputs", 0, "files"), ("tree_file",),
                   ("tree_file", "sha256"), ("base_dir",), ("tree", "name"),
                   ("tree", "root", "children", 0, "membership", "upper"), ("grid", "crs_wkt"),
                   ("grid", "width"), ("outputs",)]


@fuzz(12, seconds=20)
@given(data=st.data())
def test_reproduce_on_a_damaged_lineage_gives_our_error_or_a_comparison(written, data):
    """reproduce() on a hand-edited lineage: a comparison or our own error (property that must hold)."""
    record, _ = data.draw(mutation(written["record"], REPRODUCE_PATHS, DEEP_FOR_FILES))
    if isinstance(record.get("grid"), dict) and isinstance(record["grid"].get("width"), int):
        record["grid"]["width"] = min(record["grid"]["width"], 40)  # keep a damaged grid small
    output = written["folder"] / "again.tif"
    if not output.exists():
        output.write_bytes(Path(written["output"]).read_bytes())
    Path(str(output) + ".lineage.json").write_bytes(lineage_text(record))
    read_or_refuse(reproduce, str(output))


# -- weights tables --------------------------------------------------------------------------------


@fuzz(250)
@given(data=st.data())
def test_mutated_weights_tables_are_refused_naming_the_field(written, data):
    """A damaged weights table: an error naming the field, or a usable table (property that must hold)."""
    table = written["weights"]["table"]
    doc, path = data.draw(mutation(table, locations(table)))
    try:
        read = WeightsTable.from_dict(doc)
    except ParameterError as exc:
        if len(path) > 1:
            assert jsonio.json_path(path[:-1]) in str(exc), f"mutation at {path}: {exc}"
    else:
        if read.kind in ("binary", "categorical"):
            read_or_refuse(layer_weights, read)


@fuzz(150)
@given(data=st.data())
def test_weights_table_files_give_a_table_or_our_error(written, data):
    """read_weights_table on a damaged lineage: a table, or our error (property that must hold)."""
    record = written["weights"]
    doc, path = data.draw(mutation(record, [p for p in locations(record) if p[0] in ("table", "inputs")],
                                   DEEP_FOR_FILES))
    table_file = written["folder"] / "mutated.weights.csv"
    Path(str(table_file) + ".lineage.json").write_bytes(lineage_text(doc))
    try:
        table = read_weights_table(str(table_file))
    except FavourError as exc:
        assert str(table_file) in str(exc) or "weights table" in str(exc)
    else:
        if table.kind in ("binary", "categorical"):
            read_or_refuse(layer_weights, table)


def finite(value) -> bool:
    """True if ``value`` holds no NaN or infinity (jsonschema counts them as numbers; JSON has none)."""
    try:
        json.dumps(value, allow_nan=False)
    except (ValueError, RecursionError):
        return False
    return True


@fuzz(200)
@given(data=st.data())
def test_our_validator_agrees_with_jsonschema_on_lineages_and_tables(written, data):
    """core.schema gives jsonschema's verdict (Draft 2020-12) on damaged lineages and weights tables."""
    which = data.draw(st.sampled_from(["lineage-v1.schema.json", "weights-table-v1.schema.json"]))
    doc = written["record"] if which.startswith("lineage") else written["weights"]["table"]
    mutated, _ = data.draw(mutation(doc, [p for p in locations(doc) if p[0] != "tree"], DEEP_FOR_FILES))
    if not finite(mutated):
        return
    schema = json.loads((SCHEMA_DIR / which).read_text(encoding="utf-8"))
    reference = jsonschema.Draft202012Validator(schema)
    assert (not load_validator(which).issues(mutated)) == reference.is_valid(mutated)


# -- limits that must let a sound file through -------------------------------------------------------


def test_limits_let_the_deepest_and_largest_allowed_tree_through():
    """A tree exactly MAX_DEPTH levels deep and one of MAX_NODES nodes load (common practice, no source).

    One node more is refused: that row is in the table of tests/test_refusals.py.
    """
    Tree.from_dict({"format": "favour-tree", "version": 1, "root": node_chain(MAX_DEPTH)})
    flat = tree_doc([leaf(f"Leaf {i}", "a.tif", {"type": "identity"}) for i in range(MAX_NODES - 1)])
    assert len(list(Tree.from_dict(flat).walk())) == MAX_NODES


def test_a_byte_order_mark_is_read(tmp_path):
    """A UTF-8 byte-order mark before a tree is ignored (RFC 8259, section 8.1: a parser may ignore it)."""
    path = tmp_path / "bom.favour.json"
    path.write_bytes(b"\xef\xbb\xbf" + json.dumps(BASES[1], indent=2).encode("utf-8"))
    assert Tree.load(path).name == "Test tree"


# -- score sheets and pairwise matrices ---------------------------------------------------------


@pytest.fixture(scope="module")
def sheet(tmp_path_factory) -> dict:
    """A sound score sheet of the scored test tree, its text, and the tree."""
    from favour_plugin.core.sheets import export_sheets
    from tests.helpers import scored_tree

    folder = tmp_path_factory.mktemp("sheets")
    tree = scored_tree()
    (path,) = export_sheets(tree, folder, ["E1"])
    return {"folder": folder, "tree": tree, "text": path.read_text(encoding="utf-8")}


CELL_VALUES = st.one_of(st.text(max_size=12), st.floats(allow_nan=True, allow_infinity=True).map(repr),
                        st.integers(-10**30, 10**30).map(str), st.sampled_from(["", "#", "nan", "1e999",
                                                                               "low", "E1", "9", "0"]))


@st.composite
def damaged_sheet(draw, text: str) -> bytes:
    """A sheet's text with cells replaced, lines cut or repeated, bytes inserted, or truncated."""
    lines = text.split("\n")
    for _ in range(draw(st.integers(1, 4))):
        if not lines:
            break
        kind = draw(st.sampled_from(["cell", "drop", "repeat", "truncate", "separator"]))
        k = draw(st.integers(0, len(lines) - 1))
        if kind == "cell":
            cells = lines[k].split(",")
            cells[draw(st.integers(0, max(0, len(cells) - 1)))] = draw(CELL_VALUES).replace("\n", " ")
            lines[k] = ",".join(cells)
        elif kind == "drop":
            del lines[k]
        elif kind == "repeat":
            lines.insert(k, lines[k])
        elif kind == "separator":
            lines[k] = lines[k].replace(",", draw(st.sampled_from([";", "\t", '"', ""])))
        elif kind == "truncate":
            lines = lines[:k]
    data = "\n".join(lines).encode("utf-8")
    if draw(st.booleans()):
        at = draw(st.integers(0, len(data)))
        data = data[:at] + draw(st.binary(min_size=1, max_size=8)) + data[at:]
    return data


@fuzz(200, seconds=3)
@given(data=st.data())
def test_damaged_score_sheets_give_scores_or_a_sheet_error(sheet, data):
    """A damaged sheet: our SheetError naming the file, or scores, and the tree unchanged (property)."""
    from favour_plugin.core.errors import SheetError
    from favour_plugin.core.sheet_import import read_sheets

    path = sheet["folder"] / "damaged.csv"
    path.write_bytes(data.draw(damaged_sheet(sheet["text"])))
    before = sheet["tree"].to_dict()
    try:
        read_sheets([path], sheet["tree"])
    except SheetError as exc:
        assert "damaged.csv" in str(exc)
    assert sheet["tree"].to_dict() == before


@fuzz(60, seconds=5)
@given(payload=st.binary(max_size=4000))
def test_random_bytes_as_a_workbook_give_a_sheet_error(sheet, payload):
    """Any bytes named .xlsx: our SheetError or scores, never another exception (property)."""
    from favour_plugin.core.errors import SheetError
    from favour_plugin.core.sheet_import import read_sheets

    path = sheet["folder"] / "random.xlsx"
    path.write_bytes(payload)
    with pytest.raises(SheetError):
        read_sheets([path], sheet["tree"])


@fuzz(150)
@given(text=st.text(alphabet=st.sampled_from(list("0123456789/,.-eE \nABC")), max_size=300))
def test_pairwise_matrix_files_give_weights_or_our_error(sheet, text):
    """Any text as a pairwise matrix: weights or our ParameterError, never another exception (property)."""
    from favour_plugin.core.errors import ParameterError
    from favour_plugin.raster.workshop_jobs import pairwise_job

    path = sheet["folder"] / "matrix.csv"
    path.write_text(text, encoding="utf-8")
    try:
        job = pairwise_job(str(path))
    except ParameterError:
        return
    assert abs(sum(job.result.weights) - 1.0) < 1e-9
