"""The workshop as the dock holds it: the rounds read, the expert weights, and the table shown.

:class:`WorkshopState` is plain state (no widget): the rounds of score sheets
(:class:`~favour_plugin.core.scoring.Workshop`), the expert weights (equal by
default), the statistic and the disagreement threshold, and the aggregate of
each round, recomputed only when one of these changes. Reading sheets happens
once per round, when the user loads them; everything after that is the
aggregate of a small table (:func:`favour_plugin.core.workshop.aggregate`).

:class:`WorkshopTableModel` shows one round: a row per scored node and item,
a column per expert, then the chosen aggregate, IQR and CV, and from round 2
on the change of the aggregate since the round before. Flagged rows have a
background from Favour's ramp, bold text and a flag icon, so the flag is not
carried by colour alone.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from pathlib import Path

from qgis.PyQt.QtCore import QAbstractTableModel, QModelIndex, Qt
from qgis.PyQt.QtGui import QFont

from ..core.scoring import Scores, Workshop
from ..core.sheet_import import import_round
from ..core.tree import PATH_SEPARATOR, Tree
from ..core.workshop import DEFAULT_THRESHOLD, STATISTICS, Aggregate, aggregate
from .common import SLATE, STRAW, icon, tr

#: How the statistic combo names each central value.
STATISTIC_NAMES = {
    "pool": "Pooled (weighted mean)",
    "mean": "Mean",
    "median": "Median",
    "trimmed": "Trimmed mean",
}
#: Short column titles of the statistics.
STATISTIC_COLUMNS = {"pool": "Pooled", "mean": "Mean", "median": "Median", "trimmed": "Trimmed"}

#: The raw number behind a cell (float), for scripts and tests.
VALUE_ROLE = Qt.UserRole
#: True on the cells of a row flagged for discussion.
FLAG_ROLE = Qt.UserRole + 1
#: (node path, item) of the row.
KEY_ROLE = Qt.UserRole + 2


def number_text(value: float | None, digits: int = 4) -> str:
    """Format a value for the table: ``digits`` significant figures, ∞ for infinity, '' for None."""
    if value is None:
        return ""
    if math.isinf(value):
        return "∞" if value > 0 else "−∞"
    return f"{value:.{digits}g}"


class WorkshopState:
    """The rounds of a workshop and how they are summarised; plain state, no widget.

    Attributes
    ----------
    workshop : Workshop
        The rounds read so far (round 1 first).
    weights : dict of str → float
        Expert weights by id (1 for every expert by default; only ratios count).
    statistic : str
        The central value shown and used: ``pool``, ``mean``, ``median`` or ``trimmed``.
    threshold : float
        Items whose CV exceeds this are flagged.
    round_index : int
        The round shown (0-based; −1 when there is none).
    """

    def __init__(self) -> None:
        self.workshop = Workshop()
        self.weights: dict[str, float] = {}
        self.statistic = "pool"
        self.threshold = DEFAULT_THRESHOLD
        self.round_index = -1
        self._cache: dict[tuple, Aggregate] = {}

    @property
    def rounds(self) -> tuple[Scores, ...]:
        """The rounds read so far."""
        return self.workshop.rounds

    def clear(self) -> None:
        """Forget every round and weight."""
        self.__init__()

    def add_round(self, paths: Iterable[str | Path], tree: Tree) -> Scores:
        """Read the next round's sheets against ``tree`` and show it; return its scores.

        Raises
        ------
        SheetError, TreeFileError
            From :func:`~favour_plugin.core.sheet_import.import_round`; then
            nothing here has changed.
        """
        workshop = import_round(self.workshop, list(paths), tree)
        self.workshop = workshop
        scores = workshop.latest
        for expert in scores.experts:
            self.weights.setdefault(expert, 1.0)
        self.round_index = len(workshop.rounds) - 1
        return scores

    def scores(self, index: int | None = None) -> Scores | None:
        """Return a round's scores (default: the round shown), or None."""
        index = self.round_index if index is None else index
        return self.rounds[index] if 0 <= index < len(self.rounds) else None

    def expert_weights(self, scores: Scores) -> dict[str, float]:
        """Return the weights of the experts of one round (1 for any not set)."""
        return {expert: float(self.weights.get(expert, 1.0)) for expert in scores.experts}

    def weights_text(self, scores: Scores) -> str:
        """Return the round's expert weights as the processing algorithms take them: ``E1=2, E2=1``."""
        return ", ".join(f"{expert}={weight:g}" for expert, weight in self.expert_weights(scores).items())

    def aggregate(self, index: int | None = None) -> Aggregate | None:
        """Return the aggregate of a round (default: the round shown), or None when there is none.

        Raises
        ------
        ParameterError
            The expert weights are unusable (all 0).
        """
        index = self.round_index if index is None else index
        scores = self.scores(index)
        if scores is None:
            return None
        weights = self.expert_weights(scores)
        key = (index, tuple(weights.items()), self.threshold)
        if key not in self._cache:
            if len(self._cache) > 16:
                self._cache.clear()
            self._cache[key] = aggregate(scores, weights, threshold=self.threshold)
        return self._cache[key]

    def previous(self) -> Aggregate | None:
        """Return the aggregate of the round before the one shown, or None in round 1."""
        return self.aggregate(self.round_index - 1) if self.round_index > 0 else None


class WorkshopTableModel(QAbstractTableModel):
    """One round as a table: node, item, each expert's value, aggregate, IQR, CV (and change)."""

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.scores: Scores | None = None
        self.result: Aggregate | None = None
        self.before: Aggregate | None = None
        self.statistic = "pool"
        self.keys: list[tuple[str, str]] = []
        self.experts: tuple[str, ...] = ()
        self._flag_icon = icon("flag")
        self._bold = QFont()
        self._bold.setBold(True)

    def show(self, scores: Scores | None, result: Aggregate | None, before: Aggregate | None,
             statistic: str) -> None:
        """Show a round's scores with their aggregate (None: the values alone) and the round before."""
        self.beginResetModel()
        self.scores, self.result, self.before, self.statistic = scores, result, before, statistic
        self.keys = scores.keys() if scores is not None else []
        self.experts = scores.experts if scores is not None else ()
        self.endResetModel()

    # -- the columns -------------------------------------------------------------------

    def columns(self) -> list[str]:
        """Return the column titles."""
        if self.scores is None:
            return []
        titles = [tr("Node"), tr("Item"), *self.experts,
                  tr(STATISTIC_COLUMNS[self.statistic]), tr("IQR"), tr("CV")]
        if self.before is not None:
            titles.append(tr("Change"))
        return titles

    @property
    def aggregate_column(self) -> int:
        """Index of the aggregate column (IQR and CV follow it, then the change)."""
        return 2 + len(self.experts)

    def column_of(self, expert: str) -> int:
        """Return the column of one expert's values."""
        return 2 + self.experts.index(expert)

    def rowCount(self, parent=QModelIndex()) -> int:  # noqa: N802, B008 (Qt API)
        """Rows: one per scored node and item."""
        return 0 if parent.isValid() else len(self.keys)

    def columnCount(self, parent=QModelIndex()) -> int:  # noqa: N802, B008 (Qt API)
        """Columns: see :meth:`columns`."""
        return 0 if parent.isValid() else len(self.columns())

    def headerData(self, section, orientation, role=Qt.DisplayRole):  # noqa: N802 (Qt API)
        """Column titles; an expert's weight in its tooltip."""
        if orientation != Qt.Horizontal:
            return None
        titles = self.columns()
        if not 0 <= section < len(titles):
            return None
        if role == Qt.DisplayRole:
            return titles[section]
        if role == Qt.ToolTipRole:
            if 2 <= section < self.aggregate_column and self.result is not None:
                expert = self.experts[section - 2]
                share = self.result.expert_weights.get(expert, 0.0)
                return tr("{expert}'s values; weight {share:.0%} of the pool").format(
                    expert=expert, share=share)
            tip = _COLUMN_TIPS.get(section - self.aggregate_column)
            return tr(tip) if tip else ""
        return None

    # -- the cells ---------------------------------------------------------------------

    def summary(self, row: int):
        """Return the :class:`~favour_plugin.core.workshop.ItemSummary` of a row (None without aggregate)."""
        return self.result.get(*self.keys[row]) if self.result is not None else None

    def value(self, row: int, column: int) -> float | None:
        """Return the number in a cell (None for text cells and blanks)."""
        node, item = self.keys[row]
        if 2 <= column < self.aggregate_column:
            score = self.scores.table.get(self.experts[column - 2], {}).get(node, {}).get(item)
            return score.value if score is not None else None
        summary = self.summary(row)
        if summary is None:
            return None
        offset = column - self.aggregate_column
        if offset == 0:
            return summary.statistic(self.statistic)
        if offset == 1:
            return summary.iqr
        if offset == 2:
            return summary.cv
        if offset == 3 and self.before is not None:
            earlier = self.before.get(node, item)
            return summary.statistic(self.statistic) - earlier.statistic(self.statistic) \
                if earlier is not None else None
        return None

    def flagged(self, row: int) -> bool:
        """Return True when the row's item is flagged for discussion."""
        summary = self.summary(row)
        return bool(summary is not None and summary.flagged)

    def data(self, index, role=Qt.DisplayRole):
        """Text, numbers, flags and their marks."""
        if not index.isValid():
            return None
        row, column = index.row(), index.column()
        node, item = self.keys[row]
        if role == KEY_ROLE:
            return (node, item)
        if role == FLAG_ROLE:
            return self.flagged(row)
        if role == VALUE_ROLE:
            return self.value(row, column) if column >= 2 else None
        if role == Qt.DisplayRole:
            if column == 0:  # the node's name, indented by depth as in the tree; the path is in the tooltip
                parts = node.split(PATH_SEPARATOR)
                return "   " * max(len(parts) - 2, 0) + parts[-1]
            if column == 1:
                return item
            value = self.value(row, column)
            if column == self.aggregate_column + 2:
                return number_text(value, 2) if value is None or math.isinf(value) else f"{value:.2f}"
            if column == self.aggregate_column + 3 and value is not None:
                return "0" if value == 0 else f"{value:+.3g}"
            return number_text(value)
        if role == Qt.TextAlignmentRole and column >= 2:
            return int(Qt.AlignRight | Qt.AlignVCenter)
        flagged = self.flagged(row)
        if role == Qt.DecorationRole and column == 0 and flagged:
            return self._flag_icon
        if role == Qt.FontRole and flagged:
            return self._bold
        if role == Qt.BackgroundRole and flagged:
            return STRAW
        if role == Qt.ForegroundRole and flagged:
            return SLATE  # dark on straw reads in light and dark themes alike
        if role == Qt.ToolTipRole:
            summary = self.summary(row)
            text = node
            if summary is not None and flagged:
                text += "\n" + tr("Flagged for discussion: CV {cv} is above {threshold:g}").format(
                    cv=number_text(summary.cv, 3), threshold=self.result.threshold)
            if summary is not None and summary.n < len(self.experts):
                text += "\n" + tr("{n} of {total} experts scored this item").format(
                    n=summary.n, total=len(self.experts))
            return text
        return None


_COLUMN_TIPS = {
    0: "The aggregate of the experts' values (the statistic chosen above)",
    1: "Interquartile range of the experts' values, in the item's unit",
    2: "Coefficient of variation: the pool's weighted standard deviation over |pooled value|",
    3: "Change of the aggregate since the round before",
}


def statistic_names() -> Mapping[str, str]:
    """Return statistic → the name the combo shows, in the order of :data:`STATISTICS`."""
    return {name: tr(STATISTIC_NAMES[name]) for name in STATISTICS}
