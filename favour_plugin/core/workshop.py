"""Aggregating a workshop's scores across experts, flagging disagreement, and the aggregate tree.

For every node and item the experts' values are summarised by their mean,
median, trimmed mean and a linear opinion pool with expert weights, and their
disagreement by the interquartile range and the coefficient of variation.
Items whose disagreement passes a threshold are flagged for discussion; a
second round shows each expert the group's median and IQR
(:func:`favour_plugin.core.sheets.export_sheets` with ``group=``) and is kept
beside the first (:class:`~favour_plugin.core.scoring.Workshop`,
:func:`compare_rounds`). :func:`aggregate_tree` turns an aggregate into a new
tree, which is what "use the aggregate" evaluates.

References are listed once, with DOIs, in ``help/references.md``.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from .errors import ParameterError
from .scoring import Scores, apply_values
from .tree import PATH_SEPARATOR, Tree

#: Proportion cut from each end for the trimmed mean (as scipy.stats.trim_mean's
#: ``proportiontocut``): int(0.2·n) values from each end, so it first differs
#: from the mean with 5 experts.
DEFAULT_TRIM = 0.2

#: Coefficient of variation above which an item is flagged for discussion. A
#: rule of thumb, not from a source: on the 1–9 importance scale it flags
#: 3, 5, 7, 9 (CV 0.37) and not 5, 6, 6, 7 (CV 0.12).
DEFAULT_THRESHOLD = 0.25

STATISTICS = ("pool", "mean", "median", "trimmed")


def check_expert_weights(experts: Sequence[str], weights: Mapping[str, float] | None) -> dict[str, float]:
    """Return expert → weight (equal when ``weights`` is None), checked and summing to 1.

    Raises
    ------
    ParameterError
        A weight for an expert who gave no scores, a weight missing for one
        who did, a negative or non-finite weight, or weights that are all 0.
    """
    if not experts:
        raise ParameterError("there are no experts' scores to weigh")
    if weights is None:
        return {expert: 1.0 / len(experts) for expert in experts}
    unknown = sorted(set(weights) - set(experts))
    if unknown:
        raise ParameterError(f"expert weights name {', '.join(unknown)}, who gave no scores; "
                             f"the experts are {', '.join(experts)}")
    missing = [e for e in experts if e not in weights]
    if missing:
        raise ParameterError(f"expert weights lack {', '.join(missing)}; give every expert a weight "
                             "(0 leaves one out)")
    for expert, weight in weights.items():
        if isinstance(weight, bool) or not isinstance(weight, (int, float)) or not math.isfinite(weight) \
                or weight < 0:
            raise ParameterError(f"expert weight of {expert} must be a finite number >= 0, got {weight!r}")
    total = float(sum(weights.values()))
    if total <= 0:
        raise ParameterError("expert weights are all 0; at least one expert needs a positive weight")
    return {expert: float(weights[expert]) / total for expert in experts}


def trimmed_mean(values: np.ndarray, proportion: float = DEFAULT_TRIM) -> float:
    """Mean after cutting int(proportion · n) of the sorted values from each end.

    Notes
    -----
    The definition of scipy.stats.trim_mean (``proportiontocut``): with n
    values sorted, k = ⌊proportion · n⌋, the mean of values k … n − k − 1.
    ``proportion`` must lie in [0, 0.5).
    """
    values = np.sort(np.asarray(values, dtype=np.float64))
    if not 0.0 <= proportion < 0.5:
        raise ParameterError(f"trim proportion must lie in [0, 0.5), got {proportion!r}")
    k = int(proportion * values.size)
    return float(values[k:values.size - k].mean())


@dataclass(frozen=True)
class ItemSummary:
    """The experts' values of one item, summarised.

    Attributes
    ----------
    node, item : str
        Which item.
    experts : tuple of str
        Who scored it (the others abstained).
    values : tuple of float
        Their values, in the order of ``experts``.
    weights : tuple of float
        Their expert weights, renormalised over those who scored it.
    mean, median, trimmed, pool : float
        Arithmetic mean, median, trimmed mean, and the linear opinion pool
        Σ w_e x_e.
    iqr : float
        Q3 − Q1 (linear interpolation between order statistics, as numpy's
        default percentile and scipy.stats.iqr), in the item's unit.
    cv : float
        Coefficient of variation of the pool: √(Σ w_e (x_e − pool)²) / |pool|;
        with equal weights the population standard deviation over the mean
        (scipy.stats.variation). 0 when all values agree; inf when they differ
        around a pool of 0.
    flagged : bool
        ``cv`` above the threshold.
    low, high : float or None
        Linear pool of the stated ranges' ends (experts who gave one), or None.
    """

    node: str
    item: str
    experts: tuple[str, ...]
    values: tuple[float, ...]
    weights: tuple[float, ...]
    mean: float
    median: float
    trimmed: float
    pool: float
    iqr: float
    cv: float
    flagged: bool
    low: float | None = None
    high: float | None = None

    @property
    def n(self) -> int:
        """Number of experts who scored the item."""
        return len(self.values)

    def statistic(self, name: str) -> float:
        """Return the named central value: ``pool``, ``mean``, ``median`` or ``trimmed``."""
        if name not in STATISTICS:
            raise ParameterError(f"statistic must be one of {', '.join(STATISTICS)}, got {name!r}")
        return getattr(self, name)


def summarise(node: str, item: str, values: Mapping[str, float], weights: Mapping[str, float], *,
              trim: float = DEFAULT_TRIM, threshold: float = DEFAULT_THRESHOLD,
              ranges: Mapping[str, tuple[float, float]] | None = None) -> ItemSummary:
    """Summarise one item's values across experts.

    Parameters
    ----------
    values : mapping of expert → value
        At least one.
    weights : mapping of expert → weight
        Expert weights (≥ 0); renormalised over the experts in ``values``.
        When those all weigh 0 they count equally here.
    trim : float
        Trimmed-mean proportion cut from each end.
    threshold : float
        CV above which the item is flagged.
    ranges : mapping of expert → (low, high), optional
        The experts' stated ranges.

    Notes
    -----
    The linear opinion pool (Clemen & Winkler 1999) [CW99]_ weights each
    expert's judgement: its pooled value is the weighted mean Σ w_e x_e with
    Σ w_e = 1, and its pooled distribution the weighted mixture of the experts'
    own (used by the Monte Carlo sampler). When all values are equal every
    statistic returns that value exactly.
    """
    experts = tuple(values)
    x = np.array([values[e] for e in experts], dtype=np.float64)
    w = np.array([weights.get(e, 0.0) for e in experts], dtype=np.float64)
    w = w / w.sum() if w.sum() > 0 else np.full(x.size, 1.0 / x.size)
    if np.all(x == x[0]):
        mean = median = trimmed = pool = float(x[0])
        iqr = cv = 0.0
    else:
        mean = float(x.mean())
        median = float(np.median(x))
        trimmed = trimmed_mean(x, trim)
        pool = float(np.dot(w, x))
        q1, q3 = np.percentile(x, [25.0, 75.0])
        iqr = float(q3 - q1)
        sd = math.sqrt(float(np.dot(w, (x - pool) ** 2)))
        cv = sd / abs(pool) if pool != 0 else math.inf
    low = high = None
    if ranges:
        ranged = [e for e in experts if e in ranges]
        if ranged:
            rw = np.array([weights.get(e, 0.0) for e in ranged])
            rw = rw / rw.sum() if rw.sum() > 0 else np.full(len(ranged), 1.0 / len(ranged))
            lows = np.array([ranges[e][0] for e in ranged])
            highs = np.array([ranges[e][1] for e in ranged])
            low = float(lows[0]) if np.all(lows == lows[0]) else float(np.dot(rw, lows))
            high = float(highs[0]) if np.all(highs == highs[0]) else float(np.dot(rw, highs))
    return ItemSummary(node=node, item=item, experts=experts, values=tuple(float(v) for v in x),
                       weights=tuple(float(v) for v in w), mean=mean, median=median, trimmed=trimmed,
                       pool=pool, iqr=iqr, cv=cv, flagged=bool(cv > threshold), low=low, high=high)


@dataclass(frozen=True)
class Aggregate:
    """Every item of one round, summarised; see :func:`aggregate`.

    ``summaries`` maps (node, item) to :class:`ItemSummary`, in sheet order.
    """

    round_number: int
    summaries: Mapping[tuple[str, str], ItemSummary]
    expert_weights: Mapping[str, float]
    trim: float
    threshold: float

    def get(self, node: str, item: str) -> ItemSummary | None:
        """Return the summary of one item, or None when nobody scored it."""
        return self.summaries.get((node, item))

    @property
    def flagged(self) -> list[ItemSummary]:
        """The items flagged for discussion."""
        return [s for s in self.summaries.values() if s.flagged]

    @property
    def flagged_nodes(self) -> list[str]:
        """Node paths with at least one flagged item, in sheet order."""
        return list(dict.fromkeys(s.node for s in self.flagged))

    def values(self, statistic: str = "pool") -> dict[str, dict[str, float]]:
        """Return node → item → the named central value, ready for :func:`apply_values`."""
        out: dict[str, dict[str, float]] = {}
        for (node, item), summary in self.summaries.items():
            out.setdefault(node, {})[item] = summary.statistic(statistic)
        return out


def aggregate(scores: Scores, expert_weights: Mapping[str, float] | None = None, *,
              trim: float = DEFAULT_TRIM, threshold: float = DEFAULT_THRESHOLD) -> Aggregate:
    """Summarise every scored item of one round across experts.

    Parameters
    ----------
    scores : Scores
        One round, from :func:`favour_plugin.core.sheet_import.read_sheets`.
    expert_weights : mapping of expert → weight, optional
        For the linear pool; equal when omitted. Checked by
        :func:`check_expert_weights`.
    trim : float
        Trimmed-mean proportion per end, in [0, 0.5) (default 0.2).
    threshold : float
        Flag an item when its CV exceeds this (default 0.25; a rule of thumb).

    Returns
    -------
    Aggregate
    """
    weights = check_expert_weights(scores.experts, expert_weights)
    if not 0.0 <= trim < 0.5:
        raise ParameterError(f"trim proportion must lie in [0, 0.5), got {trim!r}")
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float)) or math.isnan(threshold) \
            or threshold < 0:
        raise ParameterError(f"the disagreement threshold must be a number >= 0, got {threshold!r}")
    summaries = {}
    for node, item in scores.keys():
        scored = scores.scores_of(node, item)
        summaries[(node, item)] = summarise(
            node, item, {e: s.value for e, s in scored.items()}, weights, trim=trim, threshold=threshold,
            ranges={e: (s.low, s.high) for e, s in scored.items() if s.has_range})
    return Aggregate(round_number=scores.round_number, summaries=summaries, expert_weights=weights,
                     trim=trim, threshold=float(threshold))


def aggregate_tree(tree: Tree, result: Aggregate, statistic: str = "pool") -> Tree:
    """Return a NEW tree with the aggregated weights and membership parameters put in.

    Parameters
    ----------
    tree : Tree
        The tree the experts scored; never changed.
    result : Aggregate
        From :func:`aggregate`.
    statistic : str
        ``"pool"`` (default; equal expert weights make it the mean), ``"mean"``,
        ``"median"`` or ``"trimmed"``.

    Raises
    ------
    ParameterError
        An aggregate makes an invalid membership (say the pooled ``lower``
        equals the pooled ``upper``), or weights every child of a node 0; the
        message starts with the node path.

    Notes
    -----
    Importance (or weight) becomes weight by normalising among siblings:
    w_i = s_i / Σ_j s_j, so each sibling group sums to 1 (children nobody
    scored keep their share; :func:`favour_plugin.core.scoring.apply_values`).
    """
    new = apply_values(tree, result.values(statistic))
    new.compile()
    return new


def tree_with_weights(tree: Tree, parent: str, weights: Mapping[str, float] | Sequence[float]) -> Tree:
    """Return a NEW tree whose children of ``parent`` carry ``weights`` (say, from pairwise comparison).

    ``weights`` maps child name → weight, or lists them in the children's
    order; every child gets one, each ≥ 0, not all 0.
    """
    new = copy.deepcopy(tree)
    node = new.find(parent)
    names = [child.name for child in node.children]
    if not names:
        raise ParameterError(f"{parent}: has no children to weigh")
    if not isinstance(weights, Mapping):
        weights = list(weights)
        if len(weights) != len(names):
            raise ParameterError(f"{parent}: {len(names)} children but {len(weights)} weights")
        weights = dict(zip(names, weights))
    if set(weights) != set(names):
        raise ParameterError(f"{parent}: weights must name exactly the children "
                             f"{', '.join(names)}; got {', '.join(map(str, weights))}")
    for name, weight in weights.items():
        if isinstance(weight, bool) or not isinstance(weight, (int, float, np.floating)) \
                or not math.isfinite(weight) or weight < 0:
            raise ParameterError(f"{parent}{PATH_SEPARATOR}{name}: weight must be a finite number >= 0, "
                                 f"got {weight!r}")
    if sum(weights.values()) <= 0:
        raise ParameterError(f"{parent}: the weights are all 0")
    for child in node.children:
        child.weight = float(weights[child.name])
    return new


@dataclass(frozen=True)
class RoundChange:
    """One item in two rounds: the group's median and IQR before and after, and the flags."""

    node: str
    item: str
    before: ItemSummary | None
    after: ItemSummary | None

    @property
    def settled(self) -> bool:
        """True when the item was flagged before and is not flagged after."""
        return bool(self.before and self.before.flagged and self.after and not self.after.flagged)


def compare_rounds(before: Aggregate, after: Aggregate) -> list[RoundChange]:
    """Pair every item of two rounds' aggregates, in the first round's order then new ones."""
    keys = list(dict.fromkeys([*before.summaries, *after.summaries]))
    return [RoundChange(node, item, before.get(node, item), after.get(node, item)) for node, item in keys]
