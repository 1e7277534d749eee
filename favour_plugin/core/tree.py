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
"""

from __future__ import annotations

import copy
import json
import math
import os
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from dataclasses import field as _field
from pathlib import Path

import numpy as np

from .errors import FavourError, OutputError, ParameterError, TreeFileError
from .membership import Membership, parse_membership
from .overlay import Operator, parse_operator
from .schema import load_validator

FORMAT = "favour-tree"
VERSION = 1
SCHEMA_FILE = "tree-v1.schema.json"
COMPONENTS = ("source", "pathway", "trap", "preservation")
PATH_SEPARATOR = " > "

_NODE_KEYS = {"name", "component", "rationale", "weight", "save_output", "operator",
              "children", "proxy", "membership"}
_PROXY_KEYS = {"path", "band", "layer", "measure", "field", "resampling"}
_TREE_KEYS = {"format", "version", "name", "description", "grid", "root"}


@dataclass
class Proxy:
    """A leaf's layer: a raster band, or a vector layer measured onto the grid.

    ``path`` is as written in the tree file: relative to the tree file's folder
    or absolute. ``measure`` is None for a raster; ``"distance"`` (map units of
    the grid CRS to the nearest feature) or ``"attribute"`` (``field`` burnt
    into the cells the features cover) for a vector layer.
    """

    path: str
    band: int | None = None
    layer: str | None = None
    measure: str | None = None
    field: str | None = None
    resampling: str | None = None
    extra: dict = _field(default_factory=dict)

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
        """Build a proxy from its tree-file form (already schema-checked)."""
        return cls(path=doc["path"], band=doc.get("band"), layer=doc.get("layer"),
                   measure=doc.get("measure"), field=doc.get("field"),
                   resampling=doc.get("resampling"),
                   extra={k: copy.deepcopy(v) for k, v in doc.items() if k not in _PROXY_KEYS})

    def to_dict(self) -> dict:
        """Return the tree-file form."""
        out = {"path": self.path}
        for key in ("band", "layer", "measure", "field", "resampling"):
            value = getattr(self, key)
            if value is not None:
                out[key] = value
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
        """Build a node and its subtree from the tree-file form (already schema-checked)."""
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

        Raises
        ------
        TreeFileError
            Wrong format, a version newer than this program reads, a schema
            violation, or a node problem (bad parameter, duplicate name); the
            message lists each problem with its node path.
        """
        if not isinstance(doc, Mapping):
            raise TreeFileError(f"a tree file holds a JSON object, not {type(doc).__name__}")
        if doc.get("format") != FORMAT:
            raise TreeFileError(f"'format' must be {FORMAT!r}, got {doc.get('format')!r}; "
                                "this is not a Favour tree file")
        version = doc.get("version")
        if isinstance(version, int) and not isinstance(version, bool) and version > VERSION:
            raise TreeFileError(
                f"tree file version {version} is newer than this Favour reads (version {VERSION}); "
                "update Favour to open it")
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
        """Parse JSON text and build the tree; bad JSON names the line and column."""
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise TreeFileError(
                f"{source} is not valid JSON: {exc.msg} at line {exc.lineno}, column {exc.colno}"
            ) from None
        return cls.from_dict(doc, base_dir)

    @classmethod
    def load(cls, path: Path | str) -> Tree:
        """Read a tree file; relative proxy paths are taken from its folder."""
        path = Path(path)
        try:
            text = path.read_text(encoding="utf-8")
        except FileNotFoundError:
            raise TreeFileError(f"tree file {path} does not exist") from None
        except (OSError, UnicodeDecodeError) as exc:
            raise TreeFileError(f"tree file {path} cannot be read: {exc}") from None
        return cls.from_json(text, base_dir=path.resolve().parent, source=f"tree file {path}")

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

        Checks structure (leaf or combining node, unique sibling names),
        operators, memberships, weights and proxy fields. File existence and
        grids are checked by the raster layer, which can open files.
        """
        found: list[Problem] = []
        for path, node in self.walk():
            found.extend(Problem(path, message) for message in _node_problems(node))
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
        it may still lack layers or memberships. Use :meth:`from_dict` for
        tree files.

        Raises
        ------
        TreeFileError
            The document is not a tree document at all (no root object, a node
            without a name, a proxy without a path).
        """
        if not isinstance(doc, Mapping) or not isinstance(doc.get("root"), Mapping):
            raise TreeFileError("a stored tree must be a JSON object with a 'root' object")
        try:
            root = Node.from_dict(doc["root"])
        except (KeyError, TypeError, AttributeError) as exc:
            raise TreeFileError(f"the stored tree cannot be read: a node or proxy lacks {exc}") from None
        return cls(root=root, name=doc.get("name", ""), description=doc.get("description", ""),
                   grid=copy.deepcopy(doc.get("grid")),
                   base_dir=Path(base_dir) if base_dir is not None else None,
                   extra={k: copy.deepcopy(v) for k, v in doc.items() if k not in _TREE_KEYS})

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


def _node_problems(node: Node) -> Iterator[str]:
    """Yield the messages for what is wrong with one node (not its subtree)."""
    if node.children and (node.proxy is not None or node.membership is not None):
        yield "a node has either children or a proxy with a membership, not both"
    if node.children or node.operator is not None:
        if node.operator is None:
            yield "has children but no operator"
        else:
            try:
                op = parse_operator(node.operator)
            except ParameterError as exc:
                yield str(exc)
            else:
                if op.type == "weighted_mean" and node.children:
                    if sum(child.weight for child in node.children) <= 0:
                        yield "operator 'weighted_mean' needs at least one child with a positive weight"
        if not node.children:
            yield "has an operator but no children"
        names = [child.name for child in node.children]
        for name in sorted({n for n in names if names.count(n) > 1}):
            yield f"two children are named {name!r}; sibling names must differ"
    else:
        if node.proxy is None:
            yield "a leaf needs a proxy layer"
        if node.membership is None:
            yield "a leaf needs a membership function"
        else:
            try:
                parse_membership(node.membership)
            except ParameterError as exc:
                yield str(exc)
        if node.proxy is not None:
            yield from _proxy_problems(node.proxy)
    if node.component is not None and node.component not in COMPONENTS:
        yield f"component must be one of {', '.join(COMPONENTS)}, got {node.component!r}"
    weight = node.weight
    if isinstance(weight, bool) or not isinstance(weight, (int, float)) or not math.isfinite(weight) \
            or weight < 0:
        yield f"weight must be a finite number >= 0, got {weight!r}"
    if not node.name or PATH_SEPARATOR.strip() in node.name:
        yield f"a node name must be non-empty and must not contain '{PATH_SEPARATOR.strip()}'"


def _proxy_problems(proxy: Proxy) -> Iterator[str]:
    """Yield the messages for what is wrong with a proxy's fields."""
    if not proxy.path:
        yield "the proxy has no layer path"
    if proxy.measure not in (None, "distance", "attribute"):
        yield f"proxy measure must be 'distance' or 'attribute', got {proxy.measure!r}"
    if proxy.measure == "attribute" and not proxy.field:
        yield "proxy measure 'attribute' needs a 'field' to burn into the grid"
    if proxy.band is not None and (isinstance(proxy.band, bool) or not isinstance(proxy.band, int)
                                   or proxy.band < 1):
        yield f"proxy band must be a whole number from 1, got {proxy.band!r}"


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
    """Return a node's name for messages, or ``fallback`` when it has none."""
    if isinstance(node, Mapping) and isinstance(node.get("name"), str) and node["name"]:
        return node["name"]
    return f"({fallback})"


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
    """A compiled leaf: its path, proxy and validated membership."""

    path: str
    proxy: Proxy
    membership: Membership


@dataclass(frozen=True)
class _Step:
    """A compiled combining node: its path, operator, children paths and weights."""

    path: str
    operator: Operator
    children: tuple[str, ...]
    weights: tuple[float, ...]


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

    def _compile(self, node: Node, path: str) -> None:
        if node.component is not None:
            self.components.append(path)
        if node.save_output or node.component is not None:
            self.saved.append(path)
        if node.is_leaf:
            self.leaves.append(Leaf(path, node.proxy, parse_membership(node.membership)))
            return
        child_paths = []
        for child in node.children:
            child_path = path + PATH_SEPARATOR + child.name
            self._compile(child, child_path)
            child_paths.append(child_path)
        self.steps.append(_Step(path, parse_operator(node.operator), tuple(child_paths),
                                tuple(float(c.weight) for c in node.children)))

    @property
    def node_paths(self) -> list[str]:
        """Every node path, leaves and combining nodes, in evaluation order."""
        return [leaf.path for leaf in self.leaves] + [step.path for step in self.steps]

    def evaluate_block(self, values: Mapping[str, np.ndarray],
                       keep: tuple[str, ...] | list[str] = ()) -> dict[str, np.ndarray]:
        """Evaluate the tree on one block of proxy values.

        Parameters
        ----------
        values : mapping of leaf path to ndarray
            Each leaf's proxy values on the block (float, NaN for nodata), all
            the same shape.
        keep : sequence of str
            Node paths whose μ to return besides the root's.

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
            try:
                results[leaf.path] = leaf.membership(values[leaf.path])
            except FavourError as exc:
                raise type(exc)(f"{leaf.path}: {exc}") from None
        for step in self.steps:
            results[step.path] = step.operator.combine(
                [results[c] for c in step.children], step.weights)
            for child in step.children:
                if child not in wanted:
                    del results[child]
        return {path: results[path] for path in results if path in wanted}
