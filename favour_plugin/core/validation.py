"""Validation of a favourability or posterior map against known deposits: curves, AUC, P–A plot.

Everything here works on the place of each deposit cell in a ranking of
every valid cell from the highest value down: the cells strictly above it
(``above``) and the cells sharing its value (``tied``, itself included), out
of ``cells`` valid cells. For one map these come from
:class:`~favour_plugin.core.validation_counts.RankCounts`; for held-out
deposits each one is placed in the map made without it
(:mod:`favour_plugin.core.holdouts`).

Ties
----
A block of cells sharing one value is crossed diagonally: its deposits are
spread evenly over its area, as if the order within the block were random.
So a deposit tied with ``t`` cells stands at the middle of the block, and
the AUC counts each tied cell half, as the Mann–Whitney statistic does.

The rate curve
--------------
Cumulative % of deposits against cumulative % of area, cells taken from the
highest value down (Chung & Fabbri 2003 [CF03]_, from memory): the
*success-rate* curve when the deposits were used to build or calibrate the
map, the *prediction-rate* curve when they were held out. With the diagonal
rule it is piecewise linear, with a vertex where a tie block of a deposit
starts or ends, and is computed exactly at those vertices.

AUC
---
The area under the rate curve equals the probability that a deposit cell
outranks a cell taken at random from all valid cells (deposit cells
included), ties counted half: the Mann–Whitney form of the ROC area
(Hanley & McNeil 1982 [HM82]_),
AUC = (1/n) Σ_d [#(cells < s_d) + ½ #(cells = s_d)] / N.
Its confidence interval is the percentile interval of a seeded bootstrap
over the deposits (Efron & Tibshirani 1993 [ET93]_, from memory): the
deposits are resampled with replacement; the map's cells are held fixed.

Prediction–area plot
--------------------
Against a threshold t: the prediction rate P(t), % of deposits in cells ≥ t,
and the occupied area A(t), % of the area ≥ t (Yousefi & Carranza 2015
[YC15]_, from memory). The area curve is drawn as 100 − A(t), so the two
curves cross where P % of the deposits lie in (100 − P) % of the area; the
normalised density there is Nd = P / (100 − P). (P(t), A(t)) is a point of
the rate curve, so the crossing is where the rate curve meets
area + deposits = 100 %, found exactly on its linear pieces. Between the
rate curve's vertices the crossing is interpolated in area, not in the
threshold value (our choice; the threshold axis would depend on how the
values are spaced).

References
----------
.. [CF03] Chung, C.-J.F. and Fabbri, A.G. (2003). Validation of spatial
   prediction models for landslide hazard mapping. Natural Hazards 30,
   451–472. (from memory)
.. [HM82] Hanley, J.A. and McNeil, B.J. (1982). The meaning and use of the
   area under a receiver operating characteristic (ROC) curve. Radiology
   143, 29–36.
.. [ET93] Efron, B. and Tibshirani, R.J. (1993). An Introduction to the
   Bootstrap. Chapman & Hall, New York. (from memory)
.. [YC15] Yousefi, M. and Carranza, E.J.M. (2015). Prediction–area (P–A)
   plot and C–A fractal analysis to classify and evaluate evidential maps
   for mineral prospectivity modeling. Computers & Geosciences 79, 69–81.
   (from memory)
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import ParameterError, SmallSampleWarning
from .feedback import Feedback

#: Below about this many deposits the figures rest on very little evidence
#: (common practice, no source).
MIN_DEPOSITS = 10
#: Top shares of the area, in %, whose deposits the capture efficiency reports.
DEFAULT_CAPTURE = (5.0, 10.0, 20.0)
DEFAULT_RESAMPLES = 1000
DEFAULT_SEED = 1
DEFAULT_LEVEL = 0.95
#: Deposits resampled per bootstrap chunk (resamples × deposits), to bound memory.
_CHUNK = 2_000_000

TIE_RULE = ("cells sharing one value form a tie block that the curves cross diagonally (its deposits "
            "spread evenly over its area); in the AUC each tied cell counts half")
CURVES = {"success": "success-rate", "prediction": "prediction-rate"}


def check_capture(percentages) -> tuple[float, ...]:
    """Return the top-area percentages sorted and distinct, or refuse any outside (0, 100).

    Raises
    ------
    ParameterError
        No percentage, or one that is not a number strictly between 0 and 100.
    """
    values = list(percentages) if isinstance(percentages, (list, tuple, np.ndarray)) else [percentages]
    numbers = (int, float, np.integer, np.floating)
    bad = [v for v in values if isinstance(v, bool) or not isinstance(v, numbers)
           or not math.isfinite(v) or not 0 < v < 100]
    if not values or bad:
        raise ParameterError(f"the top areas for the capture efficiency must be percentages strictly "
                             f"between 0 and 100 (5 for the top 5 %), got {values if values else 'none'}")
    return tuple(sorted({float(v) for v in values}))


def check_bootstrap(resamples, seed, level) -> None:
    """Refuse a bootstrap that is not a whole number of resamples ≥ 1, a bad seed or level."""
    if isinstance(resamples, bool) or not isinstance(resamples, (int, np.integer)) or resamples < 1:
        raise ParameterError(f"the bootstrap needs a whole number of resamples from 1, got {resamples!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ParameterError(f"the bootstrap seed must be a whole number >= 0, got {seed!r}")
    if isinstance(level, bool) or not isinstance(level, (int, float)) or not 0 < level < 1:
        raise ParameterError(f"the confidence level must lie strictly between 0 and 1 (0.95 for 95 %), "
                             f"got {level!r}")


def rank_scores(above, tied, cells: int) -> np.ndarray:
    """Return each deposit's share of the cells ranked below it, ties counted half.

    r_d = [#(cells < s_d) + ½ #(cells = s_d)] / N = (N − above_d − ½ tied_d) / N.
    """
    above = np.asarray(above, dtype=np.float64)
    tied = np.asarray(tied, dtype=np.float64)
    return (cells - above - 0.5 * tied) / cells


def auc(scores) -> float:
    """Return the area under the rate curve: the mean of the deposits' rank scores ([HM82]_)."""
    return float(np.mean(np.asarray(scores, dtype=np.float64)))


def bootstrap_interval(scores, resamples: int = DEFAULT_RESAMPLES, seed: int = DEFAULT_SEED,
                       level: float = DEFAULT_LEVEL) -> tuple[float, float, float]:
    """Percentile bootstrap interval of the AUC over the deposits, seeded.

    Parameters
    ----------
    scores : array_like
        The deposits' rank scores (:func:`rank_scores`).
    resamples : int
        Bootstrap resamples B.
    seed : int
        Seed of ``numpy.random.default_rng``; the same seed gives the same interval.
    level : float
        Coverage of the interval (0.95 for 95 %).

    Returns
    -------
    (low, high, se)
        The (1 − level)/2 and (1 + level)/2 quantiles of the B resampled
        AUCs, and their standard deviation (the bootstrap standard error).

    Notes
    -----
    Each resample draws n deposits with replacement from the n and takes
    the mean of their scores ([ET93]_, from memory). The cells of the map
    are held fixed, so the interval shows how much the AUC depends on which
    deposits happen to be known.
    """
    check_bootstrap(resamples, seed, level)
    values = np.asarray(scores, dtype=np.float64).reshape(-1)
    n = values.size
    if n == 0:
        raise ParameterError("the bootstrap needs at least one deposit")
    rng = np.random.default_rng(seed)
    means = np.empty(resamples, dtype=np.float64)
    step = max(1, _CHUNK // n)
    for start in range(0, resamples, step):
        stop = min(resamples, start + step)
        means[start:stop] = values[rng.integers(0, n, (stop - start, n))].mean(axis=1)
    low, high = np.quantile(means, [(1 - level) / 2, (1 + level) / 2])
    return float(low), float(high), float(means.std(ddof=1)) if resamples > 1 else 0.0


@dataclass(frozen=True)
class RateCurve:
    """A rate curve's vertices: cumulative fraction of the area and of the deposits, from 0 to 1."""

    area: np.ndarray
    deposits: np.ndarray

    def at(self, area_fraction) -> np.ndarray:
        """Return the fraction of deposits within the top ``area_fraction`` of the area (exact)."""
        return np.interp(area_fraction, self.area, self.deposits)


def rate_curve(above, tied, cells: int) -> RateCurve:
    """Build the rate curve of deposits placed by (cells above, cells tied) among ``cells``.

    Notes
    -----
    y(x) = (1/n) Σ_d clip((x·N − above_d) / tied_d, 0, 1): each deposit
    climbs evenly across its tie block (module notes). The curve is linear
    between the block ends, which are its vertices; y is found there by
    summing slopes, so the vertices are exact and :meth:`RateCurve.at` is
    exact anywhere.
    """
    above = np.asarray(above, dtype=np.int64).reshape(-1)
    tied = np.asarray(tied, dtype=np.int64).reshape(-1)
    n = above.size
    if n == 0 or cells <= 0 or np.any(tied < 1) or np.any(above + tied > cells) or np.any(above < 0):
        raise ParameterError("a rate curve needs deposits placed on valid cells (0 <= above, "
                             "1 <= tied, above + tied <= cells)")
    points = np.unique(np.concatenate([[0, cells], above, above + tied]))
    slope_change = np.zeros(points.size, dtype=np.float64)
    np.add.at(slope_change, np.searchsorted(points, above), 1.0 / (n * tied))
    np.add.at(slope_change, np.searchsorted(points, above + tied), -1.0 / (n * tied))
    slope = np.cumsum(slope_change)[:-1]
    y = np.concatenate([[0.0], np.cumsum(slope * np.diff(points))])
    return RateCurve(points / cells, np.clip(y, 0.0, 1.0))


def capture_efficiency(curve: RateCurve, percentages) -> list[dict]:
    """Return the % of deposits within each top % of the area (exact on the curve)."""
    return [{"top_area_percent": p, "deposits_percent": float(100.0 * curve.at(p / 100.0))}
            for p in check_capture(percentages)]


def prediction_area_crossing(curve: RateCurve) -> tuple[float, float, float]:
    """Return the P–A crossing: (P %, A %, Nd) with P + A = 100 and Nd = P / (100 − P) ([YC15]_).

    Notes
    -----
    g(x) = x + y(x) rises strictly from 0 to 2 along the curve, so it
    reaches 1 once; the crossing is interpolated on the linear piece where
    it does.
    """
    g = curve.area + curve.deposits
    k = int(np.searchsorted(g, 1.0, side="left"))
    k = min(max(k, 1), g.size - 1)
    x0, x1 = curve.area[k - 1], curve.area[k]
    fraction = (1.0 - g[k - 1]) / (g[k] - g[k - 1])
    area = x0 + fraction * (x1 - x0)
    prediction = 1.0 - area
    return float(100.0 * prediction), float(100.0 * area), float(prediction / area)


def weak_evidence(n: int, label: str) -> str | None:
    """Return the warning for fewer than :data:`MIN_DEPOSITS` deposits, else None."""
    if n >= MIN_DEPOSITS:
        return None
    return (f"{label}: only {n} deposit cell{'s' if n != 1 else ''}: the AUC, its interval, the curve "
            f"and the P–A crossing rest on very little evidence (fewer than about {MIN_DEPOSITS} "
            "deposits); one deposit more or less can move them a long way, so read them as hints, "
            "not as a test of the map")


def summarise(above, tied, cells: int, curve: str = "success", capture=DEFAULT_CAPTURE,
              resamples: int = DEFAULT_RESAMPLES, seed: int = DEFAULT_SEED, level: float = DEFAULT_LEVEL,
              label: str = "deposits", feedback: Feedback | None = None) -> dict:
    """Everything validation reports for one set of placed deposits, as plain data.

    Parameters
    ----------
    above, tied : array_like of int
        Per deposit cell: valid cells above its value, and cells sharing it.
    cells : int
        Valid cells N.
    curve : {"success", "prediction"}
        Whether the deposits built the map (success-rate) or were held out.
    capture : sequence of float
        Top shares of the area, in %.
    resamples, seed, level
        The bootstrap (:func:`bootstrap_interval`).
    label : str
        Names the set in messages.
    feedback : Feedback, optional
        Receives the weak-evidence warning (SmallSampleWarning).

    Returns
    -------
    dict
        ``curve``, ``n_deposits``, ``auc``, ``auc_ci`` [low, high], ``auc_se``,
        ``pa_crossing`` [P %, A %], ``nd``, ``capture``, ``ties``,
        ``points`` (the curve's vertices in %), ``scores`` and ``warnings``.
    """
    feedback = feedback or Feedback()
    if curve not in CURVES:
        raise ParameterError(f"the curve must be one of {', '.join(CURVES)}, got {curve!r}")
    above = np.asarray(above, dtype=np.int64).reshape(-1)
    tied = np.asarray(tied, dtype=np.int64).reshape(-1)
    scores = rank_scores(above, tied, cells)
    low, high, se = bootstrap_interval(scores, resamples, seed, level)
    shape = rate_curve(above, tied, cells)
    p, a, nd = prediction_area_crossing(shape)
    warnings = []
    warning = weak_evidence(above.size, label)
    if warning:
        feedback.warning(warning, SmallSampleWarning)
        warnings.append(warning)
    return {
        "curve": CURVES[curve], "n_deposits": int(above.size), "auc": auc(scores),
        "auc_ci": [low, high], "auc_se": se, "pa_crossing": [p, a], "nd": nd,
        "capture": capture_efficiency(shape, capture),
        "ties": {"rule": TIE_RULE, "deposits_in_tie_blocks": int(np.count_nonzero(tied > 1)),
                 "largest_block_percent": float(100.0 * tied.max() / cells)},
        "points": {"area_percent": (100.0 * shape.area).tolist(),
                   "deposits_percent": (100.0 * shape.deposits).tolist()},
        "scores": scores.tolist(), "warnings": warnings,
    }
