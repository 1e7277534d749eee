"""Choosing patterns: the best cut, generalised classes and a layer's weights.

See the package docstring of :mod:`favour_plugin.core.wofe` for the counting
rules, the a, b, c, d notation and the references.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InputError, ParameterError
from ..feedback import Feedback
from .counts import ClassCounts
from .rules import DEFAULT_LEVEL
from .table import WeightsTable, weights_table


@dataclass(frozen=True)
class BestCut:
    """The threshold of an ordered table with the largest significant contrast.

    ``found`` is False when no threshold passes; ``reason`` says why, and
    the other figures describe the largest studentised contrast seen (None
    if no row has a contrast).
    """

    found: bool
    threshold: float | None
    contrast: float | None
    studentized_contrast: float | None
    level: float
    kind: str
    reason: str = ""


def best_cut(table: WeightsTable, level: float = DEFAULT_LEVEL) -> BestCut:
    """Pick the threshold of maximum contrast among those significant at ``level``.

    Parameters
    ----------
    table : WeightsTable
        An ``ascending`` or ``descending`` table.
    level : float
        Minimum studentised contrast C / s(C); default 1.96 (two-sided 5 %
        point of the standard normal, a common rule of thumb).

    Returns
    -------
    BestCut
        The threshold t (the pattern is value ≤ t, or ≥ t), its contrast and
        studentised contrast. Ties in contrast go to the larger studentised
        contrast.

    Notes
    -----
    Maximum contrast subject to a significant studentised contrast, the
    usual way to binarise ordered evidence (Bonham-Carter 1994, ch. 9)
    [BC94]_. Only positive associations qualify (C / s(C) ≥ level).
    """
    if table.kind not in ("ascending", "descending"):
        raise ParameterError(f"{table.name}: best_cut needs an ascending or descending table, "
                             f"not {table.kind!r}")
    if not (isinstance(level, (int, float)) and math.isfinite(level) and level > 0):
        raise ParameterError(f"{table.name}: level must be a positive number, got {level!r}")
    rows = [r for r in table.rows if r["contrast"] is not None]
    if not rows:
        return BestCut(False, None, None, None, float(level), table.kind,
                       "no threshold has a defined contrast")
    passing = [r for r in rows if r["studentized_contrast"] >= level]
    if not passing:
        top = max(rows, key=lambda r: r["studentized_contrast"])
        return BestCut(False, top["class"], top["contrast"], top["studentized_contrast"], float(level),
                       table.kind, f"no threshold has a studentised contrast ≥ {level:g} (largest "
                       f"{top['studentized_contrast']:.3g} at {top['class']:g})")
    best = max(passing, key=lambda r: (r["contrast"], r["studentized_contrast"]))
    return BestCut(True, best["class"], best["contrast"], best["studentized_contrast"], float(level),
                   table.kind)


@dataclass
class Generalisation:
    """Categorical evidence pooled into fewer classes by the sign and significance of its weights.

    ``mapping`` sends each original class to its group code; ``groups`` lists
    the original classes per code; ``counts`` and ``table`` are the pooled
    counts and their new weights table.
    """

    mode: str
    level: float
    mapping: dict
    groups: dict
    counts: ClassCounts
    table: WeightsTable


#: Group codes of :func:`generalise`.
POSITIVE, NEUTRAL, NEGATIVE = 1.0, 0.0, -1.0


def generalise(counts: ClassCounts, table: WeightsTable, mode: str = "ternary",
               level: float = DEFAULT_LEVEL, feedback: Feedback | None = None) -> Generalisation:
    """Pool the classes of categorical evidence into a binary or ternary layer.

    Parameters
    ----------
    counts : ClassCounts
        The counts the table was built from.
    table : WeightsTable
        A ``categorical`` table.
    mode : {"ternary", "binary"}
        ``ternary``: classes whose studentised contrast is ≥ ``level`` go to
        group 1 (positive), ≤ −``level`` to group −1 (negative), the rest to
        group 0 (neutral); the pooled layer is categorical. ``binary``: the
        positive classes become the pattern (1), all others 0; the pooled
        layer is binary.
    level : float
        Significance level on the studentised contrast; default 1.96.
    feedback : Feedback, optional
        Passed on to the new table.

    Returns
    -------
    Generalisation

    Notes
    -----
    Classes with an undefined contrast join the neutral group (ternary) or
    the absent group (binary); their note is kept in the original table.
    Pooling by sign and significance of the class weights follows the
    practice described by Bonham-Carter (1994, ch. 9) [BC94]_.
    """
    if table.kind != "categorical":
        raise ParameterError(f"{table.name}: generalise needs a categorical table, not {table.kind!r}")
    if mode not in ("ternary", "binary"):
        raise ParameterError(f"{table.name}: generalise mode must be 'ternary' or 'binary', got {mode!r}")
    mapping = {}
    for row in table.rows:
        z = row["studentized_contrast"]
        if z is not None and z >= level:
            mapping[row["class"]] = POSITIVE
        elif z is not None and z <= -level and mode == "ternary":
            mapping[row["class"]] = NEGATIVE
        else:
            mapping[row["class"]] = NEUTRAL
    codes = set(mapping.values())
    if POSITIVE not in codes and mode == "binary":
        raise InputError(f"{table.name}: no class has a studentised contrast ≥ {level:g}; there is "
                         "no positive pattern to keep")
    if len(codes) == 1:
        raise InputError(f"{table.name}: every class falls in one group at level {level:g}; the "
                         "generalised layer would have nothing to contrast")
    pooled = counts.recode(mapping)
    new_kind = "binary" if mode == "binary" else "categorical"
    new_table = weights_table(pooled, new_kind, table.unit_cell_km2, table.cell_area_km2,
                              table.small_count, f"{table.name} ({mode})", feedback)
    groups = {code: sorted(k for k, v in mapping.items() if v == code) for code in sorted(codes)}
    return Generalisation(mode, float(level), mapping, groups, pooled, new_table)


@dataclass(frozen=True)
class LayerWeights:
    """The weight each class of one evidence layer adds to the posterior logit.

    ``classes`` sorted ascending; ``weights`` and ``variances`` (s² of the
    weight) per class; ``fractions`` the class's share of the layer's known
    area, used by the missing-data variance.
    """

    name: str
    classes: np.ndarray
    weights: np.ndarray
    variances: np.ndarray
    fractions: np.ndarray

    def __post_init__(self) -> None:
        arrays = [np.asarray(getattr(self, k), dtype=np.float64).reshape(-1)
                  for k in ("classes", "weights", "variances", "fractions")]
        if len({a.size for a in arrays}) != 1 or arrays[0].size == 0:
            raise ParameterError(f"{self.name}: classes, weights, variances and fractions must have "
                                 "one entry per class")
        if np.any(np.diff(arrays[0]) <= 0):
            raise ParameterError(f"{self.name}: classes must be sorted and distinct")
        if not all(np.all(np.isfinite(a)) for a in arrays):
            raise ParameterError(f"{self.name}: weights and variances must be finite")
        for key, value in zip(("classes", "weights", "variances", "fractions"), arrays):
            object.__setattr__(self, key, value)


def layer_weights(table: WeightsTable, cut: float | None = None) -> LayerWeights:
    """Turn a weights table into the per-class weights the posterior uses.

    Parameters
    ----------
    table : WeightsTable
        Binary: class 1 gets W+, class 0 gets W−. Categorical: each class
        gets its own W+ (the class against all others). Ascending or
        descending: ``cut`` is required, and classes on the pattern of row
        ``cut`` (≤ cut, or ≥ cut) get that row's W+, the others its W−.
    cut : float, optional
        Threshold for ordered tables, e.g. ``best_cut(table).threshold``.

    Returns
    -------
    LayerWeights

    Raises
    ------
    InputError
        A weight the layer needs is undefined (the message names the classes
        and why); pool classes with :func:`generalise`, choose another cut,
        or rebuild the table with ``small_count="haldane"``.
    """
    total = table.area_units
    if table.kind == "binary":
        row = table.row(1.0)
        classes = np.array([0.0, 1.0])
        pairs = [(row["w_minus"], row["s_w_minus"], row), (row["w_plus"], row["s_w_plus"], row)]
        fractions = np.array([total - row["area_units"], row["area_units"]]) / total
    elif table.kind == "categorical":
        if cut is not None:
            raise ParameterError(f"{table.name}: a cut applies to ordered tables only")
        classes = np.array([r["class"] for r in table.rows])
        pairs = [(r["w_plus"], r["s_w_plus"], r) for r in table.rows]
        fractions = np.array([r["class_area_units"] for r in table.rows]) / total
    else:
        if cut is None:
            raise ParameterError(f"{table.name}: an {table.kind} table needs a cut (see best_cut)")
        row = table.row(cut)
        classes = np.array([r["class"] for r in table.rows])
        on = classes <= row["class"] if table.kind == "ascending" else classes >= row["class"]
        pairs = [(row["w_plus"], row["s_w_plus"], row) if o else (row["w_minus"], row["s_w_minus"], row)
                 for o in on]
        fractions = np.array([r["class_area_units"] for r in table.rows]) / total
    bad = [(k, r) for k, (w, _, r) in zip(classes, pairs) if w is None]
    if bad:
        listed = "; ".join(f"class {k:g}: {r['note']}" for k, r in bad[:5])
        raise InputError(f"{table.name}: undefined weights for the posterior ({listed}); pool classes "
                         "(generalise), choose another cut, or use small_count='haldane'")
    return LayerWeights(table.name, classes, np.array([w for w, _, _ in pairs]),
                        np.array([s * s for _, s, _ in pairs]), fractions)


def weights_membership(layer: LayerWeights, source: str = "") -> dict:
    """Return a tree-leaf membership that scores each class of an evidence layer by its weight.

    Parameters
    ----------
    layer : LayerWeights
        From :func:`layer_weights` (binary, categorical or an ordered table at a cut).
    source : str
        Where the weights came from (a table file), kept in the membership for the record.

    Returns
    -------
    dict
        ``{"type": "weights", "weights": {code: W}, "default": None, "source": ...}``,
        the membership type :func:`favour_plugin.core.membership.weights_score` evaluates.

    Notes
    -----
    This is how an analogue district's statistics score a greenfield one:
    the weights are counted where deposits are known and the leaf applies
    them, through μ = 1 / (1 + exp(−W)), to the same evidence mapped in the
    new ground. See :func:`favour_plugin.core.membership.weights_score` for
    the scheme and its source.
    """
    weights = {_code_key(k): float(w) for k, w in zip(layer.classes, layer.weights)}
    out = {"type": "weights", "weights": weights, "default": None}
    if source:
        out["source"] = source
    return out


def _code_key(value: float) -> str:
    """Return a class code as tree files write it: ``"3"``, ``"-1"``, ``"2.5"``."""
    value = float(value)
    return str(int(value)) if value.is_integer() else repr(value)
