"""Model edits the dock builds on (core/tree.py): add, remove, rename, move, drafts, anchored paths.

Plain Python, no QGIS. The properties checked are structural invariants
(common practice, no source): an edit keeps every other node, names stay
unique among siblings, a refused edit changes nothing, and a path rewrite
points at the same file as before.
"""

from __future__ import annotations

import copy
import os

import pytest

from favour_plugin.core.errors import TreeFileError
from favour_plugin.core.tree import COMPONENTS, Node, Proxy, Tree
from tests.helpers import leaf, tree_doc

LINEAR = {"type": "linear", "lower": 0, "upper": 1}


def sample_tree(base_dir=None) -> Tree:
    """A small sound tree: root AND over two leaves and a group with one leaf."""
    doc = tree_doc([leaf("Alpha", "layers/a.tif", LINEAR), leaf("Beta", "/data/b.tif", LINEAR),
                    {"name": "Group", "operator": {"type": "or"},
                     "children": [leaf("Gamma", "layers/sub/c.tif", LINEAR)]}])
    return Tree.from_dict(doc, base_dir=base_dir)


def names(tree: Tree) -> list[str]:
    """Return every node path in walk order."""
    return [path for path, _ in tree.walk()]


def test_new_model_has_the_four_components_in_order():
    """A new model is a root over source, pathway, trap and preservation, each marked as its component."""
    tree = Tree.new("Test model")
    assert [c.component for c in tree.root.children] == list(COMPONENTS)
    assert [c.name for c in tree.root.children] == ["Source", "Pathway", "Trap", "Preservation"]
    assert tree.root.operator == {"type": "and"}
    # Empty components are a half-finished model: listed as problems, one per component.
    assert sorted(p.node for p in tree.problems()) == sorted(
        f"Favourability > {c.name}" for c in tree.root.children)


def test_add_child_returns_its_path():
    """Adding gives the new path (the refused additions are rows of tests/test_refusals.py)."""
    tree = sample_tree()
    path = tree.add_child("Favourability > Group", Node(name="Delta"))
    assert path == "Favourability > Group > Delta"
    assert tree.find(path).name == "Delta"


def test_add_at_index_and_index_of_agree():
    """A child inserted at index i is found at index i."""
    tree = sample_tree()
    path = tree.add_child("Favourability", Node(name="First"), index=0)
    assert tree.index_of(path) == 0
    assert [c.name for c in tree.root.children] == ["First", "Alpha", "Beta", "Group"]


def test_remove_takes_the_subtree_and_keeps_the_rest():
    """Removing a group removes exactly it and its descendants."""
    tree = sample_tree()
    everything = names(tree)
    removed = tree.remove("Favourability > Group")
    assert removed.name == "Group"
    assert names(tree) == [p for p in everything if not p.startswith("Favourability > Group")]
    with pytest.raises(KeyError):
        tree.remove("Favourability > Nowhere")


def test_rename_changes_the_path_of_the_subtree():
    """Renaming a group renames the paths of everything under it, and nothing else."""
    tree = sample_tree()
    assert tree.rename("Favourability > Group", "Structures") == "Favourability > Structures"
    assert "Favourability > Structures > Gamma" in names(tree)
    assert tree.rename("Favourability", "Model") == "Model"
    assert tree.find("Model > Alpha").name == "Alpha"
    assert tree.rename("Model > Alpha", "Alpha") == "Model > Alpha"  # its own name is not taken


def test_move_reorders_and_reparents_without_losing_nodes():
    """Moves keep the set of leaves (refused moves are rows of tests/test_refusals.py)."""
    tree = sample_tree()
    leaves = sorted(n.name for _, n in tree.walk() if n.is_leaf)
    assert tree.move("Favourability > Beta", "Favourability", 0) == "Favourability > Beta"
    assert [c.name for c in tree.root.children] == ["Beta", "Alpha", "Group"]
    assert tree.move("Favourability > Alpha", "Favourability > Group", 0) == "Favourability > Group > Alpha"
    assert [c.name for c in tree.find("Favourability > Group").children] == ["Alpha", "Gamma"]
    assert sorted(n.name for _, n in tree.walk() if n.is_leaf) == leaves


def test_unique_name_counts_up_past_taken_names():
    """unique_name returns the base, then 'base 2', 'base 3' as siblings take them."""
    tree = sample_tree()
    assert tree.unique_name("Favourability", "Delta") == "Delta"
    assert tree.unique_name("Favourability", "Alpha") == "Alpha 2"
    tree.add_child("Favourability", Node(name="Alpha 2"))
    assert tree.unique_name("Favourability", "Alpha") == "Alpha 3"
    assert ">" not in tree.unique_name("Favourability", "a > b")


def test_anchor_paths_keeps_files_and_makes_inside_paths_relative(tmp_path):
    """Anchoring to a folder: same files; inside the folder relative, outside absolute."""
    base = tmp_path / "model"
    tree = sample_tree(base_dir=base)
    tree.grid = {"reference": "layers/a.tif"}
    files = {path: node.proxy.resolve(tree.base_dir) for path, node in tree.walk() if node.proxy}
    tree.anchor_paths(base / "layers")
    assert tree.find("Favourability > Alpha").proxy.path == "a.tif"
    assert tree.find("Favourability > Group > Gamma").proxy.path == "sub/c.tif"
    assert tree.find("Favourability > Beta").proxy.path == os.path.abspath("/data/b.tif")
    assert tree.grid["reference"] == "a.tif"
    assert {path: node.proxy.resolve(tree.base_dir) for path, node in tree.walk() if node.proxy} == files
    tree.anchor_paths(tmp_path / "elsewhere")  # nothing inside: every path absolute
    assert all(os.path.isabs(node.proxy.path) for _, node in tree.walk() if node.proxy)
    assert {path: node.proxy.resolve(tree.base_dir) for path, node in tree.walk() if node.proxy} == files


def test_absolute_paths_resolve_from_the_base_folder(tmp_path):
    """absolute_paths gives each proxy the absolute path it resolved to before."""
    tree = sample_tree(base_dir=tmp_path)
    expected = {path: str(node.proxy.resolve(tmp_path)) for path, node in tree.walk() if node.proxy}
    tree.absolute_paths()
    assert {path: node.proxy.path for path, node in tree.walk() if node.proxy} == expected


def test_from_draft_keeps_a_half_finished_model_that_from_dict_refuses():
    """A model with an empty component and a leaf without a layer survives a draft round trip."""
    tree = Tree.new("Draft")
    tree.add_child("Favourability > Source", Node(name="Still to choose"))
    doc = tree.to_dict()
    with pytest.raises(TreeFileError):
        Tree.from_dict(doc)
    again = Tree.from_draft(copy.deepcopy(doc))
    assert again.to_dict() == doc


def test_edits_leave_unknown_fields_alone():
    """Fields the model does not know (notes, project ids) survive edits of other nodes."""
    tree = sample_tree()
    tree.find("Favourability > Alpha").extra["note"] = {"by": "a reviewer"}
    tree.find("Favourability > Alpha").proxy.extra["qgis_layer_id"] = "a_1"
    tree.rename("Favourability > Beta", "Bravo")
    tree.move("Favourability > Alpha", "Favourability > Group", 1)
    moved = tree.find("Favourability > Group > Alpha")
    assert moved.extra == {"note": {"by": "a reviewer"}}
    assert moved.to_dict()["proxy"] == {"path": "layers/a.tif", "band": 1, "qgis_layer_id": "a_1"}
    assert isinstance(Proxy.from_dict(moved.to_dict()["proxy"]).extra, dict)
