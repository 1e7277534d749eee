"""Fuzzy overlay operators: combine the μ arrays of a node's children into one.

Every operator takes a sequence of same-shape arrays (any number, at least
one) and returns float64. Arithmetic is done in float64 whatever the inputs:
the gamma operator's product term has an infinite slope at 0, and float32
cancellation near a ramp's lower bound was seen to move a result by 0.14.

Nodata rule, chosen per node:

``propagate`` (default)
    a cell missing (NaN) in any child is missing in the result;
``ignore``
    the operator combines the children present in that cell; a cell missing
    in every child is missing. Each operator's docstring says what "combine
    the present ones" means for it (a missing child acts as the operator's
    neutral element).

References are listed once, with DOIs, in ``help/references.md``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from .errors import GridMismatchError, ParameterError

NODATA_RULES = ("propagate", "ignore")
OPERATOR_TYPES = ("and", "or", "product", "sum", "gamma", "weighted_mean")


def _stack_check(children: Sequence[np.ndarray]) -> tuple:
    """Return the common shape of ``children`` or raise if there are none or shapes differ."""
    if len(children) == 0:
        raise ParameterError("a fuzzy operator needs at least one child")
    shape = np.shape(children[0])
    for i, child in enumerate(children[1:], start=1):
        if np.shape(child) != shape:
            raise GridMismatchError(
                f"child {i} has shape {np.shape(child)}, child 0 has {shape}; "
                "all children must share one grid")
    return shape


def _missing_mask(children: Sequence[np.ndarray], rule: str) -> np.ndarray:
    """Return where the result is missing under ``rule``: any child missing, or all."""
    present = np.zeros(np.shape(children[0]), dtype=np.int32)
    for child in children:
        present += ~np.isnan(child)
    return present < len(children) if rule == "propagate" else present == 0


def _none_missing(children: Sequence[np.ndarray]) -> bool:
    """Return True when no child has a NaN (then ``ignore`` and ``propagate`` give the same cells).

    One sum per child, with no temporary array: NaN always carries through a
    sum, so a finite total proves the child has none (an infinite input may
    give NaN with none missing, which only costs the slower path).
    """
    return not any(np.isnan(np.add.reduce(np.asarray(child), axis=None)) for child in children)


def _fold(children, nodata, combine, neutral, transform=None):
    """Fold the ufunc ``combine`` over the children in float64.

    Under ``propagate`` no mask is needed: NaN carries through ``minimum``,
    ``maximum`` and ``multiply`` by itself, so the fold is plain in-place
    arithmetic. Under ``ignore`` a missing child acts as ``neutral`` and
    cells missing in every child are set missing at the end. ``transform``
    maps each child before folding (``1 − μ`` for the algebraic sum).
    """
    _stack_check(children)
    if nodata == "ignore" and _none_missing(children):
        nodata = "propagate"  # the same cells, without the masks and the neutral fill

    def value(child):
        array = np.asarray(child, dtype=np.float64)
        return transform(array) if transform is not None else array

    if nodata == "propagate":
        acc = np.array(value(children[0]), dtype=np.float64, copy=True)
        for child in children[1:]:
            combine(acc, value(child), out=acc)
        return acc
    if combine in _SKIPPING:
        # fmin and fmax skip NaN by themselves and give NaN only where every child is NaN.
        acc = np.array(value(children[0]), dtype=np.float64, copy=True)
        for child in children[1:]:
            _SKIPPING[combine](acc, value(child), out=acc)
        return acc
    acc = np.full(np.shape(children[0]), neutral, dtype=np.float64)
    replace = np.fmin if neutral == 1.0 else np.fmax  # values lie in [0, 1]: NaN → the neutral value
    for child in children:
        combine(acc, replace(value(child), neutral), out=acc)
    acc[_missing_mask(children, "ignore")] = np.nan
    return acc


_SKIPPING = {np.minimum: np.fmin, np.maximum: np.fmax}


def _complement(array: np.ndarray) -> np.ndarray:
    """Return 1 − μ (NaN stays NaN)."""
    return np.subtract(1.0, array)


def fuzzy_and(children: Sequence[np.ndarray], nodata: str = "propagate") -> np.ndarray:
    """Fuzzy AND: the minimum of the children's μ.

    Notes
    -----
    μ = min_i μ_i (Zadeh 1965) [Zad65]_. Under ``ignore`` the minimum of the
    children present (a missing child acts as 1).
    """
    return _fold(children, nodata, np.minimum, 1.0)


def fuzzy_or(children: Sequence[np.ndarray], nodata: str = "propagate") -> np.ndarray:
    """Fuzzy OR: the maximum of the children's μ.

    Notes
    -----
    μ = max_i μ_i (Zadeh 1965) [Zad65]_. Under ``ignore`` the maximum of the
    children present (a missing child acts as 0).
    """
    return _fold(children, nodata, np.maximum, 0.0)


def fuzzy_product(children: Sequence[np.ndarray], nodata: str = "propagate") -> np.ndarray:
    """Fuzzy algebraic product: μ = ∏ μ_i.

    Notes
    -----
    Decreasive: never above the smallest child (Zimmermann & Zysno 1980;
    Bonham-Carter 1994, ch. 9) [ZZ80]_ [BC94]_. Under ``ignore`` the product
    of the children present (a missing child acts as 1).
    """
    return _fold(children, nodata, np.multiply, 1.0)


def fuzzy_sum(children: Sequence[np.ndarray], nodata: str = "propagate") -> np.ndarray:
    """Fuzzy algebraic sum: μ = 1 − ∏ (1 − μ_i).

    Notes
    -----
    Increasive: never below the largest child (Zimmermann & Zysno 1980;
    Bonham-Carter 1994, ch. 9) [ZZ80]_ [BC94]_. Under ``ignore`` the sum of
    the children present (a missing child acts as 0).
    """
    complement = _fold(children, nodata, np.multiply, 1.0, transform=_complement)
    return np.subtract(1.0, complement, out=complement)


def fuzzy_gamma(children: Sequence[np.ndarray], gamma: float, nodata: str = "propagate") -> np.ndarray:
    """Fuzzy gamma operator: μ = (algebraic sum)^γ · (algebraic product)^(1 − γ).

    Parameters
    ----------
    children : sequence of ndarray
        μ arrays in [0, 1], one per child, same shape.
    gamma : float
        γ in [0, 1]. γ = 0 gives the algebraic product, γ = 1 the algebraic sum.
    nodata : {"propagate", "ignore"}
        Nodata rule; under ``ignore`` both terms use the children present.

    Notes
    -----
    The compensatory "and" of Zimmermann & Zysno (1980) [ZZ80]_, as applied to
    mineral potential by Bonham-Carter (1994, ch. 9) [BC94]_:

        μ = [1 − ∏(1 − μ_i)]^γ · [∏ μ_i]^(1 − γ)

    For two inputs 0.8 and 0.2 the result lies between them only for about
    0.14 < γ < 0.97 (Bonham-Carter 1994, as quoted by Carranza 2009) [Car09]_.
    γ = 0 and γ = 1 return the product and the sum exactly.
    """
    if isinstance(gamma, bool) or not isinstance(gamma, (int, float)) or not 0.0 <= gamma <= 1.0:
        raise ParameterError(f"gamma must be a number in [0, 1], got {gamma!r}")
    # The limits are returned exactly: numpy's vectorised pow is not exact to the last bit.
    if gamma == 0.0:
        return fuzzy_product(children, nodata)
    if gamma == 1.0:
        return fuzzy_sum(children, nodata)
    product = fuzzy_product(children, nodata)
    total = fuzzy_sum(children, nodata)
    # sum^γ · product^(1−γ) = exp(γ ln sum + (1−γ) ln product): three transcendental
    # functions per cell instead of the four of two powers; ln 0 = −inf gives exp(−inf) = 0.
    with np.errstate(divide="ignore"):
        np.log(total, out=total)
        np.log(product, out=product)
    total *= gamma
    product *= 1.0 - gamma
    total += product
    return np.exp(total, out=total)


def weighted_mean(children: Sequence[np.ndarray], weights: Sequence[float],
                  nodata: str = "propagate") -> np.ndarray:
    """Weighted arithmetic mean: μ = Σ w_i μ_i / Σ w_i.

    Parameters
    ----------
    children : sequence of ndarray
        μ arrays, same shape.
    weights : sequence of float
        One non-negative weight per child, with a positive sum.
    nodata : {"propagate", "ignore"}
        Under ``ignore`` the weights of the children present are renormalised
        in each cell; a cell whose present children all weigh 0 is missing.

    Notes
    -----
    The index-overlay combination of Bonham-Carter (1994, ch. 9) [BC94]_.
    """
    _stack_check(children)
    if len(weights) != len(children):
        raise ParameterError(f"weighted_mean got {len(weights)} weights for {len(children)} children")
    for w in weights:
        if isinstance(w, bool) or not isinstance(w, (int, float)) or not math.isfinite(w) or w < 0:
            raise ParameterError(f"weights must be finite and non-negative, got {w!r}")
    if sum(weights) <= 0:
        raise ParameterError("weighted_mean needs at least one positive weight")
    if nodata == "ignore" and _none_missing(children):
        nodata = "propagate"  # every weight present everywhere: the same cells, fewer passes
    if nodata == "propagate":
        numerator = np.zeros(np.shape(children[0]), dtype=np.float64)
        for child, w in zip(children, weights):
            if w:
                numerator += np.asarray(child, dtype=np.float64) * float(w)
            else:  # a zero weight still propagates its child's missing cells
                numerator[np.isnan(child)] = np.nan
        numerator /= float(sum(weights))
        return numerator
    numerator = np.zeros(np.shape(children[0]), dtype=np.float64)
    denominator = np.zeros_like(numerator)
    term = np.empty_like(numerator)
    for child, w in zip(children, weights):
        if not w:
            continue  # a child of weight 0 changes neither sum, present or not
        value = np.asarray(child, dtype=np.float64)
        np.fmax(value, 0.0, out=term)  # μ ≥ 0, so fmax only turns NaN into 0
        term *= float(w)
        numerator += term
        denominator += ~np.isnan(value) * float(w)
    with np.errstate(invalid="ignore", divide="ignore"):
        result = np.divide(numerator, denominator, out=numerator)
    result[denominator <= 0] = np.nan
    return result


@dataclass(frozen=True)
class Operator:
    """A validated node operator: its type, γ when it is gamma, and its nodata rule."""

    type: str
    gamma: float | None = None
    nodata: str = "propagate"

    def combine(self, children: Sequence[np.ndarray], weights: Sequence[float]) -> np.ndarray:
        """Combine the children's μ arrays into the node's μ (float64)."""
        if self.type == "and":
            return fuzzy_and(children, self.nodata)
        if self.type == "or":
            return fuzzy_or(children, self.nodata)
        if self.type == "product":
            return fuzzy_product(children, self.nodata)
        if self.type == "sum":
            return fuzzy_sum(children, self.nodata)
        if self.type == "gamma":
            return fuzzy_gamma(children, self.gamma, self.nodata)
        return weighted_mean(children, weights, self.nodata)

    def to_dict(self) -> dict:
        """Return the tree-file form of this operator."""
        out = {"type": self.type}
        if self.type == "gamma":
            out["gamma"] = self.gamma
        if self.nodata != "propagate":
            out["nodata"] = self.nodata
        return out


def parse_operator(spec: Mapping) -> Operator:
    """Validate an operator specification from a tree file and return an :class:`Operator`.

    Raises
    ------
    ParameterError
        Unknown type or nodata rule, or γ missing or outside [0, 1].
    """
    if not isinstance(spec, Mapping):
        raise ParameterError(f"operator must be an object with a 'type', got {spec!r}")
    kind = spec.get("type")
    if kind not in OPERATOR_TYPES:
        raise ParameterError(
            f"unknown operator type {kind!r}; expected one of {', '.join(OPERATOR_TYPES)}")
    nodata = spec.get("nodata", "propagate")
    if nodata not in NODATA_RULES:
        raise ParameterError(f"unknown nodata rule {nodata!r}; expected 'propagate' or 'ignore'")
    gamma = None
    if kind == "gamma":
        if "gamma" not in spec:
            raise ParameterError("operator 'gamma' needs a numeric 'gamma' in [0, 1], which is missing")
        gamma = spec["gamma"]
        if isinstance(gamma, bool) or not isinstance(gamma, (int, float)):
            raise ParameterError(f"operator 'gamma': 'gamma' must be a number, got {gamma!r}")
        if not 0.0 <= gamma <= 1.0:
            raise ParameterError(f"operator 'gamma': 'gamma' must lie in [0, 1], got {gamma!r}")
        gamma = float(gamma)
    return Operator(type=kind, gamma=gamma, nodata=nodata)
