"""The criteria tree: a mineral-systems model as plain Python data.

A :class:`Tree` holds a root :class:`Node`; internal nodes combine their
children with a fuzzy operator, leaves turn one proxy layer into μ with a
membership function. The model keeps operators and memberships as the plain
dicts of the tree file, so an editor can hold a half-finished model;
:meth:`Tree.problems` lists what is wrong, node by node, and :meth:`Tree.compile`
turns a sound tree into an :class:`EvaluationPlan`, the one path by which any
caller (processing, dock, command line, tests) evaluates a tree block by block.

The file format (``"format": "favour-tree", "version": 1``) is JSON, checked
against ``schema/tree-v1.schema.json`` on load. Fields this module does not
know are kept and written back unchanged.

Whatever a user hands it, reading a tree ends in a tree or a
:class:`~favour_plugin.core.errors.TreeFileError` whose message names the
node: the file is read by :mod:`favour_plugin.core.jsonio` (size, encoding,
strict JSON, nesting), then the tree's shape is checked without recursion
(at most :data:`MAX_DEPTH` levels and :data:`MAX_NODES` nodes) before the
schema validator and the node builders, which recurse, see it. Numbers that
pass the schema but no computation can use (beyond ±:data:`MAX_MAGNITUDE`)
are listed by :meth:`Tree.problems` at their node.
"""

from __future__ import annotations

import copy
import hashlib
import json
import math
import os
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from dataclasses import field as _field
from pathlib import Path

import numpy as np

from .errors import FavourError, OutputError, ParameterError, TreeFileError
from .jsonio import MAX_NESTING, TREE_MAX_BYTES, lone_surrogate, parse_json_text, read_json_file, too_deep
from .membership import Membership, parse_membership
from .overlay import Operator, parse_operator
from .schema import describe, load_validator

FORMAT = "favour-tree"
VERSION = 1
SCHEMA_FILE = "tree-v1.schema.json"
COMPONENTS = ("source", "pathway", "trap", "preservation")
PATH_SEPARATOR = " > "

_NODE_KEYS = {"name", "component", "rationale", "weight", "save_output", "operator",
              "children", "proxy", "membership"}
_PROXY_KEYS = {"path", "band", "layer", "measure", "field", "resampling"}
_TREE_KEYS = {"format", "version", "name", "description", "grid", "root"}

#: Deepest tree read, in levels of nodes (the root is level 1). A mineral-systems
#: model is about 5 deep: root, component, criterion, sub-criterion, proxy
#: (common practice, no source).
MAX_DEPTH = 32

#: Most nodes a tree may hold; a model a person can argue for has tens
#: (common practice, no source).
MAX_NODES = 1000

#: Largest magnitude of a number in a node's operator, membership, weight or
#: band, and in the grid: far beyond any map coordinate, distance or value,
#: yet small enough that sums and products of such numbers stay finite
#: (common practice, no source).
MAX_MAGNITUDE = 1e15

#: Largest raster side in cells (GDAL's raster sizes and band numbers are C ints).
MAX_CELLS_PER_SIDE = 2**31 - 1


@dataclass
class Proxy:
    """A leaf's layer: a raster band, or a vector layer measured onto the grid.

    ``path`` is as written in the tree file: relative to the tree file's folder
    or absolute. ``measure`` is None for a raster; ``"distance"`` (map units of
    the grid CRS to the nearest feature) or ``"attribute"`` (``field`` burnt
    into the cells the features cover) for a vector layer.

    A vector proxy may keep only some of its features: ``where`` is
    ``{"field": name, "values": [v, ...]}``, the features whose field holds
    one of the values (numbers for a numeric field, text for a text field).
    It is plain data, never SQL: the raster layer builds GDAL's attribute
    filter from it with every name and value quoted. ``margin`` (map units of
    the grid CRS, distance proxies only) lets features up to that far outside
    the grid count in the distances inside it.
    """

    path: str
    band: int | None = None
    layer: str | None = None
    measure: str | None = None
    field: str | None = None
    resampling: str | None = None
    where: dict | None = None
    margin: float | None = None
    extra: dict = _field(default_factory=dict)

    #: The tree-file keys this class reads; others are kept in ``extra``.
    KEYS = ("path", "band", "layer", "measure", "field", "resampling", "where", "margin")

    @property
    def is_vector(self) -> bool:
        """True when the proxy is a vector layer measured onto the grid."""
        return self.measure is not None

    def resolve(self, base_dir: Path | str | None) -> Path:
        """Return the absolute path of the layer file, relative paths taken from ``base_dir``."""
        path = Path(self.path).expanduser()
        if not path.is_absolute() and base_dir is not None:
            path = Path(base_dir) / path
        return Path(os.path.abspath(path))

    @classmethod
    def from_dict(cls, doc: Mapping) -> Proxy:
        """Build a proxy from its tree-file form (already checked by the tree's reader)."""
        return cls(path=doc["path"], band=doc.get("band"), layer=doc.get("layer"),
                   measure=doc.get("measure"), field=doc.get("field"),
                   resampling=doc.get("resampling"), where=copy.deepcopy(doc.get("where")),
                   margin=doc.get("margin"),
                   extra={k: copy.deepcopy(v) for k, v in doc.items() if k not in cls.KEYS})

    def to_dict(self) -> dict:
        """Return the tree-file form."""
        out = {"path": self.path}
        for key in self.KEYS[1:]:
            value = getattr(self, key)
            if value is not None:
                out[key] = copy.deepcopy(value)
        if not self.is_vector and self.band is None:
            out["band"] = 1
        out.update(copy.deepcopy(self.extra))
        return out


@dataclass
class Node:
    """A criterion, component or the root: combines children, or scores one proxy.

    Attributes
    ----------
    name : str
        Unique among its siblings; the node's path joins names from the root.
    component : str or None
        One of ``COMPONENTS`` for the four mineral-system processes.
    operator : dict or None
        Tree-file form of the operator (internal nodes).
    children : list of Node
        Empty for a leaf.
    proxy : Proxy or None
        The leaf's layer.
    membership : dict or None
        Tree-file form of the leaf's membership function.
    weight : float
        Used when the parent's operator is ``weighted_mean``.
    rationale : str
        Why this criterion matters; part of the result in a knowledge-driven model.
    save_output : bool
        Write this node's μ as a raster of its own when node outputs are asked for
        (components always are).
    extra : dict
        Fields this version does not know, kept for round trips.
    """

    name: str
    operator: dict | None = None
    children: list[Node] = _field(default_factory=list)
    proxy: Proxy | None = None
    membership: dict | None = None
    component: str | None = None
    weight: float = 1.0
    rationale: str = ""
    save_output: bool = False
    extra: dict = _field(default_factory=dict)

    @property
    def is_leaf(self) -> bool:
        """True for a proxy leaf (no children)."""
        return not self.children and self.operator is None

    @classmethod
    def from_dict(cls, doc: Mapping) -> Node:
        """Build a node and its subtree from the tree-file form.

        The document must already be checked (:meth:`Tree.from_dict` checks
        its shape and schema, :meth:`Tree.from_draft` its shape and types):
        this recurses once per level and indexes fields without checking them.
        """
        return cls(
            name=doc["name"],
            operator=copy.deepcopy(doc.get("operator")),
            children=[cls.from_dict(child) for child in doc.get("children", ())],
            proxy=Proxy.from_dict(doc["proxy"]) if "proxy" in doc else None,
            membership=copy.deepcopy(doc.get("membership")),
            component=doc.get("component"),
            weight=doc.get("weight", 1.0),
            rationale=doc.get("rationale", ""),
            save_output=doc.get("save_output", False),
            extra={k: copy.deepcopy(v) for k, v in doc.items() if k not in _NODE_KEYS},
        )

    def to_dict(self) -> dict:
        """Return the tree-file form of this node and its subtree."""
        out: dict = {"name": self.name}
        if self.component is not None:
            out["component"] = self.component
        if self.operator is not None:
            out["operator"] = copy.deepcopy(self.operator)
        if self.proxy is not None:
            out["proxy"] = self.proxy.to_dict()
        if self.membership is not None:
            out["membership"] = copy.deepcopy(self.membership)
        if self.weight != 1.0:
            out["weight"] = self.weight
        if self.save_output:
            out["save_output"] = True
        if self.rationale:
            out["rationale"] = self.rationale
        out.update(copy.deepcopy(self.extra))
        if self.children:
            out["children"] = [child.to_dict() for child in self.children]
        return out


@dataclass(frozen=True)
class Problem:
    """Something wrong with one node: its path, a message, and ``"error"`` or ``"warning"``.

    Errors stop an evaluation; warnings (a proxy that will be resampled) do not.
    """

    node: str
    message: str
    level: str = "error"

    def __str__(self) -> str:
        """Render as ``node path: message``."""
        return f"{self.node}: {self.message}" if self.node else self.message


@dataclass
class Tree:
    """A criteria tree with its name, optional grid definition and root node.

    ``base_dir`` is the folder relative proxy paths are taken from: the tree
    file's folder once loaded or saved.
    """

    root: Node
    name: str = ""
    description: str = ""
    grid: dict | None = None
    base_dir: Path | None = None
    extra: dict = _field(default_factory=dict)

    # -- reading and writing -------------------------------------------------

    @classmethod
    def from_dict(cls, doc, base_dir: Path | str | None = None) -> Tree:
        """Check a parsed tree document and build the tree.

        The document's shape (levels, node count, nesting) is checked first,
        without recursion, then the schema, then each node's problems.

        Raises
        ------
        TreeFileError
            Wrong format, a version newer than this program reads, a tree
            deeper than :data:`MAX_DEPTH` levels or with more than
            :data:`MAX_NODES` nodes, a schema violation, or a node problem
            (bad parameter, duplicate name); the message names each problem
            with its node path.
        """
        if not isinstance(doc, Mapping):
            raise TreeFileError(f"a tree file holds a JSON object, not {type(doc).__name__}")
        if doc.get("format") != FORMAT:
            raise TreeFileError(f"'format' must be {FORMAT!r}, got {_brief(doc.get('format'))}; "
                                "this is not a Favour tree file")
        version = doc.get("version")
        if isinstance(version, int) and not isinstance(version, bool) and version > VERSION:
            raise TreeFileError(
                f"tree file version {_brief(version)} is newer than this Favour reads "
                f"(version {VERSION}); update Favour to open it")
        _check_shape(doc)
        issues = load_validator(SCHEMA_FILE).issues(doc)
        if issues:
            problems = []
            for issue in issues:
                node, where = _locate(doc, issue.path)
                problems.append(Problem(node, f"{where}: {issue.message}" if where else issue.message))
            raise TreeFileError(_join_problems("the tree does not match its schema", problems))
        tree = cls(root=Node.from_dict(doc["root"]), name=doc.get("name", ""),
                   description=doc.get("description", ""),
                   grid=copy.deepcopy(doc.get("grid")),
                   base_dir=Path(base_dir) if base_dir is not None else None,
                   extra={k: copy.deepcopy(v) for k, v in doc.items() if k not in _TREE_KEYS})
        problems = tree.problems()
        if problems:
            raise TreeFileError(_join_problems("the tree has problems", problems))
        return tree

    @classmethod
    def from_json(cls, text: str, base_dir: Path | str | None = None, source: str = "tree") -> Tree:
        """Parse JSON text and build the tree; bad JSON names the line and column.

        The text is read as :func:`favour_plugin.core.jsonio.parse_json_text`
        reads it: at most :data:`~favour_plugin.core.jsonio.TREE_MAX_BYTES`,
        strict JSON (no NaN or Infinity), nesting limited.
        """
        doc = parse_json_text(text, error=TreeFileError, source=source, max_bytes=TREE_MAX_BYTES)
        return cls.from_dict(doc, base_dir)

    @classmethod
    def load(cls, path: Path | str) -> Tree:
        """Read a tree file; relative proxy paths are taken from its folder.

        A path that is not a regular file, or a file over
        :data:`~favour_plugin.core.jsonio.TREE_MAX_BYTES`, is refused before
        it is read.

        Raises
        ------
        TreeFileError
            The file is missing, not a plain file, too large, not UTF-8, not
            JSON, or not a sound tree; the message names the file or the node.
        """
        path = Path(path)
        doc = read_json_file(path, max_bytes=TREE_MAX_BYTES, error=TreeFileError, what="tree file")
        try:
            base_dir = path.resolve().parent
        except (OSError, RuntimeError) as exc:  # a symlink loop, say
            raise TreeFileError(f"tree file {path}: its folder cannot be resolved: {exc}") from None
        return cls.from_dict(doc, base_dir=base_dir)

    def to_dict(self) -> dict:
        """Return the tree-file document (paths as stored)."""
        out: dict = {"format": FORMAT, "version": VERSION}
        if self.name:
            out["name"] = self.name
        if self.description:
            out["description"] = self.description
        if self.grid is not None:
            out["grid"] = copy.deepcopy(self.grid)
        out.update(copy.deepcopy(self.extra))
        out["root"] = self.root.to_dict()
        return out

    def to_json(self) -> str:
        """Return the tree file's text: indented JSON, UTF-8 friendly, newline-terminated."""
        return json.dumps(self.to_dict(), indent=2, ensure_ascii=False) + "\n"

    def save(self, path: Path | str) -> None:
        """Write the tree file atomically, keeping the previous version as ``<path>.bak``.

        Relative proxy paths are rewritten so they stay correct from the new
        file's folder.
        """
        path = Path(os.path.abspath(path))
        self.rebase(path.parent)
        text = self.to_json()
        tmp = path.with_name(f".{path.name}.partial")
        try:
            tmp.write_text(text, encoding="utf-8")
            if path.exists():
                os.replace(path, path.with_name(path.name + ".bak"))
            os.replace(tmp, path)
        except OSError as exc:
            tmp.unlink(missing_ok=True)
            raise OutputError(f"cannot write tree file {path}: {exc.strerror or exc}") from None

    def rebase(self, new_base: Path | str) -> None:
        """Rewrite relative proxy and grid paths so they resolve the same from ``new_base``."""
        new_base = Path(os.path.abspath(new_base))
        for _, node in self.walk():
            if node.proxy is not None and not Path(node.proxy.path).is_absolute():
                node.proxy.path = _relative(node.proxy.resolve(self.base_dir), new_base)
        if self.grid and "reference" in self.grid and not Path(self.grid["reference"]).is_absolute():
            self.grid["reference"] = _relative(self.resolve(self.grid["reference"]), new_base)
        self.base_dir = new_base

    def resolve(self, path: str) -> Path:
        """Return a path from the tree file as an absolute path."""
        p = Path(path).expanduser()
        if not p.is_absolute() and self.base_dir is not None:
            p = self.base_dir / p
        return Path(os.path.abspath(p))

    # -- structure -------------------------------------------------------------

    def walk(self) -> Iterator[tuple[str, Node]]:
        """Yield ``(path, node)`` for every node, parents before children."""
        stack = [(self.root.name, self.root)]
        while stack:
            path, node = stack.pop()
            yield path, node
            for child in reversed(node.children):
                stack.append((path + PATH_SEPARATOR + child.name, child))

    def find(self, path: str) -> Node:
        """Return the node at ``path`` or raise KeyError."""
        for node_path, node in self.walk():
            if node_path == path:
                return node
        raise KeyError(path)

    def problems(self) -> list[Problem]:
        """List every problem of the model, each with the path of the node it belongs to.

        Checks structure (leaf or combining node, unique sibling names, at most
        :data:`MAX_DEPTH` levels and :data:`MAX_NODES` nodes), operators,
        memberships, weights and proxy fields, and that every number there and
        in the grid is finite and within ±:data:`MAX_MAGNITUDE`. File
        existence and grids against the data are checked by the raster layer,
        which can open files; problems of the grid have an empty node path.
        """
        found: list[Problem] = [Problem("", message) for message in _grid_problems(self.grid)]
        count = 0
        stack = [(self.root.name, self.root, 1)]
        while stack:
            path, node, level = stack.pop()
            count += 1
            found.extend(Problem(path, message) for message in _node_problems(node))
            if level > MAX_DEPTH:
                found.append(Problem(path, f"lies {level} levels deep; a tree has at most {MAX_DEPTH} "
                                           "levels"))
                continue  # one mark per branch is enough
            for child in reversed(node.children):
                stack.append((path + PATH_SEPARATOR + str(child.name), child, level + 1))
        if count > MAX_NODES:
            found.append(Problem(self.root.name, f"the tree has {count} nodes; a tree has at most "
                                                 f"{MAX_NODES}"))
        return found

    def compile(self) -> EvaluationPlan:
        """Return the evaluation plan of a sound tree.

        Raises
        ------
        TreeFileError
            The tree has problems (each listed with its node path).
        """
        problems = self.problems()
        if problems:
            raise TreeFileError(_join_problems("the tree has problems", problems))
        return EvaluationPlan(self)

    # -- edits, for editors that build a model step by step ----------------------
    #
    # These change the structure only; a half-finished model (a component with
    # no criteria yet, a criterion with no layer) is allowed and shows up in
    # problems(). Each edit names what is wrong when it refuses.

    @classmethod
    def new(cls, name: str = "", root_name: str = "Favourability") -> Tree:
        """Return a new model: a root taking the fuzzy AND of the four components, each still empty.

        The components (``COMPONENTS``, named with a capital) take the weighted
        mean of the criteria added to them.
        """
        components = [Node(name=kind.capitalize(), component=kind, operator={"type": "weighted_mean"})
                      for kind in COMPONENTS]
        return cls(root=Node(name=root_name, operator={"type": "and"}, children=components), name=name)

    @classmethod
    def from_draft(cls, doc, base_dir: Path | str | None = None) -> Tree:
        """Build a tree from its tree-file form without checking schema or problems.

        For a half-finished model an editor stored (in a QGIS project, say):
        it may still lack layers or memberships, which :meth:`problems` lists.
        Use :meth:`from_dict` for tree files. The shape limits of
        :meth:`from_dict` apply, and every field Favour uses must have its
        type (a name is text, children a list of nodes, a proxy an object with
        a path...); the contents of operators and memberships are left to
        :meth:`problems`.

        Raises
        ------
        TreeFileError
            The document is not a tree document at all (no root object, a node
            without a name, a proxy without a path), a field has the wrong
            type, or the tree is too deep or too large; the message names the
            node and the field.
        """
        if not isinstance(doc, Mapping) or not isinstance(doc.get("root"), Mapping):
            raise TreeFileError("a stored tree must be a JSON object with a 'root' object")
        _check_shape(doc)
        _check_draft_types(doc)
        root = Node.from_dict(doc["root"])
        return cls(root=root, name=doc.get("name", ""), description=doc.get("description", ""),
                   grid=copy.deepcopy(doc.get("grid")),
                   base_dir=Path(base_dir) if base_dir is not None else None,
                   extra={k: copy.deepcopy(v) for k, v in doc.items() if k not in _TREE_KEYS})

    @classmethod
    def from_draft_json(cls, text: str, base_dir: Path | str | None = None,
                        source: str = "the stored tree") -> Tree:
        """Parse JSON text (as :meth:`from_json` does) and build a draft tree with :meth:`from_draft`.

        Raises
        ------
        TreeFileError
            The text is not strict JSON within the limits of
            :mod:`favour_plugin.core.jsonio`, or :meth:`from_draft` refuses it.
        """
        doc = parse_json_text(text, error=TreeFileError, source=source, max_bytes=TREE_MAX_BYTES)
        return cls.from_draft(doc, base_dir)

    def parent_of(self, path: str) -> Node:
        """Return the parent of the node at ``path``; KeyError for the root or an unknown path."""
        parent_path, separator, _ = path.rpartition(PATH_SEPARATOR)
        if not separator:
            raise KeyError(f"{path} is the root or not in the tree; it has no parent")
        parent = self.find(parent_path)
        if not any(parent_path + PATH_SEPARATOR + child.name == path for child in parent.children):
            raise KeyError(path)
        return parent

    def index_of(self, path: str) -> int:
        """Return the position of the node at ``path`` among its siblings."""
        parent = self.parent_of(path)
        name = path.rpartition(PATH_SEPARATOR)[2]
        return [child.name for child in parent.children].index(name)

    def unique_name(self, parent_path: str, base: str) -> str:
        """Return ``base``, or ``base 2``, ``base 3``…, whichever no child of ``parent_path`` has."""
        base = (base or "Criterion").replace(PATH_SEPARATOR.strip(), "-").strip() or "Criterion"
        taken = {child.name for child in self.find(parent_path).children}
        name, n = base, 1
        while name in taken:
            n += 1
            name = f"{base} {n}"
        return name

    def add_child(self, parent_path: str, node: Node, index: int | None = None) -> str:
        """Insert ``node`` under the node at ``parent_path`` (at the end by default); return its path.

        Raises
        ------
        ParameterError
            The parent is a leaf with a layer, or the name is empty, holds
            ``>`` or is a sibling's name already.
        KeyError
            No node at ``parent_path``.
        """
        parent = self.find(parent_path)
        if parent.proxy is not None or parent.membership is not None:
            raise ParameterError(f"{parent_path}: a criterion scored from a layer cannot take "
                                 "criteria under it; add them beside it instead")
        _check_name(node.name, [child.name for child in parent.children], parent_path)
        parent.children.insert(len(parent.children) if index is None else index, node)
        return parent_path + PATH_SEPARATOR + node.name

    def remove(self, path: str) -> Node:
        """Take the node at ``path`` (and its subtree) out of the tree and return it.

        Raises
        ------
        ParameterError
            ``path`` is the root.
        KeyError
            No node at ``path``.
        """
        if path == self.root.name:
            raise ParameterError("the root of the tree cannot be removed")
        parent = self.parent_of(path)
        return parent.children.pop(self.index_of(path))

    def rename(self, path: str, name: str) -> str:
        """Give the node at ``path`` a new name; return its new path.

        Raises
        ------
        ParameterError
            The name is empty, holds ``>`` or is a sibling's name already.
        """
        node = self.find(path)
        if path == self.root.name:
            _check_name(name, [], "the root")
            node.name = name
            return name
        parent = self.parent_of(path)
        parent_path = path.rpartition(PATH_SEPARATOR)[0]
        _check_name(name, [child.name for child in parent.children if child is not node], parent_path)
        node.name = name
        return parent_path + PATH_SEPARATOR + name

    def move(self, path: str, parent_path: str, index: int) -> str:
        """Move the node at ``path`` to position ``index`` under ``parent_path``; return its new path.

        Moving within the same parent reorders the siblings (``index`` counts
        the siblings without the node moved).

        Raises
        ------
        ParameterError
            Moving the root, moving a node under itself, under a leaf with a
            layer, or next to a sibling of the same name.
        """
        if path == self.root.name:
            raise ParameterError("the root of the tree cannot be moved")
        if parent_path == path or parent_path.startswith(path + PATH_SEPARATOR):
            raise ParameterError(f"{path} cannot be moved under itself")
        old_parent = self.parent_of(path)
        new_parent = self.find(parent_path)
        node = self.find(path)
        if new_parent is not old_parent:
            if new_parent.proxy is not None or new_parent.membership is not None:
                raise ParameterError(f"{parent_path}: a criterion scored from a layer cannot take "
                                     "criteria under it")
            _check_name(node.name, [child.name for child in new_parent.children], parent_path)
        old_parent.children.remove(node)
        new_parent.children.insert(max(0, min(index, len(new_parent.children))), node)
        return parent_path + PATH_SEPARATOR + node.name

    def anchor_paths(self, folder: Path | str) -> None:
        """Point every layer path at the same file from ``folder``, which becomes ``base_dir``.

        Layers inside ``folder`` (or below it) get paths relative to it, so the
        folder can move with its data; layers elsewhere get absolute paths.
        """
        folder = Path(os.path.abspath(folder))
        for _, node in self.walk():
            if node.proxy is not None:
                node.proxy.path = _anchored(node.proxy.resolve(self.base_dir), folder)
        if self.grid and "reference" in self.grid:
            self.grid["reference"] = _anchored(self.resolve(self.grid["reference"]), folder)
        self.base_dir = folder

    def absolute_paths(self) -> None:
        """Rewrite every layer path (and the grid reference) as an absolute path."""
        for _, node in self.walk():
            if node.proxy is not None:
                node.proxy.path = str(node.proxy.resolve(self.base_dir))
        if self.grid and "reference" in self.grid:
            self.grid["reference"] = str(self.resolve(self.grid["reference"]))


def _check_name(name: str, siblings: list[str], parent_path: str) -> None:
    """Raise ParameterError unless ``name`` is a usable node name among ``siblings``."""
    if not isinstance(name, str) or not name.strip() or PATH_SEPARATOR.strip() in name:
        raise ParameterError(f"a node name must be non-empty and must not contain "
                             f"'{PATH_SEPARATOR.strip()}', got {name!r}")
    if name in siblings:
        raise ParameterError(f"{parent_path} already has a criterion named {name!r}; "
                             "sibling names must differ")


def _anchored(path: Path, folder: Path) -> str:
    """Return ``path`` relative to ``folder`` when it lies inside it, else absolute."""
    try:
        inside = os.path.commonpath([path, folder]) == str(folder)
    except ValueError:  # another drive on Windows
        inside = False
    return Path(os.path.relpath(path, folder)).as_posix() if inside else str(path)


def _relative(path: Path, base: Path) -> str:
    """Return ``path`` relative to ``base`` (with ``..`` if needed), POSIX separators."""
    try:
        return Path(os.path.relpath(path, base)).as_posix()
    except ValueError:  # another drive on Windows
        return str(path)


def _usable_number(value) -> float | None:
    """Return ``value`` as a float if it is a finite number within ±MAX_MAGNITUDE, else None."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return float(value) if abs(value) <= MAX_MAGNITUDE else None


def _number_problems(spec, where: str, class_maps: tuple[str, ...] = ()) -> Iterator[str]:
    """Yield a message for each number in ``spec`` that is not finite or beyond ±MAX_MAGNITUDE.

    ``class_maps`` names the entries of ``spec`` whose keys are class codes
    (numbers written as text), which are checked too. At most five messages.
    """
    shown = 0
    stack = [(spec, where)]
    while stack and shown < 5:
        value, at = stack.pop()
        if isinstance(value, Mapping):
            if at.count(".") == 1 and at.rpartition(".")[2] in class_maps:
                for key in value:
                    try:
                        code = float(key)
                    except (TypeError, ValueError, OverflowError):
                        continue  # not a number: the membership names it
                    if _usable_number(code) is None:
                        shown += 1
                        yield (f"{at}: the class code {_brief(key)} is not a finite number within "
                               f"±{MAX_MAGNITUDE:g}")
            stack.extend((item, f"{at}.{key}") for key, item in reversed(list(value.items())))
        elif isinstance(value, (list, tuple)):
            stack.extend((item, f"{at}[{i}]") for i, item in reversed(list(enumerate(value))))
        elif isinstance(value, (int, float)) and not isinstance(value, bool) \
                and _usable_number(value) is None:
            shown += 1
            yield (f"{at} is {_brief(value)}; numbers in a tree must be finite and within "
                   f"±{MAX_MAGNITUDE:g}")


def _parse_problem(parse, spec, what: str) -> tuple[object, str | None]:
    """Return ``(parse(spec), None)``, or ``(None, message)`` when ``parse`` refuses ``spec``."""
    try:
        return parse(spec), None
    except ParameterError as exc:
        return None, _clip(str(exc), 500)
    except (TypeError, ValueError, KeyError, IndexError, AttributeError, OverflowError) as exc:
        # The parsers expect the tree-file form; a draft may hold anything.
        return None, f"the {what} cannot be read: {type(exc).__name__}: {_clip(str(exc), 200)}"


def _node_problems(node: Node) -> Iterator[str]:
    """Yield the messages for what is wrong with one node (not its subtree)."""
    if node.children and (node.proxy is not None or node.membership is not None):
        yield "a node has either children or a proxy with a membership, not both"
    if node.children or node.operator is not None:
        if node.operator is None:
            yield "has children but no operator"
        else:
            unusable = list(_number_problems(node.operator, "operator"))
            yield from unusable
            op, message = (None, None) if unusable else _parse_problem(parse_operator, node.operator,
                                                                       "operator")
            if message:
                yield message
            if op is not None and op.type == "weighted_mean" and node.children:
                weights = [_usable_number(child.weight) for child in node.children]
                # A weight that is no usable number is marked at its own node.
                if None not in weights and math.fsum(max(w, 0.0) for w in weights) <= 0:
                    yield "operator 'weighted_mean' needs at least one child with a positive weight"
        if not node.children:
            yield "has an operator but no children"
        names = [child.name for child in node.children]
        for name in sorted({n for n in names if names.count(n) > 1}, key=str):
            yield f"two children are named {_brief(name)}; sibling names must differ"
    else:
        if node.proxy is None:
            yield "a leaf needs a proxy layer"
        if node.membership is None:
            yield "a leaf needs a membership function"
        elif isinstance(node.membership, Mapping) and not isinstance(node.membership.get("type"), str):
            yield (f"membership.type must name a membership function, "
                   f"got {_brief(node.membership.get('type'))}")
        else:
            unusable = list(_number_problems(node.membership, "membership", ("scores", "weights")))
            yield from unusable
            message = None if unusable else _parse_problem(parse_membership, node.membership,
                                                           "membership")[1]
            if message:
                yield message
        if node.proxy is not None:
            yield from _proxy_problems(node.proxy)
    if node.component is not None and node.component not in COMPONENTS:
        yield f"component must be one of {', '.join(COMPONENTS)}, got {_brief(node.component)}"
    weight = node.weight
    if isinstance(weight, bool) or not isinstance(weight, (int, float)) \
            or (isinstance(weight, float) and not math.isfinite(weight)) or weight < 0:
        yield f"weight must be a finite number >= 0, got {_brief(weight)}"
    elif weight > MAX_MAGNITUDE:
        yield (f"weight must be at most {MAX_MAGNITUDE:g}, got {_brief(weight)}; a weight only "
               "counts relative to its siblings'")
    if not isinstance(node.name, str) or not node.name or PATH_SEPARATOR.strip() in node.name:
        yield f"a node name must be non-empty and must not contain '{PATH_SEPARATOR.strip()}'"


def _proxy_problems(proxy: Proxy) -> Iterator[str]:
    """Yield the messages for what is wrong with a proxy's fields."""
    if not proxy.path:
        yield "the proxy has no layer path"
    if proxy.measure not in (None, "distance", "attribute"):
        yield f"proxy measure must be 'distance' or 'attribute', got {_brief(proxy.measure)}"
    if proxy.measure == "attribute" and not proxy.field:
        yield "proxy measure 'attribute' needs a 'field' to burn into the grid"
    if proxy.band is not None and (isinstance(proxy.band, bool) or not isinstance(proxy.band, int)
                                   or not 1 <= proxy.band <= MAX_CELLS_PER_SIDE):
        yield f"proxy band must be a whole number from 1 to {MAX_CELLS_PER_SIDE}, got {_brief(proxy.band)}"
    if proxy.where is not None:
        if not proxy.is_vector:
            yield "proxy where (a filter of features) applies only to a vector layer"
        yield from _filter_problems(proxy.where)
    if proxy.margin is not None:
        margin = _usable_number(proxy.margin)
        if margin is None or margin < 0:
            yield (f"proxy margin must be a distance of 0 or more (map units of the grid, at most "
                   f"{MAX_MAGNITUDE:g}), got {_brief(proxy.margin)}")
        if proxy.measure != "distance":
            yield "proxy margin (features outside the grid that count) applies only to measure 'distance'"


#: Most values a proxy's filter may list: a filter picks classes of features, not features.
MAX_FILTER_VALUES = 1000


def _filter_problems(where) -> Iterator[str]:
    """Yield the messages for what is wrong with a proxy's ``where`` (plain data, never SQL)."""
    if not isinstance(where, Mapping):
        yield (f"proxy where must be an object {{'field': name, 'values': [...]}}, "
               f"got {_brief(where)}")
        return
    unknown = sorted(str(key) for key in where if key not in ("field", "values"))
    if unknown:
        yield f"proxy where holds {', '.join(map(repr, unknown))}; it takes only 'field' and 'values'"
    field_name = where.get("field")
    if not isinstance(field_name, str) or not field_name:
        yield f"proxy where.field must name a field of the layer, got {_brief(field_name)}"
    values = where.get("values")
    if not isinstance(values, list):
        yield (f"proxy where.values must be a list of the values to keep (numbers or text), "
               f"got {_brief(values)}")
        return
    if not values:
        yield "proxy where.values lists no value; tick at least one value of the field to keep"
    if len(values) > MAX_FILTER_VALUES:
        yield f"proxy where.values lists {len(values)} values; a filter takes at most {MAX_FILTER_VALUES}"
    for i, value in enumerate(values[:MAX_FILTER_VALUES]):
        if isinstance(value, str):
            continue
        if isinstance(value, bool) or not isinstance(value, (int, float)) or _usable_number(value) is None:
            yield (f"proxy where.values[{i}] must be a number or text (a value the field holds), "
                   f"got {_brief(value)}")
            break


def _grid_problems(grid) -> Iterator[str]:
    """Yield the messages for numbers of the tree's grid that no raster can use."""
    if not isinstance(grid, Mapping):
        return
    yield from _number_problems({k: grid[k] for k in ("extent", "cell_size", "band") if k in grid}, "grid")
    band = grid.get("band")
    if isinstance(band, int) and not isinstance(band, bool) and band > MAX_CELLS_PER_SIDE:
        yield f"grid: band must be at most {MAX_CELLS_PER_SIDE}, got {_brief(band)}"
    extent, cell = grid.get("extent"), _usable_number(grid.get("cell_size"))
    if not isinstance(extent, list) or len(extent) != 4 or cell is None or cell <= 0:
        return
    corners = [_usable_number(v) for v in extent]
    if None in corners:
        return
    xmin, ymin, xmax, ymax = corners
    for axis, span in (("columns", xmax - xmin), ("rows", ymax - ymin)):
        if span / cell > MAX_CELLS_PER_SIDE:
            yield (f"grid: the extent spans {span / cell:.3g} {axis} of cell_size {cell:g}; "
                   f"a raster has at most {MAX_CELLS_PER_SIDE} {axis}")


def _locate(doc, json_path: tuple) -> tuple[str, str]:
    """Turn a JSON path into (node path, message prefix naming the field).

    ``("root", "children", 0, "membership", "lower")`` becomes
    ``("Favourability > Source", "membership.lower")`` with node names looked up
    in ``doc``.
    """
    names: list[str] = []
    rest: list[str] = []
    node = doc
    parts = list(json_path)
    if parts and parts[0] == "root":
        node = doc.get("root")
        names.append(_node_label(node, "root"))
        parts = parts[1:]
        while len(parts) >= 2 and parts[0] == "children" and isinstance(parts[1], int):
            children = node.get("children") if isinstance(node, Mapping) else None
            node = children[parts[1]] if isinstance(children, list) and parts[1] < len(children) else None
            names.append(_node_label(node, f"child {parts[1]}"))
            parts = parts[2:]
    else:
        rest.append("tree")
    rest.extend(str(p) if not isinstance(p, int) else f"[{p}]" for p in parts)
    return PATH_SEPARATOR.join(names), ".".join(rest).replace(".[", "[")


def _node_label(node, fallback: str) -> str:
    """Return a node's name for messages, or ``fallback`` when it has none.

    A name that is not valid text (a lone surrogate) is shown with the bad
    character escaped, so the message itself can be printed.
    """
    if isinstance(node, Mapping) and isinstance(node.get("name"), str) and node["name"]:
        name = node["name"]
        return name if name.isascii() else name.encode("utf-8", "backslashreplace").decode("utf-8")
    return f"({fallback})"


def _clip(text: str, width: int = 40) -> str:
    """Return ``text`` cut to ``width`` characters with an ellipsis."""
    return text if len(text) <= width else text[:width - 1] + "…"


def _brief(value) -> str:
    """Return a short rendering of a value for a message: repr for plain scalars, else bounded."""
    if value is None or isinstance(value, (bool, float)) or (isinstance(value, int)
                                                             and value.bit_length() <= 200):
        return repr(value)
    if isinstance(value, str):
        return repr(_clip(value, 60))
    return describe(value)


def _short_path(names) -> str:
    """Join node names into a path for a message, abbreviating a long one and long names."""
    names = [_clip(name) for name in names]
    if len(names) > 10:
        names = [*names[:6], f"… {len(names) - 8} more …", *names[-2:]]
    return PATH_SEPARATOR.join(names)


def _check_shape(doc: Mapping) -> None:
    """Refuse a tree too deep, too large, nested too deeply or holding non-text strings.

    Runs before anything that recurses over the document (the schema
    validator, :meth:`Node.from_dict`, ``copy.deepcopy``, ``json.dumps``) and
    itself uses no recursion. Messages name the node where the limit is crossed.
    """
    root = doc.get("root")
    if isinstance(root, Mapping):
        count = 0
        stack = [(root, (_node_label(root, "root"),))]
        while stack:
            node, names = stack.pop()
            count += 1
            if len(names) > MAX_DEPTH:
                raise TreeFileError(
                    f"{_short_path(names)}: the tree is more than {MAX_DEPTH} levels deep here; "
                    f"Favour reads trees of at most {MAX_DEPTH} levels (a mineral-systems model "
                    "is about 5)")
            children = node.get("children") if isinstance(node, Mapping) else None
            if isinstance(children, (list, tuple)):
                if count + len(stack) + len(children) > MAX_NODES:
                    raise TreeFileError(
                        f"{_short_path(names)}: with its {len(children)} children the tree has more "
                        f"than {MAX_NODES} nodes; Favour reads trees of at most {MAX_NODES} nodes")
                stack.extend((child, (*names, _node_label(child, f"child {i}")))
                             for i, child in reversed(list(enumerate(children))))
    for finder, problem in ((too_deep, f"arrays and objects nest more than {MAX_NESTING} levels "
                                       f"deep here; Favour reads at most {MAX_NESTING}"),
                            (lone_surrogate, "holds a lone UTF-16 surrogate (half of a character), "
                                             "which is not text")):
        path = finder(doc, MAX_NESTING)
        if path is not None:
            node, where = _locate(doc, path)
            where = _clip(where or "the document", 80)
            raise TreeFileError(f"{_short_path(node.split(PATH_SEPARATOR)) if node else 'tree'}: "
                                f"{where}: {problem}")


#: Types of the fields of a draft node, a proxy and the tree that Favour's code relies on.
_NUMBER = "number"
_DRAFT_TREE_TYPES = {"name": (str,), "description": (str,), "grid": (Mapping, type(None))}
_DRAFT_NODE_TYPES = {"name": (str,), "component": (str, type(None)), "rationale": (str,),
                     "weight": _NUMBER, "save_output": (bool,), "operator": (Mapping, type(None)),
                     "membership": (Mapping, type(None)), "children": (list,), "proxy": (Mapping,)}
_DRAFT_PROXY_TYPES = {"path": (str,), "band": (int, type(None)), "layer": (str, type(None)),
                      "measure": (str, type(None)), "field": (str, type(None)),
                      "resampling": (str, type(None))}
_DRAFT_GRID_TYPES = {"reference": (str,), "crs": (str,), "extent": (list,), "cell_size": _NUMBER,
                     "band": (int,)}
_TYPE_NAMES = {str: "text", type(None): "null", Mapping: "an object", list: "a list",
               bool: "true or false", int: "a whole number"}


def _wrong_type(value, kinds) -> str | None:
    """Return what ``value`` should be if it is not of ``kinds``, else None."""
    if kinds == _NUMBER:
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            return None
        return "a number"
    if isinstance(value, bool) and bool not in kinds:
        return " or ".join(_TYPE_NAMES[k] for k in kinds)
    if isinstance(value, kinds):
        return None
    return " or ".join(_TYPE_NAMES[k] for k in kinds)


def _check_draft_types(doc: Mapping) -> None:
    """Refuse, naming the node and the field, a draft whose fields have types Favour cannot use."""
    def refuse(where: str, field: str, value, expected: str) -> None:
        raise TreeFileError(f"the stored tree cannot be read: {where}: '{field}' must be {expected}, "
                            f"got {_brief(value)}")

    for key, kinds in _DRAFT_TREE_TYPES.items():
        if key in doc and (expected := _wrong_type(doc[key], kinds)):
            refuse("tree", key, doc[key], expected)
    grid = doc.get("grid")
    if isinstance(grid, Mapping):
        for key, kinds in _DRAFT_GRID_TYPES.items():
            if key in grid and (expected := _wrong_type(grid[key], kinds)):
                refuse("tree", f"grid.{key}", grid[key], expected)
    stack = [(doc["root"], (_node_label(doc["root"], "root"),))]
    while stack:
        node, names = stack.pop()
        where = _short_path(names)
        if not isinstance(node, Mapping):
            raise TreeFileError(f"the stored tree cannot be read: {where}: a node must be an object, "
                                f"got {_brief(node)}")
        if "name" not in node:
            raise TreeFileError(f"the stored tree cannot be read: {where}: the node lacks a 'name'")
        for key, kinds in _DRAFT_NODE_TYPES.items():
            if key in node and (expected := _wrong_type(node[key], kinds)):
                refuse(where, key, node[key], expected)
        proxy = node.get("proxy")
        if isinstance(proxy, Mapping):
            if "path" not in proxy:
                raise TreeFileError(f"the stored tree cannot be read: {where}: the proxy lacks a 'path'")
            for key, kinds in _DRAFT_PROXY_TYPES.items():
                if key in proxy and (expected := _wrong_type(proxy[key], kinds)):
                    refuse(where, f"proxy.{key}", proxy[key], expected)
        stack.extend((child, (*names, _node_label(child, f"child {i}")))
                     for i, child in reversed(list(enumerate(node.get("children", ())))))


def _join_problems(headline: str, problems: list[Problem]) -> str:
    """Render a headline and up to 20 problems, one per line."""
    lines = []
    for problem in problems[:20]:
        lines.append(f"  - {problem}")
    if len(problems) > 20:
        lines.append(f"  - ... and {len(problems) - 20} more")
    return f"{headline}:\n" + "\n".join(lines)


# -- evaluation ---------------------------------------------------------------


@dataclass(frozen=True)
class Leaf:
    """A compiled leaf: its path, proxy and validated membership.

    ``signature`` identifies what the leaf computes (its path, which names the
    values it reads, its proxy and its membership): two plans whose leaves
    share a signature compute the same μ from the same block.
    """

    path: str
    proxy: Proxy
    membership: Membership
    signature: str = ""


@dataclass(frozen=True)
class _Step:
    """A compiled combining node: its path, operator, children paths and weights.

    ``signature`` identifies what the node computes: its operator, its
    children's signatures and their weights.
    """

    path: str
    operator: Operator
    children: tuple[str, ...]
    weights: tuple[float, ...]
    signature: str = ""


class EvaluationPlan:
    """A sound tree compiled for block-by-block evaluation.

    The plan lists its leaves (each proxy the raster layer must read) and its
    combining steps in evaluation order. :meth:`evaluate_block` is the one
    function that turns a block of proxy values into μ for the root and any
    node asked for.
    """

    def __init__(self, tree: Tree) -> None:
        self.tree = tree
        self.root_path = tree.root.name
        self.leaves: list[Leaf] = []
        self.steps: list[_Step] = []
        self.components: list[str] = []
        self.saved: list[str] = []
        self._compile(tree.root, tree.root.name)

    def _compile(self, node: Node, path: str) -> str:
        """Compile ``node`` and its subtree; return the node's signature."""
        if node.component is not None:
            self.components.append(path)
        if node.save_output or node.component is not None:
            self.saved.append(path)
        if node.is_leaf:
            signature = _signature(["leaf", path, node.proxy.to_dict(), node.membership])
            self.leaves.append(Leaf(path, node.proxy, parse_membership(node.membership), signature))
            return signature
        child_paths, child_signatures = [], []
        for child in node.children:
            child_path = path + PATH_SEPARATOR + child.name
            child_signatures.append(self._compile(child, child_path))
            child_paths.append(child_path)
        weights = tuple(float(c.weight) for c in node.children)
        signature = _signature(["node", node.operator, child_signatures, weights])
        self.steps.append(_Step(path, parse_operator(node.operator), tuple(child_paths), weights,
                                signature))
        return signature

    @property
    def node_paths(self) -> list[str]:
        """Every node path, leaves and combining nodes, in evaluation order."""
        return [leaf.path for leaf in self.leaves] + [step.path for step in self.steps]

    def evaluate_block(self, values: Mapping[str, np.ndarray],
                       keep: tuple[str, ...] | list[str] = (),
                       cache: dict | None = None) -> dict[str, np.ndarray]:
        """Evaluate the tree on one block of proxy values.

        Parameters
        ----------
        values : mapping of leaf path to ndarray
            Each leaf's proxy values on the block (float, NaN for nodata), all
            the same shape.
        keep : sequence of str
            Node paths whose μ to return besides the root's.
        cache : BlockCache, optional
            Results by node signature, shared by several plans evaluated on
            the same ``values`` (the realisations of a Monte Carlo): a leaf or
            subtree that another plan already computed with the same
            parameters is taken from it instead of computed again. Results
            are never modified in place, so sharing them is safe. The caller
            makes a new cache for each block.

        Returns
        -------
        dict of path to ndarray of float64
            μ of the root and of each node in ``keep``; NaN is nodata.

        Raises
        ------
        FavourError
            A membership refused the values (e.g. ``identity`` outside [0, 1]);
            the message starts with the leaf's path.
        """
        wanted = set(keep) | {self.root_path}
        results: dict[str, np.ndarray] = {}
        for leaf in self.leaves:
            found = cache.get(leaf.signature) if cache is not None else None
            if found is not None:
                results[leaf.path] = found
                continue
            try:
                results[leaf.path] = leaf.membership(values[leaf.path])
            except FavourError as exc:
                raise type(exc)(f"{leaf.path}: {exc}") from None
            if cache is not None:
                cache.put(leaf.signature, results[leaf.path])
        for step in self.steps:
            found = cache.get(step.signature) if cache is not None else None
            if found is not None:
                results[step.path] = found
            else:
                results[step.path] = step.operator.combine(
                    [results[c] for c in step.children], step.weights)
                if cache is not None:
                    cache.put(step.signature, results[step.path])
            for child in step.children:
                if child not in wanted:
                    del results[child]
        return {path: results[path] for path in results if path in wanted}


class BlockCache:
    """Results of one block by node signature, kept only for nodes more than one plan computes.

    Build it once for a set of plans (:meth:`for_plans`), then :meth:`fresh`
    for each block: a node that only one plan has is never stored, so the
    cache holds the shared leaves and subtrees, not every plan's every node.
    """

    def __init__(self, keep: frozenset[str]) -> None:
        self.keep = keep
        self._results: dict[str, np.ndarray] = {}

    @classmethod
    def for_plans(cls, plans) -> BlockCache:
        """Return an empty cache that keeps the signatures at least two of ``plans`` share."""
        counts: dict[str, int] = {}
        for plan in plans:
            for signature in {leaf.signature for leaf in plan.leaves} | {s.signature for s in plan.steps}:
                counts[signature] = counts.get(signature, 0) + 1
        return cls(frozenset(sig for sig, count in counts.items() if count > 1))

    def fresh(self) -> BlockCache:
        """Return an empty cache keeping the same signatures (for the next block)."""
        return BlockCache(self.keep)

    def get(self, signature: str) -> np.ndarray | None:
        """Return a stored result, or None."""
        return self._results.get(signature)

    def put(self, signature: str, result: np.ndarray) -> None:
        """Store a result if another plan will want it."""
        if signature in self.keep:
            self._results[signature] = result

    def __len__(self) -> int:
        return len(self._results)


def _signature(parts) -> str:
    """Return a short, stable identity of a node's computation (SHA-1 of canonical JSON)."""
    text = json.dumps(parts, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha1(text.encode("utf-8")).hexdigest()
