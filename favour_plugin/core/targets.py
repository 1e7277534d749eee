"""Ranked targets: the top of a favourability map as zones, with the numbers that say why they rank.

The pure parts of the targets job (:mod:`favour_plugin.raster.target_jobs`):
numpy only, fed one block at a time.

Threshold
    By a favourability value (cells with μ ≥ the value are in), or by the
    top ``x`` % of the area: the threshold is the k-th largest valid value,
    k = ⌈n · x / 100⌉ of the n valid cells, found exactly by
    :class:`TopSelection` with a few streamed histogram passes that narrow
    the value range until the bin holding the k-th value is small enough to
    collect and partition (``numpy.partition``). Cells tied with the
    threshold are all in, so the realised share of the area can exceed
    ``x`` % where many cells share that value; the job reports both.
Zone statistics
    :class:`ZoneStatistics` sums, per zone id, the cells, the favourability,
    its peak, each component's μ (over the cells where that component has a
    value) and the Monte Carlo robustness, block by block
    (:class:`BlockSums`: ``numpy.bincount`` on the block's zone ids, 0 = no
    zone).
Ranking
    :func:`rank_order`: by mean favourability, then by peak favourability
    (both descending), then by zone id so the order never depends on
    chance.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np

from .errors import InputError, ParameterError

#: Bins of one histogram pass of :class:`TopSelection`.
SELECTION_BINS = 4096
#: A bin holding at most this many cells is collected and partitioned exactly.
COLLECT_CELLS = 2_000_000


def check_top_percent(top_percent) -> float:
    """Return the top area as a float, refusing anything but a percentage strictly in (0, 100).

    Raises
    ------
    ParameterError
        Not a number, or outside (0, 100).
    """
    if isinstance(top_percent, bool) or not isinstance(top_percent, (int, float)) \
            or not math.isfinite(top_percent) or not 0 < top_percent < 100:
        raise ParameterError(f"the top area must be a percentage between 0 and 100 (10 for the top "
                             f"10 %), got {top_percent!r}")
    return float(top_percent)


def check_distance(value, what: str) -> float:
    """Return a non-negative finite number (a minimum area or a merge distance), or refuse it."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) \
            or value < 0:
        raise ParameterError(f"{what} must be a number of 0 or more, got {value!r}")
    return float(value)


def top_count(valid_cells: int, top_percent: float) -> int:
    """Return k, the number of cells the top ``top_percent`` % of ``valid_cells`` asks for (at least 1)."""
    return max(1, math.ceil(valid_cells * top_percent / 100.0 - 1e-9))


def bin_index(values: np.ndarray, lo: float, hi: float, bins: int) -> np.ndarray:
    """Return each value's bin in ``bins`` equal bins over [lo, hi] (clipped to the end bins)."""
    if hi <= lo:
        return np.zeros(values.shape, dtype=np.int64)
    index = np.floor((values - lo) * (bins / (hi - lo)))
    return np.clip(index, 0, bins - 1).astype(np.int64)


class TopSelection:
    """The exact k-th largest value of a raster, found in a few streamed passes.

    Each level is a histogram of the candidate values over a range: the first
    over [min, max] of the valid cells, each later one over the single bin of
    the level before that holds the k-th largest value. A cell is a
    candidate when it fell in the chosen bin of every level so far (the same
    :func:`bin_index` arithmetic each time, so no cell is lost at a bin's
    edge). Once the chosen bin holds at most ``collect_cells`` cells, or all
    its cells are equal, the caller collects them (:meth:`candidates`) and
    :meth:`finish` partitions them; when every candidate is equal,
    :attr:`value` holds the answer and nothing is collected.

    Parameters
    ----------
    lo, hi : float
        Smallest and largest valid value.
    k : int
        Rank of the value sought, from the top (1 is the largest).
    bins, collect_cells : int
        Bins per level; the largest bin collected whole.
    """

    def __init__(self, lo: float, hi: float, k: int, bins: int = SELECTION_BINS,
                 collect_cells: int = COLLECT_CELLS) -> None:
        self.levels: list[tuple[float, float, int]] = []  # (lo, hi, chosen bin)
        self.range = (float(lo), float(hi))
        self.k = int(k)
        self.bins = int(bins)
        self.collect_cells = int(collect_cells)
        self.passes = 0
        self.value: float | None = None  # set when every candidate is equal: no collection needed

    def candidates(self, values: np.ndarray) -> np.ndarray:
        """Return the values (1-D, valid only) that fell in the chosen bin of every level so far."""
        keep = values[~np.isnan(values)]
        for lo, hi, chosen in self.levels:
            keep = keep[bin_index(keep, lo, hi, self.bins) == chosen]
        return keep

    def block_counts(self, values: np.ndarray) -> tuple[np.ndarray, float, float]:
        """Return one block's histogram of candidates over the current range, and their min and max."""
        keep = self.candidates(values)
        counts = np.bincount(bin_index(keep, *self.range, self.bins), minlength=self.bins)
        if keep.size == 0:
            return counts, math.inf, -math.inf
        return counts, float(keep.min()), float(keep.max())

    def narrow(self, counts: np.ndarray, low: float, high: float) -> bool:
        """Take a whole pass's histogram; return True when the candidates can now be collected.

        The k-th largest candidate lies in the highest bin whose count, with
        every bin above it, reaches k; k becomes its rank within that bin.
        """
        self.passes += 1
        if low == high:
            self.value = low  # every candidate is equal: that is the k-th largest
            return True
        if counts.sum() <= self.collect_cells:
            return True
        above = np.cumsum(counts[::-1])
        top = int(np.searchsorted(above, self.k))  # bins counted from the top
        chosen = self.bins - 1 - top
        self.k -= int(above[top - 1]) if top else 0
        lo, hi = self.range
        self.levels.append((lo, hi, chosen))
        width = (hi - lo) / self.bins
        self.range = (lo + chosen * width, lo + (chosen + 1) * width)
        if self.range[1] <= self.range[0] or len(self.levels) > 64:
            return True
        return int(counts[chosen]) <= self.collect_cells

    def finish(self, collected: np.ndarray) -> float:
        """Return the k-th largest of the collected candidates."""
        if collected.size < self.k:
            raise InputError(f"the raster changed while it was read: {collected.size} candidate cells "
                             f"for the {self.k}-th largest value")
        return float(np.partition(collected, collected.size - self.k)[collected.size - self.k])


class BlockSums:
    """One block's sums per zone present in it: what :class:`ZoneStatistics` adds up.

    ``ids`` are the zone ids in the block (sorted, none 0); every other
    array has one entry per id. Only the zones present are counted
    (``numpy.unique`` then ``numpy.bincount`` on the block's own index), so a
    block costs the same whatever the number of zones.
    """

    def __init__(self, zones: np.ndarray, values: np.ndarray,
                 components: Mapping[str, np.ndarray] | None = None,
                 robustness: np.ndarray | None = None) -> None:
        inside = zones > 0
        self.ids, local = np.unique(zones[inside], return_inverse=True)
        n = self.ids.size
        v = values[inside]
        self.cells = np.bincount(local, minlength=n)
        self.total = np.bincount(local, v, minlength=n)
        self.peak = np.full(n, -np.inf)
        np.maximum.at(self.peak, local, v)
        self.components = {name: _valid_sums(local, array[inside], n)
                           for name, array in (components or {}).items()}
        self.robustness = _valid_sums(local, robustness[inside], n) if robustness is not None else None


def _valid_sums(local: np.ndarray, values: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Return the sums and counts of the valid (non-NaN) values per local zone index."""
    valid = ~np.isnan(values)
    return (np.bincount(local[valid], values[valid], minlength=n),
            np.bincount(local[valid], minlength=n))


class ZoneStatistics:
    """Per-zone totals of one pass: cells, favourability (sum and peak), components, robustness.

    Zone ids are whole numbers from 1 to ``zones``; 0 marks a cell in no zone.
    Each block's :class:`BlockSums` is added with :meth:`add`.
    """

    def __init__(self, zones: int, components: Sequence[str] = (), robustness: bool = False) -> None:
        n = int(zones) + 1
        self.cells = np.zeros(n, np.int64)
        self.total = np.zeros(n, np.float64)
        self.peak = np.full(n, -np.inf)
        self.components = {name: (np.zeros(n, np.float64), np.zeros(n, np.int64)) for name in components}
        self.robustness = (np.zeros(n, np.float64), np.zeros(n, np.int64)) if robustness else None

    def add(self, block: BlockSums) -> None:
        """Add one block's sums (the ids of a block are unique, so plain indexed adds suffice)."""
        ids = block.ids
        if ids.size and (ids[-1] >= self.cells.size or ids[0] < 1):
            raise InputError(f"zone ids {int(ids[0])}–{int(ids[-1])} outside 1–{self.cells.size - 1}")
        self.cells[ids] += block.cells
        self.total[ids] += block.total
        self.peak[ids] = np.maximum(self.peak[ids], block.peak)
        for name, (total, count) in block.components.items():
            self.components[name][0][ids] += total
            self.components[name][1][ids] += count
        if self.robustness is not None and block.robustness is not None:
            self.robustness[0][ids] += block.robustness[0]
            self.robustness[1][ids] += block.robustness[1]

    def means(self) -> dict[str, np.ndarray]:
        """Return per-zone means (index 0 unused): ``favourability``, each component, ``robustness``.

        A mean over no valid cell is NaN (a component that is nodata over a
        whole zone).
        """
        out = {"favourability": _mean(self.total, self.cells)}
        for name, (total, count) in self.components.items():
            out[name] = _mean(total, count)
        if self.robustness is not None:
            out["robustness"] = _mean(*self.robustness)
        return out


def _mean(total: np.ndarray, count: np.ndarray) -> np.ndarray:
    """Return total / count, NaN where count is 0."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)


def rank_order(mean: np.ndarray, peak: np.ndarray, ids: np.ndarray) -> np.ndarray:
    """Return ``ids`` ordered by mean favourability, then peak (both descending), then id."""
    return ids[np.lexsort((ids, -peak[ids], -mean[ids]))]


def why_text(component_means: Mapping[str, float]) -> str:
    """Return the components from strongest to weakest: ``pathway 0.91 > trap 0.85 > source 0.40``.

    Components with no value in the zone are left out. The text says which
    process carries the zone and which holds it back.
    """
    ranked = sorted(((value, name) for name, value in component_means.items()
                     if value is not None and math.isfinite(value)), key=lambda item: (-item[0], item[1]))
    return " > ".join(f"{name} {value:.2f}" for value, name in ranked)
