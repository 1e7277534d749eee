"""Realisations of a tree drawn from a workshop's scores, and one-at-a-time sensitivity variants.

The Monte Carlo evaluates N trees that differ only in weights and membership
parameters; this module draws them. Everything here is pure: plain trees in,
plain trees out, no files and no GDAL. The engine evaluates the realisations
of each block together, in one pass.

Units of a draw
---------------
Values are drawn by *family*: the weighting items (importance or weight) of
the children of one node, or the membership parameters of one leaf. A family
takes all its values from one expert, drawn with the expert weights among
those who scored any item of it (an expert of weight 0 is never drawn, unless
only such experts scored the family: then they count equally, as in the
pool); families are drawn independently of each other, in the tree's order.
Why per family and not per item: an expert's importances are relative among
siblings, and a membership's parameters hold together (the lower and upper of
one ramp), so mixing experts inside a family can give a shape nobody
proposed, or an invalid one (lower == upper). Why not one expert per
realisation: with four experts the whole Monte Carlo would have four distinct
maps, and each expert's view of one criterion is a separate judgement from
their view of another.

Modes
-----
``"experts"``
    Each value is the drawn expert's score; items the expert left blank take
    the aggregated value.
``"ranges"``
    Items for which at least one expert stated a range are drawn uniformly in
    the drawn expert's range (an expert who gave a value and no range counts
    as that single value), so each item follows the linear opinion pool of the
    experts' uniform distributions (Clemen & Winkler 1999) [CW99]_. Items
    nobody gave a range keep the aggregated value.

Invalid draws
-------------
A family whose draw would make an invalid membership (a range draw with
lower == upper, corners out of order) or weigh every child 0 is drawn again,
expert and values, from the same generator, up to :data:`MAX_DRAWS` times;
then :class:`ParameterError` names the node. The redraws come from the seeded
stream, so the same seed gives the same realisations, redraws included.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from .errors import ParameterError
from .scoring import MEMBERSHIP_PREFIX, WEIGHT_ITEMS, Scores, apply_values, membership_problem
from .tree import PATH_SEPARATOR, Tree
from .workshop import STATISTICS, aggregate, aggregate_tree, check_expert_weights

MODES = ("experts", "ranges")

#: Draws of one family before a sample is refused.
MAX_DRAWS = 100


@dataclass(frozen=True)
class _Family:
    """Items drawn together from one expert: a node's children's weights, or a leaf's membership."""

    node: str
    kind: str                      # "weights" or "membership"
    items: tuple[tuple[str, str], ...]
    experts: tuple[str, ...]
    probabilities: np.ndarray


def _families(tree: Tree, scores: Scores, weights: Mapping[str, float]) -> list[_Family]:
    """Return the families of the tree that at least one expert scored, in walk order."""
    keys = scores.keys()
    families = []
    for path, node in tree.walk():
        groups = []
        if node.children:
            children = {path + PATH_SEPARATOR + child.name for child in node.children}
            groups.append(("weights", tuple((n, i) for n, i in keys if n in children and i in WEIGHT_ITEMS)))
        groups.append(("membership", tuple((n, i) for n, i in keys
                                           if n == path and i.startswith(MEMBERSHIP_PREFIX))))
        for kind, items in groups:
            if not items:
                continue
            experts = tuple(e for e in scores.experts
                            if any(i in scores.table[e].get(n, {}) for n, i in items))
            p = np.array([weights[e] for e in experts], dtype=np.float64)
            p = p / p.sum() if p.sum() > 0 else np.full(len(experts), 1.0 / len(experts))
            families.append(_Family(path, kind, items, experts, p))
    return families


def _check_request(n, seed, mode: str, statistic: str) -> None:
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 1:
        raise ParameterError(f"the number of realisations must be a whole number from 1, got {n!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ParameterError(f"the seed must be a whole number >= 0, got {seed!r}")
    if mode not in MODES:
        raise ParameterError(f"sampling mode must be one of {', '.join(MODES)}, got {mode!r}")
    if statistic not in STATISTICS:
        raise ParameterError(f"statistic must be one of {', '.join(STATISTICS)}, got {statistic!r}")


def sample_values(tree: Tree, scores: Scores, n: int, seed: int, *, mode: str = "experts",
                  expert_weights: Mapping[str, float] | None = None,
                  statistic: str = "pool") -> list[dict[str, dict[str, float]]]:
    """Draw N sets of values (node → item → value), one per realisation.

    Parameters
    ----------
    tree : Tree
        The tree the experts scored (sound; never changed).
    scores : Scores
        One round of scores.
    n : int
        Number of realisations, ≥ 1.
    seed : int
        Seed of ``numpy.random.default_rng``; the same seed gives the same values.
    mode : str
        ``"experts"`` or ``"ranges"`` (module docstring).
    expert_weights : mapping, optional
        Probability weight of each expert (equal when omitted); also the
        weights of the linear pool that fills gaps.
    statistic : str
        Aggregate that fills gaps and items without a range: ``"pool"``,
        ``"mean"``, ``"median"`` or ``"trimmed"``.

    Raises
    ------
    ParameterError
        Bad n, seed, mode, statistic or expert weights; an aggregate that makes
        an invalid tree; or a family with no valid draw in :data:`MAX_DRAWS`
        tries (the message names the node).
    """
    _check_request(n, seed, mode, statistic)
    tree.compile()
    weights = check_expert_weights(scores.experts, expert_weights)
    result = aggregate(scores, weights)
    aggregate_tree(tree, result, statistic)  # refuses an aggregate that is itself invalid
    central = result.values(statistic)
    ranged = {key for key, s in result.summaries.items() if s.low is not None}
    families = _families(tree, scores, weights)
    nodes = dict(tree.walk())
    rng = np.random.default_rng(int(seed))
    realisations = []
    for _ in range(int(n)):
        values: dict[str, dict[str, float]] = {}
        for family in families:
            for node, item, value in _draw(rng, family, scores, central, ranged, mode, nodes):
                values.setdefault(node, {})[item] = value
        realisations.append(values)
    return realisations


def _draw(rng, family: _Family, scores: Scores, central, ranged, mode: str, nodes) -> list[tuple]:
    """Draw one family's values, redrawing invalid ones (module docstring); return (node, item, value)."""
    problem = ""
    drawn: list[tuple] = []
    for _ in range(MAX_DRAWS):
        expert = family.experts[int(rng.choice(len(family.experts), p=family.probabilities))]
        drawn = []
        for node, item in family.items:
            score = scores.table[expert].get(node, {}).get(item)
            if score is None or (mode == "ranges" and (node, item) not in ranged):
                value = central[node][item]
            elif mode == "ranges" and score.has_range:
                value = float(rng.uniform(score.low, score.high))
            else:
                value = score.value
            drawn.append((node, item, value))
        problem = _family_problem(family, drawn, nodes)
        if problem is None:
            return drawn
    shown = ", ".join(f"{item} = {value:g}" for _, item, value in drawn)
    raise ParameterError(f"{family.node}: no valid draw of its {family.kind} in {MAX_DRAWS} tries "
                         f"(last: {shown}): {problem}; narrow the experts' ranges so that they "
                         "cannot make this invalid")


def _family_problem(family: _Family, drawn: list[tuple], nodes) -> str | None:
    if family.kind == "membership":
        return membership_problem(nodes[family.node].membership, {item: v for _, item, v in drawn})
    parent = nodes[family.node]
    if (parent.operator or {}).get("type") == "weighted_mean":
        scored = {node for node, _, _ in drawn}
        unscored = sum(max(float(c.weight), 0.0) for c in parent.children
                       if family.node + PATH_SEPARATOR + c.name not in scored)
        if unscored <= 0 and sum(v for _, _, v in drawn) <= 0:
            return "every child is weighted 0"
    return None


def sample_trees(tree: Tree, scores: Scores, n: int, seed: int, *, mode: str = "experts",
                 expert_weights: Mapping[str, float] | None = None, statistic: str = "pool") -> list[Tree]:
    """Return N NEW trees with weights and membership parameters drawn from the workshop.

    Same arguments as :func:`sample_values`; each values set is put into a
    copy of ``tree`` with :func:`favour_plugin.core.scoring.apply_values`
    (importance → weights normalised among siblings), and every tree returned
    compiles. With zero spread (all experts agree, ranges of zero width) every
    realisation equals :func:`favour_plugin.core.workshop.aggregate_tree`.
    """
    trees = []
    for values in sample_values(tree, scores, n, seed, mode=mode, expert_weights=expert_weights,
                                statistic=statistic):
        realisation = apply_values(tree, values)
        realisation.compile()
        trees.append(realisation)
    return trees


@dataclass(frozen=True)
class Variant:
    """One sensitivity variant: which node, what change, and the tree (None when skipped).

    ``label`` names the node and the change (``"… > Fault mesh: weight × 1.1"``);
    ``description`` says what was done, or why the variant was skipped.
    """

    label: str
    node: str
    change: str
    tree: Tree | None
    description: str

    @property
    def skipped(self) -> bool:
        """True when the variant could not be built; ``description`` says why."""
        return self.tree is None


def sensitivity_variants(tree: Tree, fraction: float = 0.1) -> list[Variant]:
    """One-at-a-time weight changes and leave-one-out trees, each a NEW tree.

    Parameters
    ----------
    tree : Tree
        A sound tree (it must compile); never changed.
    fraction : float
        Relative weight change, 0 < fraction < 1 (0.1 for ±10 %).

    Returns
    -------
    list of Variant
        In walk order, for each node below the root: for a node with a weight
        (a child of a ``weighted_mean`` node with siblings) the tree with that
        weight × (1 + fraction) and × (1 − fraction), siblings unchanged; then
        the tree with the node and its subtree left out. A leave-one-out that
        would leave its parent with no children, or any tree that would not
        compile, is returned with ``tree=None`` and the reason in
        ``description``. A weight of 0 gives skipped weight variants.
    """
    if isinstance(fraction, bool) or not isinstance(fraction, (int, float)) or not math.isfinite(fraction) \
            or not 0 < fraction < 1:
        raise ParameterError(f"the weight change must be a fraction between 0 and 1 (0.1 for ±10%), "
                             f"got {fraction!r}")
    tree.compile()
    variants: list[Variant] = []
    for path, node in tree.walk():
        if path == tree.root.name:
            continue
        parent_path, _, name = path.rpartition(PATH_SEPARATOR)
        parent = tree.find(parent_path)
        if (parent.operator or {}).get("type") == "weighted_mean" and len(parent.children) > 1:
            for sign, symbol in ((1, "+"), (-1, "−")):
                factor = 1 + sign * fraction
                label = f"{path}: weight × {factor:g}"
                change = f"weight {symbol}{fraction:.0%}"
                if float(node.weight) == 0:
                    variants.append(Variant(label, path, change, None, f"{label}: skipped: the "
                                            "weight is 0, so scaling it changes nothing"))
                    continue
                new = copy.deepcopy(tree)
                target = new.find(path)
                target.weight = float(node.weight) * factor
                variants.append(_checked(new, label, path, change,
                                         f"{path}: weight {float(node.weight):g} → {target.weight:g}"))
        label = f"{path}: left out"
        if len(parent.children) == 1:
            variants.append(Variant(label, path, "left out", None,
                                    f"{label}: skipped: {parent_path} would have no children"))
            continue
        new = copy.deepcopy(tree)
        new_parent = new.find(parent_path)
        new_parent.children = [child for child in new_parent.children if child.name != name]
        variants.append(_checked(new, label, path, "left out",
                                 f"{path} and everything under it left out of {parent_path}"))
    return variants


def _checked(tree: Tree, label: str, node: str, change: str, description: str) -> Variant:
    problems = tree.problems()
    if problems:
        return Variant(label, node, change, None,
                       f"{label}: skipped: the tree would not compile: "
                       + "; ".join(str(p) for p in problems[:3]))
    return Variant(label, node, change, tree, description)
