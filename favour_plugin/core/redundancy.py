"""Proxy redundancy before overlay: how alike the leaves' memberships are, on a lattice of cells.

Two proxies whose memberships rise and fall together say the same thing
twice, and an overlay that takes both weighs that criterion double. The
check is Pearson's correlation r of every pair of leaves' μ over a sample of
cells; pairs with |r| above a threshold (0.8 by default: common practice,
no source) are flagged.

The sample is a regular lattice of cells: every k-th row and every k-th
column, starting half a step in, with k the smallest whole step that keeps
the lattice within the number of cells asked for (every cell when the grid
is that small). A lattice covers the grid evenly and is the same at every
run, so the figures can be checked and repeated.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import ParameterError

#: |r| above which a pair is flagged (common practice, no source).
DEFAULT_THRESHOLD = 0.8
#: Cells the lattice holds at most, by default.
DEFAULT_SAMPLE = 100_000


@dataclass(frozen=True)
class Lattice:
    """Every ``step``-th row and column of a grid: the sampled ``rows`` and ``columns`` (cell indices)."""

    step: int
    rows: np.ndarray
    columns: np.ndarray

    @property
    def cells(self) -> int:
        """Number of cells in the lattice."""
        return int(self.rows.size * self.columns.size)

    def describe(self) -> dict:
        """Plain data for a result or a lineage."""
        return {"kind": "regular lattice of cells", "step": self.step,
                "first_row": int(self.rows[0]), "first_column": int(self.columns[0]),
                "rows": int(self.rows.size), "columns": int(self.columns.size), "cells": self.cells}


def lattice(height: int, width: int, sample_cells: int = DEFAULT_SAMPLE) -> Lattice:
    """Return the lattice of at most ``sample_cells`` cells over a ``height`` x ``width`` grid.

    Raises
    ------
    ParameterError
        A sample size that is not a whole number of at least 2 cells.
    """
    if isinstance(sample_cells, bool) or not isinstance(sample_cells, (int, np.integer)) \
            or sample_cells < 2:
        raise ParameterError(f"the sample must be a whole number of at least 2 cells, got {sample_cells!r}")
    step = max(1, math.ceil(math.sqrt(height * width / sample_cells)))
    while math.ceil(height / step) * math.ceil(width / step) > sample_cells:
        step += 1
    rows = np.arange(min(step // 2, height - 1), height, step)
    columns = np.arange(min(step // 2, width - 1), width, step)
    return Lattice(step, rows, columns)


def check_threshold(threshold) -> float:
    """Return the |r| threshold, or refuse one that is not strictly between 0 and 1."""
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float)) \
            or not math.isfinite(threshold) or not 0 < threshold < 1:
        raise ParameterError(f"the redundancy threshold on |r| must lie strictly between 0 and 1 "
                             f"(0.8 by default), got {threshold!r}")
    return float(threshold)


def correlations(samples: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Pearson r of every pair of columns over the rows where both are known.

    Parameters
    ----------
    samples : ndarray (cells × leaves)
        μ of each leaf on the sampled cells; NaN is nodata.

    Returns
    -------
    (r, n)
        ``r`` (leaves × leaves, NaN where a pair has fewer than 2 cells or a
        leaf is constant on them; 1 on the diagonal of a varying leaf) and
        ``n``, the cells each pair was computed on.

    Notes
    -----
    r = Σ (a − ā)(b − b̄) / sqrt(Σ (a − ā)² Σ (b − b̄)²) over the pair's
    common cells (pairwise-complete), the statistic numpy.corrcoef computes.
    """
    x = np.asarray(samples, dtype=np.float64)
    leaves = x.shape[1]
    r = np.full((leaves, leaves), np.nan)
    n = np.zeros((leaves, leaves), dtype=np.int64)
    known = ~np.isnan(x)
    for i in range(leaves):
        for j in range(i, leaves):
            both = known[:, i] & known[:, j]
            n[i, j] = n[j, i] = int(both.sum())
            if n[i, j] < 2:
                continue
            a = x[both, i] - x[both, i].mean()
            b = x[both, j] - x[both, j].mean()
            scale = math.sqrt(float(np.dot(a, a)) * float(np.dot(b, b)))
            if scale > 0:
                r[i, j] = r[j, i] = float(np.clip(np.dot(a, b) / scale, -1.0, 1.0))
    return r, n


def redundant_pairs(names: list[str], r: np.ndarray, n: np.ndarray, threshold: float) -> list[dict]:
    """Every pair of leaves with its r, its cells and whether |r| exceeds ``threshold``; largest |r| first."""
    pairs = []
    for i in range(len(names)):
        for j in range(i + 1, len(names)):
            value = None if np.isnan(r[i, j]) else float(r[i, j])
            note = "" if value is not None else "r undefined: fewer than 2 common cells or a constant μ"
            pairs.append({"leaf_a": names[i], "leaf_b": names[j], "r": value, "cells": int(n[i, j]),
                          "flagged": value is not None and abs(value) > threshold, "note": note})
    return sorted(pairs, key=lambda p: -1.0 if p["r"] is None else -abs(p["r"]))
