"""The evaluation plan: a sound tree compiled into steps evaluated block by block.

See :mod:`favour_plugin.core.tree` for the whole picture.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ..errors import FavourError
from ..membership import Membership, parse_membership
from ..overlay import Operator, parse_operator
from .limits import PATH_SEPARATOR
from .nodes import Node, Proxy

if TYPE_CHECKING:  # the plan only reads a tree; Tree.compile() makes plans
    from .model import Tree


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
