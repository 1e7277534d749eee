"""Plain parts of the dock: starting memberships and the histogram summary (no QGIS needed).

Properties checked (common practice, no source): every starting function is
one the tree accepts (``parse_membership``, the same validation the engine
uses), rises or falls across the data's range as asked, and the histogram
counts every sampled value once, as ``numpy.histogram`` and ``numpy.unique``
count them.
"""

from __future__ import annotations

import numpy as np
import pytest

from favour_plugin.core.membership import MEMBERSHIP_TYPES, parse_membership
from favour_plugin.gui.defaults import code_key, starting_for_proxy, starting_membership
from favour_plugin.gui.sampling import MAX_CLASSES, summarise

RAMPS = ("linear", "logistic", "piecewise")


@pytest.mark.parametrize("kind", MEMBERSHIP_TYPES)
@pytest.mark.parametrize("low, high", [(0.0, 1.0), (-14.3, 10.2), (200.0, 7000.0), (1e-4, 3e-4)])
def test_every_starting_membership_is_valid(kind, low, high):
    """Each type's starting parameters pass the tree's own validation."""
    spec = starting_membership(kind, low, high, classes=[1.0, 3.0, 6.0])
    assert spec["type"] == kind
    parse_membership(spec)


@pytest.mark.parametrize("kind", RAMPS)
@pytest.mark.parametrize("falling", [False, True])
def test_ramps_rise_or_fall_across_the_range_as_asked(kind, falling):
    """μ at the high end exceeds μ at the low end for a rising start, and the reverse for falling."""
    low, high = 12.0, 480.0
    mu = parse_membership(starting_membership(kind, low, high, falling=falling))(np.array([low, high]))
    assert (mu[1] < mu[0]) if falling else (mu[1] > mu[0])


def test_a_new_distance_proxy_starts_near_one_at_the_features():
    """A vector proxy starts at μ 1 on its features, falling to 0 by 1 km."""
    mu = parse_membership(starting_for_proxy(True))(np.array([0.0, 500.0, 1000.0, 5000.0]))
    assert mu.tolist() == [1.0, 0.5, 0.0, 0.0]


def test_class_codes_are_written_as_the_tree_file_writes_them():
    """Whole codes lose their '.0'; others keep their decimals."""
    assert [code_key(3.0), code_key(-2.0), code_key(2.5)] == ["3", "-2", "2.5"]


def test_summary_counts_every_value_and_finds_classes():
    """Class counts equal numpy.unique's; histogram counts sum to the number of finite values."""
    rng = np.random.default_rng(5)
    codes = rng.choice([1, 2, 3, 6], size=5000, p=[0.1, 0.2, 0.3, 0.4]).astype(float)
    codes[:50] = np.nan
    sample = summarise(codes)
    values, counts = np.unique(codes[np.isfinite(codes)], return_counts=True)
    assert sample.classes == dict(zip(values.tolist(), counts.tolist()))
    assert sample.count == 4950 == int(sample.counts.sum())


def test_summary_of_continuous_values_has_no_classes_and_clips_the_tails():
    """Continuous values give no class table; the tails beyond the percentiles land in the end bins."""
    rng = np.random.default_rng(6)
    values = np.concatenate([rng.normal(0, 1, 20000), [1e6, -1e6]])
    sample = summarise(values)
    assert sample.classes is None
    assert sample.count == int(sample.counts.sum()) == values.size
    assert sample.low == pytest.approx(np.percentile(values, 0.5))
    assert sample.high < 10 and sample.fit[0] < 0 < sample.fit[1]
    many = summarise(np.arange(MAX_CLASSES + 1, dtype=float))
    assert many.classes is None


def test_summary_of_nothing_is_empty_not_an_error():
    """No valid value gives an empty histogram over [0, 1]."""
    sample = summarise(np.array([np.nan, np.inf]))
    assert sample.count == 0 and sample.classes is None and (sample.low, sample.high) == (0.0, 1.0)
