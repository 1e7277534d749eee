"""The Monte Carlo sampler and sensitivity variants: seeded repeatability, zero spread, ranges, validity.

The requests the sampler and the variants refuse are rows of the table in tests/test_refusals.py.
"""

from __future__ import annotations

import copy
import importlib.util
import json
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from favour_plugin.core.scoring import Score, Scores, node_items
from favour_plugin.core.sheet_import import read_sheets
from favour_plugin.core.tree import Tree
from favour_plugin.core.uncertainty import sample_trees, sample_values, sensitivity_variants
from favour_plugin.core.workshop import aggregate, aggregate_tree
from tests.helpers import leaf, tree_doc

ROOT = Path(__file__).resolve().parent.parent
DISTANCE = {"measure": "distance", "layer": "lines"}
PATHWAY = "Favourability > Pathway"
SPLAYS, MESH = f"{PATHWAY} > Splays", f"{PATHWAY} > Mesh"
HINGES, ARSENIC = "Favourability > Trap > Hinges", "Favourability > Trap > Arsenic"
COVER = "Favourability > Preservation > Cover"

TREE_DOC = tree_doc([
    {"name": "Pathway", "operator": {"type": "weighted_mean"}, "children": [
        {**leaf("Splays", "faults.gpkg", {"type": "linear", "lower": 800, "upper": 100}, **DISTANCE),
         "weight": 3},
        leaf("Mesh", "faults.gpkg", {"type": "trapezoid", "points": [0, 300, 3000, 7000]}, **DISTANCE),
    ]},
    {"name": "Trap", "operator": {"type": "weighted_mean"}, "children": [
        leaf("Hinges", "hinges.gpkg", {"type": "gaussian", "centre": 0, "spread": 700}, **DISTANCE),
        leaf("Arsenic", "as.tif", {"type": "piecewise", "points": [[6, 0.0], [15, 0.75], [40, 0.95]]}),
    ]},
    {"name": "Preservation", "operator": {"type": "and"}, "children": [
        leaf("Cover", "cover.tif", {"type": "linear", "lower": 300, "upper": 0}),
    ]},
])


def make_tree() -> Tree:
    """The small test tree of this module."""
    return Tree.from_dict(copy.deepcopy(TREE_DOC))


def scores_of(table: dict) -> Scores:
    """Scores from {expert: {node: {item: value or (value, low, high)}}}."""
    def score(v):
        return Score(*v) if isinstance(v, tuple) else Score(float(v))
    return Scores(table={e: {n: {i: score(v) for i, v in items.items()} for n, items in nodes.items()}
                         for e, nodes in table.items()}, experts=tuple(table))


def three_experts() -> Scores:
    """Three experts who disagree on weights and on the Splays ramp."""
    return scores_of({
        "E1": {SPLAYS: {"importance": 9, "membership.lower": (800, 700, 900), "membership.upper": 100},
               MESH: {"importance": 3}, HINGES: {"membership.spread": (700, 500, 900)}},
        "E2": {SPLAYS: {"importance": 6, "membership.lower": (800, 600, 1000), "membership.upper": 150},
               MESH: {"importance": 6}, HINGES: {"membership.spread": 900}},
        "E3": {SPLAYS: {"importance": 9, "membership.lower": 750, "membership.upper": 120},
               MESH: {"importance": 1}},
    })


def _docs(trees):
    return [json.dumps(t.to_dict(), sort_keys=True) for t in trees]


def test_same_seed_gives_identical_realisations():
    """Same seed → identical trees (both modes); another seed → other trees (numpy default_rng streams)."""
    tree, scores = make_tree(), three_experts()
    for mode in ("experts", "ranges"):
        first = _docs(sample_trees(tree, scores, 25, seed=11, mode=mode))
        assert first == _docs(sample_trees(tree, scores, 25, seed=11, mode=mode))
        assert first != _docs(sample_trees(tree, scores, 25, seed=12, mode=mode))
        assert len(set(first)) > 3


@pytest.mark.parametrize("mode", ["experts", "ranges"])
def test_zero_spread_gives_the_aggregate_tree_every_time(mode):
    """All experts agree and ranges have zero width → every realisation equals aggregate_tree."""
    tree = make_tree()
    values = {node: {item: (spec.value, spec.value, spec.value) if spec.takes_range else spec.value
                     for item, spec in items.items()} for node, items in node_items(tree).items()}
    scores = scores_of({e: copy.deepcopy(values) for e in ("E1", "E2", "E3", "E4")})
    expected = json.dumps(aggregate_tree(tree, aggregate(scores)).to_dict(), sort_keys=True)
    realisations = sample_trees(tree, scores, 40, seed=3, mode=mode, expert_weights={
        "E1": 0.1, "E2": 0.2, "E3": 0.3, "E4": 0.4})
    assert set(_docs(realisations)) == {expected}


def test_experts_mode_takes_each_family_from_one_expert():
    """Experts mode: a leaf's lower and upper, and a node's children's weights, come from one expert."""
    tree, scores = make_tree(), three_experts()
    ramps = {(800.0, 100.0), (800.0, 150.0), (750.0, 120.0)}
    shares = {9 / 12, 6 / 12, 9 / 10}
    for realisation in sample_trees(tree, scores, 60, seed=5):
        membership = realisation.find(SPLAYS).membership
        assert (membership["lower"], membership["upper"]) in ramps
        splays, mesh = (c.weight for c in realisation.find(PATHWAY).children)
        assert min(abs(splays - s) for s in shares) < 1e-15 and splays + mesh == pytest.approx(1.0)


def test_experts_are_drawn_as_often_as_their_weights():
    """Expert draws follow the weights (binomial 4σ), and an expert of weight 0 is never drawn."""
    tree, scores = make_tree(), three_experts()
    weights = {"E1": 0.6, "E2": 0.4, "E3": 0.0}
    n = 2000
    draws = sample_values(tree, scores, n, seed=8, expert_weights=weights)
    uppers = np.array([d[SPLAYS]["membership.upper"] for d in draws])
    assert not np.any(uppers == 120.0)
    count = int(np.sum(uppers == 100.0))
    assert abs(count - 0.6 * n) < 4 * math.sqrt(n * 0.6 * 0.4)


@settings(max_examples=5, deadline=None, derandomize=True)
@given(st.integers(0, 2**32 - 1))
def test_ranges_samples_lie_in_the_stated_ranges_and_their_mean_converges(seed):
    """Ranges mode: lower lies in an expert's range (or is E3's value); its mean → the pool's 790 ± 5 s.e."""
    tree, scores = make_tree(), three_experts()
    weights = {"E1": 0.5, "E2": 0.3, "E3": 0.2}
    n = 3000
    draws = sample_values(tree, scores, n, seed=seed, mode="ranges", expert_weights=weights)
    lower = np.array([d[SPLAYS]["membership.lower"] for d in draws])
    inside = ((lower >= 700) & (lower <= 900)) | ((lower >= 600) & (lower <= 1000)) | (lower == 750)
    assert inside.all()
    # mixture of U(700, 900), U(600, 1000) and a point at 750 with weights 0.5, 0.3, 0.2 (by hand):
    mean = 0.5 * 800 + 0.3 * 800 + 0.2 * 750
    second = 0.5 * (200**2 / 12 + 800**2) + 0.3 * (400**2 / 12 + 800**2) + 0.2 * 750**2
    standard_error = math.sqrt(second - mean**2) / math.sqrt(n)
    assert abs(lower.mean() - mean) < 5 * standard_error
    # nobody gave a range for upper: it keeps the linear pool 0.5·100 + 0.3·150 + 0.2·120 = 119
    uppers = {d[SPLAYS]["membership.upper"] for d in draws}
    assert len(uppers) == 1 and uppers.pop() == pytest.approx(119.0, rel=1e-14)
    spread = np.array([d[HINGES]["membership.spread"] for d in draws])
    assert ((spread >= 500) & (spread <= 900)).all()


def test_invalid_draws_are_redrawn_from_the_seeded_stream():
    """Overlapping corner ranges: every realisation is a valid trapezoid, and the same seed repeats them."""
    tree = make_tree()
    scores = scores_of({"E1": {MESH: {"membership.points[0]": (200, 0, 400),
                                      "membership.points[1]": (450, 300, 600)}}})
    realisations = sample_trees(tree, scores, 300, seed=21, mode="ranges")
    corners = np.array([r.find(MESH).membership["points"][:2] for r in realisations])
    assert (corners[:, 0] <= corners[:, 1]).all()
    assert _docs(realisations) == _docs(sample_trees(tree, scores, 300, seed=21, mode="ranges"))


def _demo_workshop(tmp_path):
    spec = importlib.util.spec_from_file_location("demo_workshop", ROOT / "resources/demo/workshop.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    manifest = module.generate_workshop(tmp_path, seed=module.DEFAULT_SEED)
    tree = Tree.load(module.TREE_FILE)
    return tree, read_sheets([tmp_path / name for name in manifest["round1"]], tree)


def test_every_realisation_of_the_demo_workshop_compiles(tmp_path):
    """The demo tree sampled from its demo workshop: every realisation compiles; the input is unchanged."""
    tree, scores = _demo_workshop(tmp_path)
    before = tree.to_dict()
    for mode in ("experts", "ranges"):
        realisations = sample_trees(tree, scores, 30, seed=2, mode=mode)
        for realisation in realisations:
            assert realisation is not tree
            realisation.compile()
        assert len(set(_docs(realisations))) == 30
    assert tree.to_dict() == before


# -- sensitivity ------------------------------------------------------------------------


def test_weight_variants_scale_one_weight_and_leave_the_rest():
    """Each weighted child gets × (1 ± fraction) in its own tree, siblings untouched; labels name both."""
    tree = make_tree()
    before = tree.to_dict()
    variants = {v.label: v for v in sensitivity_variants(tree, 0.2)}
    up, down = variants[f"{SPLAYS}: weight × 1.2"], variants[f"{SPLAYS}: weight × 0.8"]
    assert (up.change, down.change) == ("weight +20%", "weight −20%")
    assert up.tree.find(SPLAYS).weight == pytest.approx(3.6)
    assert down.tree.find(SPLAYS).weight == pytest.approx(2.4)
    assert up.tree.find(MESH).weight == 1.0 and up.node == SPLAYS
    assert f"{HINGES}: weight × 1.2" in variants
    assert not any(label.startswith(f"{COVER}: weight") for label in variants)   # under 'and', alone
    assert tree.to_dict() == before
    for variant in variants.values():
        if not variant.skipped:
            variant.tree.compile()


def test_leave_one_out_removes_the_node_or_says_why_not():
    """Leaving a criterion out removes exactly it; an only child is skipped: the parent would be empty."""
    tree = make_tree()
    variants = {v.label: v for v in sensitivity_variants(tree, 0.1)}
    mesh = variants[f"{MESH}: left out"]
    assert [c.name for c in mesh.tree.find(PATHWAY).children] == ["Splays"]
    assert [p for p, _ in mesh.tree.walk()] == [p for p, _ in tree.walk() if p != MESH]
    cover = variants[f"{COVER}: left out"]
    assert cover.skipped and "Favourability > Preservation would have no children" in cover.description
    assert variants["Favourability > Preservation: left out"].tree is not None


def test_zero_weights_give_skipped_variants():
    """Weight 0 cannot be scaled; leaving out the only weighted sibling would not compile: both skipped."""
    doc = copy.deepcopy(TREE_DOC)
    doc["root"]["children"][0]["children"][1]["weight"] = 0
    variants = {v.label: v for v in sensitivity_variants(Tree.from_dict(doc), 0.1)}
    assert variants[f"{MESH}: weight × 1.1"].skipped
    assert "the weight is 0" in variants[f"{MESH}: weight × 1.1"].description
    splays = variants[f"{SPLAYS}: left out"]
    assert splays.skipped and "would not compile" in splays.description
    assert "positive weight" in splays.description
