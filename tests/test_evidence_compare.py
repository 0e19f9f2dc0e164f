"""Tests for advisor.evidence.compare: bootstrap interval, paired test, effect size, bands."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from advisor.evidence.compare import (
    activity_bands,
    bootstrap_mean_interval,
    paired_comparison,
)


def test_bootstrap_of_two_values_spans_both():
    """Values (0, 1): resampled means are 0, 0.5, 1 w.p. 1/4, 1/2, 1/4, so the 95% interval
    is (0, 1)."""
    # Hand-worked: P(mean = 0) = 1/4 > 2.5%, so both percentile ends sit on the extremes.
    low, high = bootstrap_mean_interval(np.array([0.0, 1.0]), rng=np.random.default_rng(0))
    assert (low, high) == (0.0, 1.0)


def test_bootstrap_of_constant_values_is_a_point():
    """Equal values give a zero-width interval at that value."""
    assert bootstrap_mean_interval(np.full(7, 0.25), rng=np.random.default_rng(1)) == (0.25, 0.25)


def test_bootstrap_is_none_below_two_values():
    """One value cannot be resampled into an interval."""
    assert bootstrap_mean_interval(np.array([0.3]), rng=np.random.default_rng(0)) is None


def test_bootstrap_agrees_with_scipy_percentile_bootstrap():
    """Our percentile interval is close to scipy.stats.bootstrap(method='percentile')."""
    x = np.random.default_rng(3).exponential(size=200)
    ours = bootstrap_mean_interval(x, resamples=20000, rng=np.random.default_rng(4))
    # scipy.stats.bootstrap((x,), np.mean, method="percentile"): the reference implementation;
    # both are Monte Carlo, so agreement is to Monte Carlo error.
    ref = stats.bootstrap((x,), np.mean, method="percentile", n_resamples=20000,
                          random_state=np.random.default_rng(5)).confidence_interval
    assert ours[0] == pytest.approx(ref.low, abs=0.01)
    assert ours[1] == pytest.approx(ref.high, abs=0.01)


def test_bootstrap_is_reproducible_with_a_seed():
    """The same seed gives the same interval."""
    x = np.random.default_rng(0).normal(size=50)
    a = bootstrap_mean_interval(x, rng=np.random.default_rng(9))
    b = bootstrap_mean_interval(x, rng=np.random.default_rng(9))
    assert a == b


def test_paired_comparison_p_value_and_effect_size_match_scipy_and_hand_values():
    """p equals scipy.stats.ttest_rel and d_z equals mean(d) / sd(d)."""
    rng = np.random.default_rng(7)
    base = rng.uniform(size=40)
    cand = base + rng.normal(0.05, 0.1, size=40)
    r = paired_comparison(cand, base, candidate_name="c", baseline_name="b",
                          rng=np.random.default_rng(0))
    d = cand - base
    # scipy.stats.ttest_rel(cand, base): the paired t-test the docstring names.
    assert r.p_value == pytest.approx(stats.ttest_rel(cand, base).pvalue)
    assert r.effect_size == pytest.approx(d.mean() / d.std(ddof=1))
    assert r.lift == pytest.approx(d.mean())
    assert r.lift_low < r.lift < r.lift_high
    assert r.relative_lift == pytest.approx(d.mean() / base.mean())
    assert r.wins + r.losses == 40


def test_paired_comparison_of_identical_methods_has_p_one_and_no_effect_size():
    """Identical per-user metrics give lift 0, p = 1, no effect size."""
    x = np.array([0.1, 0.0, 0.5, 0.2])
    r = paired_comparison(x, x, candidate_name="c", baseline_name="b",
                          rng=np.random.default_rng(0))
    assert (r.lift, r.p_value, r.effect_size, r.wins, r.losses) == (0.0, 1.0, None, 0, 0)


def test_activity_bands_find_the_first_band_where_the_lift_is_clear():
    """Lift only for users with 6+ items: the threshold reported is 6."""
    rng = np.random.default_rng(2)
    history = np.repeat([1, 4, 10, 30], 60)
    base = rng.uniform(0, 0.2, size=len(history))
    gain = np.where(history >= 6, 0.2, 0.0) + rng.normal(0, 0.02, size=len(history))
    bands, first = activity_bands(history, base + gain, base,
                                  ((1, 2), (3, 5), (6, 20), (21, None)),
                                  candidate_name="c", baseline_name="b",
                                  rng=np.random.default_rng(0))
    assert [b.users for b in bands] == [60, 60, 60, 60]
    assert first == 6


def test_activity_bands_ignore_bands_with_too_few_users():
    """A clear lift in a band below the minimum size does not set the threshold."""
    history = np.array([1] * 5 + [10] * 50)
    base = np.zeros(55)
    cand = np.where(history == 1, 0.5, 0.0) + np.linspace(0, 0.01, 55)
    bands, first = activity_bands(history, cand, base, ((1, 2), (6, 20)),
                                  candidate_name="c", baseline_name="b",
                                  rng=np.random.default_rng(0), min_users=30)
    assert not bands[0].enough_users
    assert first == 6
