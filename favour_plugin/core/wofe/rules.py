"""Constants shared by the weights-of-evidence modules."""

from __future__ import annotations

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
