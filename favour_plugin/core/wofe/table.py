"""Weights of one pattern and the weights table of a layer.

See the package docstring of :mod:`favour_plugin.core.wofe` for the counting
rules, the a, b, c, d notation and the references.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
from scipy import special

from ..errors import InputError, NodataWarning, ParameterError, SmallSampleWarning
from ..feedback import Feedback
from ..jsonio import check_nesting, json_path
from ..schema import load_validator
from .counts import ClassCounts
from .rules import COLUMNS, DEFAULT_LEVEL, KINDS, SMALL_COUNT_RULES, TABLE_SCHEMA_FILE


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
