"""Weights of evidence: weights, contrast, best cut, posterior probability, independence checks.

The statistics rest on counts in unit cells, and counts stream in block by
block: a raster layer feeds :class:`ClassCounts` (one evidence layer) or
:class:`ConditionCounts` (several layers at once) with one block of class
codes and deposit counts at a time, and nothing that grows with the grid is
held. Everything after counting works on the small per-class or
per-condition tables.

Counting rules
--------------
Study area
    Cells where ``area_mask`` is False are outside the study area and count
    for nothing; deposits there are counted as ``outside_deposits`` and
    reported.
Deposit cells
    A deposit layer comes in as the number of deposit points per cell. A cell
    holding one or more deposits counts once, as one deposit cell (the
    weights model one deposit per unit cell at most); the extra points are
    counted as ``merged_deposits`` and reported.
Missing evidence (nodata, NaN in core)
    Weights of a layer are computed over the area where that layer is known:
    its own N and n_D. Cells and deposits on nodata are counted
    (``nodata_cells``, ``nodata_deposit_cells``) and reported, never dropped.
    In the posterior a missing layer has weight 0 and adds the missing-data
    variance of Agterberg, Bonham-Carter & Wright (1990) [ABW90]_.
Areas
    area in unit cells = cells × ``cell_area_km2`` / ``unit_cell_km2``.
    The caller converts the grid's cell area to km² (m² or CRS units² times
    a factor) before calling.

Counts of one pattern, following Bonham-Carter (1994, ch. 9) [BC94]_:

====  ===================================================
a     deposits on the pattern
b     area on the pattern without deposits (unit cells)
c     deposits off the pattern
d     area off the pattern without deposits (unit cells)
====  ===================================================

so that n_D = a + c and N − n_D = b + d over the known area.

Undefined weights
-----------------
A weight is undefined when a count it needs is zero or negative: no
deposits on (a = 0) or off (c = 0) the pattern, or no deposit-free unit
cells (b ≤ 0 or d ≤ 0, which also means the unit cell may be too large).
Such a row carries ``None`` in the undefined columns, ``flag = "undefined"``
and a ``note`` that says why; no ±inf or NaN reaches a table. Only when the
caller asks (``small_count="haldane"``) are 0.5 added to each of a, b, c and
d of a row with a zero count, the Haldane–Anscombe correction [Hal56]_
[Ans56]_; the row is then flagged ``"adjusted"``. Rows whose pattern is
empty or covers the whole known area are structural (there is nothing to
contrast) and are never adjusted.

References
----------
Listed here once; details marked "(from memory)" were recalled, not looked up.

.. [ABW90] Agterberg, F.P., Bonham-Carter, G.F. and Wright, D.F. (1990).
   Statistical pattern integration for mineral exploration. In Gaál, G. and
   Merriam, D.F. (eds), Computer Applications in Resource Estimation:
   Prediction and Assessment for Metals and Petroleum. Pergamon, Oxford,
   1–21. (from memory: pages; the missing-data variance formula.)
.. [BC94] Bonham-Carter, G.F. (1994). Geographic Information Systems for
   Geoscientists: Modelling with GIS. Pergamon, Oxford. Chapter 9.
   (from memory: the prior variance, the s(P) ≈ P·s(logit) practice and the
   n/T < 0.85 rule of thumb.)
.. [AC02] Agterberg, F.P. and Cheng, Q. (2002). Conditional independence
   test for weights-of-evidence modeling. Natural Resources Research 11(4),
   249–255. (from memory: volume and pages; s²(T) = Σ N_k² s²(P_k).)
.. [Agt14] Agterberg, F.P. (2014). Geomathematics: Theoretical Foundations,
   Applications and Future Developments. Springer, Cham. (from memory: the
   worked figure s(logit) = 0.401 at P = 0.069, s(P) ≈ 0.028.)
.. [Woo55] Woolf, B. (1955). On estimating the relation between blood group
   and disease. Annals of Human Genetics 19, 251–253.
.. [Hal56] Haldane, J.B.S. (1956). The estimation and significance of the
   logarithm of a ratio of frequencies. Annals of Human Genetics 20,
   309–311. (from memory)
.. [Ans56] Anscombe, F.J. (1956). On estimating binomial response
   relations. Biometrika 43, 461–464. (from memory)
.. [Yat34] Yates, F. (1934). Contingency tables involving small numbers and
   the χ² test. Supplement to the Journal of the Royal Statistical Society
   1, 217–235. (from memory)
.. [Coc54] Cochran, W.G. (1954). Some methods for strengthening the common
   χ² tests. Biometrics 10, 417–451. (from memory: the "expected counts of
   at least 5" rule.)
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import special

from .errors import GridMismatchError, InputError, NodataWarning, ParameterError, SmallSampleWarning
from .feedback import Feedback
from .jsonio import check_nesting, json_path
from .schema import load_validator

KINDS = ("binary", "categorical", "ascending", "descending")
SMALL_COUNT_RULES = (None, "haldane")
S_P_RULES = ("delta", "relative")

#: Schema of a weights table as :meth:`WeightsTable.as_dict` writes it.
TABLE_SCHEMA_FILE = "weights-table-v1.schema.json"

#: Default studentised-contrast level for a significant pattern: 1.96, the
#: two-sided 5 % point of the standard normal (common rule of thumb, no source).
DEFAULT_LEVEL = 1.96

#: Ratio n/T below which conditional independence is in doubt (rule of thumb,
#: Bonham-Carter 1994, from memory).
CI_RATIO_RULE = 0.85

#: Expected counts below this make a chi-square p-value rough (Cochran 1954,
#: from memory).
MIN_EXPECTED = 5.0

#: Distinct class values one :class:`ClassCounts` keeps before it refuses:
#: continuous evidence must be put into classes first (:func:`code_by_breaks`).
MAX_CLASSES = 10_000

#: Distinct conditions (combinations of classes) one :class:`ConditionCounts` keeps.
MAX_CONDITIONS = 200_000

#: Column names of a weights table, in order.
COLUMNS = ("class", "area_units", "deposits", "w_plus", "s_w_plus", "w_minus", "s_w_minus",
           "contrast", "s_contrast", "studentized_contrast", "p_value", "flag", "note",
           "class_area_units", "class_deposits")


# --------------------------------------------------------------------------- counting


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


# --------------------------------------------------------------------------- weights


def unit_cells(cells, cell_area_km2: float, unit_cell_km2: float):
    """Return an area in unit cells: cells × cell area (km²) / unit-cell area (km²)."""
    _check_areas(cell_area_km2, unit_cell_km2)
    return np.asarray(cells, dtype=np.float64) * (cell_area_km2 / unit_cell_km2)


def _check_areas(cell_area_km2, unit_cell_km2) -> None:
    for name, value in (("cell_area_km2", cell_area_km2), ("unit_cell_km2", unit_cell_km2)):
        if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)) \
                or not math.isfinite(value) or value <= 0:
            raise ParameterError(f"{name} must be a positive number of km², got {value!r}")


def pattern_weights(a, b, c, d, small_count: str | None = None) -> dict[str, np.ndarray]:
    """Weights of evidence of binary patterns from their counts, vectorised.

    Parameters
    ----------
    a, b, c, d : array_like
        Counts per pattern (see the module notes): a deposits on the
        pattern, b deposit-free unit cells on it, c deposits off it, d
        deposit-free unit cells off it. Broadcast together.
    small_count : {None, "haldane"}
        None leaves undefined weights undefined; ``"haldane"`` adds 0.5 to
        all four counts of a pattern with a zero count [Hal56]_ [Ans56]_.

    Returns
    -------
    dict of ndarray
        ``w_plus, s_w_plus, w_minus, s_w_minus, contrast, s_contrast,
        studentized_contrast, p_value`` (float64, NaN where undefined) and
        ``flag, note`` (object arrays of str). Callers that show a table turn
        NaN into None (:func:`weights_table` does).

    Notes
    -----
    From Bonham-Carter (1994, ch. 9) [BC94]_, with n_D = a + c and
    N − n_D = b + d::

        W+ = ln[(a / n_D) / (b / (N − n_D))]     s²(W+) = 1/a + 1/b
        W− = ln[(c / n_D) / (d / (N − n_D))]     s²(W−) = 1/c + 1/d
        C  = W+ − W− = ln(a·d / (b·c))           s²(C)  = s²(W+) + s²(W−)

    C is the log odds ratio of the 2×2 table [[a, b], [c, d]] and s(C) its
    Woolf (1955) [Woo55]_ standard error. The studentised contrast C / s(C)
    is referred to the standard normal; ``p_value`` is two-sided,
    2·(1 − Φ(|C / s(C)|)), because the sign of an association is not known
    before looking (a categorical class, or a generalisation into positive
    and negative groups, uses both signs), and the default level 1.96 is the
    two-sided 5 % point.
    """
    a, b, c, d = np.broadcast_arrays(*(np.asarray(v, dtype=np.float64) for v in (a, b, c, d)))
    shape = a.shape
    # Work on flat copies: np.nonzero needs at least one dimension.
    a, b, c, d = (v.reshape(-1).copy() for v in (a, b, c, d))
    if small_count not in SMALL_COUNT_RULES:
        raise ParameterError(f"small_count must be None or 'haldane', got {small_count!r}")
    empty = (a + b) <= 0
    full = (c + d) <= 0
    structural = empty | full
    reasons = _reasons(a, b, c, d, empty, full)
    flag = np.full(a.shape, "", dtype=object)
    note = np.full(a.shape, "", dtype=object)
    if small_count == "haldane":
        zero = (a == 0) | (b == 0) | (c == 0) | (d == 0)
        fixable = zero & ~structural & (b >= 0) & (d >= 0)
        for index in zip(*np.nonzero(fixable)):
            flag[index] = "adjusted"
            note[index] = ("Haldane–Anscombe: 0.5 added to a, b, c and d because "
                           + "; ".join(reasons[index]))
            reasons[index] = []
        a, b, c, d = (np.where(fixable, v + 0.5, v) for v in (a, b, c, d))
    plus_ok = (a > 0) & (b > 0)
    minus_ok = (c > 0) & (d > 0)
    both = plus_ok & minus_ok
    with np.errstate(divide="ignore", invalid="ignore"):
        n_dep = a + c
        n_free = b + d
        w_plus = np.where(plus_ok, np.log(a / n_dep) - np.log(b / n_free), np.nan)
        v_plus = np.where(plus_ok, 1.0 / a + 1.0 / b, np.nan)
        w_minus = np.where(minus_ok, np.log(c / n_dep) - np.log(d / n_free), np.nan)
        v_minus = np.where(minus_ok, 1.0 / c + 1.0 / d, np.nan)
    contrast = np.where(both, w_plus - w_minus, np.nan)
    s_contrast = np.where(both, np.sqrt(v_plus + v_minus), np.nan)
    z = np.where(both, contrast / s_contrast, np.nan)
    # 2·(1 − Φ(|z|)) through the complementary error function keeps tiny p-values exact.
    p_value = np.where(both, special.erfc(np.abs(z) / math.sqrt(2.0)), np.nan)
    for index in zip(*np.nonzero(~both)):
        undefined = [name for name, ok in (("W+", plus_ok[index]), ("W−", minus_ok[index])) if not ok]
        text = "; ".join(reasons[index]) or "a count is not positive"
        flag[index] = "undefined"
        note[index] = (f"{text}: {' and '.join(undefined)} and the contrast undefined"
                       + (f" ({note[index]})" if note[index] else ""))
    out = {"w_plus": w_plus, "s_w_plus": np.sqrt(v_plus), "w_minus": w_minus,
           "s_w_minus": np.sqrt(v_minus), "contrast": contrast, "s_contrast": s_contrast,
           "studentized_contrast": z, "p_value": p_value, "flag": flag, "note": note}
    return {key: value.reshape(shape) for key, value in out.items()}


def _reasons(a, b, c, d, empty, full) -> np.ndarray:
    """Return an object array of lists: why each pattern's weights would be undefined."""
    reasons = np.empty(a.shape, dtype=object)
    reasons.fill(())
    suspect = empty | full | (a <= 0) | (b <= 0) | (c <= 0) | (d <= 0)
    for index in zip(*np.nonzero(suspect)):
        why = []
        if empty[index]:
            why.append("the pattern is empty")
        elif full[index]:
            why.append("the pattern covers the whole known area")
        else:
            if a[index] == 0:
                why.append("no deposits on the pattern (a = 0)")
            if c[index] == 0:
                why.append("every deposit is on the pattern (c = 0)")
            if b[index] <= 0:
                why.append(f"no deposit-free unit cells on the pattern (b = {b[index]:.4g}; "
                           "is the unit cell too large?)")
            if d[index] <= 0:
                why.append(f"no deposit-free unit cells off the pattern (d = {d[index]:.4g}; "
                           "is the unit cell too large?)")
        reasons[index] = why
    return reasons


@dataclass
class WeightsTable:
    """A weights-of-evidence table for one evidence layer, and the counts behind it.

    ``rows`` holds one dict per class with the keys of :data:`COLUMNS`;
    numbers are floats, undefined ones are None. For ``binary`` evidence there
    is one row (class 1, the pattern). For ``categorical`` evidence each class
    is a pattern against all other classes. For ``ascending`` evidence the row
    of class t is the pattern "value ≤ t", for ``descending`` "value ≥ t":
    ``area_units`` and ``deposits`` then describe the cumulative pattern and
    ``class_area_units``/``class_deposits`` the class alone.

    The summary attributes are over the study area: ``area_units`` and
    ``deposits`` on known evidence (N and n_D of the weights),
    ``nodata_area_units`` and ``nodata_deposits`` on missing evidence, and the
    merged and outside deposit counts of :class:`ClassCounts`.
    """

    name: str
    kind: str
    rows: list[dict]
    unit_cell_km2: float
    cell_area_km2: float
    small_count: str | None
    area_units: float
    deposits: int
    nodata_area_units: float
    nodata_deposits: int
    merged_deposits: int
    outside_deposits: int
    columns: tuple = field(default=COLUMNS)

    def row(self, cls: float) -> dict:
        """Return the row of class ``cls``."""
        for row in self.rows:
            if row["class"] == float(cls):
                return row
        raise ParameterError(f"{self.name}: no class {cls!r} in the weights table "
                             f"(classes: {[r['class'] for r in self.rows]})")

    @property
    def flagged(self) -> list[dict]:
        """Rows whose weights are undefined or were adjusted."""
        return [row for row in self.rows if row["flag"]]

    def as_dict(self) -> dict:
        """Plain-data form for a lineage record, a CSV writer or a report."""
        return {"name": self.name, "kind": self.kind, "unit_cell_km2": self.unit_cell_km2,
                "cell_area_km2": self.cell_area_km2, "small_count": self.small_count,
                "area_units": self.area_units, "deposits": self.deposits,
                "nodata_area_units": self.nodata_area_units, "nodata_deposits": self.nodata_deposits,
                "merged_deposits": self.merged_deposits, "outside_deposits": self.outside_deposits,
                "columns": list(self.columns), "rows": [dict(row) for row in self.rows]}

    @classmethod
    def from_dict(cls, doc: Mapping) -> WeightsTable:
        """Rebuild a table from :meth:`as_dict`'s output (e.g. read back from a lineage record).

        The document is checked against ``schema/weights-table-v1.schema.json``
        first (after its nesting, without recursion), so a damaged or
        hand-edited table is refused with the fields at fault named.

        Raises
        ------
        ParameterError
            Not a weights table: a field missing or of the wrong type or range,
            e.g. ``rows[2].w_plus: must be of type number or null``.
        """
        if not isinstance(doc, Mapping):
            raise ParameterError(f"not a weights table record: expected an object, got "
                                 f"{type(doc).__name__}")
        check_nesting(doc, error=ParameterError, source="not a weights table record")
        issues = load_validator(TABLE_SCHEMA_FILE).issues(doc)
        if issues:
            listed = "; ".join(f"{json_path(i.path) or 'the table'}: {i.message}" for i in issues[:10])
            more = f"; and {len(issues) - 10} more" if len(issues) > 10 else ""
            raise ParameterError(f"not a weights table record: {listed}{more}")
        return cls(name=doc["name"], kind=doc["kind"], rows=[dict(r) for r in doc["rows"]],
                   unit_cell_km2=float(doc["unit_cell_km2"]),
                   cell_area_km2=float(doc["cell_area_km2"]), small_count=doc.get("small_count"),
                   area_units=float(doc["area_units"]), deposits=int(doc["deposits"]),
                   nodata_area_units=float(doc["nodata_area_units"]),
                   nodata_deposits=int(doc["nodata_deposits"]),
                   merged_deposits=int(doc["merged_deposits"]),
                   outside_deposits=int(doc["outside_deposits"]))

    def to_csv(self, level: float = DEFAULT_LEVEL) -> str:
        """Return the table as CSV text: :data:`CSV_COLUMNS`, one row per class or threshold.

        Undefined numbers are empty fields; ``significant`` is ``yes`` where
        |C / s(C)| ≥ ``level`` and ``no`` otherwise (empty when undefined).
        """
        buffer = io.StringIO()
        writer = csv.writer(buffer, lineterminator="\n")
        writer.writerow(CSV_COLUMNS)
        for row in self.rows:
            z = row["studentized_contrast"]
            significant = "" if z is None else ("yes" if abs(z) >= level else "no")
            values = {**row, "significant": significant}
            writer.writerow(["" if values[c] is None else _csv_number(values[c]) for c in CSV_COLUMNS])
        return buffer.getvalue()


#: Columns of the CSV form of a weights table, in order.
CSV_COLUMNS = ("class", "area_units", "deposits", "w_plus", "s_w_plus", "w_minus", "s_w_minus",
               "contrast", "s_contrast", "studentized_contrast", "p_value", "significant", "flag",
               "note", "class_area_units", "class_deposits")


def _csv_number(value):
    """Render a float with full precision (repr) and anything else as it is."""
    if isinstance(value, float):
        return repr(int(value)) if value.is_integer() and abs(value) < 1e15 else repr(value)
    return value


def weights_membership(layer: LayerWeights, source: str = "") -> dict:
    """Return a tree-leaf membership that scores each class of an evidence layer by its weight.

    Parameters
    ----------
    layer : LayerWeights
        From :func:`layer_weights` (binary, categorical or an ordered table at a cut).
    source : str
        Where the weights came from (a table file), kept in the membership for the record.

    Returns
    -------
    dict
        ``{"type": "weights", "weights": {code: W}, "default": None, "source": ...}``,
        the membership type :func:`favour_plugin.core.membership.weights_score` evaluates.

    Notes
    -----
    This is how an analogue district's statistics score a greenfield one:
    the weights are counted where deposits are known and the leaf applies
    them, through μ = 1 / (1 + exp(−W)), to the same evidence mapped in the
    new ground. See :func:`favour_plugin.core.membership.weights_score` for
    the scheme and its source.
    """
    weights = {_code_key(k): float(w) for k, w in zip(layer.classes, layer.weights)}
    out = {"type": "weights", "weights": weights, "default": None}
    if source:
        out["source"] = source
    return out


def _code_key(value: float) -> str:
    """Return a class code as tree files write it: ``"3"``, ``"-1"``, ``"2.5"``."""
    value = float(value)
    return str(int(value)) if value.is_integer() else repr(value)


def _plain(value):
    """Return a float, or None for NaN."""
    value = float(value)
    return None if math.isnan(value) else value


def _check_counts(counts: ClassCounts, kind: str, name: str, small_count) -> None:
    """Raise InputError for evidence or deposits that weights of evidence cannot use."""
    if kind not in KINDS:
        raise ParameterError(f"{name}: kind must be one of {', '.join(KINDS)}, got {kind!r}")
    if counts.total_cells == 0:
        raise InputError(f"{name}: no cells were counted inside the study area")
    if counts.known_cells == 0:
        raise InputError(f"{name}: the evidence is nodata in every one of the {counts.nodata_cells} "
                         "cells of the study area")
    classes = counts.classes
    if kind in ("binary", "categorical") and np.any(classes != np.round(classes)):
        bad = classes[classes != np.round(classes)][:5].tolist()
        raise InputError(f"{name}: {kind} evidence needs whole-number class codes, found {bad}; "
                         "use 'ascending' or 'descending' for ordered values")
    if kind == "binary":
        extra = classes[(classes != 0) & (classes != 1)]
        if extra.size:
            raise InputError(f"{name}: binary evidence takes 1 (present), 0 (absent) and nodata, "
                             f"found {extra[:5].tolist()}; use 'categorical' for more classes")
        if 1.0 not in classes:
            raise InputError(f"{name}: binary evidence has no cell with value 1; the pattern is empty")
        if 0.0 not in classes:
            raise InputError(f"{name}: binary evidence has no cell with value 0; the pattern covers "
                             "the whole known area and there is nothing to contrast")
    if counts.known_deposit_cells == 0:
        raise InputError(
            f"{name}: no deposit lies on known evidence ({counts.nodata_deposit_cells} on nodata, "
            f"{counts.outside_deposits} outside the study area); weights need deposits")
    if classes.size == 1:
        raise InputError(f"{name}: the evidence has a single class ({classes[0]:g}) on its known area; "
                         "there is nothing to contrast")
    with_deposits = classes[counts.deposit_cells > 0]
    if with_deposits.size == 1 and small_count is None:
        raise InputError(
            f"{name}: all {counts.known_deposit_cells} deposits on known evidence fall in class "
            f"{with_deposits[0]:g}, so no contrast can be computed for any class; check the deposits "
            "and the classes, or ask for small_count='haldane'")


def weights_table(counts: ClassCounts, kind: str, unit_cell_km2: float, cell_area_km2: float,
                  small_count: str | None = None, name: str = "evidence",
                  feedback: Feedback | None = None) -> WeightsTable:
    """Build the weights-of-evidence table of one evidence layer.

    Parameters
    ----------
    counts : ClassCounts
        The layer's counts over the study area.
    kind : {"binary", "categorical", "ascending", "descending"}
        How classes make patterns (see :class:`WeightsTable`).
    unit_cell_km2 : float
        Area one deposit stands for, km² (the unit cell).
    cell_area_km2 : float
        Area of one grid cell, km².
    small_count : {None, "haldane"}
        The small-count rule (module notes); None by default.
    name : str
        The layer's name, used in messages.
    feedback : Feedback, optional
        Receives warnings: flagged rows (SmallSampleWarning) and deposits on
        nodata (NodataWarning); and notes on merged and outside deposits.

    Returns
    -------
    WeightsTable

    Raises
    ------
    InputError
        No cells, all-nodata evidence, no deposits on known evidence, a
        single class, all deposits in one class (unless ``small_count``),
        non-integer codes for binary or categorical evidence, codes other
        than 0/1 for binary evidence.
    ParameterError
        A bad kind, small-count rule or area, or a unit cell so large that
        the known area holds no more unit cells than deposits.

    Notes
    -----
    Weights, contrast and studentised contrast as in :func:`pattern_weights`
    ([BC94]_, [Woo55]_), over the known area of the layer.
    """
    feedback = feedback or Feedback()
    _check_areas(cell_area_km2, unit_cell_km2)
    if small_count not in SMALL_COUNT_RULES:
        raise ParameterError(f"{name}: small_count must be None or 'haldane', got {small_count!r}")
    _check_counts(counts, kind, name, small_count)
    scale = cell_area_km2 / unit_cell_km2
    classes = counts.classes
    cls_area = counts.cells * scale
    cls_dep = counts.deposit_cells.astype(np.float64)
    area_n = counts.known_cells * scale
    dep_n = float(counts.known_deposit_cells)
    if area_n <= dep_n:
        raise ParameterError(
            f"{name}: the known area is {area_n:.4g} unit cells for {dep_n:g} deposits; the unit cell "
            f"({unit_cell_km2:g} km²) is too large for these deposits")
    if kind == "binary":
        keep = classes == 1.0
        pat_area, pat_dep = cls_area[keep], cls_dep[keep]
        row_classes, row_area, row_dep = classes[keep], cls_area[keep], cls_dep[keep]
    else:
        row_classes, row_area, row_dep = classes, cls_area, cls_dep
        if kind == "categorical":
            pat_area, pat_dep = cls_area, cls_dep
        elif kind == "ascending":
            pat_area, pat_dep = np.cumsum(cls_area), np.cumsum(cls_dep)
        else:
            pat_area, pat_dep = np.cumsum(cls_area[::-1])[::-1], np.cumsum(cls_dep[::-1])[::-1]
    a = pat_dep
    b = pat_area - pat_dep
    c = dep_n - pat_dep
    d = (area_n - pat_area) - c
    # Cumulative sums of floats can leave a whisker where the pattern is the whole area.
    whole = np.isclose(pat_area, area_n, rtol=1e-12, atol=0.0)
    c, d = np.where(whole, 0.0, c), np.where(whole, 0.0, d)
    result = pattern_weights(a, b, c, d, small_count)
    rows = []
    for i, value in enumerate(row_classes):
        row = {"class": float(value), "area_units": float(pat_area[i]), "deposits": round(float(a[i]))}
        for key in ("w_plus", "s_w_plus", "w_minus", "s_w_minus", "contrast", "s_contrast",
                    "studentized_contrast", "p_value"):
            row[key] = _plain(result[key][i])
        row["flag"] = str(result["flag"][i])
        row["note"] = str(result["note"][i])
        row["class_area_units"] = float(row_area[i])
        row["class_deposits"] = round(float(row_dep[i]))
        rows.append(row)
    table = WeightsTable(
        name=name, kind=kind, rows=rows, unit_cell_km2=float(unit_cell_km2),
        cell_area_km2=float(cell_area_km2), small_count=small_count, area_units=float(area_n),
        deposits=int(dep_n), nodata_area_units=float(counts.nodata_cells * scale),
        nodata_deposits=counts.nodata_deposit_cells, merged_deposits=counts.merged_deposits,
        outside_deposits=counts.outside_deposits)
    report_table(table, feedback)
    return table


def report_table(table: WeightsTable, feedback: Feedback) -> None:
    """Send the table's caveats to ``feedback``: flagged rows, deposits on nodata, merged, outside."""
    for row in table.flagged:
        feedback.warning(f"{table.name}: class {row['class']:g}: {row['note']}", SmallSampleWarning)
    if table.nodata_deposits:
        feedback.warning(
            f"{table.name}: {table.nodata_deposits} deposit cells lie on nodata evidence; they are "
            "left out of this layer's weights and count in the prior and the posterior checks",
            NodataWarning)
    if table.merged_deposits:
        feedback.info(f"{table.name}: {table.merged_deposits} deposits share a cell with another and "
                      "were merged (each cell counts once)")
    if table.outside_deposits:
        feedback.info(f"{table.name}: {table.outside_deposits} deposits lie outside the study area "
                      "and were not counted")


# --------------------------------------------------------------------------- choosing patterns


@dataclass(frozen=True)
class BestCut:
    """The threshold of an ordered table with the largest significant contrast.

    ``found`` is False when no threshold passes; ``reason`` says why, and
    the other figures describe the largest studentised contrast seen (None
    if no row has a contrast).
    """

    found: bool
    threshold: float | None
    contrast: float | None
    studentized_contrast: float | None
    level: float
    kind: str
    reason: str = ""


def best_cut(table: WeightsTable, level: float = DEFAULT_LEVEL) -> BestCut:
    """Pick the threshold of maximum contrast among those significant at ``level``.

    Parameters
    ----------
    table : WeightsTable
        An ``ascending`` or ``descending`` table.
    level : float
        Minimum studentised contrast C / s(C); default 1.96 (two-sided 5 %
        point of the standard normal, a common rule of thumb).

    Returns
    -------
    BestCut
        The threshold t (the pattern is value ≤ t, or ≥ t), its contrast and
        studentised contrast. Ties in contrast go to the larger studentised
        contrast.

    Notes
    -----
    Maximum contrast subject to a significant studentised contrast, the
    usual way to binarise ordered evidence (Bonham-Carter 1994, ch. 9)
    [BC94]_. Only positive associations qualify (C / s(C) ≥ level).
    """
    if table.kind not in ("ascending", "descending"):
        raise ParameterError(f"{table.name}: best_cut needs an ascending or descending table, "
                             f"not {table.kind!r}")
    if not (isinstance(level, (int, float)) and math.isfinite(level) and level > 0):
        raise ParameterError(f"{table.name}: level must be a positive number, got {level!r}")
    rows = [r for r in table.rows if r["contrast"] is not None]
    if not rows:
        return BestCut(False, None, None, None, float(level), table.kind,
                       "no threshold has a defined contrast")
    passing = [r for r in rows if r["studentized_contrast"] >= level]
    if not passing:
        top = max(rows, key=lambda r: r["studentized_contrast"])
        return BestCut(False, top["class"], top["contrast"], top["studentized_contrast"], float(level),
                       table.kind, f"no threshold has a studentised contrast ≥ {level:g} (largest "
                       f"{top['studentized_contrast']:.3g} at {top['class']:g})")
    best = max(passing, key=lambda r: (r["contrast"], r["studentized_contrast"]))
    return BestCut(True, best["class"], best["contrast"], best["studentized_contrast"], float(level),
                   table.kind)


@dataclass
class Generalisation:
    """Categorical evidence pooled into fewer classes by the sign and significance of its weights.

    ``mapping`` sends each original class to its group code; ``groups`` lists
    the original classes per code; ``counts`` and ``table`` are the pooled
    counts and their new weights table.
    """

    mode: str
    level: float
    mapping: dict
    groups: dict
    counts: ClassCounts
    table: WeightsTable


#: Group codes of :func:`generalise`.
POSITIVE, NEUTRAL, NEGATIVE = 1.0, 0.0, -1.0


def generalise(counts: ClassCounts, table: WeightsTable, mode: str = "ternary",
               level: float = DEFAULT_LEVEL, feedback: Feedback | None = None) -> Generalisation:
    """Pool the classes of categorical evidence into a binary or ternary layer.

    Parameters
    ----------
    counts : ClassCounts
        The counts the table was built from.
    table : WeightsTable
        A ``categorical`` table.
    mode : {"ternary", "binary"}
        ``ternary``: classes whose studentised contrast is ≥ ``level`` go to
        group 1 (positive), ≤ −``level`` to group −1 (negative), the rest to
        group 0 (neutral); the pooled layer is categorical. ``binary``: the
        positive classes become the pattern (1), all others 0; the pooled
        layer is binary.
    level : float
        Significance level on the studentised contrast; default 1.96.
    feedback : Feedback, optional
        Passed on to the new table.

    Returns
    -------
    Generalisation

    Notes
    -----
    Classes with an undefined contrast join the neutral group (ternary) or
    the absent group (binary); their note is kept in the original table.
    Pooling by sign and significance of the class weights follows the
    practice described by Bonham-Carter (1994, ch. 9) [BC94]_.
    """
    if table.kind != "categorical":
        raise ParameterError(f"{table.name}: generalise needs a categorical table, not {table.kind!r}")
    if mode not in ("ternary", "binary"):
        raise ParameterError(f"{table.name}: generalise mode must be 'ternary' or 'binary', got {mode!r}")
    mapping = {}
    for row in table.rows:
        z = row["studentized_contrast"]
        if z is not None and z >= level:
            mapping[row["class"]] = POSITIVE
        elif z is not None and z <= -level and mode == "ternary":
            mapping[row["class"]] = NEGATIVE
        else:
            mapping[row["class"]] = NEUTRAL
    codes = set(mapping.values())
    if POSITIVE not in codes and mode == "binary":
        raise InputError(f"{table.name}: no class has a studentised contrast ≥ {level:g}; there is "
                         "no positive pattern to keep")
    if len(codes) == 1:
        raise InputError(f"{table.name}: every class falls in one group at level {level:g}; the "
                         "generalised layer would have nothing to contrast")
    pooled = counts.recode(mapping)
    new_kind = "binary" if mode == "binary" else "categorical"
    new_table = weights_table(pooled, new_kind, table.unit_cell_km2, table.cell_area_km2,
                              table.small_count, f"{table.name} ({mode})", feedback)
    groups = {code: sorted(k for k, v in mapping.items() if v == code) for code in sorted(codes)}
    return Generalisation(mode, float(level), mapping, groups, pooled, new_table)


# --------------------------------------------------------------------------- posterior


@dataclass(frozen=True)
class LayerWeights:
    """The weight each class of one evidence layer adds to the posterior logit.

    ``classes`` sorted ascending; ``weights`` and ``variances`` (s² of the
    weight) per class; ``fractions`` the class's share of the layer's known
    area, used by the missing-data variance.
    """

    name: str
    classes: np.ndarray
    weights: np.ndarray
    variances: np.ndarray
    fractions: np.ndarray

    def __post_init__(self) -> None:
        arrays = [np.asarray(getattr(self, k), dtype=np.float64).reshape(-1)
                  for k in ("classes", "weights", "variances", "fractions")]
        if len({a.size for a in arrays}) != 1 or arrays[0].size == 0:
            raise ParameterError(f"{self.name}: classes, weights, variances and fractions must have "
                                 "one entry per class")
        if np.any(np.diff(arrays[0]) <= 0):
            raise ParameterError(f"{self.name}: classes must be sorted and distinct")
        if not all(np.all(np.isfinite(a)) for a in arrays):
            raise ParameterError(f"{self.name}: weights and variances must be finite")
        for key, value in zip(("classes", "weights", "variances", "fractions"), arrays):
            object.__setattr__(self, key, value)


def layer_weights(table: WeightsTable, cut: float | None = None) -> LayerWeights:
    """Turn a weights table into the per-class weights the posterior uses.

    Parameters
    ----------
    table : WeightsTable
        Binary: class 1 gets W+, class 0 gets W−. Categorical: each class
        gets its own W+ (the class against all others). Ascending or
        descending: ``cut`` is required, and classes on the pattern of row
        ``cut`` (≤ cut, or ≥ cut) get that row's W+, the others its W−.
    cut : float, optional
        Threshold for ordered tables, e.g. ``best_cut(table).threshold``.

    Returns
    -------
    LayerWeights

    Raises
    ------
    InputError
        A weight the layer needs is undefined (the message names the classes
        and why); pool classes with :func:`generalise`, choose another cut,
        or rebuild the table with ``small_count="haldane"``.
    """
    total = table.area_units
    if table.kind == "binary":
        row = table.row(1.0)
        classes = np.array([0.0, 1.0])
        pairs = [(row["w_minus"], row["s_w_minus"], row), (row["w_plus"], row["s_w_plus"], row)]
        fractions = np.array([total - row["area_units"], row["area_units"]]) / total
    elif table.kind == "categorical":
        if cut is not None:
            raise ParameterError(f"{table.name}: a cut applies to ordered tables only")
        classes = np.array([r["class"] for r in table.rows])
        pairs = [(r["w_plus"], r["s_w_plus"], r) for r in table.rows]
        fractions = np.array([r["class_area_units"] for r in table.rows]) / total
    else:
        if cut is None:
            raise ParameterError(f"{table.name}: an {table.kind} table needs a cut (see best_cut)")
        row = table.row(cut)
        classes = np.array([r["class"] for r in table.rows])
        on = classes <= row["class"] if table.kind == "ascending" else classes >= row["class"]
        pairs = [(row["w_plus"], row["s_w_plus"], row) if o else (row["w_minus"], row["s_w_minus"], row)
                 for o in on]
        fractions = np.array([r["class_area_units"] for r in table.rows]) / total
    bad = [(k, r) for k, (w, _, r) in zip(classes, pairs) if w is None]
    if bad:
        listed = "; ".join(f"class {k:g}: {r['note']}" for k, r in bad[:5])
        raise InputError(f"{table.name}: undefined weights for the posterior ({listed}); pool classes "
                         "(generalise), choose another cut, or use small_count='haldane'")
    return LayerWeights(table.name, classes, np.array([w for w, _, _ in pairs]),
                        np.array([s * s for _, s, _ in pairs]), fractions)


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


# --------------------------------------------------------------------------- independence checks


class ConditionCounts:
    """Cells and deposit cells per unique condition (combination of classes) of several layers.

    Parameters
    ----------
    names : sequence of str
        Layer names, in the order blocks are given.
    max_conditions : int
        Refuse more distinct conditions than this.

    Notes
    -----
    A condition is one class per layer, missing allowed. Counting rules as
    for :class:`ClassCounts`. The counts give the pairwise deposit tables and
    the predicted number of deposits T of the overall check, and the
    marginal of each layer equals that layer's :class:`ClassCounts`.
    """

    def __init__(self, names: Sequence[str], max_conditions: int = MAX_CONDITIONS) -> None:
        self.names = [str(n) for n in names]
        if not self.names:
            raise ParameterError("condition counts need at least one layer")
        self.max_conditions = int(max_conditions)
        width = 2 * len(self.names)
        self._keys = np.zeros((0, width), dtype=np.float64)
        self._cells = np.zeros(0, dtype=np.int64)
        self._deposits = np.zeros(0, dtype=np.int64)
        self.merged_deposits = 0
        self.outside_deposits = 0

    def add_block(self, class_blocks: Sequence[np.ndarray], deposits=None, area_mask=None) -> None:
        """Add one block: one class-code array per layer (NaN nodata), deposit counts, study mask."""
        if len(class_blocks) != len(self.names):
            raise ParameterError(f"condition counts expect {len(self.names)} layers, got {len(class_blocks)}")
        columns = []
        dep = inside = None
        for block in class_blocks:
            values, dep, inside = _block_inputs(block, deposits, area_mask)
            columns.append(values)
        self.outside_deposits += int(dep[~inside].sum())
        dep = dep[inside]
        self.merged_deposits += int(np.maximum(dep - 1, 0).sum())
        values = np.stack([c[inside] for c in columns], axis=1)
        missing = np.isnan(values)
        # Missing flags as their own columns keep NaN out of the unique search; + 0.0 folds −0 into 0.
        keys = np.concatenate([np.where(missing, 0.0, values) + 0.0, missing.astype(np.float64)], axis=1)
        self._absorb(keys, np.ones(keys.shape[0], dtype=np.int64), (dep > 0).astype(np.int64))

    def _absorb(self, keys, cells, deposits) -> None:
        keys = np.concatenate([self._keys, keys])
        cells = np.concatenate([self._cells, cells])
        deposits = np.concatenate([self._deposits, deposits])
        if keys.shape[0] == 0:
            return
        unique, inverse = np.unique(keys, axis=0, return_inverse=True)
        inverse = inverse.reshape(-1)
        if unique.shape[0] > self.max_conditions:
            raise InputError(f"more than {self.max_conditions} distinct combinations of classes; put "
                             "the evidence into fewer classes before the independence checks")
        self._keys = unique
        self._cells = np.bincount(inverse, weights=cells, minlength=unique.shape[0]).astype(np.int64)
        self._deposits = np.bincount(inverse, weights=deposits, minlength=unique.shape[0]).astype(np.int64)

    def merge(self, other: ConditionCounts) -> ConditionCounts:
        """Return new counts holding the sum of ``self`` and ``other`` (same layers)."""
        if other.names != self.names:
            raise ParameterError(f"cannot merge condition counts of {self.names} and {other.names}")
        out = ConditionCounts(self.names, max(self.max_conditions, other.max_conditions))
        out._absorb(np.concatenate([self._keys, other._keys]),
                    np.concatenate([self._cells, other._cells]),
                    np.concatenate([self._deposits, other._deposits]))
        out.merged_deposits = self.merged_deposits + other.merged_deposits
        out.outside_deposits = self.outside_deposits + other.outside_deposits
        return out

    @property
    def classes(self) -> np.ndarray:
        """Array (conditions × layers) of class codes, NaN where a layer is missing."""
        width = len(self.names)
        codes = self._keys[:, :width].copy()
        codes[self._keys[:, width:] > 0] = np.nan
        return codes

    @property
    def cells(self) -> np.ndarray:
        """Cells per condition (int64)."""
        return self._cells.copy()

    @property
    def deposit_cells(self) -> np.ndarray:
        """Deposit cells per condition (int64)."""
        return self._deposits.copy()

    def marginal(self, layer: int | str) -> ClassCounts:
        """Return the :class:`ClassCounts` of one layer (by index or name)."""
        j = self.names.index(layer) if isinstance(layer, str) else int(layer)
        codes = self.classes[:, j]
        missing = np.isnan(codes)
        out = ClassCounts()
        keys, inverse = np.unique(codes[~missing], return_inverse=True)
        out._classes = keys
        out._cells = np.bincount(inverse.reshape(-1), weights=self._cells[~missing],
                                 minlength=keys.size).astype(np.int64)
        out._deposits = np.bincount(inverse.reshape(-1), weights=self._deposits[~missing],
                                    minlength=keys.size).astype(np.int64)
        out.nodata_cells = int(self._cells[missing].sum())
        out.nodata_deposit_cells = int(self._deposits[missing].sum())
        out.merged_deposits, out.outside_deposits = self.merged_deposits, self.outside_deposits
        return out


def _chi_square(table: np.ndarray, yates: bool) -> tuple[float, int, float, float]:
    """Pearson chi-square of independence: (statistic, dof, p-value, smallest expected count)."""
    n = table.sum()
    expected = np.outer(table.sum(1), table.sum(0)) / n
    dof = (table.shape[0] - 1) * (table.shape[1] - 1)
    deviation = np.abs(table - expected)
    if yates and dof == 1:
        deviation = np.maximum(deviation - 0.5, 0.0)
    statistic = float((deviation ** 2 / expected).sum())
    from scipy import stats  # imported here: 0.2 s that only the independence checks need

    return statistic, dof, float(stats.chi2.sf(statistic, dof)), float(expected.min())


def pairwise_independence(conditions: ConditionCounts, yates: bool = False,
                          feedback: Feedback | None = None) -> list[dict]:
    """Chi-square test of independence of each pair of layers, on deposit counts.

    Parameters
    ----------
    conditions : ConditionCounts
        Counts over the study area; layers are usually binary patterns, but
        any number of classes works (an r × c table).
    yates : bool
        Apply Yates' continuity correction [Yat34]_ to 2 × 2 tables. Off by
        default: the plain Pearson statistic is the one of the pairwise test
        in Bonham-Carter (1994) [BC94]_ (from memory), and Yates' correction
        is known to be conservative.
    feedback : Feedback, optional
        Receives a SmallSampleWarning for tables with small expected counts.

    Returns
    -------
    list of dict
        One per pair: ``layer_a, layer_b, classes_a, classes_b, table``
        (deposit cells, rows classes of a, columns classes of b), ``chi2,
        dof, p_value, min_expected, yates, flag, note``. ``flag`` is
        ``"undefined"`` (a class of either layer holds no deposits, so an
        expected count is 0 and the statistic is None) or
        ``"small_expected"`` (an expected count below 5, Cochran 1954
        [Coc54]_, from memory: the p-value is rough) or "".

    Notes
    -----
    Among the deposit cells where both layers are known, the table of
    deposits by class of a and class of b is tested for independence:
    χ² = Σ (O − E)² / E, E = row total × column total / n, with
    (r − 1)(c − 1) degrees of freedom; scipy.stats.chi2_contingency computes
    the same statistic. A small p-value says the two patterns are not
    conditionally independent given the deposits.
    """
    feedback = feedback or Feedback()
    codes = conditions.classes
    deposits = conditions.deposit_cells
    results = []
    for i in range(len(conditions.names)):
        for j in range(i + 1, len(conditions.names)):
            both = ~np.isnan(codes[:, i]) & ~np.isnan(codes[:, j])
            keys_a, ia = np.unique(codes[both, i], return_inverse=True)
            keys_b, ib = np.unique(codes[both, j], return_inverse=True)
            table = np.zeros((keys_a.size, keys_b.size), dtype=np.float64)
            np.add.at(table, (ia.reshape(-1), ib.reshape(-1)), deposits[both])
            result = {"layer_a": conditions.names[i], "layer_b": conditions.names[j],
                      "classes_a": keys_a.tolist(), "classes_b": keys_b.tolist(),
                      "table": table.astype(np.int64).tolist(), "chi2": None, "dof": None,
                      "p_value": None, "min_expected": None, "yates": bool(yates), "flag": "", "note": ""}
            empty_a = keys_a[table.sum(1) == 0].tolist()
            empty_b = keys_b[table.sum(0) == 0].tolist()
            if keys_a.size < 2 or keys_b.size < 2:
                result["flag"] = "undefined"
                result["note"] = "a layer has a single class where both are known"
            elif empty_a or empty_b:
                result["flag"] = "undefined"
                result["note"] = (f"no deposits in classes {empty_a} of {result['layer_a']} or "
                                  f"{empty_b} of {result['layer_b']}; an expected count is 0")
            else:
                chi2, dof, p_value, min_expected = _chi_square(table, yates)
                result.update(chi2=chi2, dof=dof, p_value=p_value, min_expected=min_expected)
                if min_expected < MIN_EXPECTED:
                    result["flag"] = "small_expected"
                    result["note"] = (f"smallest expected count {min_expected:.3g} < {MIN_EXPECTED:g}; "
                                      "the chi-square p-value is rough")
            if result["flag"]:
                feedback.warning(f"{result['layer_a']} × {result['layer_b']}: {result['note']}",
                                 SmallSampleWarning)
            results.append(result)
    return results


def overall_independence(conditions: ConditionCounts, layers: Sequence[LayerWeights],
                         unit_cell_km2: float, cell_area_km2: float, prior: Prior | None = None,
                         s_p_rule: str = "delta") -> dict:
    """Compare observed deposits n with the number the posterior predicts, T = Σ N_k·P_k.

    Parameters
    ----------
    conditions : ConditionCounts
        Counts per unique condition over the study area.
    layers : sequence of LayerWeights
        Weights per layer, in the order of ``conditions.names``.
    unit_cell_km2, cell_area_km2 : float
        Unit-cell and grid-cell areas, km².
    prior : Prior, optional
        Defaults to the prior of the study area counted in ``conditions``.
    s_p_rule : {"delta", "relative"}
        How s(P_k) follows from s(logit); see :func:`s_probability`.

    Returns
    -------
    dict
        ``observed`` n (deposit cells), ``predicted`` T, ``ratio`` n/T,
        ``s_predicted`` s(T), ``z`` = (T − n)/s(T), ``p_value`` (one-tailed,
        P(Z ≥ z)), ``ratio_rule`` 0.85, and ``flag``/``note`` when the ratio
        is below the rule or the test is significant at 5 %.

    Notes
    -----
    N_k is condition k's area in unit cells, P_k its posterior
    (:func:`posterior_block`, so missing data are treated as in the map).
    A ratio n/T below about 0.85 suggests a problem with conditional
    independence (Bonham-Carter 1994, rule of thumb, from memory) [BC94]_.
    The test of Agterberg & Cheng (2002) [AC02]_ refers T − n to
    s²(T) = Σ_k N_k²·s²(P_k) (from memory). It is one-tailed because a
    violation of conditional independence between positively associated
    patterns double-counts evidence and inflates T; T below n is not the
    failure being tested.
    """
    if len(layers) != len(conditions.names):
        raise ParameterError(f"overall check needs weights for each of {conditions.names}, got "
                             f"{len(layers)}")
    cells = conditions.cells
    deposits = conditions.deposit_cells
    if prior is None:
        prior = study_prior(int(cells.sum()), int(deposits.sum()), unit_cell_km2, cell_area_km2)
    codes = conditions.classes
    post = posterior_block([codes[:, j] for j in range(codes.shape[1])], layers, prior, s_p_rule)
    area = unit_cells(cells, cell_area_km2, unit_cell_km2)
    predicted = float((area * post.probability).sum())
    s_predicted = float(np.sqrt((area ** 2 * post.s_probability ** 2).sum()))
    observed = int(deposits.sum())
    z = (predicted - observed) / s_predicted
    from scipy import stats  # imported here: 0.2 s that only the independence checks need

    p_value = float(stats.norm.sf(z))
    ratio = observed / predicted
    notes = []
    if ratio < CI_RATIO_RULE:
        notes.append(f"n/T = {ratio:.3f} is below {CI_RATIO_RULE:g}: the layers may not be "
                     "conditionally independent")
    if p_value < 0.05:
        notes.append(f"T − n = {predicted - observed:.3g} is {z:.2f} standard deviations of T "
                     f"(one-tailed p = {p_value:.3g})")
    return {"observed": observed, "predicted": predicted, "ratio": ratio, "s_predicted": s_predicted,
            "z": float(z), "p_value": p_value, "ratio_rule": CI_RATIO_RULE,
            "flag": "doubtful" if notes else "", "note": "; ".join(notes)}


def conditional_independence(conditions: ConditionCounts, layers: Sequence[LayerWeights],
                             unit_cell_km2: float, cell_area_km2: float, prior: Prior | None = None,
                             s_p_rule: str = "delta", yates: bool = False,
                             feedback: Feedback | None = None) -> dict:
    """Both conditional-independence checks: ``{"pairwise": [...], "overall": {...}}``.

    See :func:`pairwise_independence` and :func:`overall_independence`.
    """
    feedback = feedback or Feedback()
    overall = overall_independence(conditions, layers, unit_cell_km2, cell_area_km2, prior, s_p_rule)
    if overall["flag"]:
        feedback.warning(f"conditional independence: {overall['note']}")
    return {"pairwise": pairwise_independence(conditions, yates, feedback), "overall": overall}
