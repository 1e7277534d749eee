"""Honest hold-outs for weights of evidence: leave-one-out and spatial blocks, from the conditions table.

A posterior map depends on a cell only through its condition, the
combination of its evidence classes, and
:class:`~favour_plugin.core.wofe.ConditionCounts` holds the cells and
deposit cells of every condition. Holding deposits out changes only the
deposit counts: the weights of each layer, the prior, the posterior of
every condition and the place of each held-out deposit among all cells are
computed again from the table, without reading the rasters again. The
weights are those of the posterior job (``raster.wofe_jobs.posterior``,
weights counted here): binary layers by W+ and W−, categorical ones by the
W+ of each class, missing evidence weighing 0.

Held-out deposits are placed among the cells of the map made without them,
with the posterior rounded to float32 as the posterior job writes it, so
the ranks are those of the raster that job would write. A held-out
deposit's cell stays in the study area as a cell without a deposit (the
cells are not removed, only the deposits).

Leave-one-out
    Each deposit cell in turn is removed and scored in the map made from
    the others. Deposit cells sharing a condition give the same map, so the
    map is made once per condition holding deposits.
Spatial blocks
    Square blocks of a given side (map units), anchored at the grid's upper
    left corner; all deposit cells of a block are held out together and
    scored in the map made from the deposits of the other blocks. Where
    deposits cluster, a neighbour of a held-out deposit can carry much the
    same evidence into the weights, so leave-one-out still flatters the
    map; holding out whole blocks does not (Roberts et al. 2017 [Rob17]_,
    from memory).

A fold whose weights become undefined (a class left with no deposit, say)
cannot make a map; its deposits are left out of the held-out figures and
reported with the reason.

References
----------
.. [Rob17] Roberts, D.R. et al. (2017). Cross-validation strategies for
   data with temporal, spatial, hierarchical, or phylogenetic structure.
   Ecography 40, 913–929. (from memory)
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from . import wofe
from .errors import InputError, ParameterError
from .feedback import Feedback


def layer_kinds(codes: np.ndarray) -> list[str]:
    """Return each layer's kind as the posterior job decides it: binary for codes 0 and 1 only."""
    kinds = []
    for j in range(codes.shape[1]):
        known = codes[:, j][~np.isnan(codes[:, j])]
        kinds.append("binary" if set(np.unique(known).tolist()) <= {0.0, 1.0} else "categorical")
    return kinds


def marginal(codes: np.ndarray, cells: np.ndarray, deposits: np.ndarray) -> wofe.ClassCounts:
    """Return one layer's class counts from per-condition codes (NaN missing), cells and deposits."""
    missing = np.isnan(codes)
    keys, inverse = np.unique(codes[~missing], return_inverse=True)
    inverse = inverse.reshape(-1)
    per_cells = np.bincount(inverse, weights=cells[~missing], minlength=keys.size)
    per_deposits = np.bincount(inverse, weights=deposits[~missing], minlength=keys.size)
    return wofe.ClassCounts.from_table(keys, per_cells.astype(np.int64), per_deposits.astype(np.int64),
                                       int(cells[missing].sum()), int(deposits[missing].sum()))


def condition_probability(codes: np.ndarray, cells: np.ndarray, deposits: np.ndarray,
                          kinds: list[str], names: list[str], unit_cell_km2: float,
                          cell_area_km2: float) -> np.ndarray:
    """Posterior probability of every condition, with weights and prior counted from the table.

    Parameters
    ----------
    codes : ndarray (conditions × layers)
        Class codes per condition, NaN where a layer is missing.
    cells, deposits : ndarray of int
        Cells and deposit cells per condition.
    kinds : list of str
        ``binary`` or ``categorical`` per layer (:func:`layer_kinds`).
    names : list of str
        Layer names, for messages.
    unit_cell_km2, cell_area_km2 : float
        Unit-cell and grid-cell areas, km².

    Returns
    -------
    ndarray of float64
        P per condition ([BC94]_ via :func:`favour_plugin.core.wofe.posterior_block`).

    Raises
    ------
    InputError, ParameterError
        Weights that the counts leave undefined, or no deposit left.
    """
    layers = []
    for j, (kind, name) in enumerate(zip(kinds, names)):
        table = wofe.weights_table(marginal(codes[:, j], cells, deposits), kind, unit_cell_km2,
                                   cell_area_km2, None, name, Feedback())
        layers.append(wofe.layer_weights(table))
    prior = wofe.study_prior(int(cells.sum()), int(deposits.sum()), unit_cell_km2, cell_area_km2)
    return wofe.posterior_block([codes[:, j] for j in range(codes.shape[1])], layers, prior).probability


def place(values: np.ndarray, cells: np.ndarray, which: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return, for the conditions ``which``, the cells with a higher value and the cells with the same.

    ``values`` is one number per condition (the map), ``cells`` the cells
    each condition covers.
    """
    distinct, inverse = np.unique(values, return_inverse=True)
    per_value = np.bincount(inverse.reshape(-1), weights=cells, minlength=distinct.size).astype(np.int64)
    at_or_below = np.cumsum(per_value)
    j = np.searchsorted(distinct, values[which])
    tied = per_value[j]
    return int(cells.sum()) - at_or_below[j], tied


def deposit_conditions(condition_codes: np.ndarray, deposit_codes: np.ndarray) -> np.ndarray:
    """Return the index of each deposit's condition (row of ``condition_codes``), −1 where none matches.

    Codes are compared as :class:`~favour_plugin.core.wofe.ConditionCounts`
    keys them: NaN (missing) matches NaN, and −0 matches 0.
    """
    def keys(codes):
        missing = np.isnan(codes)
        return np.concatenate([np.where(missing, 0.0, codes) + 0.0, missing.astype(np.float64)], axis=1)

    k = condition_codes.shape[0]
    both = np.concatenate([keys(condition_codes), keys(deposit_codes)])
    _, inverse = np.unique(both, axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    first = np.full(inverse.max() + 1 if inverse.size else 0, -1, dtype=np.int64)
    first[inverse[:k][::-1]] = np.arange(k)[::-1]
    return first[inverse[k:]]


def check_block_size(size) -> float:
    """Return the side of the hold-out blocks, or refuse one that is not a positive finite number."""
    if isinstance(size, bool) or not isinstance(size, (int, float)) or not math.isfinite(size) or size <= 0:
        raise ParameterError(f"the block size must be a positive number of map units, got {size!r}")
    return float(size)


def spatial_blocks(x, y, size: float, origin: tuple[float, float]) -> np.ndarray:
    """Return a block number per point: squares of side ``size`` (map units) from ``origin`` (x0, y top).

    Raises
    ------
    ParameterError
        A side that is not a positive finite number.
    """
    size = check_block_size(size)
    column = np.floor((np.asarray(x, dtype=np.float64) - origin[0]) / size).astype(np.int64)
    row = np.floor((origin[1] - np.asarray(y, dtype=np.float64)) / size).astype(np.int64)
    _, number = np.unique(np.stack([row, column], axis=1), axis=0, return_inverse=True)
    return number.reshape(-1)


@dataclass
class HeldOut:
    """Held-out deposits placed in the maps made without them.

    ``above`` and ``tied`` per deposit cell (−1 where its fold made no map),
    ``fold`` the fold each deposit was held out in, ``folds`` how many maps
    were made, ``skipped`` the folds without a map, with the reason.
    """

    above: np.ndarray
    tied: np.ndarray
    fold: np.ndarray
    folds: int
    skipped: list[dict] = field(default_factory=list)

    @property
    def placed(self) -> np.ndarray:
        """Mask of the deposit cells that were scored."""
        return self.tied > 0


def _run_folds(codes, cells, deposits, where, fold, remove_one, kinds, names, unit_cell_km2,
               cell_area_km2, feedback: Feedback) -> HeldOut:
    """Make one map per fold without its deposits (or one of them) and place the fold's deposits."""
    above = np.full(where.size, -1, dtype=np.int64)
    tied = np.full(where.size, -1, dtype=np.int64)
    numbers = np.unique(fold)
    skipped = []
    for count, number in enumerate(numbers):
        feedback.check_cancelled()
        members = np.flatnonzero(fold == number)
        removed = np.bincount(where[members[:1] if remove_one else members], minlength=cells.size)
        try:
            values = condition_probability(codes, cells, deposits - removed, kinds, names, unit_cell_km2,
                                           cell_area_km2)
        except (InputError, ParameterError) as exc:
            skipped.append({"deposits": int(members.size), "reason": str(exc)})
            continue
        above[members], tied[members] = place(values.astype(np.float32), cells, where[members])
        feedback.set_progress((count + 1) / numbers.size)
    return HeldOut(above, tied, fold, int(numbers.size), skipped)


def leave_one_out(codes, cells, deposits, where, kinds, names, unit_cell_km2, cell_area_km2,
                  feedback: Feedback | None = None) -> HeldOut:
    """Score each deposit cell in the map made without it.

    Parameters
    ----------
    codes, cells, deposits
        The conditions table (:func:`condition_probability`).
    where : ndarray of int
        Each deposit cell's condition (:func:`deposit_conditions`).
    kinds, names, unit_cell_km2, cell_area_km2
        As for :func:`condition_probability`.
    feedback : Feedback, optional
        Progress over the maps, and cancel.
    """
    return _run_folds(codes, cells, deposits, where, where.copy(), True, kinds, names, unit_cell_km2,
                      cell_area_km2, feedback or Feedback())


def held_out_blocks(codes, cells, deposits, where, blocks, kinds, names, unit_cell_km2, cell_area_km2,
                    feedback: Feedback | None = None) -> HeldOut:
    """Score the deposit cells of each block in the map made from the deposits of the other blocks.

    ``blocks`` gives each deposit cell's block (:func:`spatial_blocks`);
    the other arguments are those of :func:`leave_one_out`.

    Raises
    ------
    ParameterError
        Every deposit lies in one block: nothing would be left to weigh.
    """
    blocks = np.asarray(blocks, dtype=np.int64)
    if np.unique(blocks).size < 2:
        raise ParameterError(f"all {blocks.size} deposit cells fall in one block; nothing would be left "
                             "to count the weights from: choose a smaller block size")
    return _run_folds(codes, cells, deposits, where, blocks, False, kinds, names, unit_cell_km2,
                      cell_area_km2, feedback or Feedback())
