"""The parts of a tree: a proxy layer, a node, and a problem found at a node.

See :mod:`favour_plugin.core.tree` for the whole picture.
"""

from __future__ import annotations

import copy
import os
from collections.abc import Mapping
from dataclasses import dataclass
from dataclasses import field as _field
from pathlib import Path

from .limits import NODE_KEYS


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
            extra={k: copy.deepcopy(v) for k, v in doc.items() if k not in NODE_KEYS},
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
