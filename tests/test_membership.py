"""Membership functions against scikit-fuzzy and against the properties they must have."""

import numpy as np
import skfuzzy
from hypothesis import given, settings
from hypothesis import strategies as st

from favour_plugin.core import membership as m

RNG = np.random.default_rng(20261201)
X = np.concatenate([RNG.uniform(-50, 150, 2000), np.linspace(-50, 150, 401)])


def test_gaussian_matches_skfuzzy_gaussmf():
    """gaussian equals scikit-fuzzy's gaussmf(x, mean, sigma) (reference library)."""
    for centre, spread in [(0, 1), (42.5, 7.3), (-10, 60)]:
        np.testing.assert_allclose(m.gaussian(X, centre, spread),
                                   skfuzzy.gaussmf(X, centre, spread), rtol=1e-12, atol=1e-15)


def test_logistic_matches_skfuzzy_sigmf():
    """logistic equals scikit-fuzzy's sigmf(x, b=midpoint, c=slope), rising and falling."""
    for midpoint, slope in [(50, 0.1), (10, -0.35), (0, 2.0)]:
        np.testing.assert_allclose(m.logistic(X, midpoint, slope),
                                   skfuzzy.sigmf(X, midpoint, slope), rtol=1e-12, atol=1e-300)


def test_trapezoid_matches_skfuzzy_trapmf():
    """trapezoid equals scikit-fuzzy's trapmf for ordered corners, shoulders included."""
    for corners in [(0, 20, 60, 100), (-20, 0, 0, 30), (10, 40, 40, 40.5)]:
        np.testing.assert_allclose(m.trapezoid(X, *corners), skfuzzy.trapmf(X, list(corners)),
                                   atol=1e-12)


def test_trapezoid_with_equal_middle_corners_matches_skfuzzy_trimf():
    """trapezoid with b == c is the triangle of scikit-fuzzy's trimf."""
    a, b, c = -5.0, 30.0, 90.0
    np.testing.assert_allclose(m.trapezoid(X, a, b, b, c), skfuzzy.trimf(X, [a, b, c]), atol=1e-12)


def test_piecewise_through_three_points_matches_skfuzzy_trimf():
    """piecewise [[a,0],[b,1],[c,0]] is scikit-fuzzy's trimf inside [a, c], clamped outside."""
    a, b, c = 0.0, 25.0, 100.0
    mu = m.piecewise(X, np.array([a, b, c]), np.array([0.0, 1.0, 0.0]))
    np.testing.assert_allclose(mu, skfuzzy.trimf(X, [a, b, c]), atol=1e-12)


def test_linear_is_a_trapezoid_shoulder_from_skfuzzy():
    """linear(lower, upper) equals trapmf [lower, upper, ∞, ∞] on a bounded range."""
    lower, upper = 10.0, 70.0
    reference = skfuzzy.trapmf(X, [lower, upper, 1e9, 1e9 + 1])
    np.testing.assert_allclose(m.linear(X, lower, upper), reference, atol=1e-12)


def test_linear_falls_when_lower_exceeds_upper():
    """lower > upper gives a falling ramp: μ 1 below upper, 0 above lower."""
    mu = m.linear(np.array([0.0, 20.0, 50.0, 80.0, 100.0]), 80.0, 20.0)
    np.testing.assert_allclose(mu, [1.0, 1.0, 0.5, 0.0, 0.0])


def test_categories_scores_codes_and_default():
    """Listed codes get their score, others the default, NaN stays NaN."""
    spec = m.parse_membership({"type": "categories", "scores": {"3": 0.9, "5": 0.6, "12": 1},
                               "default": 0.05})
    mu = spec(np.array([3, 5, 12, 1, 4, 13, np.nan]))
    np.testing.assert_allclose(mu, [0.9, 0.6, 1.0, 0.05, 0.05, 0.05, np.nan])


def test_categories_null_default_makes_unlisted_codes_nodata():
    """default null: classes not listed become nodata."""
    spec = m.parse_membership({"type": "categories", "scores": {"2": 0.4}, "default": None})
    np.testing.assert_allclose(spec(np.array([2.0, 3.0])), [0.4, np.nan])


finite = st.floats(-1e6, 1e6, allow_nan=False)


@settings(max_examples=200, deadline=None)
@given(st.lists(finite, min_size=1, max_size=50), finite, finite)
def test_every_function_maps_into_unit_interval_and_keeps_nan(values, p, q):
    """μ lies in [0, 1] for any input, and NaN in gives NaN out, for every function."""
    x = np.array([*values, np.nan])
    lo, hi = (p, q) if p != q else (p, p + 1.0)
    a, b, c, d = sorted([p, q, p + 1.0, q + 2.0])
    results = [m.linear(x, lo, hi), m.logistic(x, p, 0.01), m.gaussian(x, p, 1.0 + abs(q)),
               m.trapezoid(x, a, b, c, d),
               m.piecewise(x, np.array([a, d + 1]), np.array([0.2, 0.8]))]
    for mu in results:
        assert np.isnan(mu[-1])
        assert np.all((mu[:-1] >= 0) & (mu[:-1] <= 1))


@settings(max_examples=100, deadline=None)
@given(st.lists(finite, min_size=2, max_size=50), finite, st.floats(0.1, 1e3))
def test_rising_functions_are_monotone(values, lower, width):
    """linear with lower < upper and logistic with positive slope never decrease."""
    x = np.sort(np.array(values))
    for mu in (m.linear(x, lower, lower + width), m.logistic(x, lower, 1.0 / width)):
        assert np.all(np.diff(mu) >= -1e-15)


def test_identity_passes_mu_through():
    """identity passes μ through (a hair over 1 clipped); its refusal of 1.7 is in test_refusals."""
    spec = m.parse_membership({"type": "identity"})
    np.testing.assert_allclose(spec(np.array([0.0, 0.5, 1.0 + 1e-7, np.nan])), [0, 0.5, 1, np.nan])


def test_output_is_float64_and_keeps_shape():
    """Each function returns float64 with the input's shape (float32 input included)."""
    x = RNG.uniform(0, 1, (7, 5)).astype(np.float32)
    for kind, spec in [("linear", {"lower": 0, "upper": 1}), ("gaussian", {"centre": 0, "spread": 1}),
                       ("logistic", {"midpoint": 0.5, "slope": 3}),
                       ("trapezoid", {"points": [0, 0.2, 0.4, 0.9]}),
                       ("piecewise", {"points": [[0, 0], [1, 1]]}),
                       ("categories", {"scores": {"0": 1}, "default": 0})]:
        mu = m.parse_membership({"type": kind, **spec})(x)
        assert mu.dtype == np.float64 and mu.shape == x.shape
