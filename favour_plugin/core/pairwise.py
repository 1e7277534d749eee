"""Pairwise-comparison weights: the principal eigenvector of a reciprocal judgement matrix.

An expert (or a group) compares the children of one node two at a time: "how
many times more important is *i* than *j*?", on Saaty's 1–9 scale (1 equal,
3 moderately, 5 strongly, 7 very strongly, 9 extremely more important; 2, 4,
6, 8 between; the reciprocals 1/2 … 1/9 for the other way round) [Saa80]_.
The judgements fill a positive reciprocal matrix A (a_ij = 1/a_ji, a_ii = 1);
the weights are its principal right eigenvector, and how far its eigenvalue
λmax lies above n measures how inconsistent the judgements are (Saaty 1977,
1980) [Saa77]_ [Saa80]_.

References are listed once, with DOIs, in ``help/references.md``.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass

import numpy as np

from .errors import ParameterError

#: Saaty's random index RI(n): the mean consistency index of many random
#: reciprocal matrices of order n with entries drawn from the 1–9 scale and its
#: reciprocals. Values for n = 1…10 as tabulated by Saaty (1980) [Saa80]_, n = 11…15
#: as in the extended table of the same author; all *(from memory)*. The n = 12
#: entry (1.48, below n = 11) is recalled as printed; a simulation gives about 1.54.
RANDOM_INDEX = {1: 0.0, 2: 0.0, 3: 0.58, 4: 0.90, 5: 1.12, 6: 1.24, 7: 1.32, 8: 1.41, 9: 1.45,
                10: 1.49, 11: 1.51, 12: 1.48, 13: 1.56, 14: 1.57, 15: 1.59}

#: Judgements are acceptably consistent when CR is below this (Saaty 1980) [Saa80]_.
CR_LIMIT = 0.10

#: Largest relative departure |a_ij · a_ji − 1| accepted as reciprocal: a value typed
#: with three significant figures (0.143 for 1/7, 0.111 for 1/9) passes, two (0.14) does not.
RECIPROCAL_TOLERANCE = 0.01

#: The 17 values of Saaty's scale: 1/9 … 1/2, 1, 2 … 9.
SAATY_SCALE = tuple([1.0 / k for k in range(9, 1, -1)] + [float(k) for k in range(1, 10)])

_MAX_SQUARINGS = 60


@dataclass(frozen=True, eq=False)
class PairwiseResult:
    """Weights and consistency of one pairwise-comparison matrix.

    Unpacks and indexes as ``(weights, lambda_max, ci, cr)``.

    Attributes
    ----------
    weights : ndarray of float64, shape (n,)
        Principal right eigenvector, all positive, summing to 1 (read-only).
    lambda_max : float
        Principal eigenvalue λmax (≥ n for a reciprocal matrix).
    ci : float
        Consistency index (λmax − n)/(n − 1); 0 for consistent judgements.
    cr : float
        Consistency ratio CI/RI(n) with :data:`RANDOM_INDEX`; 0 for n = 2.
    consistent : bool
        ``cr < CR_LIMIT`` (0.10).
    random_index : float
        RI(n) used.
    worst_pair : tuple of int
        (i, j), i < j, the judgement furthest from the ratio of the weights.
    worst_ratio : float
        a_ij / (w_i / w_j) for that pair: 1 for a judgement in line with the
        weights; 3 means the judgement says three times more than the weights.
    matrix : ndarray
        The reciprocal matrix used (upper triangle as given, lower triangle
        its exact reciprocals), read-only.
    """

    weights: np.ndarray
    lambda_max: float
    ci: float
    cr: float
    consistent: bool
    random_index: float
    worst_pair: tuple[int, int]
    worst_ratio: float
    matrix: np.ndarray

    def _as_tuple(self) -> tuple:
        return (self.weights, self.lambda_max, self.ci, self.cr)

    def __iter__(self) -> Iterator:
        return iter(self._as_tuple())

    def __getitem__(self, index):
        return self._as_tuple()[index]

    def __len__(self) -> int:
        return 4

    @property
    def n(self) -> int:
        """Number of elements compared."""
        return int(self.weights.shape[0])

    @property
    def worst_consistent_value(self) -> float:
        """w_i / w_j for the worst pair: the judgement that would agree with the weights."""
        i, j = self.worst_pair
        return float(self.weights[i] / self.weights[j])


def _checked_matrix(matrix) -> np.ndarray:
    """Return ``matrix`` as a float64 reciprocal matrix or raise ParameterError naming the fault."""
    try:
        a = np.array(matrix, dtype=np.float64)
    except (TypeError, ValueError):
        raise ParameterError("a pairwise-comparison matrix must be a square table of numbers, "
                             "with every row the same length") from None
    if a.ndim != 2 or a.shape[0] != a.shape[1]:
        raise ParameterError(f"a pairwise-comparison matrix must be square, got shape {a.shape}")
    n = a.shape[0]
    if n < 2:
        raise ParameterError(f"pairwise comparison needs at least 2 elements, got {n}; "
                             "a single criterion takes the whole weight")
    if n > max(RANDOM_INDEX):
        raise ParameterError(f"pairwise comparison of {n} elements: the random index is tabulated "
                             f"up to n = {max(RANDOM_INDEX)}; group the criteria under more nodes")
    bad = ~np.isfinite(a) | (a <= 0)
    if bad.any():
        i, j = (int(k) for k in np.argwhere(bad)[0])
        raise ParameterError(f"pairwise-comparison entries must be finite and positive; "
                             f"entry ({i + 1}, {j + 1}) is {a[i, j]!r}")
    diagonal = np.abs(np.diag(a) - 1.0) > 1e-9
    if diagonal.any():
        i = int(np.argmax(diagonal))
        raise ParameterError(f"the diagonal of a pairwise-comparison matrix must be 1 (an element "
                             f"compared with itself); entry ({i + 1}, {i + 1}) is {a[i, i]!r}")
    departure = np.abs(a * a.T - 1.0)
    if (departure > RECIPROCAL_TOLERANCE).any():
        i, j = (int(k) for k in np.argwhere(np.triu(departure > RECIPROCAL_TOLERANCE, 1))[0])
        raise ParameterError(
            f"the matrix is not reciprocal: entry ({i + 1}, {j + 1}) is {a[i, j]:g} and entry "
            f"({j + 1}, {i + 1}) is {a[j, i]:g}, but it must be 1/{a[i, j]:g} = {1.0 / a[i, j]:.4g} "
            f"(within {RECIPROCAL_TOLERANCE:.0%})")
    upper = np.triu(a, 1)
    return upper + np.triu(1.0 / a, 1).T + np.eye(n)


def _principal_vector(a: np.ndarray) -> np.ndarray:
    """Return the principal right eigenvector of a positive matrix, normalised to sum 1.

    Saaty's own procedure [Saa80]_: raise the matrix to ever higher powers and
    normalise its row sums until they stop changing. Repeated squaring reaches
    A^(2^k); the matrix is rescaled at each step so nothing overflows. A
    positive matrix has a simple, real, largest eigenvalue with a positive
    eigenvector (Perron–Frobenius), so the row sums converge to it.
    """
    power = a / a.sum()
    vector = power.sum(axis=1)
    vector /= vector.sum()
    for _ in range(_MAX_SQUARINGS):
        power = power @ power
        power /= power.sum()
        new = power.sum(axis=1)
        new /= new.sum()
        if np.max(np.abs(new - vector)) <= 1e-15:
            return new
        vector = new
    return vector


def pairwise_weights(matrix) -> PairwiseResult:
    """Weights, λmax, consistency index and ratio of a reciprocal pairwise-comparison matrix.

    Parameters
    ----------
    matrix : array_like, shape (n, n)
        a_ij: how many times element i is more important than element j,
        on Saaty's 1–9 scale or its reciprocals (dimensionless). Positive,
        finite, a_ii = 1, a_ji = 1/a_ij within :data:`RECIPROCAL_TOLERANCE`;
        2 ≤ n ≤ 15. The upper triangle is used, the lower triangle only checked.

    Returns
    -------
    PairwiseResult
        ``weights``, ``lambda_max``, ``ci``, ``cr`` (also unpacked in this
        order), ``consistent``, ``worst_pair`` and ``worst_ratio``.

    Raises
    ------
    ParameterError
        Not square, n < 2 or n > 15, an entry not finite or not positive, a
        diagonal entry other than 1, or a pair that is not reciprocal (the
        message names both entries and their values).

    Notes
    -----
    The weights w solve A w = λmax w with Σ w_i = 1 (principal right
    eigenvector). CI = (λmax − n)/(n − 1) and CR = CI / RI(n), with Saaty's
    random index RI (:data:`RANDOM_INDEX`); CR < 0.10 counts as acceptably
    consistent [Saa80]_. A matrix is consistent when a_ij = w_i/w_j for all
    pairs; then λmax = n and CI = CR = 0.

    n = 2 is always consistent (λmax = 2 exactly for any reciprocal pair) and
    RI(2) = 0: CI and CR are reported as 0. n = 1 is refused: there is nothing
    to compare.

    The most inconsistent judgement is the pair (i < j) with the largest
    |ln ε_ij|, ε_ij = a_ij w_j / w_i, Saaty's measure of how far a judgement
    departs from the ratio of the weights it produced [Saa80]_; ``worst_ratio``
    is ε_ij.
    """
    a = _checked_matrix(matrix)
    n = a.shape[0]
    weights = _principal_vector(a)
    lambda_max = float((a @ weights).sum())  # Σ_i (A w)_i = λmax Σ_i w_i = λmax
    random_index = RANDOM_INDEX[n]
    if n == 2:
        lambda_max, ci, cr = 2.0, 0.0, 0.0
    else:
        ci = max((lambda_max - n) / (n - 1), 0.0)  # λmax ≥ n in exact arithmetic
        cr = ci / random_index
    epsilon = a * weights[None, :] / weights[:, None]
    log_error = np.triu(np.abs(np.log(epsilon)), 1)
    i, j = (int(k) for k in np.unravel_index(np.argmax(log_error), log_error.shape))
    if i == j:  # every judgement agrees with the weights: name the first pair
        i, j = 0, 1
    weights.setflags(write=False)
    a.setflags(write=False)
    return PairwiseResult(weights=weights, lambda_max=lambda_max, ci=float(ci), cr=float(cr),
                          consistent=bool(cr < CR_LIMIT), random_index=random_index,
                          worst_pair=(i, j), worst_ratio=float(epsilon[i, j]), matrix=a)


def matrix_from_judgements(names: Sequence[str], judgements: Iterable[tuple]) -> np.ndarray:
    """Build a reciprocal matrix from judgements "a is v times as important as b".

    Parameters
    ----------
    names : sequence of str
        The elements compared (e.g. the children of a node), in matrix order.
    judgements : iterable of (a, b, v)
        ``a`` and ``b`` are names (or 0-based indices); ``v`` on Saaty's scale,
        1/9 ≤ v ≤ 9 (any real value in that interval; 3 means "a is moderately
        more important than b", 1/3 the reverse). Exactly one judgement per
        unordered pair, n(n − 1)/2 in all.

    Returns
    -------
    ndarray of float64, shape (n, n)
        a_ab = v, a_ba = 1/v, ones on the diagonal; ready for :func:`pairwise_weights`.

    Raises
    ------
    ParameterError
        Fewer than two names or a repeated name, an unknown name, an element
        compared with itself, a pair judged twice, a value off the scale, or
        pairs not judged (the message names them).
    """
    names = [str(name) for name in names]
    if len(names) < 2:
        raise ParameterError(f"pairwise comparison needs at least 2 elements, got {len(names)}")
    repeated = sorted({name for name in names if names.count(name) > 1})
    if repeated:
        raise ParameterError(f"element names must differ; repeated: {', '.join(repeated)}")
    index = {name: k for k, name in enumerate(names)}
    n = len(names)
    a = np.eye(n)
    seen: dict[tuple[int, int], int] = {}

    def position(element) -> int:
        if isinstance(element, (int, np.integer)) and not isinstance(element, bool):
            if 0 <= element < n:
                return int(element)
        elif str(element) in index:
            return index[str(element)]
        raise ParameterError(f"judgement names {element!r}, which is not one of: {', '.join(names)}")

    for count, judgement in enumerate(judgements, start=1):
        try:
            first, second, value = judgement
        except (TypeError, ValueError):
            raise ParameterError(f"judgement {count} must be (a, b, value), got {judgement!r}") from None
        i, j = position(first), position(second)
        if i == j:
            raise ParameterError(f"judgement {count} compares {names[i]!r} with itself")
        pair = (min(i, j), max(i, j))
        if pair in seen:
            raise ParameterError(f"judgement {count} judges {names[i]!r} against {names[j]!r} again "
                                 f"(first in judgement {seen[pair]})")
        seen[pair] = count
        if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)) \
                or not math.isfinite(value) or not 1 / 9 - 1e-12 <= value <= 9 + 1e-12:
            raise ParameterError(f"judgement {count} ({names[i]} against {names[j]}): value must be "
                                 f"a number from 1/9 to 9 on Saaty's scale, got {value!r}")
        a[i, j] = float(value)
        a[j, i] = 1.0 / float(value)
    missing = [f"{names[i]} / {names[j]}" for i in range(n) for j in range(i + 1, n) if (i, j) not in seen]
    if missing:
        raise ParameterError(f"{len(missing)} pair(s) not judged: {'; '.join(missing[:10])}"
                             + (" …" if len(missing) > 10 else ""))
    return a
