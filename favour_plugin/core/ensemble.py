"""Many evaluations of one block at once: summaries across realisations, and top-area thresholds.

A Monte Carlo or a sensitivity study evaluates N trees on the same cells.
For each block the engine stacks the N root maps into an array of shape
``(N, rows, columns)``; the functions here reduce such stacks, one block at a
time, so nothing that grows with the grid is held whole.

"The top x % of the area" of a map is the set of valid cells whose μ is at or
above the map's k-th largest value, k = ⌈n x/100⌉ of its n valid cells. The quantile of a whole grid is known
only once every cell has been seen, so thresholds come from
:class:`UnitHistograms`: fine histograms of μ on [0, 1] (``BINS`` bins of
width 1/16 384), filled from a regular sample of rows before the full pass
(the engine's pilot) and checked against the full pass afterwards.
"""

from __future__ import annotations

import numpy as np

#: Bins of the histograms of μ on [0, 1]; a threshold is exact to 1/BINS.
BINS = 16384

#: The percentiles written by a Monte Carlo, in percent.
PERCENTILES = (10.0, 50.0, 90.0)


def summarise_stack(stack: np.ndarray, thresholds: np.ndarray | None = None) -> dict[str, np.ndarray]:
    """Reduce N realisations of a block to per-cell summaries.

    Parameters
    ----------
    stack : ndarray, shape (N, rows, columns)
        μ of each realisation (float32 or float64); NaN is nodata.
    thresholds : ndarray, shape (N,), optional
        Each realisation's top-area threshold; gives ``robustness``.

    Returns
    -------
    dict of str to ndarray (rows, columns), float64
        ``mean``; ``std`` (across realisations, n − 1 in the denominator; 0
        when N = 1); ``p10``, ``p50``, ``p90`` (numpy's default linear
        interpolation between order statistics, the definition of
        :func:`numpy.percentile`); and ``robustness``, the fraction of
        realisations in which the cell is at or above that realisation's
        threshold. A cell that is nodata in some realisations is summarised
        over those where it has a value; nodata in all, it is NaN.

    Notes
    -----
    With s realisations valid at a cell: mean = Σ μ_r / s,
    std = sqrt(Σ (μ_r − mean)² / (s − 1)), robustness = #{r: μ_r ≥ t_r} / s.
    """
    stack = np.asarray(stack)
    n = stack.shape[0]
    missing = np.isnan(stack)
    partial = missing.any(axis=0) & ~missing.all(axis=0)
    if partial.any():
        out = _summarise_with_gaps(stack, missing)
    else:
        out = _summarise_full(stack)
    if thresholds is not None:
        thresholds = np.asarray(thresholds, dtype=stack.dtype if stack.dtype.kind == "f" else np.float64)
        above = (stack >= thresholds.reshape((n,) + (1,) * (stack.ndim - 1))).sum(axis=0)
        valid = n - missing.sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            out["robustness"] = np.where(valid > 0, above / np.maximum(valid, 1), np.nan)
    return out


def _summarise_full(stack: np.ndarray) -> dict[str, np.ndarray]:
    """Summaries of a stack where each cell is valid in every realisation or in none.

    The percentiles come from one partial sort of each cell's N values
    (cells × N, contiguous), interpolated as numpy's default does; the
    standard deviation from the deviations about the float64 mean.
    """
    n = stack.shape[0]
    shape = stack.shape[1:]
    flat = stack.reshape(n, -1)
    mean = flat.sum(axis=0, dtype=np.float64) / n
    cells = np.ascontiguousarray(flat.T)  # each cell's N values side by side
    if n > 1:
        deviation = cells - mean[:, None]
        std = np.sqrt(np.einsum("ij,ij->i", deviation, deviation) / (n - 1))
    else:
        std = np.where(np.isnan(mean), np.nan, 0.0)
    positions = np.asarray(PERCENTILES) / 100.0 * (n - 1)
    below = np.floor(positions).astype(int)
    above = np.minimum(below + 1, n - 1)
    ordered = np.partition(cells, np.unique(np.concatenate([below, above])), axis=1)
    out = {"mean": mean.reshape(shape), "std": std.reshape(shape)}
    for q, lo, hi, position in zip(PERCENTILES, below, above, positions):
        low = ordered[:, lo].astype(np.float64)
        out[_name(q)] = (low + (ordered[:, hi] - low) * (position - lo)).reshape(shape)
    return out


def _summarise_with_gaps(stack: np.ndarray, missing: np.ndarray) -> dict[str, np.ndarray]:
    """Summaries over the realisations where each cell has a value (numpy's nan functions)."""
    import warnings

    out = {}
    with warnings.catch_warnings(), np.errstate(invalid="ignore", divide="ignore"):
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN cells give NaN, as meant
        out["mean"] = np.nanmean(stack, axis=0, dtype=np.float64)
        count = (~missing).sum(axis=0)
        spread = np.nanstd(stack, axis=0, dtype=np.float64, ddof=1)
        out["std"] = np.where(count == 1, 0.0, spread)
        for q, values in zip(PERCENTILES, np.nanpercentile(stack, PERCENTILES, axis=0)):
            out[_name(q)] = values.astype(np.float64)
    return out


def _name(percent: float) -> str:
    """Return the key of a percentile: ``p10``, ``p50``, ``p90``."""
    return f"p{percent:g}"


class UnitHistograms:
    """Histograms of μ ∈ [0, 1] for each of N maps, filled block by block.

    Bin k holds μ in [k/BINS, (k+1)/BINS); μ = 1 falls in the last bin.
    Memory is N × BINS × 8 bytes (128 KiB per map).
    """

    def __init__(self, n: int) -> None:
        self.counts = np.zeros((n, BINS), dtype=np.int64)

    @property
    def n(self) -> int:
        """Number of maps."""
        return self.counts.shape[0]

    def add(self, stack: np.ndarray) -> None:
        """Count the valid cells of a stack (N, …) of μ into each map's histogram."""
        stack = np.asarray(stack)
        for r in range(stack.shape[0]):
            values = stack[r].ravel()
            values = values[~np.isnan(values)]
            if values.size:
                bins = np.minimum((values * BINS).astype(np.int64), BINS - 1)
                self.counts[r] += np.bincount(bins, minlength=BINS)

    def merge(self, other: UnitHistograms) -> None:
        """Add another set of histograms (of the same maps)."""
        self.counts += other.counts

    @property
    def valid(self) -> np.ndarray:
        """Valid cells counted for each map."""
        return self.counts.sum(axis=1)

    def top_thresholds(self, percent: float) -> np.ndarray:
        """Return each map's threshold of the top ``percent`` % of its counted cells.

        The threshold is the lower edge of the bin holding the k-th largest
        value, k = ⌈n · percent/100⌉ of n counted cells, so at least
        ``percent`` % of the cells lie at or above it (more by at most the
        cells sharing that bin). A map with no counted cell gets NaN.
        """
        cumulative = np.cumsum(self.counts[:, ::-1], axis=1)  # cells at or above each bin, top down
        wanted = np.ceil(self.valid * percent / 100.0)
        first = np.argmax(cumulative >= wanted[:, None], axis=1)  # top-down index reaching the share
        edges = (BINS - 1 - first) / BINS
        return np.where(self.valid > 0, edges, np.nan)

    def fraction_at_or_above(self, thresholds: np.ndarray) -> np.ndarray:
        """Return, per map, the fraction of counted cells at or above its threshold (a bin edge)."""
        thresholds = np.asarray(thresholds, dtype=np.float64)
        first_bin = np.clip(np.round(thresholds * BINS).astype(np.int64), 0, BINS)
        above = np.array([self.counts[r, first_bin[r]:].sum() for r in range(self.n)], dtype=np.float64)
        return np.where(self.valid > 0, above / np.maximum(self.valid, 1), np.nan)

    def auc(self, deposit_values: list[np.ndarray]) -> np.ndarray:
        """Return each map's area under the success-rate curve from its histogram.

        AUC = (1/n) Σ_d [#(μ < μ_d) + ½ #(μ tied with μ_d)] / #cells, the
        probability that a deposit cell outranks a random cell, ties counted
        half (the Mann–Whitney form of the ROC area, Hanley & McNeil 1982
        [HM82]_). Here "tied" means in the same histogram bin, so the result
        can differ from the exact one by at most half the share of cells in
        the deposits' bins.

        Parameters
        ----------
        deposit_values : list of ndarray
            For each map, μ at its deposit cells (NaN are left out).
        """
        out = np.full(self.n, np.nan)
        for r, values in enumerate(deposit_values):
            values = np.asarray(values, dtype=np.float64)
            values = values[~np.isnan(values)]
            total = self.valid[r]
            if not values.size or total == 0:
                continue
            below = np.concatenate([[0], np.cumsum(self.counts[r])])  # cells in bins before k
            bins = np.minimum((values * BINS).astype(np.int64), BINS - 1)
            out[r] = float(np.mean((below[bins] + 0.5 * self.counts[r, bins]) / total))
        return out
