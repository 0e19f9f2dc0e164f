"""Tests for advisor.stats.intervals: Wilson intervals and sample sizes."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.proportion import proportion_confint, samplesize_confint_proportion

from advisor.errors import ConfigError, LogFormatError
from advisor.stats import Interval, users_needed, wilson_interval, wilson_lower_bound

# (successes, trials, low, high): Wilson 95%. Values reproduced with
# statsmodels proportion_confint(s, n, method="wilson") (REFERENCES.md [L]); they are also
# the worked examples of Newcombe (1998), Stat. Med. 17:857-872, second-hand / from memory,
# not re-checked against the paper.
WORKED = [
    (81, 263, 0.2553, 0.3662),
    (15, 148, 0.0624, 0.1605),
    (0, 20, 0.0, 0.1611),
    (1, 29, 0.0061, 0.1718),
]


@pytest.mark.parametrize(("s", "n", "low", "high"), WORKED)
def test_wilson_interval_matches_published_worked_values(s, n, low, high):
    """The 95% Wilson interval reproduces the worked values to four decimals."""
    ci = wilson_interval(s, n)
    assert round(ci.low, 4) == pytest.approx(low, abs=1e-12)
    assert round(ci.high, 4) == pytest.approx(high, abs=1e-12)
    assert ci.estimate == pytest.approx(s / n)


def test_wilson_interval_matches_statsmodels_on_arrays():
    """Vectorised intervals equal statsmodels' Wilson intervals element by element."""
    rng = np.random.default_rng(3)
    n = rng.integers(1, 500, size=200)
    s = rng.integers(0, n + 1)
    for conf in (0.8, 0.95, 0.99):
        ci = wilson_interval(s, n, confidence=conf)
        lo, hi = proportion_confint(s, n, alpha=1 - conf, method="wilson")  # statsmodels
        np.testing.assert_allclose(ci.low, lo, rtol=0, atol=1e-12)
        np.testing.assert_allclose(ci.high, hi, rtol=0, atol=1e-12)
        assert isinstance(ci.low, np.ndarray) and ci.low.shape == (200,)


def test_wilson_interval_returns_floats_for_scalars():
    """Scalar counts give plain floats, not 0-d arrays."""
    ci = wilson_interval(3, 10)
    assert type(ci.low) is float and type(ci.high) is float and type(ci.estimate) is float


def test_wilson_interval_is_nan_without_warnings_when_no_trials():
    """Zero trials give a NaN interval and emit no RuntimeWarning."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ci = wilson_interval(np.array([0, 2, 0]), np.array([0, 4, 5]))
    assert np.isnan(ci.low[0]) and np.isnan(ci.high[0]) and np.isnan(ci.estimate[0])
    assert np.all(np.isfinite(ci.low[1:]))
    scalar = wilson_interval(0, 0)
    assert math.isnan(scalar.low) and math.isnan(scalar.high)


@settings(max_examples=200, deadline=None)
@given(n=st.integers(1, 10_000), frac=st.floats(0, 1), conf=st.floats(0.5, 0.999))
def test_wilson_interval_stays_within_unit_range_and_brackets_estimate(n, frac, conf):
    """0 <= low <= estimate <= high <= 1 for any valid counts and level."""
    s = int(round(frac * n))
    ci = wilson_interval(s, n, confidence=conf)
    assert 0.0 <= ci.low <= ci.estimate + 1e-12
    assert ci.estimate <= ci.high + 1e-12 and ci.high <= 1.0


def test_wilson_interval_narrows_as_confidence_falls():
    """A lower confidence level gives a nested, narrower interval."""
    wide, narrow = wilson_interval(30, 100, confidence=0.99), wilson_interval(30, 100,
                                                                              confidence=0.8)
    assert wide.low < narrow.low < narrow.high < wide.high


@pytest.mark.parametrize("conf", [0, 1, 95, -0.1, float("nan"), True, "0.95x"])
def test_wilson_interval_rejects_confidence_outside_unit_interval(conf):
    """Confidence must be a fraction strictly between 0 and 1."""
    with pytest.raises(ConfigError, match="confidence"):
        wilson_interval(1, 10, confidence=conf)


@pytest.mark.parametrize(("s", "n"), [(5, 4), (-1, 4), (1, -2), (float("nan"), 3)])
def test_wilson_interval_rejects_impossible_counts(s, n):
    """Negative, non-finite or successes > trials are refused with the offending pair."""
    with pytest.raises(LogFormatError, match="successes"):
        wilson_interval(s, n)


def test_interval_to_dict_is_json_safe_with_nan_as_none():
    """to_dict gives plain floats / lists and writes NaN as None."""
    d = wilson_interval(np.array([1, 0]), np.array([4, 0])).to_dict()
    text = json.dumps(d, allow_nan=False)
    back = json.loads(text)
    assert back["low"][1] is None and isinstance(back["low"][0], float)
    assert back["confidence"] == 0.95
    assert isinstance(wilson_interval(1, 4).to_dict()["low"], float)


def test_interval_is_frozen():
    """Interval results cannot be modified after creation."""
    ci = wilson_interval(1, 4)
    assert isinstance(ci, Interval)
    with pytest.raises(AttributeError):
        ci.low = 0.0  # type: ignore[misc]


def test_wilson_lower_bound_equals_statsmodels_lower_end():
    """The lower bound is statsmodels' Wilson lower end."""
    s, n = np.array([2, 90, 0, 7]), np.array([2, 100, 3, 9])
    lo, _ = proportion_confint(s, n, alpha=0.1, method="wilson")  # statsmodels
    np.testing.assert_allclose(wilson_lower_bound(s, n, confidence=0.9), lo, atol=1e-12)


def test_wilson_lower_bound_ranks_well_supported_shares_first_and_unseen_last():
    """90/100 outranks 2/2, and an item with no trials sorts after every seen item."""
    s, n = np.array([2, 90, 0, 1]), np.array([2, 100, 0, 5])
    order = np.argsort(-wilson_lower_bound(s, n))
    assert order.tolist() == [1, 0, 3, 2]


def test_users_needed_matches_statsmodels_sample_size_rounded_up():
    """p=0.5, E=0.05 at 95% needs 385 users (statsmodels gives 384.1459 unrounded)."""
    # statsmodels samplesize_confint_proportion(0.5, 0.05) -> 384.1459 (REFERENCES.md [L])
    assert samplesize_confint_proportion(0.5, 0.05) == pytest.approx(384.1459, abs=1e-4)
    assert users_needed(0.5, 0.05) == 385
    assert type(users_needed(0.5, 0.05)) is int


def test_users_needed_is_vectorised_and_equals_ceil_of_statsmodels():
    """Array inputs give an int array equal to ceil of statsmodels' formula."""
    p = np.array([0.05, 0.1, 0.3, 0.5, 0.7])
    e = np.array([0.01, 0.02, 0.05, 0.1, 0.03])
    got = users_needed(p, e, confidence=0.9)
    want = np.ceil(samplesize_confint_proportion(p, e, alpha=0.1))  # statsmodels
    assert got.dtype == np.int64
    np.testing.assert_array_equal(got, want.astype(np.int64))


@pytest.mark.parametrize(("p", "e"), [(0.5, 0.05), (0.3, 0.05), (0.2, 0.03), (0.6, 0.1)])
def test_users_needed_gives_wilson_half_width_close_to_target(p, e):
    """At the suggested n, the Wilson half-width is within 5% of the target (moderate p)."""
    n = users_needed(p, e)
    ci = wilson_interval(round(p * n), n)
    assert (ci.high - ci.low) / 2 == pytest.approx(e, rel=0.05)


def test_users_needed_floors_degenerate_proportions_at_one():
    """p = 0 gives 1 trial, not 0 (the normal formula's known weakness, documented)."""
    assert users_needed(0.0, 0.05) == 1


@pytest.mark.parametrize(("p", "e"), [(1.5, 0.05), (-0.1, 0.05), (0.5, 0.0), (0.5, 1.0)])
def test_users_needed_rejects_out_of_range_inputs(p, e):
    """p outside [0, 1] or half-width outside (0, 1) is a ConfigError."""
    with pytest.raises(ConfigError):
        users_needed(p, e)
