"""What experts score in a workshop, the scores they gave, and scores put back into a tree.

Each node of a criteria tree offers *items* to score:

``importance``
    Every node but the root: how much the criterion matters beside its
    siblings, on a ratio scale from 1 (marginal) to 9 (decisive). Only the
    ratios among siblings count: importances become weights by dividing each
    by their sum over the siblings (direct rating, Malczewski 1999) [Mal99]_.
``weight``
    Instead of importance, for sibling groups whose weights do not fit the
    1–9 scale (a ratio above 9, a zero weight): a relative weight ≥ 0,
    normalised among siblings the same way. One group of siblings is scored
    on one of the two, never a mix.
``membership.<parameter>``
    Each numeric parameter of a leaf's membership function (``lower``,
    ``points[2]``, ``points[1].x``, ``scores.3``…), with an optional range
    ``low``–``high`` the expert finds plausible. Weights-of-evidence leaves
    (membership ``weights``) come from data and offer no items.

A weight only changes the map where the parent takes a ``weighted_mean``;
the items are offered for every node so a workshop can argue the operator
too, and the sheets say where a weight has no effect.

:class:`Scores` holds one round of scoring as plain data (expert → node →
item → :class:`Score`); :class:`Workshop` keeps the rounds side by side.
:func:`apply_values` puts values (aggregated or sampled) into a new tree.
"""

from __future__ import annotations

import copy
import math
import re
from collections.abc import Iterator, Mapping
from dataclasses import dataclass

from .errors import ParameterError
from .membership import parse_membership
from .tree import PATH_SEPARATOR, Node, Tree

IMPORTANCE = "importance"
WEIGHT = "weight"
WEIGHT_ITEMS = (IMPORTANCE, WEIGHT)
MEMBERSHIP_PREFIX = "membership."
IMPORTANCE_SCALE = (1.0, 9.0)
CONFIDENCE_LEVELS = ("low", "medium", "high")


@dataclass(frozen=True)
class ItemSpec:
    """One scorable item of a node: what it is, its scale and its current value in the tree.

    ``key`` locates a membership parameter inside the membership dict (empty
    for weighting items); ``minimum``/``maximum`` bound the scale, open when
    ``open_minimum`` (``spread > 0``); ``nonzero`` refuses 0 (a logistic slope).
    """

    node: str
    item: str
    value: float
    unit: str
    key: tuple = ()
    minimum: float = -math.inf
    maximum: float = math.inf
    open_minimum: bool = False
    nonzero: bool = False
    takes_range: bool = False
    note: str = ""

    def scale_problem(self, value: float) -> str | None:
        """Return why ``value`` is off this item's scale, or None when it is on it."""
        if not math.isfinite(value):
            return f"must be a finite number, got {value!r}"
        if self.open_minimum and value <= self.minimum:
            return f"{self.item} must be above {self.minimum:g}, got {value:g}"
        if value < self.minimum or value > self.maximum:
            if self.item == IMPORTANCE:
                return f"importance must lie between 1 and 9, got {value:g}"
            if math.isinf(self.maximum):
                return f"{self.item} must be {self.minimum:g} or more, got {value:g}"
            return f"{self.item} must lie between {self.minimum:g} and {self.maximum:g}, got {value:g}"
        if self.nonzero and value == 0:
            return f"{self.item} must not be 0"
        return None


@dataclass(frozen=True)
class Score:
    """One expert's score of one item: a value, an optional range, a confidence and a note.

    ``source`` says where it was read (``"E1.csv row 7"``), for messages.
    """

    value: float
    low: float | None = None
    high: float | None = None
    confidence: str | None = None
    note: str = ""
    source: str = ""

    @property
    def has_range(self) -> bool:
        """True when the expert gave a range low–high."""
        return self.low is not None and self.high is not None


@dataclass(frozen=True)
class Scores:
    """One round of scoring: ``table[expert][node][item]`` is a :class:`Score`.

    Built by :func:`favour_plugin.core.sheet_import.read_sheets`; treat as read-only.
    ``experts`` keeps the order in which experts first appear; ``files`` the
    sheets read.
    """

    table: Mapping[str, Mapping[str, Mapping[str, Score]]]
    experts: tuple[str, ...]
    round_number: int = 1
    files: tuple[str, ...] = ()

    def entries(self) -> Iterator[tuple[str, str, str, Score]]:
        """Yield ``(expert, node, item, score)`` for every score."""
        for expert in self.experts:
            for node, items in self.table.get(expert, {}).items():
                for item, score in items.items():
                    yield expert, node, item, score

    def keys(self) -> list[tuple[str, str]]:
        """Every (node, item) scored by at least one expert, in order of first appearance."""
        seen: dict[tuple[str, str], None] = {}
        for _, node, item, _ in self.entries():
            seen.setdefault((node, item), None)
        return list(seen)

    def scores_of(self, node: str, item: str) -> dict[str, Score]:
        """Return expert → score for one item (experts who scored it only)."""
        out = {}
        for expert in self.experts:
            score = self.table.get(expert, {}).get(node, {}).get(item)
            if score is not None:
                out[expert] = score
        return out

    def of_expert(self, expert: str) -> dict[str, dict[str, Score]]:
        """Return node → item → score for one expert (empty for an unknown id)."""
        return {node: dict(items) for node, items in self.table.get(expert, {}).items()}


@dataclass(frozen=True)
class Workshop:
    """The rounds of one workshop, kept side by side (round 1 first)."""

    rounds: tuple[Scores, ...] = ()

    def add_round(self, scores: Scores) -> Workshop:
        """Return a new workshop with ``scores`` as its next round."""
        expected = len(self.rounds) + 1
        if scores.round_number != expected:
            raise ParameterError(f"the workshop has {len(self.rounds)} round(s); the scores added "
                                 f"must be round {expected}, got round {scores.round_number}")
        return Workshop((*self.rounds, scores))

    @property
    def latest(self) -> Scores:
        """The last round."""
        if not self.rounds:
            raise ParameterError("the workshop has no rounds yet; import score sheets first")
        return self.rounds[-1]


# -- the items of a tree --------------------------------------------------------


def _membership_items(path: str, node: Node) -> list[ItemSpec]:
    """Return the membership-parameter items of a leaf (none for types experts do not score)."""
    spec = node.membership if isinstance(node.membership, Mapping) else {}
    kind = spec.get("type")
    distance = node.proxy is not None and node.proxy.measure == "distance"
    x_unit = "map units" if distance else "proxy units"
    items: list[ItemSpec] = []

    def add(name: str, key: tuple, unit: str, **scale) -> None:
        value = spec
        for part in key:
            value = value[part]
        items.append(ItemSpec(node=path, item=MEMBERSHIP_PREFIX + name, value=float(value), unit=unit,
                              key=key, takes_range=True, **scale))

    if kind == "linear":
        add("lower", ("lower",), f"{x_unit} (μ = 0)")
        add("upper", ("upper",), f"{x_unit} (μ = 1)")
    elif kind == "logistic":
        add("midpoint", ("midpoint",), f"{x_unit} (μ = 0.5)")
        add("slope", ("slope",), f"1/{x_unit}", nonzero=True)
    elif kind == "gaussian":
        add("centre", ("centre",), f"{x_unit} (μ = 1)")
        add("spread", ("spread",), x_unit, minimum=0.0, open_minimum=True)
    elif kind == "trapezoid":
        for k, corner in enumerate("abcd"):
            add(f"points[{k}]", ("points", k), f"{x_unit} (corner {corner})")
    elif kind == "piecewise":
        for k in range(len(spec.get("points", ()))):
            add(f"points[{k}].x", ("points", k, 0), x_unit)
            add(f"points[{k}].mu", ("points", k, 1), "μ (0–1)", minimum=0.0, maximum=1.0)
    elif kind == "categories":
        for code in spec.get("scores", {}):
            add(f"scores.{code}", ("scores", code), f"μ (0–1) of class {code}", minimum=0.0, maximum=1.0)
    return items


def _weight_item(path: str, node: Node, parent: Node) -> ItemSpec:
    """Return the importance (or weight) item of a child, its starting value from the tree's weights."""
    siblings = [float(child.weight) for child in parent.children]
    top = max(siblings)
    on_scale = top > 0 and min(siblings) > 0 and top / min(siblings) <= 9.0
    op = parent.operator.get("type") if isinstance(parent.operator, Mapping) else None
    note = "" if op == "weighted_mean" else (
        f"the parent combines with {op!r}: this weight changes the map only under a weighted mean")
    if on_scale:
        # The heaviest sibling starts at 9; only ratios among siblings count.
        return ItemSpec(node=path, item=IMPORTANCE, value=9.0 * float(node.weight) / top,
                        unit="1–9 (1 marginal … 9 decisive), relative to siblings",
                        minimum=IMPORTANCE_SCALE[0], maximum=IMPORTANCE_SCALE[1], note=note)
    return ItemSpec(node=path, item=WEIGHT, value=float(node.weight),
                    unit="weight ≥ 0, relative to siblings", minimum=0.0, note=note)


def node_items(tree: Tree) -> dict[str, dict[str, ItemSpec]]:
    """Return node path → item name → :class:`ItemSpec` for every item the tree offers.

    The weighting item of each child is ``importance`` when its sibling group's
    weights fit the 1–9 scale (all positive, largest/smallest ≤ 9), with the
    heaviest sibling at 9; otherwise ``weight`` with the tree's weights as they
    are. Membership items come from the leaf's current parameters.
    """
    items: dict[str, dict[str, ItemSpec]] = {}
    for path, node in tree.walk():
        found = {}
        for child in node.children:
            child_path = path + PATH_SEPARATOR + child.name
            spec = _weight_item(child_path, child, node)
            items.setdefault(child_path, {})[spec.item] = spec
        found.update({spec.item: spec for spec in _membership_items(path, node)})
        items.setdefault(path, {}).update(found)
    return {path: items[path] for path, _ in tree.walk() if items.get(path)}


def allowed_items(items: Mapping[str, ItemSpec]) -> tuple[str, ...]:
    """Return the item names a node accepts: its own, and the other weighting item if it has one."""
    names = list(items)
    if any(name in WEIGHT_ITEMS for name in names):
        names = [name for name in names if name not in WEIGHT_ITEMS]
        names = [IMPORTANCE, WEIGHT, *names]
    return tuple(names)


def weight_spec(node: str, item: str) -> ItemSpec:
    """Return the scale of a weighting item (``importance`` or ``weight``) for ``node``."""
    if item == IMPORTANCE:
        return ItemSpec(node=node, item=IMPORTANCE, value=math.nan, unit="1–9",
                        minimum=IMPORTANCE_SCALE[0], maximum=IMPORTANCE_SCALE[1])
    return ItemSpec(node=node, item=WEIGHT, value=math.nan, unit="weight ≥ 0", minimum=0.0)


_ITEM_PATTERN = re.compile(r"([A-Za-z_]+)(?:\[(\d+)\])?(?:\.(x|mu))?$")


def membership_key(item: str, membership: Mapping) -> tuple:
    """Return the key of a ``membership.<parameter>`` item inside ``membership``.

    Raises
    ------
    KeyError
        The item names no parameter of this membership.
    """
    name = item[len(MEMBERSHIP_PREFIX):]
    if membership.get("type") == "categories" and name.startswith("scores."):
        code = name[len("scores."):]
        for key in membership.get("scores", {}):
            if str(key) == code:
                return ("scores", key)
        raise KeyError(item)
    match = _ITEM_PATTERN.match(name)
    if not match:
        raise KeyError(item)
    key: tuple = (match.group(1),)
    if match.group(2) is not None:
        key += (int(match.group(2)),)
    if match.group(3) is not None:
        key += (0 if match.group(3) == "x" else 1,)
    target = membership
    try:
        for part in key:
            target = target[part]
    except (KeyError, IndexError, TypeError):
        raise KeyError(item) from None
    if isinstance(target, bool) or not isinstance(target, (int, float)):
        raise KeyError(item)
    return key


def with_membership_values(membership: Mapping, values: Mapping[str, float]) -> dict:
    """Return a copy of a membership dict with ``values`` (item → value) put in."""
    spec = copy.deepcopy(dict(membership))
    for item, value in values.items():
        key = membership_key(item, spec)
        target = spec
        for part in key[:-1]:
            target = target[part]
        target[key[-1]] = float(value)
    return spec


def membership_problem(membership: Mapping, values: Mapping[str, float]) -> str | None:
    """Return why ``membership`` with ``values`` put in is invalid, or None when it parses."""
    try:
        parse_membership(with_membership_values(membership, values))
    except ParameterError as exc:
        return str(exc)
    return None


# -- values into a tree ----------------------------------------------------------


def apply_values(tree: Tree, values: Mapping[str, Mapping[str, float]]) -> Tree:
    """Return a new tree with weights and membership parameters taken from ``values``.

    Parameters
    ----------
    tree : Tree
        The tree scored; never changed.
    values : mapping
        node path → item → value, for any subset of the tree's items.

    Returns
    -------
    Tree
        A deep copy with the values put in.

    Raises
    ------
    ParameterError
        A membership becomes invalid (``lower == upper``, corners out of
        order…), or every child of a node is weighted 0; the message starts
        with the node path.

    Notes
    -----
    Weights: among the children of a node, the scored ones (value s_i on
    ``importance`` or ``weight``) share the weight they hold in the tree now,
    in proportion to s_i; children nobody scored keep theirs. With every child
    scored this is w_i = s_i / Σ_j s_j (direct rating [Mal99]_). The weights of
    each sibling group come out summing to 1; a weighted mean depends only on
    their ratios.
    """
    new = copy.deepcopy(tree)
    nodes = dict(new.walk())
    for path, items in values.items():
        node = nodes.get(path)
        if node is None:
            raise ParameterError(f"{path}: no such node in the tree")
        member = {item: value for item, value in items.items() if item.startswith(MEMBERSHIP_PREFIX)}
        if member:
            if not isinstance(node.membership, Mapping):
                raise ParameterError(f"{path}: has no membership to put {', '.join(member)} into")
            spec = with_membership_values(node.membership, member)
            try:
                parse_membership(spec)
            except ParameterError as exc:
                shown = ", ".join(f"{item[len(MEMBERSHIP_PREFIX):]} = {value:g}"
                                  for item, value in member.items())
                raise ParameterError(f"{path}: these values make an invalid membership ({shown}): "
                                     f"{exc}") from None
            node.membership = spec
    for path, node in nodes.items():
        if not node.children:
            continue
        child_paths = [path + PATH_SEPARATOR + child.name for child in node.children]
        scored = {}
        for k, child_path in enumerate(child_paths):
            items = values.get(child_path, {})
            for item in WEIGHT_ITEMS:
                if item in items:
                    scored[k] = float(items[item])
        if not scored:
            continue
        current = [max(float(child.weight), 0.0) for child in node.children]
        total = sum(current)
        share = (sum(current[k] for k in scored) / total if total > 0
                 else len(scored) / len(current))
        scored_total = sum(scored.values())
        if scored_total <= 0:
            raise ParameterError(f"{path}: every scored child is weighted 0 "
                                 f"({', '.join(node.children[k].name for k in scored)}); "
                                 "at least one needs a positive weight")
        for k, child in enumerate(node.children):
            if k in scored:
                child.weight = share * scored[k] / scored_total
            else:
                child.weight = current[k] / total if total > 0 else 0.0
    return new


def normalised_weights(tree: Tree) -> dict[str, float]:
    """Return child path → weight divided by the sum of its siblings' weights (1/n when all 0)."""
    out = {}
    for path, node in tree.walk():
        total = sum(float(child.weight) for child in node.children)
        for child in node.children:
            out[path + PATH_SEPARATOR + child.name] = (
                float(child.weight) / total if total > 0 else 1.0 / len(node.children))
    return out
