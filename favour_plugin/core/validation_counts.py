"""Exact ranks of deposit values among a raster's cells, counted block by block, and a value histogram.

Validation needs, for each distinct value v found at a deposit cell, the
number of valid cells below v and equal to v, over the whole raster. The
deposit values are read first (a few small reads); then every block is
sorted once and the deposit values are looked up in it
(:func:`count_block`), so the counts are exact whatever the values and
however many cells share one. Blocks add up in :class:`RankCounts`, which
holds nothing that grows with the grid.

Each block also feeds a fine histogram of its values, used where a
threshold is needed between the deposit values (the prediction–area plot
against the threshold, the threshold of the P–A crossing or of the top x %
of the area). The bins are the top :data:`KEY_BITS` bits of an
order-preserving integer key of the value as a float32 number, so they
need no value range in advance and are equally fine at every scale: the
sign, the whole exponent and 9 bits of the mantissa, i.e. 512 bins per
factor of two (a bin spans at most 1/512 ≈ 0.2 % of its lower edge).
The count of cells at or above a bin's lower edge is exact for rasters of
float32 values or narrower; a float64 value within one float32 rounding
step of an edge may be counted on the other side of it.
"""

from __future__ import annotations

import math

import numpy as np

#: Bits of the float32 key kept as the histogram bin: 2**18 bins.
KEY_BITS = 18
BINS = 1 << KEY_BITS
_SHIFT = np.uint32(32 - KEY_BITS)
_SIGN = np.uint32(0x80000000)
_LOW = np.uint32(0x7FFFFFFF)


def float_keys(values) -> np.ndarray:
    """Return order-preserving uint32 keys of ``values`` as float32 numbers.

    For finite float32 a and b, a < b exactly when key(a) < key(b); −0 is
    read as +0 first, so the two zeros share a key. NaN must be removed
    before.

    Notes
    -----
    The usual bit trick: a positive float's bits with the sign bit set; a
    negative float's bits all flipped, so larger magnitudes sort lower.
    """
    x = np.asarray(values, dtype=np.float32).reshape(-1) + np.float32(0.0)
    bits = x.view(np.uint32)
    return bits ^ ((bits >> np.uint32(31)) * _LOW | _SIGN)


def key_values(keys) -> np.ndarray:
    """Return the float32 numbers of keys made by :func:`float_keys` (the inverse)."""
    k = np.asarray(keys, dtype=np.uint32)
    bits = np.where(k & _SIGN, k ^ _SIGN, ~k).astype(np.uint32)
    return bits.view(np.float32)


def bin_edges(bins) -> np.ndarray:
    """Return the lower edge (the smallest float32 number) of each histogram bin, as float64."""
    keys = np.asarray(bins, dtype=np.uint32) << _SHIFT
    return key_values(keys).astype(np.float64)


class RankCounts:
    """Valid cells below and equal to each target value, and a histogram of every valid cell.

    Parameters
    ----------
    targets : array_like
        The distinct values to rank (those found at deposit cells), in the
        raster's own number type, so that comparisons are exact.

    Notes
    -----
    ``below[j]`` is the number of valid cells whose value is < targets[j],
    ``equal[j]`` the number equal to it; ``valid`` counts valid cells,
    ``infinite`` the valid cells that are ±inf. ``histogram`` counts valid
    cells per bin of :func:`float_keys` (module notes).
    """

    def __init__(self, targets) -> None:
        self.targets = np.unique(np.asarray(targets).reshape(-1))
        if self.targets.dtype.kind == "f" and np.isnan(self.targets).any():
            raise ValueError("rank targets must not hold NaN")
        m = self.targets.size
        self.below = np.zeros(m, dtype=np.int64)
        self.equal = np.zeros(m, dtype=np.int64)
        self.valid = 0
        self.infinite = 0
        self.minimum = math.inf
        self.maximum = -math.inf
        self.histogram = np.zeros(BINS, dtype=np.int64)

    @classmethod
    def of_array(cls, values, targets) -> RankCounts:
        """Count one whole array at once (small grids and tests); NaN is nodata."""
        counts = cls(targets)
        counts.add(count_block(values, counts.targets))
        return counts

    def add(self, block: dict) -> None:
        """Add the counts of one block (made by :func:`count_block` with these targets)."""
        self.below += block["below"]
        self.equal += block["equal"]
        self.valid += block["valid"]
        self.infinite += block["infinite"]
        if block["valid"]:
            self.minimum = min(self.minimum, block["minimum"])
            self.maximum = max(self.maximum, block["maximum"])
            self.histogram[block["bins"]] += block["counts"]

    def positions(self, values) -> tuple[np.ndarray, np.ndarray]:
        """Return, per value (each one of the targets), the cells above it and the cells equal to it.

        Raises
        ------
        ValueError
            A value is not one of the targets.
        """
        v = np.asarray(values).reshape(-1)
        j = np.clip(np.searchsorted(self.targets, v), 0, max(0, self.targets.size - 1))
        if v.size and (self.targets.size == 0 or np.any(self.targets[j] != v)):
            raise ValueError("every value to place must be one of the rank targets")
        return self.valid - self.below[j] - self.equal[j], self.equal[j].copy()

    def cells_at_or_above_bin(self, bins) -> np.ndarray:
        """Return the valid cells in each bin and all bins above it (cells ≥ the bin's lower edge)."""
        above = np.cumsum(self.histogram[::-1])[::-1]
        return above[np.asarray(bins, dtype=np.int64)]

    def threshold_for_cells(self, k: int) -> tuple[float, int]:
        """Return the lower edge of the bin holding the k-th highest valid cell, and the cells ≥ it.

        ``k`` runs from 1 (the highest cell) to ``valid``. The edge is a
        threshold at which at least k cells lie at or above, more by at
        most the cells sharing that bin.
        """
        k = int(min(max(k, 1), self.valid))
        above = np.cumsum(self.histogram[::-1])[::-1]
        b = int(np.flatnonzero(above >= k)[-1])
        return float(bin_edges([b])[0]), int(above[b])


def count_block(values, targets, invalid=None) -> dict:
    """Count one block: valid cells below and equal to each target, and its histogram.

    Parameters
    ----------
    values : ndarray
        The block's values (any shape, any numeric type); NaN is nodata.
    targets : ndarray
        Sorted distinct target values, of the same number type as ``values``
        so that comparisons are exact.
    invalid : ndarray of bool, optional
        Further cells to leave out (a declared nodata value), same shape.

    Returns
    -------
    dict
        ``below``, ``equal`` (int64 per target), ``valid``, ``infinite``,
        ``minimum``, ``maximum``, and the block's histogram as ``bins``
        (distinct bin numbers) with their ``counts``.

    Notes
    -----
    Nothing is sorted per cell. Each valid value's histogram bin (the top
    :data:`KEY_BITS` bits of its order-preserving float32 key) is counted
    with one ``bincount``; as the bins are ordered as the values are, the
    cells in bins below a target's bin are all below the target. Only the
    cells sharing a bin with some target (a few, for a few hundred targets
    among 2¹⁸ bins) are sorted and compared with the targets in the values'
    own number type, so ties are counted exactly.
    """
    flat = np.asarray(values).reshape(-1)
    keep = None
    if flat.dtype.kind == "f":
        keep = ~np.isnan(flat)
    if invalid is not None:
        valid_mask = ~np.asarray(invalid, dtype=bool).reshape(-1)
        keep = valid_mask if keep is None else keep & valid_mask
    known = flat if keep is None or keep.all() else flat[keep]
    targets = np.asarray(targets)
    out = {"below": np.zeros(targets.size, dtype=np.int64), "equal": np.zeros(targets.size, dtype=np.int64),
           "valid": int(known.size), "infinite": 0, "minimum": math.nan, "maximum": math.nan,
           "bins": np.zeros(0, dtype=np.int64), "counts": np.zeros(0, dtype=np.int64)}
    if not known.size:
        return out
    out["minimum"], out["maximum"] = float(known.min()), float(known.max())
    if known.dtype.kind == "f":
        out["infinite"] = int(np.count_nonzero(np.isinf(known)))
    cell_bins = float_keys(known) >> _SHIFT
    first = int(cell_bins.min())
    counts = np.bincount((cell_bins - np.uint32(first)).astype(np.intp))
    filled = np.flatnonzero(counts)
    out["bins"], out["counts"] = (filled + first).astype(np.int64), counts[filled].astype(np.int64)
    if targets.size:
        target_bins = (float_keys(targets) >> _SHIFT).astype(np.int64)
        # Cells in bins strictly below each target's bin: all of them are below the target.
        before = np.concatenate([[0], np.cumsum(counts)])
        out["below"] = before[np.clip(target_bins - first, 0, counts.size)].astype(np.int64)
        # Cells in a target's own bin: compared exactly, in the values' own number type.
        marked = np.zeros(BINS, dtype=bool)
        marked[target_bins] = True
        shared = np.sort(known[marked[cell_bins]])
        shared_bins = (float_keys(shared) >> _SHIFT).astype(np.int64)
        left = np.searchsorted(shared, targets, side="left")
        out["below"] += left - np.searchsorted(shared_bins, target_bins, side="left")
        out["equal"] = (np.searchsorted(shared, targets, side="right") - left).astype(np.int64)
    return out


def _deposits_at_or_above(deposit_values: np.ndarray, thresholds: np.ndarray) -> np.ndarray:
    """Return how many deposit values are ≥ each threshold (deposit values sorted ascending)."""
    return deposit_values.size - np.searchsorted(deposit_values, thresholds, side="left")


def prediction_area_table(counts: RankCounts, deposit_values, points: int = 200) -> dict:
    """Return the prediction–area plot's data: per threshold t, % of the area and of the deposits ≥ t.

    Parameters
    ----------
    counts : RankCounts
        The map's counts, with every deposit value among its targets.
    deposit_values : array_like
        The values at the deposit cells (valid ones).
    points : int
        About how many thresholds to spread evenly between the lowest and
        the highest valid value, besides every deposit value.

    Returns
    -------
    dict
        ``threshold`` (descending), ``area_percent`` (occupied area A(t))
        and ``prediction_percent`` (prediction rate P(t)), lists of equal
        length.

    Notes
    -----
    At each deposit value the area comes from the exact counts; the spread
    thresholds are histogram bin edges, where the count of cells at or above
    is exact too (module notes), so every row is exact, not interpolated.
    """
    values = np.sort(np.asarray(deposit_values).reshape(-1))
    cells = counts.valid
    at_deposits = np.unique(values)
    above_deposits = cells - counts.below[np.searchsorted(counts.targets, at_deposits)]
    spread = np.linspace(counts.minimum, counts.maximum, max(2, points))
    bins = np.unique(float_keys(spread) >> _SHIFT).astype(np.int64)
    edges = bin_edges(bins)
    thresholds = np.concatenate([at_deposits.astype(np.float64), edges])
    area = np.concatenate([above_deposits, counts.cells_at_or_above_bin(bins)])
    order = np.argsort(-thresholds, kind="stable")
    thresholds, area = thresholds[order], area[order]
    keep = np.concatenate([[True], thresholds[1:] != thresholds[:-1]])
    thresholds, area = thresholds[keep], area[keep]
    hits = _deposits_at_or_above(values.astype(np.float64), thresholds)
    return {"threshold": thresholds.tolist(), "area_percent": (100.0 * area / cells).tolist(),
            "prediction_percent": (100.0 * hits / max(1, values.size)).tolist()}


def threshold_at_area(counts: RankCounts, deposit_values, area_fraction: float) -> dict:
    """Return a threshold whose cells at or above cover about ``area_fraction`` of the valid area.

    When the cell at that place in the ranking shares a deposit's value, the
    threshold is that value (exact); otherwise it is the lower edge of the
    histogram bin holding that cell, which takes in at most one bin's cells
    more. The realised area and prediction rate at the threshold are exact.
    """
    values = np.sort(np.asarray(deposit_values, dtype=np.float64).reshape(-1))
    cells = counts.valid
    k = max(1, math.ceil(area_fraction * cells - 1e-9))
    start = cells - counts.below - counts.equal  # cells strictly above each target
    holds = np.flatnonzero((start < k) & (k <= start + counts.equal))
    if holds.size:
        j = int(holds[0])
        threshold, at_or_above, source = float(counts.targets[j]), int(cells - counts.below[j]), \
            "the value of a deposit cell"
    else:
        threshold, at_or_above = counts.threshold_for_cells(k)
        source = "the lower edge of a histogram bin (512 bins per factor of two)"
    hits = int(_deposits_at_or_above(values, np.array([threshold]))[0])
    return {"value": threshold, "area_percent": 100.0 * at_or_above / cells,
            "prediction_percent": 100.0 * hits / max(1, values.size), "source": source}
