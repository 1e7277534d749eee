"""Weights of evidence: outside checks (statsmodels, scipy.stats, published identities) and properties.

Every grid here is synthetic, drawn from a seeded generator; no place or deposit is real.
"""

import json
import math

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import special, stats
from statsmodels.stats.contingency_tables import Table2x2

from favour_plugin.core import wofe
from favour_plugin.core.errors import NodataWarning, SmallSampleWarning
from favour_plugin.core.feedback import Feedback

NUMERIC = ("area_units", "w_plus", "s_w_plus", "w_minus", "s_w_minus", "contrast", "s_contrast",
           "studentized_contrast", "p_value", "class_area_units")


def synthetic_grid(seed=7, shape=(120, 150), classes=5, nodata_rows=0):
    """Return (evidence classes 1..classes with NaN rows, deposit counts) where low classes are richer."""
    rng = np.random.default_rng(seed)
    evidence = rng.integers(1, classes + 1, shape).astype(np.float64)
    rate = 0.02 * (classes + 1 - evidence) / classes
    deposits = rng.poisson(rate)
    evidence[:nodata_rows] = np.nan
    return evidence, deposits


def binary_counts(a, free_on, c, free_off):
    """ClassCounts of a binary layer: ``a`` deposit cells and ``free_on`` other cells on the pattern, etc."""
    return wofe.ClassCounts.from_table([0, 1], [c + free_off, a + free_on], [c, a])


def table_of(counts, scale, pattern=1.0):
    """Return the 2×2 table [[a, b], [c, d]] in unit cells of class ``pattern`` vs the rest."""
    on = counts.classes == pattern
    a = counts.deposit_cells[on].sum()
    c = counts.deposit_cells[~on].sum()
    b = counts.cells[on].sum() * scale - a
    d = counts.cells[~on].sum() * scale - c
    return np.array([[a, b], [c, d]], dtype=np.float64)


# ----------------------------------------------------------------- outside checks on the formulas


@settings(max_examples=300, deadline=None)
@given(a=st.integers(1, 400), c=st.integers(1, 400),
       free_on=st.integers(1, 20_000), free_off=st.integers(1, 20_000),
       scale=st.sampled_from([1.0, 0.25, 0.01, 3.0]))
def test_contrast_is_statsmodels_log_odds_ratio(a, c, free_on, free_off, scale):
    """Contrast = Table2x2 log_oddsratio, s(C) = log_oddsratio_se (Woolf 1955), p = its Wald p-value."""
    counts = binary_counts(a, free_on, c, free_off)
    table = table_of(counts, scale)
    assume(table[0, 1] > 0 and table[1, 1] > 0)  # else the unit cell is too large: see undefined rows
    row = wofe.weights_table(counts, "binary", unit_cell_km2=1.0, cell_area_km2=scale).row(1)
    reference = Table2x2(table, shift_zeros=False)  # statsmodels, outside our code
    assert row["contrast"] == pytest.approx(reference.log_oddsratio, rel=1e-9, abs=1e-12)
    assert row["s_contrast"] == pytest.approx(reference.log_oddsratio_se, rel=1e-9)
    assert row["p_value"] == pytest.approx(reference.log_oddsratio_pvalue(), rel=1e-6, abs=1e-300)


@settings(max_examples=200, deadline=None)
@given(a=st.integers(1, 300), c=st.integers(1, 300),
       b=st.floats(0.1, 1e5), d=st.floats(0.1, 1e5))
def test_weights_match_their_published_definitions(a, b, c, d):
    """W± = ln[(a/n_D)/(b/(N−n_D))] etc., s²(W+) = 1/a + 1/b (Bonham-Carter 1994, ch. 9)."""
    got = wofe.pattern_weights(a, b, c, d)
    n_dep, n_free = a + c, b + d
    assert got["w_plus"] == pytest.approx(math.log((a / n_dep) / (b / n_free)), rel=1e-9, abs=1e-12)
    assert got["w_minus"] == pytest.approx(math.log((c / n_dep) / (d / n_free)), rel=1e-9, abs=1e-12)
    assert got["s_w_plus"] ** 2 == pytest.approx(1 / a + 1 / b, rel=1e-12)
    assert got["s_w_minus"] ** 2 == pytest.approx(1 / c + 1 / d, rel=1e-12)
    z = float(got["studentized_contrast"])
    assert got["p_value"] == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-9, abs=1e-300)  # scipy.stats
    # Property: an informative pattern has W+ and W− of opposite signs.
    if abs(float(got["contrast"])) > 1e-9:
        assert np.sign(got["w_plus"]) == -np.sign(got["w_minus"])


def test_logistic_regression_slope_equals_contrast_over_unit_cells():
    """Logit of deposit presence on one binary pattern (statsmodels Logit, one row per unit cell)."""
    rng = np.random.default_rng(11)
    pattern = (rng.random((80, 100)) < 0.3).astype(np.float64)
    deposits = (rng.random(pattern.shape) < np.where(pattern == 1, 0.03, 0.008)).astype(int)
    counts = wofe.ClassCounts.from_arrays(pattern, deposits)
    # unit cell = cell area, so every cell is one unit cell and one regression row.
    row = wofe.weights_table(counts, "binary", unit_cell_km2=0.01, cell_area_km2=0.01).row(1)
    fit = sm.Logit(deposits.reshape(-1), sm.add_constant(pattern.reshape(-1))).fit(disp=0)
    assert row["contrast"] == pytest.approx(fit.params[1], rel=1e-6)
    assert row["s_contrast"] == pytest.approx(fit.bse[1], rel=1e-5)


def test_binomial_glm_with_area_weights_gives_contrast_for_fractional_unit_cells():
    """GLM Binomial with frequency weights a, b, c, d (statsmodels): slope = C, its SE = s(C)."""
    evidence, deposits = synthetic_grid(seed=3)
    pattern = (evidence <= 2).astype(np.float64)
    counts = wofe.ClassCounts.from_arrays(pattern, deposits)
    scale = 0.04 / 0.1  # 200 m cells, 0.1 km² unit cell: b and d are fractional
    (a, b), (c, d) = table_of(counts, scale)
    row = wofe.weights_table(counts, "binary", unit_cell_km2=0.1, cell_area_km2=0.04).row(1)
    exog = sm.add_constant(np.array([1.0, 1.0, 0.0, 0.0]))
    fit = sm.GLM(np.array([1.0, 0.0, 1.0, 0.0]), exog, family=sm.families.Binomial(),
                 freq_weights=np.array([a, b, c, d])).fit()
    assert row["contrast"] == pytest.approx(fit.params[1], rel=1e-8)
    assert row["s_contrast"] == pytest.approx(fit.bse[1], rel=1e-6)
    assert b != round(b)


def test_one_layer_posterior_is_the_deposit_frequency_on_and_off_the_pattern():
    """One layer: P = a/(a+b) on the pattern, c/(c+d) off it (Bonham-Carter 1994 identity)."""
    evidence, deposits = synthetic_grid(seed=5)
    pattern = (evidence <= 2).astype(np.float64)
    counts = wofe.ClassCounts.from_arrays(pattern, deposits)
    scale = 0.01 / 0.5
    table = wofe.weights_table(counts, "binary", unit_cell_km2=0.5, cell_area_km2=0.01)
    prior = wofe.study_prior(counts.total_cells, counts.total_deposit_cells, 0.5, 0.01)
    post = wofe.posterior_block([np.array([1.0, 0.0])], [wofe.layer_weights(table)], prior)
    (a, b), (c, d) = table_of(counts, scale)
    assert post.probability[0] == pytest.approx(a / (a + b), rel=1e-12)
    assert post.probability[1] == pytest.approx(c / (c + d), rel=1e-12)
    assert prior.probability == pytest.approx((a + c) / (a + b + c + d), rel=1e-12)


def test_s_p_rules_against_agterberg_2014_worked_figure():
    """Agterberg (2014), figure from memory: s(logit) = 0.401 at P = 0.069 gives s(P) ≈ 0.028."""
    relative = float(wofe.s_probability(0.069, 0.401, "relative"))
    delta = float(wofe.s_probability(0.069, 0.401, "delta"))
    assert round(relative, 3) == 0.028  # the published figure follows s(P) ≈ P·s(logit)
    assert round(delta, 3) == 0.026  # the delta method does not reproduce it
    # The delta rule is the derivative of the logistic: check against a numerical derivative.
    logit, step = special.logit(0.069), 1e-6
    slope = (special.expit(logit + step) - special.expit(logit - step)) / (2 * step)
    assert delta == pytest.approx(slope * 0.401, rel=1e-6)


def test_pairwise_chi_square_matches_scipy_chi2_contingency():
    """Pairwise test on the deposit table = scipy.stats.chi2_contingency, with and without Yates."""
    rng = np.random.default_rng(21)
    first = (rng.random((150, 150)) < 0.4).astype(np.float64)
    second = np.where(rng.random(first.shape) < 0.7, first, 1 - first)  # associated with the first
    deposits = rng.poisson(np.where(first == 1, 0.01, 0.004))
    conditions = wofe.ConditionCounts(["first", "second"])
    conditions.add_block([first, second], deposits)
    has = deposits > 0
    observed = np.array([[np.sum(has & (first == i) & (second == j)) for j in (0, 1)] for i in (0, 1)])
    for yates in (False, True):
        result = wofe.pairwise_independence(conditions, yates=yates)[0]
        chi2, p_value, dof, _ = stats.chi2_contingency(observed, correction=yates)
        assert result["table"] == observed.tolist()
        assert result["chi2"] == pytest.approx(chi2, rel=1e-10)
        assert result["p_value"] == pytest.approx(p_value, rel=1e-8)
        assert result["dof"] == dof == 1


def test_pairwise_chi_square_for_more_classes_matches_scipy():
    """A 3 × 2 deposit table gives scipy.stats.chi2_contingency's statistic and 2 degrees of freedom."""
    evidence, deposits = synthetic_grid(seed=8, classes=3)
    other = (np.random.default_rng(2).random(evidence.shape) < 0.5).astype(np.float64)
    conditions = wofe.ConditionCounts(["three", "two"])
    conditions.add_block([evidence, other], deposits)
    result = wofe.pairwise_independence(conditions)[0]
    chi2, p_value, dof, _ = stats.chi2_contingency(np.array(result["table"]), correction=False)
    assert (result["chi2"], result["dof"]) == (pytest.approx(chi2), dof) and dof == 2
    assert result["p_value"] == pytest.approx(p_value)


def test_haldane_rows_add_half_to_every_count():
    """small_count='haldane' adds 0.5 to a, b, c, d (Haldane 1956); log odds ratio from statsmodels."""
    counts = wofe.ClassCounts.from_table([1, 2, 3], [400, 300, 500], [0, 6, 9])
    table = wofe.weights_table(counts, "categorical", 1.0, 1.0, small_count="haldane")
    row = table.row(1)
    # statsmodels' shift_zeros replaces zeros by 0.5 only (its docstring says "add 0.5 to all"),
    # so the Haldane table is built here and statsmodels gives its log odds ratio.
    reference = Table2x2(table_of(counts, 1.0, pattern=1.0) + 0.5, shift_zeros=False)
    assert row["flag"] == "adjusted" and "a = 0" in row["note"]
    assert row["contrast"] == pytest.approx(reference.log_oddsratio)
    assert row["s_contrast"] == pytest.approx(reference.log_oddsratio_se)
    assert table.row(2)["flag"] == ""  # rows without a zero count are left alone


# ----------------------------------------------------------------- properties of the tables


def test_undefined_rows_are_flagged_with_none_not_inf_or_nan():
    """A class without deposits gets None in W+ and the contrast, flag 'undefined' and a reason."""
    counts = wofe.ClassCounts.from_table([1, 2, 3], [400, 300, 500], [0, 6, 9])
    feedback = Feedback()
    table = wofe.weights_table(counts, "categorical", 1.0, 1.0, feedback=feedback)
    row = table.row(1)
    assert row["w_plus"] is None and row["contrast"] is None and row["p_value"] is None
    assert row["w_minus"] is not None and math.isfinite(row["w_minus"])
    assert row["flag"] == "undefined" and "a = 0" in row["note"]
    for each in table.rows:
        assert all(each[k] is None or math.isfinite(each[k]) for k in NUMERIC)
    assert any(w["category"] == "SmallSampleWarning" and "class 1" in w["message"]
               for w in feedback.warnings)


def test_unit_cell_too_large_is_a_flagged_row():
    """More deposits than unit cells on a pattern (b ≤ 0) is undefined, even under Haldane."""
    counts = wofe.ClassCounts.from_table([0, 1], [5000, 40], [10, 30])
    table = wofe.weights_table(counts, "binary", unit_cell_km2=1.0, cell_area_km2=0.5,
                               small_count="haldane")
    row = table.row(1)
    assert row["flag"] == "undefined" and "b = -10" in row["note"] and row["w_plus"] is None


def test_ascending_and_descending_counts_are_cumulative_and_monotone():
    """Ascending rows grow with t and descending rows shrink; both end at the whole known area."""
    evidence, deposits = synthetic_grid(seed=9, classes=7, nodata_rows=4)
    counts = wofe.ClassCounts.from_arrays(evidence, deposits)
    up = wofe.weights_table(counts, "ascending", 0.1, 0.01)
    down = wofe.weights_table(counts, "descending", 0.1, 0.01)
    for table, sign in ((up, 1), (down, -1)):
        area = np.array([r["area_units"] for r in table.rows])
        deps = np.array([r["deposits"] for r in table.rows])
        assert np.all(sign * np.diff(area) > 0) and np.all(sign * np.diff(deps) >= 0)
    assert up.rows[-1]["area_units"] == pytest.approx(up.area_units)
    assert down.rows[0]["area_units"] == pytest.approx(down.area_units)
    assert up.rows[-1]["flag"] == "undefined" and "whole known area" in up.rows[-1]["note"]
    # The ascending row at t is the pattern "value ≤ t": compare with direct counting.
    known = ~np.isnan(evidence)
    for row in up.rows:
        on = known & (evidence <= row["class"])
        assert row["deposits"] == int(np.sum(on & (deposits > 0)))
        assert row["area_units"] == pytest.approx(on.sum() * 0.1)


def test_code_by_breaks_makes_cumulative_patterns_of_thresholds():
    """Codes from breaks: ascending 'code ≤ k' is 'value ≤ t_k', descending 'code ≥ k' is 'value ≥ t_k'."""
    rng = np.random.default_rng(4)
    values = rng.uniform(0, 1000, 5000).round(0)
    values[:10] = np.nan
    breaks = [100.0, 250.0, 500.0, 900.0]
    up = wofe.code_by_breaks(values, breaks, "ascending")
    down = wofe.code_by_breaks(values, breaks, "descending")
    known = ~np.isnan(values)
    assert np.all(np.isnan(up[~known])) and np.all(np.isnan(down[~known]))
    for k, t in enumerate(breaks, start=1):
        assert np.array_equal(up[known] <= k, values[known] <= t)
        assert np.array_equal(down[known] >= k, values[known] >= t)


def test_block_by_block_counting_equals_whole_array_counting():
    """Counts summed over blocks of any shape, and merged halves, equal counting the whole grid."""
    evidence, deposits = synthetic_grid(seed=13, nodata_rows=6)
    mask = np.ones(evidence.shape, dtype=bool)
    mask[:, :7] = False
    whole = wofe.ClassCounts.from_arrays(evidence, deposits, mask)
    other = (np.random.default_rng(1).random(evidence.shape) < 0.5).astype(np.float64)
    other[50:60, 20:30] = np.nan
    whole_joint = wofe.ConditionCounts(["a", "b"])
    whole_joint.add_block([evidence, other], deposits, mask)
    rng = np.random.default_rng(0)
    rows = np.sort(rng.choice(np.arange(1, evidence.shape[0]), 5, replace=False))
    cols = np.sort(rng.choice(np.arange(1, evidence.shape[1]), 3, replace=False))
    blocks = wofe.ClassCounts()
    joint = wofe.ConditionCounts(["a", "b"])
    for r in np.split(np.arange(evidence.shape[0]), rows):
        for c in np.split(np.arange(evidence.shape[1]), cols):
            window = np.ix_(r, c)
            blocks.add_block(evidence[window], deposits[window], mask[window])
            joint.add_block([evidence[window], other[window]], deposits[window], mask[window])
    assert blocks == whole
    top, bottom = evidence[:50], evidence[50:]
    halves = wofe.ClassCounts.from_arrays(top, deposits[:50], mask[:50]).merge(
        wofe.ClassCounts.from_arrays(bottom, deposits[50:], mask[50:]))
    assert halves == whole
    joint_halves = wofe.ConditionCounts(["a", "b"])
    joint_halves.add_block([evidence[:50], other[:50]], deposits[:50], mask[:50])
    rest = wofe.ConditionCounts(["a", "b"])
    rest.add_block([evidence[50:], other[50:]], deposits[50:], mask[50:])
    assert joint_halves.merge(rest).marginal("b") == whole_joint.marginal("b")
    assert np.array_equal(joint.cells, whole_joint.cells)
    assert np.array_equal(joint.deposit_cells, whole_joint.deposit_cells)
    assert joint.marginal("a") == whole  # the joint counts' marginal is the layer's counts
    assert whole.known_cells == int(np.sum(mask & ~np.isnan(evidence)))


def test_deposit_handling_merges_shared_cells_and_reports_nodata_and_outside():
    """Two deposits in one cell count once (1 merged); deposits on nodata and outside are reported."""
    evidence = np.array([[1, 1, 2, np.nan], [2, 2, 1, 1]], dtype=np.float64)
    deposits = np.array([[2, 0, 1, 1], [0, 0, 0, 3]])
    mask = np.array([[True, True, True, True], [True, True, True, False]])
    counts = wofe.ClassCounts.from_arrays(evidence, deposits, mask)
    assert counts.deposit_cells.tolist() == [1, 1]  # class 1: the doubled cell once; class 2: one
    assert (counts.merged_deposits, counts.nodata_deposit_cells, counts.outside_deposits) == (1, 1, 3)
    assert counts.total_deposit_cells == 3
    feedback = Feedback()
    table = wofe.weights_table(counts, "categorical", 0.001, 0.001, feedback=feedback)
    assert (table.nodata_deposits, table.merged_deposits, table.outside_deposits) == (1, 1, 3)
    assert json.loads(json.dumps(table.as_dict()))["rows"][0]["class"] == 1.0  # plain data for lineage
    assert any(w["category"] == NodataWarning.__name__ for w in feedback.warnings)


def test_best_cut_takes_largest_significant_contrast_not_largest_contrast():
    """Best cut = max contrast among C/s(C) ≥ 1.96 (rule of thumb); contrasts from statsmodels Table2x2."""
    counts = wofe.ClassCounts.from_table([1, 2, 3, 4, 5], [43, 3000, 3000, 4000, 6000], [1, 25, 14, 10, 8])
    table = wofe.weights_table(counts, "ascending", 1.0, 1.0)
    cum_cells, cum_dep = np.cumsum(counts.cells), np.cumsum(counts.deposit_cells)
    n_cells, n_dep = cum_cells[-1], cum_dep[-1]
    reference = {}
    for t, cells, dep in zip(counts.classes[:-1], cum_cells, cum_dep):
        ref = Table2x2(np.array([[dep, cells - dep], [n_dep - dep, n_cells - cells - (n_dep - dep)]]))
        reference[t] = (ref.log_oddsratio, ref.log_oddsratio / ref.log_oddsratio_se)
    passing = {t: v for t, v in reference.items() if v[1] >= 1.96}
    largest = max(reference, key=lambda t: reference[t][0])
    assert largest not in passing  # the small first class has the largest contrast but is not significant
    best = wofe.best_cut(table)
    expected = max(passing, key=lambda t: passing[t][0])
    assert best.found and best.threshold == expected
    assert best.contrast == pytest.approx(passing[expected][0])
    assert best.studentized_contrast == pytest.approx(passing[expected][1])
    assert not wofe.best_cut(table, level=50).found


def test_generalise_pools_classes_by_sign_and_significance():
    """Ternary pooling: positive, neutral and negative groups; pooled counts keep every cell and deposit."""
    evidence, deposits = synthetic_grid(seed=17, shape=(200, 200), classes=6)
    counts = wofe.ClassCounts.from_arrays(evidence, deposits)
    table = wofe.weights_table(counts, "categorical", 0.1, 0.01)
    result = wofe.generalise(counts, table)
    for row in table.rows:
        z, code = row["studentized_contrast"], result.mapping[row["class"]]
        assert code == (wofe.POSITIVE if z >= 1.96 else wofe.NEGATIVE if z <= -1.96 else wofe.NEUTRAL)
    assert result.counts.known_cells == counts.known_cells
    assert result.counts.known_deposit_cells == counts.known_deposit_cells
    binary = wofe.generalise(counts, table, mode="binary")
    assert binary.table.kind == "binary"
    reference = Table2x2(table_of(binary.counts, 0.1, pattern=1.0), shift_zeros=False)
    assert binary.table.row(1)["contrast"] == pytest.approx(reference.log_oddsratio)


# ----------------------------------------------------------------- posterior and independence


def test_posterior_adds_weights_to_the_prior_logit_and_their_variances():
    """logit P = logit P(D) + Σ W; s²(logit) = s²(prior) + Σ s²(W) (Bonham-Carter 1994, ch. 9)."""
    evidence, deposits = synthetic_grid(seed=19)
    first = (evidence <= 2).astype(np.float64)
    second = np.where(np.random.default_rng(3).random(evidence.shape) < 0.5, 1.0, 0.0)
    layers = []
    for name, grid in (("first", first), ("second", second)):
        counts = wofe.ClassCounts.from_arrays(grid, deposits)
        layers.append(wofe.layer_weights(wofe.weights_table(counts, "binary", 0.1, 0.01, name=name)))
    counts = wofe.ClassCounts.from_arrays(first, deposits)
    prior = wofe.study_prior(counts.total_cells, counts.total_deposit_cells, 0.1, 0.01)
    post = wofe.posterior_block([np.array([1.0, 0.0]), np.array([0.0, 1.0])], layers, prior)
    expected = prior.logit + np.array([layers[0].weights[1] + layers[1].weights[0],
                                       layers[0].weights[0] + layers[1].weights[1]])
    assert np.allclose(post.logit, expected)
    assert np.allclose(post.probability, special.expit(expected))
    var = prior.s2_logit + np.array([layers[0].variances[1] + layers[1].variances[0],
                                     layers[0].variances[0] + layers[1].variances[1]])
    assert np.allclose(post.s_logit ** 2, var)
    assert np.all(post.s_missing == 0)
    assert prior.s2_logit == pytest.approx(1 / prior.deposits + 1 / (prior.area_units - prior.deposits))


def test_missing_evidence_has_weight_zero_and_the_two_state_missing_variance():
    """A missing binary layer: weight 0 and s² = [P(D|B)−P]²P(B) + [P(D|B̄)−P]²P(B̄) (Agterberg et al. 1990)."""
    evidence, deposits = synthetic_grid(seed=23, nodata_rows=10)
    pattern = np.where(np.isnan(evidence), np.nan, (evidence <= 2).astype(np.float64))
    counts = wofe.ClassCounts.from_arrays(pattern, deposits)
    table = wofe.weights_table(counts, "binary", 0.1, 0.01)
    layer = wofe.layer_weights(table)
    prior = wofe.study_prior(counts.total_cells, counts.total_deposit_cells, 0.1, 0.01)
    post = wofe.posterior_block([np.array([np.nan, 1.0])], [layer], prior, s_p_rule="relative")
    assert post.probability[0] == pytest.approx(prior.probability)
    p_on, p_off = special.expit(prior.logit + table.row(1)["w_plus"]), special.expit(
        prior.logit + table.row(1)["w_minus"])
    share = table.row(1)["area_units"] / table.area_units
    two_state = (p_on - prior.probability) ** 2 * share + (p_off - prior.probability) ** 2 * (1 - share)
    assert post.s_missing[0] ** 2 == pytest.approx(two_state, rel=1e-10)
    assert post.s_missing[1] == 0
    assert post.s_probability[0] ** 2 == pytest.approx(post.s_weights[0] ** 2 + two_state)
    assert post.s_weights[0] == pytest.approx(prior.probability * math.sqrt(prior.s2_logit))


def test_overall_check_one_layer_predicts_the_observed_deposits_exactly():
    """One layer without missing data: T = Σ N_k P_k = n (identity), so n/T = 1 and z = 0."""
    evidence, deposits = synthetic_grid(seed=29)
    pattern = (evidence <= 3).astype(np.float64)
    conditions = wofe.ConditionCounts(["pattern"])
    conditions.add_block([pattern], deposits)
    table = wofe.weights_table(conditions.marginal(0), "binary", 0.5, 0.01)
    result = wofe.overall_independence(conditions, [wofe.layer_weights(table)], 0.5, 0.01)
    assert result["predicted"] == pytest.approx(result["observed"], rel=1e-10)
    assert result["ratio"] == pytest.approx(1.0) and result["flag"] == ""
    assert result["p_value"] == pytest.approx(stats.norm.sf(result["z"]))  # one-tailed, scipy.stats


def test_overall_check_passes_layers_that_are_conditionally_independent():
    """Deposits drawn with log-additive rates on two independent patterns: n/T ≈ 1, T − n not significant."""
    rng = np.random.default_rng(41)
    first = (rng.random((300, 300)) < 0.3).astype(np.float64)
    second = (rng.random(first.shape) < 0.4).astype(np.float64)
    deposits = rng.poisson(0.002 * np.where(first == 1, 4.0, 1.0) * np.where(second == 1, 2.5, 1.0))
    conditions = wofe.ConditionCounts(["first", "second"])
    conditions.add_block([first, second], deposits)
    layers = [wofe.layer_weights(wofe.weights_table(conditions.marginal(j), "binary", 0.1, 0.01))
              for j in range(2)]
    result = wofe.conditional_independence(conditions, layers, 0.1, 0.01)
    assert 0.85 <= result["overall"]["ratio"] <= 1.15 and result["overall"]["flag"] == ""
    assert result["overall"]["p_value"] > 0.05
    assert result["pairwise"][0]["p_value"] > 0.01


def test_overall_check_flags_a_layer_entered_twice():
    """The same pattern twice double-counts its evidence: n/T < 0.85 (rule of thumb) and T − n significant."""
    rng = np.random.default_rng(31)
    pattern = (rng.random((200, 200)) < 0.3).astype(np.float64)
    deposits = rng.poisson(np.where(pattern == 1, 0.03, 0.003))
    conditions = wofe.ConditionCounts(["pattern", "copy"])
    conditions.add_block([pattern, pattern.copy()], deposits)
    table = wofe.weights_table(conditions.marginal(0), "binary", 0.1, 0.01)
    layer = wofe.layer_weights(table)
    feedback = Feedback()
    result = wofe.conditional_independence(conditions, [layer, layer], 0.1, 0.01, feedback=feedback)
    overall = result["overall"]
    assert overall["ratio"] < wofe.CI_RATIO_RULE and overall["flag"] == "doubtful"
    assert overall["z"] > 1.645 and overall["p_value"] < 0.05
    assert result["pairwise"][0]["p_value"] < 1e-6  # identical patterns are dependent
    assert feedback.warnings


def test_ordered_cut_gives_w_plus_on_the_pattern_and_w_minus_off_it():
    """An ascending cut at t: classes ≤ t carry W+ of row t, the others its W−."""
    evidence, deposits = synthetic_grid(seed=37, classes=6)
    counts = wofe.ClassCounts.from_arrays(evidence, deposits)
    table = wofe.weights_table(counts, "ascending", 0.1, 0.01)
    cut = wofe.best_cut(table)
    layer = wofe.layer_weights(table, cut=cut.threshold)
    row = table.row(cut.threshold)
    on = layer.classes <= cut.threshold
    assert np.all(layer.weights[on] == row["w_plus"]) and np.all(layer.weights[~on] == row["w_minus"])
    assert layer.fractions.sum() == pytest.approx(1.0)


# ----------------------------------------------------------------- errors


def test_haldane_rule_defines_the_weights_of_a_class_without_deposits():
    """All deposits in one class: refused plainly (test_refusals), defined and flagged under Haldane."""
    one_class = wofe.ClassCounts.from_table([1, 2], [500, 500], [4, 0])
    assert wofe.weights_table(one_class, "categorical", 1.0, 1.0, small_count="haldane").row(1)["flag"]


def test_small_expected_counts_are_flagged_in_the_pairwise_test():
    """Expected deposit counts below 5 (Cochran 1954, from memory) flag the pair and warn."""
    first = np.array([1.0, 1.0, 0.0, 0.0, 1.0, 0.0] * 20)
    second = np.array([1.0, 0.0, 1.0, 0.0, 0.0, 1.0] * 20)
    deposits = np.zeros(first.size, dtype=int)
    deposits[:8] = 1
    conditions = wofe.ConditionCounts(["first", "second"])
    conditions.add_block([first, second], deposits)
    feedback = Feedback()
    result = wofe.pairwise_independence(conditions, feedback=feedback)[0]
    assert result["flag"] == "small_expected" and result["min_expected"] < 5
    assert feedback.warnings[0]["category"] == SmallSampleWarning.__name__
