"""The dock's state: the criteria tree, its undo history and the file it came from.

:class:`TreeController` is plain state with signals; it holds no widget and
does no computation, so it is tested without a screen. Every edit goes through
:meth:`TreeController.edit`, which snapshots the tree before and after and
pushes a :class:`~.commands.SnapshotCommand` on the undo stack; an edit that
raises leaves the tree untouched.
"""

from __future__ import annotations

import copy
import os
from collections.abc import Callable
from pathlib import Path

from qgis.PyQt.QtCore import QObject, pyqtSignal
from qgis.PyQt.QtWidgets import QUndoStack

from ..core.tree import COMPONENTS, PATH_SEPARATOR, Node, Proxy, Tree
from .commands import SnapshotCommand
from .common import tr

#: Proxy field holding the id of the QGIS layer a proxy was taken from (project only).
LAYER_ID_KEY = "qgis_layer_id"

_KEEP = object()


class TreeController(QObject):
    """The tree being edited, with undo and redo, the tree file, and the run options.

    Signals
    -------
    changed
        The tree (or its absence) changed: an edit, an undo, a redo, a load.
    focus_requested(str)
        The node a view should select after an edit, undo or redo.
    options_changed
        Where runs write, or whether they write component rasters, changed.
    """

    changed = pyqtSignal()
    focus_requested = pyqtSignal(str)
    options_changed = pyqtSignal()

    def __init__(self, parent: QObject | None = None) -> None:
        super().__init__(parent)
        self.tree: Tree | None = None
        self.file_path: str | None = None
        self.undo_stack = QUndoStack(self)
        #: Folder for run outputs ('' = the default beside the project).
        self.output_folder = ""
        #: Also write one raster per component (and per node marked to save).
        self.component_rasters = False

    def set_run_options(self, output_folder: str | None = None,
                        component_rasters: bool | None = None) -> None:
        """Set where runs write ('' = the default) and whether they write component rasters (not undone)."""
        if output_folder is not None:
            self.output_folder = output_folder
        if component_rasters is not None:
            self.component_rasters = bool(component_rasters)
        self.options_changed.emit()

    # -- whole trees -------------------------------------------------------------

    def reset(self, tree: Tree | None = None, file_path: str | None = None) -> None:
        """Show ``tree`` (or nothing) with an empty undo history: a project opened or cleared."""
        self.undo_stack.clear()
        self.file_path = file_path
        self._set_tree(copy.deepcopy(tree), tree.root.name if tree is not None else None)
        self.undo_stack.setClean()

    def new_model(self, name: str = "") -> None:
        """Start a new model (root and the four components); undo gives the previous tree back."""
        self._replace(Tree.new(name or tr("New model")), None, tr("New model"))

    def open_file(self, path: str) -> None:
        """Open a tree file; undo gives the previous tree back.

        Raises
        ------
        TreeFileError
            The file cannot be read or is not a sound tree; the current tree
            is untouched.
        """
        tree = Tree.load(path)
        self._replace(tree, os.path.abspath(path), tr("Open tree file"))

    def save_file(self, path: str | None = None) -> str:
        """Write the tree to ``path`` (default: the file it came from) and return the path.

        Layers inside the file's folder are written relative to it, others
        absolute; project layer ids are left out (a tree file belongs to no
        project).

        Raises
        ------
        OutputError
            The file cannot be written.
        ValueError
            No tree, or no path and the tree came from no file.
        """
        if self.tree is None:
            raise ValueError("there is no tree to save")
        path = path or self.file_path
        if not path:
            raise ValueError("give a file name to save the tree to")
        path = os.path.abspath(path)
        self.file_copy(Path(path).parent).save(path)
        self.file_path = path
        self.undo_stack.setClean()
        return path

    def file_copy(self, folder: str | Path) -> Tree:
        """Return a copy of the tree for a file in ``folder``: paths anchored there, no layer ids."""
        tree = self._detached()
        tree.anchor_paths(folder)
        return tree

    def run_copy(self) -> Tree:
        """Return a copy of the tree for a run: absolute paths, no layer ids."""
        tree = self._detached()
        tree.absolute_paths()
        return tree

    def _detached(self) -> Tree:
        if self.tree is None:
            raise ValueError("there is no tree")
        tree = copy.deepcopy(self.tree)
        for _, node in tree.walk():
            if node.proxy is not None:
                node.proxy.extra.pop(LAYER_ID_KEY, None)
        return tree

    def _replace(self, tree: Tree, file_path, text: str) -> None:
        command = SnapshotCommand(self, copy.deepcopy(self.tree), tree, text,
                                  focus=(self._root_path(self.tree), tree.root.name))
        command.files = (self.file_path, file_path)
        self.undo_stack.push(command)

    @staticmethod
    def _root_path(tree: Tree | None) -> str | None:
        return tree.root.name if tree is not None else None

    def _set_tree(self, tree: Tree | None, focus: str | None, file_path=_KEEP) -> None:
        """Install a tree (called by the undo commands); tell the views."""
        self.tree = tree
        if file_path is not _KEEP:
            self.file_path = file_path
        self.changed.emit()
        if focus:
            self.focus_requested.emit(focus)

    # -- the one way to edit --------------------------------------------------------

    def edit(self, text: str, change: Callable[[Tree], str | None], focus: str | None = None,
             merge_key: str | None = None) -> str | None:
        """Apply ``change`` to a copy of the tree and push it as one undoable step.

        ``change`` edits the tree it is given and may return the path of the
        node to select; an exception leaves the tree as it was. An edit that
        changes nothing pushes nothing. Returns the path ``change`` returned.
        """
        if self.tree is None:
            raise ValueError("there is no tree to edit; start a new model or open a tree file")
        before = copy.deepcopy(self.tree)
        after = copy.deepcopy(self.tree)
        selected = change(after)
        if after.to_dict() == before.to_dict():
            return selected
        self.undo_stack.push(SnapshotCommand(self, before, after, text,
                                             focus=(focus, selected or focus), merge_key=merge_key))
        return selected

    def undo(self) -> None:
        """Undo the last edit."""
        self.undo_stack.undo()

    def redo(self) -> None:
        """Redo the last undone edit."""
        self.undo_stack.redo()

    # -- edits of one node ------------------------------------------------------------

    def rename(self, path: str, name: str) -> str:
        """Rename a node; return its new path (ParameterError for a bad or taken name)."""
        return self.edit(tr("Rename"), lambda t: t.rename(path, name.strip()), focus=path)

    def set_component(self, path: str, component: str | None) -> None:
        """Mark a node as one of the four components, or as none."""
        if component is not None and component not in COMPONENTS:
            raise ValueError(f"component must be one of {', '.join(COMPONENTS)}")
        self._set(path, tr("Set component"), lambda n: setattr(n, "component", component))

    def set_operator_type(self, path: str, kind: str) -> None:
        """Set how a node combines its children; γ starts at 0.5 when gamma is chosen."""
        def change(node: Node) -> None:
            spec = dict(node.operator or {})
            spec["type"] = kind
            if kind == "gamma":
                spec.setdefault("gamma", 0.5)
            else:
                spec.pop("gamma", None)
            node.operator = spec
        self._set(path, tr("Set operator"), change)

    def set_gamma(self, path: str, gamma: float) -> None:
        """Set γ of a gamma node."""
        def change(node: Node) -> None:
            node.operator = {**(node.operator or {"type": "gamma"}), "gamma": float(gamma)}
        self._set(path, tr("Set γ"), change, merge_key=f"gamma|{path}")

    def set_nodata(self, path: str, rule: str) -> None:
        """Set a node's nodata rule ("propagate" is the default and is not written)."""
        def change(node: Node) -> None:
            spec = dict(node.operator or {"type": "and"})
            spec.pop("nodata", None)
            if rule != "propagate":
                spec["nodata"] = rule
            node.operator = spec
        self._set(path, tr("Set nodata rule"), change)

    def set_weight(self, path: str, weight: float) -> None:
        """Set a node's weight (used when its parent takes a weighted mean)."""
        value = float(weight)
        self._set(path, tr("Set weight"), lambda n: setattr(n, "weight", int(value) if value.is_integer()
                                                             else value), merge_key=f"weight|{path}")

    def set_rationale(self, path: str, text: str) -> None:
        """Set why a criterion matters; typing in a row is one undo step."""
        self._set(path, tr("Edit rationale"), lambda n: setattr(n, "rationale", text),
                  merge_key=f"rationale|{path}")

    def set_save_output(self, path: str, save: bool) -> None:
        """Ask for this node's μ as a raster of its own when component rasters are written."""
        self._set(path, tr("Set node raster"), lambda n: setattr(n, "save_output", bool(save)))

    def set_membership(self, path: str, spec: dict | None, merge_key: str | None = None) -> None:
        """Replace a leaf's membership function (plain tree-file form)."""
        self._set(path, tr("Edit membership"), lambda n: setattr(n, "membership", copy.deepcopy(spec)),
                  merge_key=f"membership|{merge_key}|{path}" if merge_key else None)

    def set_proxy(self, path: str, proxy: Proxy, membership: dict | None = None) -> None:
        """Give a criterion its layer; ``membership`` is used only if it has none yet."""
        def change(node: Node) -> None:
            if node.children or node.operator is not None:
                raise ValueError(tr("{path} combines other criteria; add the layer as a criterion "
                                    "under it").format(path=path))
            node.proxy = copy.deepcopy(proxy)
            if node.membership is None and membership is not None:
                node.membership = copy.deepcopy(membership)
        self._set(path, tr("Set layer"), change)

    def set_band(self, path: str, band: int) -> None:
        """Choose the band of a raster proxy."""
        self._set(path, tr("Set band"), lambda n: setattr(n.proxy, "band", int(band)))

    def set_measure(self, path: str, measure: str, field: str | None = None) -> None:
        """Choose what a vector proxy measures: "distance", or "attribute" with a numeric field.

        A margin counts only for distances, so it is dropped with the change.
        """
        def change(node: Node) -> None:
            node.proxy.measure = measure
            node.proxy.field = field if measure == "attribute" else None
            if measure != "distance":
                node.proxy.margin = None
        self._set(path, tr("Set measure"), change)

    def set_filter(self, path: str, where: dict | None) -> None:
        """Keep only the features whose field holds one of the values (``{"field", "values"}``; None: all)."""
        def change(node: Node) -> None:
            node.proxy.where = copy.deepcopy(where) if where else None
        self._set(path, tr("Set feature filter"), change)

    def set_margin(self, path: str, margin: float) -> None:
        """Count features up to ``margin`` map units outside the grid (0: none); stepping is one undo step."""
        value = float(margin)
        self._set(path, tr("Set margin"), lambda n: setattr(n.proxy, "margin", (
            None if value == 0 else int(value) if value.is_integer() else value)),
                  merge_key=f"margin|{path}")

    def _set(self, path: str, text: str, change: Callable[[Node], None],
             merge_key: str | None = None) -> None:
        self.edit(text, lambda t: change(t.find(path)), focus=path, merge_key=merge_key)

    # -- the tree as a whole ----------------------------------------------------------

    def set_tree_name(self, name: str) -> None:
        """Set the model's name."""
        self.edit(tr("Rename model"), lambda t: setattr(t, "name", name), merge_key="tree-name")

    def set_description(self, text: str) -> None:
        """Set the model's description; typing in a row is one undo step."""
        self.edit(tr("Edit description"), lambda t: setattr(t, "description", text),
                  merge_key="tree-description")

    def set_grid_reference(self, path: str | None) -> None:
        """Take the grid from this raster, or (None) from the first raster proxy."""
        def change(tree: Tree) -> None:
            grid = {k: v for k, v in (tree.grid or {}).items() if k not in ("reference", "band")}
            tree.grid = ({**grid, "reference": path} if path else grid) or None
        self.edit(tr("Set grid"), change)

    # -- structure ----------------------------------------------------------------------

    def add_criterion(self, parent_path: str, name: str | None = None) -> str:
        """Add an empty criterion (to be given a layer) under ``parent_path``; return its path."""
        return self.edit(tr("Add criterion"), lambda t: t.add_child(
            parent_path, Node(name=t.unique_name(parent_path, name or tr("New criterion")))),
            focus=parent_path)

    def add_group(self, parent_path: str, name: str | None = None) -> str:
        """Add a criterion that combines criteria of its own (weighted mean); return its path."""
        return self.edit(tr("Add group"), lambda t: t.add_child(
            parent_path, Node(name=t.unique_name(parent_path, name or tr("New group")),
                              operator={"type": "weighted_mean"})), focus=parent_path)

    def add_component(self, component: str | None = None, name: str | None = None) -> str:
        """Add a component under the root; return its path."""
        def change(tree: Tree) -> str:
            label = name or (component.capitalize() if component else tr("New component"))
            node = Node(name=tree.unique_name(tree.root.name, label), component=component,
                        operator={"type": "weighted_mean"})
            return tree.add_child(tree.root.name, node)
        return self.edit(tr("Add component"), change, focus=self._root_path(self.tree))

    def add_layer_criterion(self, parent_path: str, name: str, proxy: Proxy,
                            membership: dict | None) -> str:
        """Add a criterion scored from ``proxy`` under ``parent_path``; return its path."""
        return self.edit(tr("Add layer"), lambda t: t.add_child(
            parent_path, Node(name=t.unique_name(parent_path, name), proxy=copy.deepcopy(proxy),
                              membership=copy.deepcopy(membership))), focus=parent_path)

    def remove(self, path: str) -> str:
        """Remove a node and everything under it; return the parent's path."""
        parent_path = path.rpartition(PATH_SEPARATOR)[0]

        def change(tree: Tree) -> str:
            tree.remove(path)
            return parent_path
        return self.edit(tr("Remove"), change, focus=path)

    def move_to(self, path: str, parent_path: str, index: int) -> str:
        """Move a node to position ``index`` under ``parent_path`` (a drag); return its new path.

        ``index`` counts the new parent's children without the node moved. One
        move is one undo step; a refused move (under itself, under a leaf that
        reads a layer, beside a sibling of the same name, the root) raises
        ParameterError and leaves the tree as it was.
        """
        return self.edit(tr("Move"), lambda t: t.move(path, parent_path, index), focus=path)

    def move_by(self, path: str, delta: int) -> str:
        """Move a node ``delta`` places among its siblings; return its path."""
        parent_path = path.rpartition(PATH_SEPARATOR)[0]
        return self.edit(tr("Move"), lambda t: t.move(path, parent_path, t.index_of(path) + delta),
                         focus=path)
