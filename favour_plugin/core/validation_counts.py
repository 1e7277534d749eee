"""Exact ranks of deposit values among a raster's cells, counted block by block, and a value histogram.

Validation needs, for each distinct value v found at a deposit cell, the
number of valid cells below v and equal to v, over the whole raster. The
deposit values are read first (:mod:`favour_plugin.raster.rank_pass`);
then each block's cells are binned by value and only the cells sharing a
bin with a deposit value are compared with it (:func:`count_block`), so
the counts are exact whatever the values and however many cells share
one. Blocks add up in :class:`RankCounts`, whose size does not grow with
the grid.

Each block also feeds a fine histogram of its values, used where a
threshold is needed between the deposit values (the prediction–area plot
against the threshold, the threshold of the P–A crossing or of the top x %
of the area). The bins are the top :data:`KEY_BITS` bits of an
order-preserving integer key of the value as a float32 number, so they
need no value range in advance and are equally fine at every scale: the
sign, the whole exponent and 13 bits of the mantissa, i.e. 8192 bins per
factor of two (a bin spans at most 1/8192 ≈ 0.012 % of its lower edge).
The histogram is 2²² counts (32 MiB), whatever the grid's size.
The count of cells at or above a bin's lower edge is exact for rasters of
float32 values or narrower; a float64 value within one float32 rounding
step of an edge may be counted on the other side of it.
"""

from __future__ import annotations

import math

import numpy as np

#: Bits of the float32 key kept as the histogram bin: 2**22 bins. Finer bins leave fewer cells to
#: compare exactly (those sharing a bin with a deposit value), coarser ones smaller tables. On the
#: validation benchmark's blocks 3 % of the cells share a bin at 22 bits (34 % at 18, which counted
#: half as fast); 24 bits was no faster and takes four times the memory.
KEY_BITS = 22
BINS = 1 << KEY_BITS
#: Bins per factor of two (the sign and the 8 exponent bits take 9 of the key's bits).
BINS_PER_OCTAVE = 1 << (KEY_BITS - 9)
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
    with np.errstate(invalid="ignore", over="ignore"):  # signalling NaNs; float64 beyond float32 is ±inf
        return _keys_in_place(np.add(np.asarray(values).reshape(-1), np.float32(0.0), dtype=np.float32))


def _keys_in_place(x: np.ndarray) -> np.ndarray:
    """Turn a float32 array of our own (−0 already read as +0) into its keys, in its own memory."""
    bits = x.view(np.uint32)
    flip = bits >> np.uint32(31)
    flip *= _LOW
    flip |= _SIGN
    bits ^= flip
    return bits


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
        self.histogram = np.zeros(BINS, dtype=np.int64)  # pages are taken only where blocks land
        self.table = TargetTable(self.targets)
        self._bins_used = (BINS, 0)  # the bins any block reached: [first, end)
        self._above = None

    @classmethod
    def of_array(cls, values, targets) -> RankCounts:
        """Count one whole array at once (small grids and tests); NaN is nodata."""
        counts = cls(targets)
        counts.add(counts.count(values))
        return counts

    def count(self, values, invalid=None) -> dict:
        """Count one block against these targets (:func:`count_block`); safe to call from many threads."""
        return count_block(values, self.table, invalid)

    def add(self, block: dict) -> None:
        """Add the counts of one block (made by :func:`count_block` with these targets)."""
        self.below += block["below"]
        self.equal += block["equal"]
        self.valid += block["valid"]
        self.infinite += block["infinite"]
        if block["valid"]:
            self.minimum = min(self.minimum, block["minimum"])
            self.maximum = max(self.maximum, block["maximum"])
            first, end = block["first_bin"], block["first_bin"] + block["bin_counts"].size
            self.histogram[first:end] += block["bin_counts"]
            self._bins_used = (min(self._bins_used[0], first), max(self._bins_used[1], end))
            self._above = None

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
        first, above = self._cells_above()
        at = np.asarray(bins, dtype=np.int64) - first
        inside = above[np.clip(at, 0, max(0, above.size - 1))] if above.size else np.zeros(at.shape, np.int64)
        return np.where(at < 0, self.valid, np.where(at >= above.size, 0, inside))

    def _cells_above(self) -> tuple[int, np.ndarray]:
        """Return the first bin used and, from it to the last used, the valid cells in and above each bin.

        Kept until the next block is added.
        """
        first, end = self._bins_used
        if self._above is None:
            used = self.histogram[first:end] if end > first else self.histogram[:0]
            self._above = np.cumsum(used[::-1])[::-1]
        return first, self._above

    def threshold_for_cells(self, k: int) -> tuple[float, int]:
        """Return the lower edge of the bin holding the k-th highest valid cell, and the cells ≥ it.

        ``k`` runs from 1 (the highest cell) to ``valid``. The edge is a
        threshold at which at least k cells lie at or above, more by at
        most the cells sharing that bin.
        """
        k = int(min(max(k, 1), self.valid))
        first, above = self._cells_above()
        at = int(np.searchsorted(-above, -k, side="right")) - 1  # ``above`` falls bin by bin
        return float(bin_edges([first + at])[0]), int(above[at])


class TargetTable:
    """Sorted distinct target values with their histogram bins and a table marking those bins.

    Made once per pass and shared, read-only, by the threads counting blocks.
    The marks are :data:`BINS` flags (4 MiB).
    """

    def __init__(self, targets) -> None:
        self.values = np.asarray(targets).reshape(-1)
        self.bins = (float_keys(self.values) >> _SHIFT).astype(np.int64)
        self.marks = np.zeros(BINS, dtype=bool)
        self.marks[self.bins] = True


def count_block(values, targets, invalid=None) -> dict:
    """Count one block: valid cells below and equal to each target, and its histogram.

    Parameters
    ----------
    values : ndarray
        The block's values (any shape, any numeric type); NaN is nodata.
    targets : ndarray or TargetTable
        Sorted distinct target values, of the same number type as ``values``
        so that comparisons are exact (or their :class:`TargetTable`, made
        once for many blocks).
    invalid : ndarray of bool, optional
        Further cells to leave out (a declared nodata value), same shape.

    Returns
    -------
    dict
        ``below``, ``equal`` (int64 per target), ``valid``, ``infinite``,
        ``minimum``, ``maximum``, and the block's histogram as ``first_bin``
        and ``bin_counts`` (the counts of bins ``first_bin``, ``first_bin`` + 1, …).

    Notes
    -----
    Nothing is sorted per cell. Each value's histogram bin (the top
    :data:`KEY_BITS` bits of its order-preserving float32 key) is counted
    with one ``bincount``; as the bins are ordered as the values are, the
    cells in bins below a target's bin are all below the target. Only the
    cells sharing a bin with some target (a few per cent, for a few hundred
    targets among 2²² bins) are sorted and compared with the targets in the
    values' own number type, so ties are counted exactly.

    In a float32 or integer block whose smallest and largest values are
    finite, NaN cells need no mask: a NaN's key lies above +inf's or below
    −inf's, so its bin falls outside the block's range of bins and is
    counted in one extra bin that is then dropped. Otherwise (infinite
    values, float64 values, or ``invalid`` given) the valid cells are
    picked out first.
    """
    table = targets if isinstance(targets, TargetTable) else TargetTable(targets)
    flat = np.asarray(values).reshape(-1)
    floating = flat.dtype.kind == "f"
    out = {"below": np.zeros(table.values.size, dtype=np.int64),
           "equal": np.zeros(table.values.size, dtype=np.int64), "valid": 0, "infinite": 0,
           "minimum": math.nan, "maximum": math.nan, "first_bin": 0,
           "bin_counts": np.zeros(0, dtype=np.int64)}
    if not flat.size:
        return out
    if invalid is not None or (floating and flat.dtype != np.float32):
        return _count_picked(flat, table, invalid, out)
    if floating:
        # Adding 0 copies, reads −0 as +0 and quiets every NaN (numpy's fmin and fmax can miss the
        # smallest value beside a signalling NaN); then the copy becomes the bins.
        with np.errstate(invalid="ignore"):
            copy = np.add(flat, np.float32(0.0))
        low, high = np.fmin.reduce(copy), np.fmax.reduce(copy)
        if math.isnan(low):
            return out
        if math.isinf(low) or math.isinf(high):
            return _count_picked(flat, table, invalid, out)
    else:
        low, high = flat.min(), flat.max()
        copy = np.add(flat, np.float32(0.0), dtype=np.float32)
    first, last = (int(k) for k in float_keys(np.array([low, high], dtype=flat.dtype)) >> _SHIFT)
    span = last - first + 1
    offsets = copy.view(np.uint32)
    if low >= 0:  # no valid value has its sign bit set: a key is its bits with the sign bit added
        np.right_shift(offsets, _SHIFT, out=offsets)
        offsets -= np.uint32(first - (int(_SIGN) >> int(_SHIFT)))
    else:
        _keys_in_place(copy)
        offsets >>= _SHIFT
        offsets -= np.uint32(first)
    # a NaN's bin lies above the range or below it (there the subtraction wraps round: large)
    np.minimum(offsets, np.uint32(span), out=offsets)  # every NaN in the extra bin ``span``
    offsets = offsets.astype(np.intp)
    counts = np.bincount(offsets, minlength=span + 1)
    out.update(valid=int(flat.size - counts[span]), minimum=float(low), maximum=float(high),
               first_bin=first, bin_counts=counts[:span])
    inside = table.bins[(table.bins >= first) & (table.bins <= last)] - first
    if inside.size and counts[inside].any():  # some cell shares a bin with a target
        marks = table.marks[first:first + span + 1].copy()
        marks[span] = False  # the NaN cells' bin
        shared = flat[np.take(marks, offsets)]
    else:
        shared = flat[:0]
    if table.values.size:
        _count_targets(shared, counts[:span], first, table, out)
    return out


def _count_picked(flat: np.ndarray, table: TargetTable, invalid, out: dict) -> dict:
    """Count a block whose valid cells are picked out first (infinite values, or a mask given)."""
    keep = ~np.isnan(flat) if flat.dtype.kind == "f" else None
    if invalid is not None:
        valid_mask = ~np.asarray(invalid, dtype=bool).reshape(-1)
        keep = valid_mask if keep is None else keep & valid_mask
    known = flat if keep is None else flat[keep]
    if not known.size:
        return out
    out.update(valid=int(known.size), minimum=float(known.min()), maximum=float(known.max()))
    if known.dtype.kind == "f":
        out["infinite"] = int(np.count_nonzero(np.isinf(known)))
    cell_bins = float_keys(known) >> _SHIFT
    first = int(cell_bins.min())
    offsets = (cell_bins - np.uint32(first)).astype(np.intp)
    counts = np.bincount(offsets)
    out.update(first_bin=first, bin_counts=counts)
    if table.values.size:
        _count_targets(known[np.take(table.marks[first:first + counts.size], offsets)], counts, first, table,
                       out)
    return out


def _count_targets(shared: np.ndarray, counts: np.ndarray, first: int, table: TargetTable, out: dict) -> None:
    """Fill ``below`` and ``equal``: whole bins below each target's, then exact compares within its bin.

    ``shared`` holds the block's valid cells that lie in some target's bin;
    ``counts`` the block's cells per bin from ``first``.
    """
    targets = table.values
    before = np.concatenate([[0], np.cumsum(counts)])
    below = before[np.clip(table.bins - first, 0, counts.size)]
    shared = np.sort(shared)
    shared_bins = (float_keys(shared) >> _SHIFT).astype(np.int64)
    left = np.searchsorted(shared, targets, side="left")
    out["below"] = (below + left - np.searchsorted(shared_bins, table.bins, side="left")).astype(np.int64)
    out["equal"] = (np.searchsorted(shared, targets, side="right") - left).astype(np.int64)


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
        source = f"the lower edge of a histogram bin ({BINS_PER_OCTAVE} bins per factor of two)"
    hits = int(_deposits_at_or_above(values, np.array([threshold]))[0])
    return {"value": threshold, "area_percent": 100.0 * at_or_above / cells,
            "prediction_percent": 100.0 * hits / max(1, values.size), "source": source}
