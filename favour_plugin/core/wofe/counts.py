"""Counting unit cells and deposits per class, block by block.

See the package docstring of :mod:`favour_plugin.core.wofe` for the counting
rules, the a, b, c, d notation and the references.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ..errors import GridMismatchError, InputError, ParameterError
from .rules import MAX_CLASSES


def _block_inputs(classes, deposits, area_mask) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return (classes float64, deposit counts int64, inside mask) flattened and checked."""
    values = np.asarray(classes, dtype=np.float64)
    shape = values.shape
    if deposits is None:
        counts = np.zeros(shape, dtype=np.int64)
    else:
        raw = np.asarray(deposits)
        if raw.shape != shape:
            raise GridMismatchError(f"deposit block has shape {raw.shape}, evidence block has {shape}")
        raw = raw.astype(np.float64)
        if np.any(~np.isfinite(raw)) or np.any(raw < 0) or np.any(raw != np.round(raw)):
            bad = raw[~np.isfinite(raw) | (raw < 0) | (raw != np.round(raw))][0]
            raise InputError(f"deposit counts per cell must be whole numbers ≥ 0, found {bad!r}")
        counts = raw.astype(np.int64)
    if area_mask is None:
        inside = np.ones(shape, dtype=bool)
    else:
        inside = np.asarray(area_mask, dtype=bool)
        if inside.shape != shape:
            raise GridMismatchError(f"study-area mask has shape {inside.shape}, evidence block has {shape}")
    if np.any(np.isinf(values)):
        raise InputError("evidence holds ±inf; nodata must be NaN and classes finite")
    return values.reshape(-1), counts.reshape(-1), inside.reshape(-1)


def _merge_keyed(keys_a, vals_a, keys_b, vals_b):
    """Merge two sorted key arrays with per-key value columns (sums on shared keys)."""
    keys = np.union1d(keys_a, keys_b)
    out = []
    for col_a, col_b in zip(vals_a, vals_b):
        total = np.zeros(keys.size, dtype=np.int64)
        np.add.at(total, np.searchsorted(keys, keys_a), col_a)
        np.add.at(total, np.searchsorted(keys, keys_b), col_b)
        out.append(total)
    return keys, out


def _count_codes(known: np.ndarray, is_dep: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return (distinct codes, cells, deposit cells) of a block's known values.

    Whole-number codes within a span of 65 536 (classes, and every output of
    :func:`code_by_breaks`) are counted with ``bincount`` in linear time;
    anything else with a sort (``unique``).
    """
    if known.size:
        low = known.min()
        shifted = known - low
        if known.max() - low < 65536:
            whole = shifted.astype(np.int64)
            if np.array_equal(whole, shifted):
                cells = np.bincount(whole)
                deps = np.bincount(whole, weights=is_dep, minlength=cells.size)
                present = np.flatnonzero(cells)
                return present + low, cells[present].astype(np.int64), deps[present].astype(np.int64)
    keys, inverse = np.unique(known, return_inverse=True)
    inverse = inverse.reshape(-1)
    cells = np.bincount(inverse, minlength=keys.size).astype(np.int64)
    deps = np.bincount(inverse, weights=is_dep, minlength=keys.size).astype(np.int64)
    return keys, cells, deps


class ClassCounts:
    """Cells and deposit cells per class of one evidence layer, accumulated block by block.

    Parameters
    ----------
    max_classes : int
        Refuse more distinct class values than this (an unclassed continuous
        layer would otherwise grow with the grid).

    Notes
    -----
    Per class code: ``cells`` and ``deposit_cells`` (cells holding at least
    one deposit). Also ``nodata_cells``, ``nodata_deposit_cells``,
    ``merged_deposits`` (points beyond the first in a cell, inside the study
    area) and ``outside_deposits`` (points in cells outside the study area).
    See the module notes for the counting rules. Blocks may come in any
    order; :meth:`merge` combines counts made separately (e.g. per tile).
    """

    def __init__(self, max_classes: int = MAX_CLASSES) -> None:
        self.max_classes = int(max_classes)
        self._classes = np.zeros(0, dtype=np.float64)
        self._cells = np.zeros(0, dtype=np.int64)
        self._deposits = np.zeros(0, dtype=np.int64)
        self.nodata_cells = 0
        self.nodata_deposit_cells = 0
        self.merged_deposits = 0
        self.outside_deposits = 0

    @classmethod
    def from_arrays(cls, classes, deposits=None, area_mask=None, max_classes: int = MAX_CLASSES):
        """Count one whole array (small grids and tests); same as one :meth:`add_block`."""
        counts = cls(max_classes)
        counts.add_block(classes, deposits, area_mask)
        return counts

    @classmethod
    def from_table(cls, classes, cells, deposit_cells, nodata_cells: int = 0,
                   nodata_deposit_cells: int = 0):
        """Build counts from per-class totals made elsewhere (e.g. a raster attribute table).

        Parameters
        ----------
        classes : array_like
            Distinct finite class codes.
        cells, deposit_cells : array_like of int
            Cells and deposit cells per class; ``deposit_cells <= cells``.
        nodata_cells, nodata_deposit_cells : int
            Cells and deposit cells where the evidence is missing.
        """
        keys = np.asarray(classes, dtype=np.float64).reshape(-1)
        cell_n = np.asarray(cells, dtype=np.int64).reshape(-1)
        dep_n = np.asarray(deposit_cells, dtype=np.int64).reshape(-1)
        if not (keys.size == cell_n.size == dep_n.size):
            raise InputError("classes, cells and deposit_cells must have one entry per class")
        if np.unique(keys).size != keys.size or np.any(~np.isfinite(keys)):
            raise InputError("class codes must be distinct and finite")
        if np.any(cell_n < 0) or np.any(dep_n < 0) or np.any(dep_n > cell_n):
            raise InputError("counts must satisfy 0 <= deposit_cells <= cells")
        order = np.argsort(keys)
        counts = cls(max(MAX_CLASSES, keys.size))
        counts._classes, counts._cells, counts._deposits = keys[order], cell_n[order], dep_n[order]
        counts.nodata_cells, counts.nodata_deposit_cells = int(nodata_cells), int(nodata_deposit_cells)
        return counts

    def add_block(self, classes, deposits=None, area_mask=None) -> None:
        """Add one block of class codes and deposit counts.

        Parameters
        ----------
        classes : ndarray
            Class codes (any numeric dtype); NaN is nodata.
        deposits : ndarray of int, optional
            Number of deposit points in each cell (a boolean mask works too);
            None for a block without deposits.
        area_mask : ndarray of bool, optional
            True inside the study area; None means the whole block is inside.
        """
        values, dep, inside = _block_inputs(classes, deposits, area_mask)
        self.outside_deposits += int(dep[~inside].sum())
        values, dep = values[inside], dep[inside]
        self.merged_deposits += int(np.maximum(dep - 1, 0).sum())
        is_dep = (dep > 0).astype(np.int64)
        missing = np.isnan(values)
        self.nodata_cells += int(missing.sum())
        self.nodata_deposit_cells += int(is_dep[missing].sum())
        known = values[~missing]
        keys, cells, deps = _count_codes(known, is_dep[~missing])
        merged, (cells, deps) = _merge_keyed(self._classes, (self._cells, self._deposits),
                                             keys, (cells, deps))
        if merged.size > self.max_classes:
            raise InputError(
                f"evidence has more than {self.max_classes} distinct values; put continuous "
                "evidence into classes first (code_by_breaks) before weights of evidence")
        self._classes, self._cells, self._deposits = merged, cells, deps

    def merge(self, other: ClassCounts) -> ClassCounts:
        """Return new counts holding the sum of ``self`` and ``other``."""
        out = ClassCounts(max(self.max_classes, other.max_classes))
        out._classes, (out._cells, out._deposits) = _merge_keyed(
            self._classes, (self._cells, self._deposits), other._classes, (other._cells, other._deposits))
        for name in ("nodata_cells", "nodata_deposit_cells", "merged_deposits", "outside_deposits"):
            setattr(out, name, getattr(self, name) + getattr(other, name))
        return out

    def recode(self, mapping: Mapping[float, float]) -> ClassCounts:
        """Return counts with classes renamed by ``mapping`` (classes mapped alike are pooled).

        Every class present must appear in ``mapping``.
        """
        missing = [float(k) for k in self._classes if float(k) not in mapping]
        if missing:
            raise ParameterError(f"recode mapping has no entry for classes {missing[:10]}")
        new = np.array([float(mapping[float(k)]) for k in self._classes], dtype=np.float64)
        keys, inverse = np.unique(new, return_inverse=True)
        out = ClassCounts(self.max_classes)
        out._classes = keys
        out._cells = np.bincount(inverse.reshape(-1), weights=self._cells,
                                 minlength=keys.size).astype(np.int64)
        out._deposits = np.bincount(inverse.reshape(-1), weights=self._deposits,
                                    minlength=keys.size).astype(np.int64)
        for name in ("nodata_cells", "nodata_deposit_cells", "merged_deposits", "outside_deposits"):
            setattr(out, name, getattr(self, name))
        return out

    @property
    def classes(self) -> np.ndarray:
        """Sorted distinct class codes seen on known cells (float64)."""
        return self._classes.copy()

    @property
    def cells(self) -> np.ndarray:
        """Cells per class (int64), aligned with :attr:`classes`."""
        return self._cells.copy()

    @property
    def deposit_cells(self) -> np.ndarray:
        """Deposit cells per class (int64), aligned with :attr:`classes`."""
        return self._deposits.copy()

    @property
    def known_cells(self) -> int:
        """Cells inside the study area where the evidence is known."""
        return int(self._cells.sum())

    @property
    def known_deposit_cells(self) -> int:
        """Deposit cells on known evidence."""
        return int(self._deposits.sum())

    @property
    def total_cells(self) -> int:
        """Cells inside the study area, known or not."""
        return self.known_cells + self.nodata_cells

    @property
    def total_deposit_cells(self) -> int:
        """Deposit cells inside the study area, on known evidence or not."""
        return self.known_deposit_cells + self.nodata_deposit_cells

    def as_dict(self) -> dict:
        """Plain-data summary for a lineage record or a report."""
        return {"classes": self._classes.tolist(), "cells": self._cells.tolist(),
                "deposit_cells": self._deposits.tolist(), "nodata_cells": self.nodata_cells,
                "nodata_deposit_cells": self.nodata_deposit_cells,
                "merged_deposits": self.merged_deposits, "outside_deposits": self.outside_deposits}

    def __eq__(self, other) -> bool:
        if not isinstance(other, ClassCounts):
            return NotImplemented
        return self.as_dict() == other.as_dict()

    def __repr__(self) -> str:
        return (f"ClassCounts({self._classes.size} classes, {self.known_cells} known cells, "
                f"{self.known_deposit_cells} deposit cells, {self.nodata_cells} nodata cells)")


def code_by_breaks(values, breaks, kind: str) -> np.ndarray:
    """Turn continuous evidence into class codes for ordered weights of evidence.

    Parameters
    ----------
    values : ndarray
        Evidence values (e.g. distance in CRS units); NaN is nodata.
    breaks : array_like
        Strictly increasing thresholds t_1 < … < t_m, in the values' units.
    kind : {"ascending", "descending"}
        The direction the table will be built in.

    Returns
    -------
    ndarray of float64
        Codes, NaN where ``values`` is NaN. For ``ascending`` the codes run
        1 … m + 1 and the pattern "code ≤ k" is exactly "value ≤ t_k"; for
        ``descending`` they run 0 … m and "code ≥ k" is "value ≥ t_k". So the
        row for class k of the table is the pattern of break t_k.
    """
    edges = np.asarray(breaks, dtype=np.float64).reshape(-1)
    if edges.size == 0 or np.any(~np.isfinite(edges)) or np.any(np.diff(edges) <= 0):
        raise ParameterError(f"breaks must be finite and strictly increasing, got {edges.tolist()}")
    x = np.asarray(values, dtype=np.float64)
    if kind == "ascending":
        codes = np.digitize(x, edges, right=True) + 1.0
    elif kind == "descending":
        codes = np.digitize(x, edges, right=False).astype(np.float64)
    else:
        raise ParameterError(f"code_by_breaks kind must be 'ascending' or 'descending', got {kind!r}")
    return np.where(np.isnan(x), np.nan, codes)
