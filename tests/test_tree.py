"""The tree file: schema checks against the jsonschema reference, round trips, the plan.

What a bad tree file is refused with is in the table of tests/test_refusals.py.
"""

import copy
import json
from pathlib import Path

import jsonschema
import numpy as np
import pytest

from favour_plugin.core.errors import TreeFileError
from favour_plugin.core.schema import SCHEMA_DIR, Validator, load_validator
from favour_plugin.core.tree import Tree
from tests.helpers import example_tree_doc

SCHEMA = json.loads((SCHEMA_DIR / "tree-v1.schema.json").read_text(encoding="utf-8"))


def mutations():
    """Yield (label, document) pairs: the example broken in one way each, and a few valid variants."""
    yield "valid", example_tree_doc()
    doc = example_tree_doc()
    del doc["grid"]
    yield "valid without grid", doc
    doc = example_tree_doc()
    doc["grid"] = {"crs": "EPSG:32750", "extent": [0, 0, 1000, 1000], "cell_size": 25}
    yield "valid with crs grid", doc
    doc = example_tree_doc()
    doc["custom"] = {"kept": True}
    doc["root"]["children"][0]["notes"] = "free text"
    yield "valid with extra fields", doc
    paths = {
        "format": (("format",), "other"),
        "version type": (("version",), "1"),
        "root name type": (("root", "name"), 7),
        "empty name": (("root", "name"), ""),
        "operator type": (("root", "operator", "type"), "xor"),
        "gamma high": (("root", "operator", "gamma"), 1.2),
        "gamma negative": (("root", "operator", "gamma"), -0.2),
        "component": (("root", "children", 0, "component"), "fluid"),
        "weight negative": (("root", "children", 0, "children", 0, "weight"), -1),
        "band zero": (("root", "children", 0, "children", 0, "proxy", "band"), 0),
        "score high": (("root", "children", 0, "children", 0, "membership", "scores", "3"), 1.5),
        "score key": (("root", "children", 0, "children", 0, "membership", "scores"), {"x": 1}),
        "default text": (("root", "children", 0, "children", 0, "membership", "default"), "low"),
        "lower text": (("root", "children", 0, "children", 1, "membership", "lower"), "ten"),
        "measure": (("root", "children", 1, "children", 0, "proxy", "measure"), "density"),
        "spread zero": (("root", "children", 1, "children", 1, "membership", "spread"), 0),
        "points short": (("root", "children", 1, "children", 3, "membership", "points"), [0, 1, 2]),
        "pair long": (("root", "children", 1, "children", 2, "membership", "points"), [[1, 0, 3], [2, 1]]),
        "nodata rule": (("root", "children", 1, "operator", "nodata"), "skip"),
        "children empty": (("root", "children", 0, "children"), []),
        "grid cell": (("grid",), {"crs": "EPSG:4326", "extent": [0, 0, 1, 1], "cell_size": 0}),
        "grid partial": (("grid",), {"crs": "EPSG:4326"}),
        "extent short": (("grid",), {"crs": "EPSG:4326", "extent": [0, 0, 1], "cell_size": 1}),
    }
    for label, (path, value) in paths.items():
        doc = example_tree_doc()
        target = doc
        for key in path[:-1]:
            target = target[key]
        target[path[-1]] = value
        yield label, doc
    for label, path in {"no root": ("root",), "no gamma": ("root", "operator", "gamma"),
                        "no upper": ("root", "children", 0, "children", 1, "membership", "upper"),
                        "no membership": ("root", "children", 0, "children", 1, "membership"),
                        "no proxy path": ("root", "children", 0, "children", 1, "proxy", "path"),
                        "no operator": ("root", "children", 1, "operator")}.items():
        doc = example_tree_doc()
        target = doc
        for key in path[:-1]:
            target = target[key]
        del target[path[-1]]
        yield label, doc


@pytest.mark.parametrize("label, doc", list(mutations()), ids=[m[0] for m in mutations()])
def test_our_validator_agrees_with_jsonschema(label, doc):
    """core.schema gives the same verdict as the jsonschema reference implementation (Draft 2020-12)."""
    reference = jsonschema.Draft202012Validator(SCHEMA)
    ours = load_validator("tree-v1.schema.json")
    assert (not ours.issues(doc)) == reference.is_valid(doc), label
    assert label.startswith("valid") == reference.is_valid(doc), label


def test_schema_is_a_valid_draft_2020_12_schema():
    """The shipped schema passes jsonschema's meta-schema check."""
    jsonschema.Draft202012Validator.check_schema(SCHEMA)


def test_validator_refuses_keywords_it_does_not_implement():
    """A schema using an unsupported keyword is refused rather than silently half-checked."""
    with pytest.raises(ValueError, match="'oneOf' is not supported"):
        Validator({"oneOf": [{"type": "string"}]})


def test_round_trip_keeps_everything_including_unknown_fields():
    """from_dict(to_dict()) reproduces the document, extra fields and all."""
    doc = example_tree_doc()
    doc["custom"] = {"kept": [1, 2]}
    doc["root"]["children"][0]["children"][0]["proxy"]["note"] = "aeromagnetic survey 3"
    doc["root"]["children"][1]["extra_field"] = 5
    tree = Tree.from_dict(copy.deepcopy(doc))
    again = tree.to_dict()
    assert again["custom"] == {"kept": [1, 2]}
    assert again["root"]["children"][1]["extra_field"] == 5
    assert again["root"]["children"][0]["children"][0]["proxy"]["note"] == "aeromagnetic survey 3"
    assert Tree.from_dict(again).to_dict() == again


def test_save_keeps_a_backup_and_rebases_relative_paths(tmp_path):
    """save() writes atomically, keeps one .bak, and relative paths still point at the same files."""
    first = tmp_path / "models" / "model.json"
    first.parent.mkdir()
    tree = Tree.from_dict(example_tree_doc(), base_dir=first.parent)
    tree.save(first)
    before = {p: n.proxy.resolve(tree.base_dir) for p, n in tree.walk() if n.proxy}
    tree.name = "Second version"
    tree.save(first)
    assert json.loads((first.parent / "model.json.bak").read_text())["name"] == "Example"
    moved = tmp_path / "elsewhere" / "deeper" / "copy.json"
    moved.parent.mkdir(parents=True)
    tree.save(moved)
    reloaded = Tree.load(moved)
    after = {p: n.proxy.resolve(reloaded.base_dir) for p, n in reloaded.walk() if n.proxy}
    assert after == before
    assert reloaded.to_dict()["root"]["children"][0]["children"][0]["proxy"]["path"] == \
        "../../models/layers/litho.tif"
    assert not list(Path(tmp_path).rglob("*.partial"))


def test_plan_evaluates_children_before_parents_and_drops_unkept_nodes():
    """evaluate_block returns the root and kept nodes only, computed bottom-up."""
    plan = Tree.from_dict(example_tree_doc()).compile()
    values = {leaf.path: np.array([3.0, 1.0, np.nan]) for leaf in plan.leaves}
    out = plan.evaluate_block(values, keep=["Favourability > Source"])
    assert set(out) == {"Favourability", "Favourability > Source"}
    # Source = OR(categories(3)=0.9, linear(3; 10, 80)=0) = 0.9 in the first cell.
    assert out["Favourability > Source"][0] == pytest.approx(0.9)
    assert np.isnan(out["Favourability"][2])


# -- a proxy's filter of features and margin -----------------------------------------------------

FAULTS_PROXY = ("root", "children", 1, "children", 0, "proxy")


def _with_proxy(**fields) -> dict:
    """The example tree with fields set on its distance proxy (a value of ... removes the field)."""
    doc = example_tree_doc()
    proxy = doc
    for key in FAULTS_PROXY:
        proxy = proxy[key]
    for key, value in fields.items():
        if value is ...:
            proxy.pop(key, None)
        else:
            proxy[key] = value
    return doc


PROXY_CASES = {
    "valid filter of numbers": _with_proxy(where={"field": "order", "values": [1, 2]}),
    "valid filter of text": _with_proxy(where={"field": "kind", "values": ["major", "it's"]}),
    "valid margin": _with_proxy(margin=250),
    "valid margin 0": _with_proxy(margin=0),
    "filter without values": _with_proxy(where={"field": "order"}),
    "filter with no value": _with_proxy(where={"field": "order", "values": []}),
    "filter value true": _with_proxy(where={"field": "order", "values": [True]}),
    "filter value null": _with_proxy(where={"field": "order", "values": [None]}),
    "filter value a list": _with_proxy(where={"field": "order", "values": [[1]]}),
    "filter as SQL text": _with_proxy(where="order IN (1, 2)"),
    "filter with another key": _with_proxy(where={"field": "order", "values": [1], "sql": "1=1"}),
    "filter of an empty field name": _with_proxy(where={"field": "", "values": [1]}),
    "margin negative": _with_proxy(margin=-5),
    "margin as text": _with_proxy(margin="250"),
}


@pytest.mark.parametrize("label", list(PROXY_CASES))
def test_proxy_filter_and_margin_agree_with_jsonschema(label):
    """The schema's verdict on a proxy's where and margin is jsonschema's (Draft 2020-12)."""
    doc = PROXY_CASES[label]
    reference = jsonschema.Draft202012Validator(SCHEMA)
    assert (not load_validator("tree-v1.schema.json").issues(doc)) == reference.is_valid(doc), label
    assert label.startswith("valid") == reference.is_valid(doc), label


@pytest.mark.parametrize("label", [k for k in PROXY_CASES if not k.startswith("valid")])
def test_a_draft_with_a_bad_filter_or_margin_lists_the_problem_at_its_node(label):
    """The dock's drafts skip the schema; problems() names the node and the field instead."""
    tree = Tree.from_draft(copy.deepcopy(PROXY_CASES[label]))
    found = [p for p in tree.problems() if p.node == "Favourability > Pathway > Near faults"]
    assert found and all("proxy where" in p.message or "proxy margin" in p.message for p in found), found


def test_filter_and_margin_round_trip_as_fields_of_the_proxy():
    """where and margin are read into the proxy (not its extra fields) and written back unchanged."""
    doc = _with_proxy(where={"field": "order", "values": [1, 2]}, margin=250, note="kept")
    tree = Tree.from_dict(copy.deepcopy(doc))
    proxy = tree.find("Favourability > Pathway > Near faults").proxy
    assert (proxy.where, proxy.margin, proxy.extra) == ({"field": "order", "values": [1, 2]}, 250,
                                                        {"note": "kept"})
    written = tree.find("Favourability > Pathway > Near faults").to_dict()["proxy"]
    assert written == {"path": "layers/faults.gpkg", "layer": "faults", "measure": "distance",
                       "where": {"field": "order", "values": [1, 2]}, "margin": 250, "note": "kept"}
    assert Tree.from_dict(tree.to_dict()).to_dict() == tree.to_dict()
    # The plan tells leaves with other filters apart: they read other cells.
    other = Tree.from_dict(_with_proxy(where={"field": "order", "values": [1]}, margin=250, note="kept"))
    signatures = {leaf.path: leaf.signature for leaf in tree.compile().leaves}
    assert signatures != {leaf.path: leaf.signature for leaf in other.compile().leaves}


def test_a_filter_on_a_raster_or_a_margin_on_an_attribute_is_a_problem():
    """where applies to vector layers, margin to distances; elsewhere each is named at its node."""
    doc = _with_proxy(margin=100, measure="attribute", field="throw")
    doc["root"]["children"][0]["children"][0]["proxy"]["where"] = {"field": "x", "values": [1]}
    with pytest.raises(TreeFileError) as refused:
        Tree.from_dict(doc)
    text = str(refused.value)
    assert "Favourability > Pathway > Near faults: proxy margin (features outside the grid " \
           "that count) applies only to measure 'distance'" in text
    assert "Favourability > Source > Mafic volcanic host: proxy where (a filter of features) applies " \
           "only to a vector layer" in text
