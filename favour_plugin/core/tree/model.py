"""The :class:`Tree`: building, editing, reading and writing a criteria tree.

See :mod:`favour_plugin.core.tree` for the whole picture.
"""

from __future__ import annotations

import copy
import json
import os
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from dataclasses import field as _field
from pathlib import Path

from ..errors import OutputError, ParameterError, TreeFileError
from ..jsonio import TREE_MAX_BYTES, parse_json_text, read_json_file
from ..schema import load_validator
from .limits import COMPONENTS, FORMAT, MAX_DEPTH, MAX_NODES, PATH_SEPARATOR, SCHEMA_FILE, TREE_KEYS, VERSION
from .nodes import Node, Problem
from .plan import EvaluationPlan
from .problems import grid_problems, join_problems, node_problems
from .reading import brief, check_draft_types, check_shape, locate


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
            raise TreeFileError(f"'format' must be {FORMAT!r}, got {brief(doc.get('format'))}; "
                                "this is not a Favour tree file")
        version = doc.get("version")
        if isinstance(version, int) and not isinstance(version, bool) and version > VERSION:
            raise TreeFileError(
                f"tree file version {brief(version)} is newer than this Favour reads "
                f"(version {VERSION}); update Favour to open it")
        check_shape(doc)
        issues = load_validator(SCHEMA_FILE).issues(doc)
        if issues:
            problems = []
            for issue in issues:
                node, where = locate(doc, issue.path)
                problems.append(Problem(node, f"{where}: {issue.message}" if where else issue.message))
            raise TreeFileError(join_problems("the tree does not match its schema", problems))
        tree = cls(root=Node.from_dict(doc["root"]), name=doc.get("name", ""),
                   description=doc.get("description", ""),
                   grid=copy.deepcopy(doc.get("grid")),
                   base_dir=Path(base_dir) if base_dir is not None else None,
                   extra={k: copy.deepcopy(v) for k, v in doc.items() if k not in TREE_KEYS})
        problems = tree.problems()
        if problems:
            raise TreeFileError(join_problems("the tree has problems", problems))
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
        found: list[Problem] = [Problem("", message) for message in grid_problems(self.grid)]
        count = 0
        stack = [(self.root.name, self.root, 1)]
        while stack:
            path, node, level = stack.pop()
            count += 1
            found.extend(Problem(path, message) for message in node_problems(node))
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
            raise TreeFileError(join_problems("the tree has problems", problems))
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
        check_shape(doc)
        check_draft_types(doc)
        root = Node.from_dict(doc["root"])
        return cls(root=root, name=doc.get("name", ""), description=doc.get("description", ""),
                   grid=copy.deepcopy(doc.get("grid")),
                   base_dir=Path(base_dir) if base_dir is not None else None,
                   extra={k: copy.deepcopy(v) for k, v in doc.items() if k not in TREE_KEYS})

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
