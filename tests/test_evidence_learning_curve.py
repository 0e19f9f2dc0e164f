"""Tests for advisor.evidence.learning_curve: subsampling, fit and the users-needed estimate."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.sparse as sp
import statsmodels.api as sm

from advisor.evidence.learning_curve import fit_learning_curve, subsample_users

SIZES = [(0.125, 100), (0.25, 200), (0.5, 400), (1.0, 800)]


def _points(lift_at, *, base=0.1, users=300, noise=0.02, seed=0):
    rng = np.random.default_rng(seed)
    out = []
    for f, n in SIZES:
        b = np.full(users, base)
        out.append((f, n, b + lift_at(n) + rng.normal(0, noise, users), b))
    return out


def test_subsamples_are_nested_and_of_the_stated_size():
    """Each smaller sample is inside the larger one and holds ceil(f * users) users."""
    x = sp.csr_matrix(np.eye(40, dtype=np.float32))
    subs = subsample_users(x, (0.125, 0.5, 1.0), rng=np.random.default_rng(0))
    kept = [set(np.flatnonzero(np.diff(m.indptr))) for _, _, m in subs]
    assert [n for _, n, _ in subs] == [math.ceil(0.125 * 40), 20, 40]
    assert kept[0] <= kept[1] <= kept[2]


def test_slope_equals_the_ols_fit_of_lift_on_log2_users():
    """The fitted slope per doubling equals numpy.polyfit on the stacked per-user lifts."""
    pts = _points(lambda n: 0.01 * math.log2(n))
    lc = fit_learning_curve(pts, candidate="itemknn", lift_target=0.1,
                            rng=np.random.default_rng(0))
    x = np.concatenate([np.full(len(c), math.log2(n)) for _, n, c, _ in pts])
    y = np.concatenate([c - b for _, _, c, b in pts])
    # numpy.polyfit(x, y, 1): ordinary least squares, the same point estimate as statsmodels.
    slope, intercept = np.polyfit(x, y, 1)
    assert lc.slope == pytest.approx(slope) and lc.intercept == pytest.approx(intercept)
    assert lc.slope_low < lc.slope < lc.slope_high


def test_slope_interval_uses_user_clustered_errors():
    """The slope interval equals statsmodels OLS with cov_type='cluster' by user."""
    pts = _points(lambda n: 0.005 * math.log2(n), seed=1)
    lc = fit_learning_curve(pts, candidate="itemknn", lift_target=0.1,
                            rng=np.random.default_rng(0))
    x = np.concatenate([np.full(300, math.log2(n)) for _, n, _, _ in pts])
    y = np.concatenate([c - b for _, _, c, b in pts])
    groups = np.tile(np.arange(300), len(pts))
    # statsmodels OLS(...).fit(cov_type="cluster", cov_kwds={"groups": user}).conf_int(0.05)
    ref = sm.OLS(y, sm.add_constant(x)).fit(cov_type="cluster", cov_kwds={"groups": groups})
    low, high = ref.conf_int(0.05)[1]
    assert (lc.slope_low, lc.slope_high) == pytest.approx((low, high))


def test_climbing_curve_below_target_gives_an_estimate_that_reaches_it():
    """A rising curve short of the target: the fitted line meets the target at the estimate."""
    pts = _points(lambda n: 0.002 * math.log2(n), noise=0.005)
    lc = fit_learning_curve(pts, candidate="itemknn", lift_target=0.3,
                            rng=np.random.default_rng(0))
    assert lc.still_climbing and lc.status == "estimated"
    reached = lc.intercept + lc.slope * math.log2(800 + lc.users_needed)
    assert reached == pytest.approx(lc.target_lift, abs=lc.slope * 0.01)


def test_flat_curve_is_not_estimable():
    """A curve with no growth gives no estimate."""
    pts = _points(lambda n: 0.005, noise=0.01, seed=3)
    lc = fit_learning_curve(pts, candidate="itemknn", lift_target=0.5,
                            rng=np.random.default_rng(0))
    assert lc.status == "not_estimable" and lc.users_needed is None


def test_curve_closing_a_negative_gap_is_not_extrapolated_past_zero():
    """A candidate still below popularity gets no estimate even while it climbs."""
    pts = _points(lambda n: -0.12 + 0.01 * math.log2(n), noise=0.005)
    lc = fit_learning_curve(pts, candidate="itemknn", lift_target=0.1,
                            rng=np.random.default_rng(0))
    assert lc.points[-1].lift < 0 and lc.still_climbing
    assert lc.status == "not_estimable" and lc.users_needed is None


def test_target_met_today_needs_no_users():
    """A lift above the target at full size reports 'met'."""
    pts = _points(lambda n: 0.05, noise=0.01)
    lc = fit_learning_curve(pts, candidate="latent", lift_target=0.1,
                            rng=np.random.default_rng(0))
    assert lc.status == "met" and lc.users_needed is None
    assert lc.target_lift == pytest.approx(0.1 * 0.1)
