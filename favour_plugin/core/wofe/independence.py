"""Independence checks: counts per condition, pairwise, overall and conditional tests.

See the package docstring of :mod:`favour_plugin.core.wofe` for the counting
rules, the a, b, c, d notation and the references.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..errors import InputError, ParameterError, SmallSampleWarning
from ..feedback import Feedback
from .counts import ClassCounts, _block_inputs
from .patterns import LayerWeights
from .posterior import Prior, posterior_block, study_prior
from .rules import CI_RATIO_RULE, MAX_CONDITIONS, MIN_EXPECTED
from .table import unit_cells


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
