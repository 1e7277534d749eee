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

Modules, in the order a tree comes to life:

``limits``    the format's name and version, the keys it knows, size limits
``nodes``     :class:`Proxy`, :class:`Node`, :class:`Problem`
``reading``   a file's shape and types checked before the schema sees it
``problems``  what makes a node, proxy or grid unusable (no cells read)
``model``     :class:`Tree`: edit, read, write, :meth:`Tree.problems`, :meth:`Tree.compile`
``plan``      :class:`EvaluationPlan` (and :class:`Leaf`, :class:`BlockCache`)

Every public name is importable from this package as before.
"""

from __future__ import annotations

from .limits import (
    COMPONENTS,
    FORMAT,
    MAX_CELLS_PER_SIDE,
    MAX_DEPTH,
    MAX_MAGNITUDE,
    MAX_NODES,
    PATH_SEPARATOR,
    SCHEMA_FILE,
    VERSION,
)
from .model import (
    Tree,
)
from .nodes import (
    Node,
    Problem,
    Proxy,
)
from .plan import (
    BlockCache,
    EvaluationPlan,
    Leaf,
)
from .problems import MAX_FILTER_VALUES

__all__ = [
    "COMPONENTS",
    "FORMAT",
    "MAX_CELLS_PER_SIDE",
    "MAX_DEPTH",
    "MAX_FILTER_VALUES",
    "MAX_MAGNITUDE",
    "MAX_NODES",
    "PATH_SEPARATOR",
    "SCHEMA_FILE",
    "VERSION",
    "BlockCache",
    "EvaluationPlan",
    "Leaf",
    "Node",
    "Problem",
    "Proxy",
    "Tree",
]
