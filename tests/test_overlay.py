"""Fuzzy operators: published limits and bounds, order properties, and the nodata rules."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from favour_plugin.core import overlay as o

unit = st.floats(0.0, 1.0, allow_nan=False)


def children_strategy(max_children=6, size=12):
    """Lists of 1..max_children μ arrays of one shape, values in [0, 1]."""
    return st.integers(1, max_children).flatmap(
        lambda n: st.lists(arrays(np.float64, size, elements=unit), min_size=n, max_size=n))


@settings(max_examples=300, deadline=None)
@given(children_strategy())
def test_and_is_below_every_child_and_or_above(children):
    """AND ≤ every child ≤ OR, cell by cell (Zadeh 1965: min and max)."""
    low, high = o.fuzzy_and(children), o.fuzzy_or(children)
    for child in children:
        assert np.all(low <= child) and np.all(child <= high)


@settings(max_examples=300, deadline=None)
@given(children_strategy())
def test_product_below_and_and_sum_above_or(children):
    """Algebraic product ≤ AND and algebraic sum ≥ OR (decreasive and increasive operators)."""
    assert np.all(o.fuzzy_product(children) <= o.fuzzy_and(children) + 1e-15)
    assert np.all(o.fuzzy_sum(children) >= o.fuzzy_or(children) - 1e-15)


@settings(max_examples=300, deadline=None)
@given(children_strategy(), unit)
def test_gamma_lies_between_product_and_sum(children, gamma):
    """product ≤ gamma ≤ sum for any γ in [0, 1], and gamma stays in [0, 1]."""
    g = o.fuzzy_gamma(children, gamma)
    assert np.all(g >= o.fuzzy_product(children) - 1e-12)
    assert np.all(g <= o.fuzzy_sum(children) + 1e-12)
    assert np.all((g >= 0) & (g <= 1))


@settings(max_examples=200, deadline=None)
@given(children_strategy())
def test_gamma_limits_are_product_and_sum(children):
    """γ = 0 is exactly the algebraic product, γ = 1 exactly the algebraic sum (Zimmermann & Zysno 1980)."""
    np.testing.assert_array_equal(o.fuzzy_gamma(children, 0.0), o.fuzzy_product(children))
    np.testing.assert_array_equal(o.fuzzy_gamma(children, 1.0), o.fuzzy_sum(children))


def test_gamma_between_inputs_only_for_published_range():
    """For μ = 0.8 and 0.2 the output lies between them only for about 0.14 < γ < 0.97.

    Bonham-Carter (1994), as quoted by Carranza (2009): the published bound.
    """
    children = [np.array([0.8]), np.array([0.2])]
    gammas = np.linspace(0.0, 1.0, 10001)
    inside = np.array([0.2 <= o.fuzzy_gamma(children, g)[0] <= 0.8 for g in gammas])
    first, last = gammas[inside][0], gammas[inside][-1]
    assert first == pytest.approx(0.14, abs=0.006)
    assert last == pytest.approx(0.97, abs=0.006)
    assert np.all(inside[(gammas > first) & (gammas < last)])


def test_sum_and_product_of_two_known_values():
    """0.8 and 0.2: product 0.16, algebraic sum 0.84 (Bonham-Carter 1994 worked values, from memory)."""
    children = [np.array([0.8]), np.array([0.2])]
    assert o.fuzzy_product(children)[0] == pytest.approx(0.16)
    assert o.fuzzy_sum(children)[0] == pytest.approx(0.84)


def test_gamma_is_computed_in_float64_near_zero():
    """float32 children give the float64 answer: gamma's product term is steep near 0."""
    rng = np.random.default_rng(7)
    children32 = [rng.uniform(0, 1e-3, 1000).astype(np.float32) for _ in range(8)]
    children64 = [c.astype(np.float64) for c in children32]
    np.testing.assert_array_equal(o.fuzzy_gamma(children32, 0.9), o.fuzzy_gamma(children64, 0.9))


def test_weighted_mean_is_numpy_average():
    """weighted_mean equals numpy.average with the same weights (reference implementation)."""
    rng = np.random.default_rng(3)
    children = [rng.uniform(0, 1, 50) for _ in range(4)]
    weights = [1.0, 2.5, 0.0, 4.0]
    np.testing.assert_allclose(o.weighted_mean(children, weights),
                               np.average(np.vstack(children), axis=0, weights=weights))


NAN = np.nan


@pytest.mark.parametrize("operator, propagate, ignore", [
    ("and", [NAN, 0.2, NAN], [0.6, 0.2, NAN]),
    ("or", [NAN, 0.9, NAN], [0.6, 0.9, NAN]),
    ("product", [NAN, 0.18, NAN], [0.6, 0.18, NAN]),
    ("sum", [NAN, 0.92, NAN], [0.6, 0.92, NAN]),
])
def test_nodata_rules(operator, propagate, ignore):
    """propagate: any missing child → missing; ignore: combine the children present."""
    children = [np.array([0.6, 0.2, NAN]), np.array([NAN, 0.9, NAN])]
    op = o.parse_operator({"type": operator})
    np.testing.assert_allclose(op.combine(children, (1, 1)), propagate)
    op = o.parse_operator({"type": operator, "nodata": "ignore"})
    np.testing.assert_allclose(op.combine(children, (1, 1)), ignore)


def test_weighted_mean_ignore_renormalises_weights():
    """Under ignore the weights of the children present are renormalised per cell."""
    children = [np.array([0.5, NAN]), np.array([1.0, 0.2])]
    np.testing.assert_allclose(o.weighted_mean(children, [1, 3], "ignore"), [0.875, 0.2])
    np.testing.assert_allclose(o.weighted_mean(children, [1, 3], "propagate"), [0.875, NAN])


@settings(max_examples=200, deadline=None)
@given(children_strategy(), unit, st.lists(st.floats(0.0, 10.0), min_size=6, max_size=6),
       st.sampled_from(["and", "or", "product", "sum", "gamma", "weighted_mean"]))
def test_a_cell_under_ignore_does_not_depend_on_missing_cells_elsewhere(children, gamma, weights, kind):
    """Under ``ignore`` a cell's μ depends only on that cell's children (property that must hold).

    A block with no missing cell takes a shorter path than one with any; the
    cells both share must come out identical, to the last bit.
    """
    weights = weights[:len(children)]
    if sum(weights) <= 0:
        weights[0] = 1.0
    spec = {"type": kind, "nodata": "ignore", **({"gamma": gamma} if kind == "gamma" else {})}
    op = o.parse_operator(spec)
    whole = op.combine(children, weights)
    with_gap = [np.append(child, NAN if i == 0 else 0.5) for i, child in enumerate(children)]
    assert np.array_equal(op.combine(with_gap, weights)[:-1], whole)


