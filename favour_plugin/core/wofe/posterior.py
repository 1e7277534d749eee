"""Prior and posterior probability with their standard deviations.

See the package docstring of :mod:`favour_plugin.core.wofe` for the counting
rules, the a, b, c, d notation and the references.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import special

from ..errors import GridMismatchError, InputError, ParameterError
from .patterns import LayerWeights
from .rules import S_P_RULES
from .table import unit_cells


@dataclass(frozen=True)
class Prior:
    """Prior probability of a deposit per unit cell over the study area, and its logit variance."""

    probability: float
    logit: float
    s2_logit: float
    area_units: float
    deposits: int


def study_prior(cells: int, deposit_cells: int, unit_cell_km2: float, cell_area_km2: float) -> Prior:
    """Prior probability P(D) = n_D / N per unit cell over the study area.

    Parameters
    ----------
    cells : int
        Cells inside the study area (known or missing evidence alike), e.g.
        ``ClassCounts.total_cells``.
    deposit_cells : int
        Deposit cells inside the study area, e.g. ``ClassCounts.total_deposit_cells``.
    unit_cell_km2, cell_area_km2 : float
        Unit-cell and grid-cell areas, km².

    Returns
    -------
    Prior

    Notes
    -----
    logit P(D) = ln[n_D / (N − n_D)], with s²(logit) = 1/n_D + 1/(N − n_D),
    the binomial variance of a log odds, 1/(N·p·(1 − p)). It is close to the
    1/n_D that follows from Bonham-Carter's (1994) s²(P) = n_D/N² [BC94]_
    (from memory) when deposits are rare.
    """
    area = float(unit_cells(cells, cell_area_km2, unit_cell_km2))
    n = int(deposit_cells)
    if n <= 0:
        raise InputError("the study area holds no deposit cells; a prior probability needs deposits")
    if area <= n:
        raise ParameterError(f"the study area is {area:.4g} unit cells for {n} deposits; the unit cell "
                             f"({unit_cell_km2:g} km²) is too large")
    return Prior(n / area, math.log(n / (area - n)), 1.0 / n + 1.0 / (area - n), area, n)


def s_probability(probability, s_logit, rule: str = "delta"):
    """Return the standard deviation of a probability from the standard deviation of its logit.

    Parameters
    ----------
    probability : array_like
        P in (0, 1).
    s_logit : array_like
        s(logit P).
    rule : {"delta", "relative"}
        ``delta``: s(P) ≈ P·(1 − P)·s(logit), the first-order (delta-method)
        propagation through P = 1 / (1 + e^(−logit)); the default.
        ``relative``: s(P) ≈ P·s(logit), reading s(logit) as a relative
        error of P, the small-P practice of Bonham-Carter (1994) [BC94]_
        (from memory), which treats the posterior odds as the probability.

    Returns
    -------
    ndarray of float64

    Notes
    -----
    The rules differ by the factor (1 − P): under 10 % wherever P < 0.1, and
    ``relative`` is the larger (more cautious). Checked against Agterberg
    (2014) [Agt14]_ (figure from memory): s(logit) = 0.401 at P = 0.069 with
    s(P) ≈ 0.028. ``relative`` gives 0.069 × 0.401 = 0.0277 ≈ 0.028; the
    delta method gives 0.069 × 0.931 × 0.401 = 0.0258 ≈ 0.026, and the odds
    form O·s(logit) gives 0.0297. So the worked figure follows the
    ``relative`` rule; choose it to reproduce published tables.
    """
    p = np.asarray(probability, dtype=np.float64)
    s = np.asarray(s_logit, dtype=np.float64)
    if rule == "delta":
        return p * (1.0 - p) * s
    if rule == "relative":
        return p * s
    raise ParameterError(f"s(P) rule must be one of {', '.join(S_P_RULES)}, got {rule!r}")


@dataclass(frozen=True)
class PosteriorBlock:
    """Posterior probability per unit cell for one block, and its uncertainty.

    ``probability`` P; ``s_probability`` = sqrt(s_weights² + s_missing²);
    ``s_weights`` from the prior and weight variances; ``s_missing`` from
    missing evidence; ``logit`` and ``s_logit`` before conversion. All
    float64 arrays of the block's shape.
    """

    probability: np.ndarray
    s_probability: np.ndarray
    s_weights: np.ndarray
    s_missing: np.ndarray
    logit: np.ndarray
    s_logit: np.ndarray


def _lookup(values: np.ndarray, layer: LayerWeights) -> tuple[np.ndarray, np.ndarray]:
    """Return (index into layer.classes, missing mask) for a block, raising on unknown codes."""
    missing = np.isnan(values)
    index = np.clip(np.searchsorted(layer.classes, np.where(missing, layer.classes[0], values)),
                    0, layer.classes.size - 1)
    unknown = ~missing & (layer.classes[index] != values)
    if np.any(unknown):
        found = np.unique(values[unknown])[:5].tolist()
        raise InputError(f"{layer.name}: class values {found} have no weight (weights exist for "
                         f"{layer.classes[:10].tolist()}); the weights were counted on other data")
    return index, missing


def posterior_block(class_blocks: Sequence[np.ndarray], layers: Sequence[LayerWeights], prior: Prior,
                    s_p_rule: str = "delta") -> PosteriorBlock:
    """Posterior probability and its standard deviation for one block of evidence classes.

    Parameters
    ----------
    class_blocks : sequence of ndarray
        One array of class codes per layer, all the same shape; NaN is nodata.
    layers : sequence of LayerWeights
        Weights per layer, in the same order.
    prior : Prior
        From :func:`study_prior`.
    s_p_rule : {"delta", "relative"}
        How s(P) follows from s(logit); see :func:`s_probability`.

    Returns
    -------
    PosteriorBlock

    Notes
    -----
    logit P = logit P(D) + Σ_j W_j(class of the cell), with W_j = 0 where
    layer j is missing (Bonham-Carter 1994, ch. 9) [BC94]_. Weights variance
    s²(logit) = s²(logit P(D)) + Σ_j s²(W_j) over the layers present,
    turned into s_weights by ``s_p_rule``.

    Missing-data variance (Agterberg, Bonham-Carter & Wright 1990) [ABW90]_
    (from memory): for each layer j missing in a cell, the spread of the
    posterior over the states the cell might be in,
    Σ_k f_jk · (P_jk − P)², where f_jk is class k's share of layer j's known
    area and P_jk the posterior with W_jk added. For a binary layer this is
    [P(D|B) − P]²·P(B) + [P(D|B̄) − P]²·P(B̄). Terms of several missing
    layers add.

    Cells outside the study area are not special here; the caller masks them.
    """
    if len(class_blocks) != len(layers) or not layers:
        raise ParameterError(f"posterior needs one class block per layer: {len(class_blocks)} blocks, "
                             f"{len(layers)} layers")
    if s_p_rule not in S_P_RULES:
        raise ParameterError(f"s(P) rule must be one of {', '.join(S_P_RULES)}, got {s_p_rule!r}")
    blocks = [np.asarray(b, dtype=np.float64) for b in class_blocks]
    shape = blocks[0].shape
    for layer, block in zip(layers, blocks):
        if block.shape != shape:
            raise GridMismatchError(f"{layer.name}: block shape {block.shape} differs from {shape}")
    logit = np.full(shape, prior.logit, dtype=np.float64)
    var_logit = np.full(shape, prior.s2_logit, dtype=np.float64)
    lookups = []
    for layer, block in zip(layers, blocks):
        index, missing = _lookup(block, layer)
        logit += np.where(missing, 0.0, layer.weights[index])
        var_logit += np.where(missing, 0.0, layer.variances[index])
        lookups.append(missing)
    probability = special.expit(logit)
    s_logit = np.sqrt(var_logit)
    s_weights = s_probability(probability, s_logit, s_p_rule)
    var_missing = np.zeros(shape, dtype=np.float64)
    for layer, missing in zip(layers, lookups):
        if np.any(missing):
            p_here = probability[missing]
            p_states = special.expit(logit[missing][:, None] + layer.weights[None, :])
            var_missing[missing] += ((p_states - p_here[:, None]) ** 2 * layer.fractions[None, :]).sum(1)
    s_missing = np.sqrt(var_missing)
    return PosteriorBlock(probability, np.sqrt(s_weights ** 2 + var_missing), s_weights, s_missing,
                          logit, s_logit)
