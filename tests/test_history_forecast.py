"""Readiness forecast: growth fits against statsmodels, planted growth, and the reasons
given instead of numbers."""

from __future__ import annotations

import json
import math
import warnings
from datetime import date, timedelta

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from advisor.history import HistoryEntry, RuleGap, fit_growth, forecast_readiness
from advisor.history.forecast import MIN_POINTS, crossing_weeks, is_count_metric

SEED = 20261201


def planted(n: int = 10, *, y0: float = 300.0, growth: float = 0.12, noise: float = 0.05,
            seed: int = SEED) -> tuple[np.ndarray, np.ndarray]:
    """Weekly values y0 * exp(growth * week) with log-normal scatter (invented)."""
    rng = np.random.default_rng(seed)
    t = np.arange(n, dtype=float)
    return t, y0 * np.exp(growth * t + rng.normal(0.0, noise, n))


def entries_from(users, *, users_ge_5=None, start: str = "2026-09-06", gaps_last=(),
                 next_tier: str | None = "item_neighbourhood", **last_kw) -> list[HistoryEntry]:
    """Weekly hand-made entries (Sundays) with the given users series."""
    d0 = date.fromisoformat(start)
    out = []
    for i, u in enumerate(users):
        u = float(u)
        u5 = float(users_ge_5[i]) if users_ge_5 is not None else u / 3
        last = i == len(users) - 1
        kw = dict(
            as_of=f"{(d0 + timedelta(days=7 * i)).isoformat()}T23:59:59.999999+00:00",
            recorded_utc="2026-12-01T00:00:00+00:00", fingerprint="0" * 64,
            tool_version="0.1.0", interactions=u * 12, users=u, items_seen=300.0,
            users_ge_5=u5, density=0.02, cooc_share=0.5, itemknn_lift=None,
            itemknn_lift_low=None, itemknn_lift_high=None, headline_tier="segment_lists",
            next_tier=next_tier, personalised_go=False,
            tier_statuses={"non_personalised": "ready", "segment_lists": "ready",
                           "item_neighbourhood": "not_ready"},
            gaps=tuple(gaps_last) if last else (),
            metrics={"volume.users": u, "volume.interactions": u * 12,
                     "activity.users_ge_5": u5})
        if last:
            kw.update(last_kw)
        out.append(HistoryEntry(**kw))
    return out


def test_count_metrics_are_recognised():
    """Counts that grow with traffic are forecastable; rates and flags are not."""
    assert all(map(is_count_metric, ["volume.users", "volume.interactions",
                                     "activity.users_ge_5", "support.items_ge_10"]))
    assert not any(map(is_count_metric, ["volume.density", "signals.categories",
                                         "evidence.itemknn_lift_low", "activity.share_ge_5"]))


def test_exponential_fit_equals_statsmodels_ols_on_log_values():
    """Slope, its interval and the projections equal a direct sm.OLS fit of log(y)."""
    t, y = planted()
    fit = fit_growth(t, y, form="exponential", confidence=0.9)
    # statsmodels: sm.OLS(np.log(y), sm.add_constant(t)).fit()
    res = sm.OLS(np.log(y), sm.add_constant(t)).fit()
    assert fit.slope == pytest.approx(res.params[1], rel=1e-12)
    assert fit.intercept == pytest.approx(res.params[0], rel=1e-12)
    assert (fit.slope_low, fit.slope_high) == pytest.approx(tuple(res.conf_int(0.1)[1]),
                                                            rel=1e-12)
    assert fit.weekly_growth == pytest.approx(math.exp(res.params[1]) - 1, rel=1e-12)
    # statsmodels: res.get_prediction(...).summary_frame(alpha=0.1), obs_ci_* back-transformed
    ahead = np.array([p.weeks_ahead for p in fit.projections], float)
    frame = res.get_prediction(sm.add_constant(t[-1] + ahead)).summary_frame(alpha=0.1)
    assert [p.value for p in fit.projections] == pytest.approx(np.exp(frame["mean"]), rel=1e-10)
    assert [p.low for p in fit.projections] == pytest.approx(np.exp(frame["obs_ci_lower"]),
                                                             rel=1e-10)
    assert [p.high for p in fit.projections] == pytest.approx(np.exp(frame["obs_ci_upper"]),
                                                              rel=1e-10)
    assert fit.points == 10 and fit.form == "exponential" and fit.growing


def test_linear_fit_equals_statsmodels_ols():
    """The linear form's slope and interval equal sm.OLS(y, sm.add_constant(t))."""
    rng = np.random.default_rng(SEED)
    t = np.arange(8, dtype=float)
    y = 200 + 40 * t + rng.normal(0, 10, 8)
    fit = fit_growth(t, y, form="linear")
    res = sm.OLS(y, sm.add_constant(t)).fit()  # statsmodels, 95% interval
    assert (fit.slope, fit.slope_low, fit.slope_high) == pytest.approx(
        (res.params[1], *res.conf_int(0.05)[1]), rel=1e-12)
    assert fit.weekly_growth == pytest.approx(res.params[1], rel=1e-12)
    assert fit.aic_linear == pytest.approx(res.aic, rel=1e-12)


def test_exponential_aic_is_on_the_original_scale():
    """The exponential AIC equals -2 * scipy log-normal log-likelihood of y + 2 * 2."""
    t, y = planted()
    fit = fit_growth(t, y)
    res = sm.OLS(np.log(y), sm.add_constant(t)).fit()
    sigma = math.sqrt(res.ssr / len(y))  # maximum-likelihood scale
    # scipy.stats.lognorm.logpdf(y, s=sigma, scale=exp(fitted log mean))
    llf = stats.lognorm.logpdf(y, s=sigma, scale=np.exp(res.fittedvalues)).sum()
    assert fit.aic_exponential == pytest.approx(-2 * llf + 2 * 2, rel=1e-10)


def test_auto_form_picks_the_planted_form():
    """AIC picks exponential growth for a planted exponential and linear for a linear one."""
    t, y = planted(noise=0.03)
    assert fit_growth(t, y).form == "exponential"
    rng = np.random.default_rng(SEED)
    y_lin = 1000 + 100 * t + rng.normal(0, 15, len(t))
    assert fit_growth(t, y_lin).form == "linear"


def test_crossing_weeks_follow_the_statsmodels_prediction_interval():
    """Each crossing week is the first whole week where sm's mean / interval end reaches T."""
    t, y = planted()
    threshold = 3000.0
    w, lo, hi = crossing_weeks(t, y, threshold, form="exponential")
    res = sm.OLS(np.log(y), sm.add_constant(t)).fit()
    ks = np.arange(1, 53)
    frame = res.get_prediction(sm.add_constant(t[-1] + ks)).summary_frame(alpha=0.05)
    log_t = math.log(threshold)
    first = {col: int(ks[np.argmax(frame[col].to_numpy() >= log_t)])
             for col in ("mean", "obs_ci_upper", "obs_ci_lower")}
    assert (w, lo, hi) == (first["mean"], first["obs_ci_upper"], first["obs_ci_lower"])
    assert lo < w < hi


def test_planted_exponential_growth_interval_contains_true_crossing_week():
    """With planted growth, the forecast interval holds the true crossing week."""
    y0, g, threshold, n = 300.0, 0.12, 3000.0, 10
    # true median curve reaches 3000 at week ln(10) / 0.12 = 19.19, so at whole week 20,
    # which is 20 - 9 = 11 weeks after the last (week 9) audit
    true_week = math.ceil(math.log(threshold / y0) / g) - (n - 1)
    assert true_week == 11
    t, y = planted(n, y0=y0, growth=g)
    w, lo, hi = crossing_weeks(t, y, threshold)
    assert lo <= true_week <= hi
    # and over many seeded histories the 95% interval holds it about 95% of the time
    hits = 0
    for seed in range(100):
        t, y = planted(n, y0=y0, growth=g, seed=seed)
        _, lo, hi = crossing_weeks(t, y, threshold)
        hits += lo is not None and hi is not None and lo <= true_week <= hi
    assert hits >= 90


def test_flat_series_gives_a_reason_not_a_number():
    """A flat series (slope interval around zero) is said to be flat; no week is given."""
    rng = np.random.default_rng(SEED)
    t = np.arange(8, dtype=float)
    y = 500 + rng.normal(0, 20, 8)
    fit = fit_growth(t, y)
    assert not fit.growing and "flat" in fit.reason and fit.projections == ()
    assert crossing_weeks(t, y, 1000) == (None, None, None)


def test_constant_series_gives_a_reason():
    """A constant series (zero residuals) is flat, without warnings or a number."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fit = fit_growth([0, 1, 2, 3, 4], [50, 50, 50, 50, 50])
    assert not fit.growing and "flat" in fit.reason


def test_declining_series_is_said_to_be_falling():
    """A falling series gives a 'falling' reason and no crossing."""
    t, y = planted(growth=-0.1)
    fit = fit_growth(t, y)
    assert not fit.growing and "falling" in fit.reason
    assert crossing_weeks(t, y, 1000) == (None, None, None)


def test_fewer_than_three_audits_give_a_reason():
    """Two audits give a reason instead of fits and weeks."""
    assert MIN_POINTS == 3
    fc = forecast_readiness(entries_from([100, 150]))
    assert fc.reason.startswith("only 2 audit(s)")
    assert fc.users is None and fc.crossings == () and fc.next_tier is None
    assert fit_growth([0, 1], [1, 2]) is None


def test_three_audits_give_a_fit_whose_interval_rests_on_one_degree_of_freedom():
    """Three audits are enough for a fit; its slope interval uses t with 1 degree of freedom
    (statsmodels OLS on log(users) against the week, ``conf_int``), 12.7 standard errors
    each side, so only near-exact growth gives a narrow one."""
    values = [100, 150, 230]
    fit = fit_growth([0, 1, 2], values, form="exponential")
    assert fit is not None and fit.points == 3
    ols = sm.OLS(np.log(values), sm.add_constant(np.arange(3.0))).fit()
    assert ols.df_resid == 1
    low, high = ols.conf_int(0.05)[1]
    assert math.isclose(fit.slope_low, low, rel_tol=1e-9)
    assert math.isclose(fit.slope_high, high, rel_tol=1e-9)
    # the half-width is t(0.975, 1 df) = 12.706 standard errors (scipy.stats.t.ppf)
    assert math.isclose((high - low) / (2 * ols.bse[1]), stats.t.ppf(0.975, 1), rel_tol=1e-9)


def _users_ge_5_gap(value: float, threshold: float = 300.0) -> RuleGap:
    return RuleGap("item_neighbourhood", "cf.users_with_history", "activity.users_ge_5", ">=",
                   threshold, value, "fail", threshold - value)


def test_forecast_gives_the_week_a_failing_count_rule_passes():
    """A failing users_ge_5 rule is forecast from that metric's own history."""
    t, u5 = planted(8, y0=40, growth=0.15)
    users = u5 * 3.3
    fc = forecast_readiness(entries_from(users, users_ge_5=u5,
                                         gaps_last=[_users_ge_5_gap(u5[-1])]))
    assert fc.reason is None and fc.points == 8
    (c,) = fc.crossings
    assert (c.weeks, c.weeks_low, c.weeks_high) == crossing_weeks(t, u5, 300.0)
    last = date(2026, 9, 6) + timedelta(days=7 * 7)
    assert c.date == (last + timedelta(days=7 * c.weeks)).isoformat()
    nt = fc.next_tier
    assert nt.tier == "item_neighbourhood" and nt.forecast == ("cf.users_with_history",)
    assert (nt.weeks, nt.weeks_low, nt.weeks_high) == (c.weeks, c.weeks_low, c.weeks_high)
    assert fc.users.form in ("exponential", "linear") and fc.users.points == 8
    assert "Growth continues as in the fitted window" in fc.assumption


def test_learning_curve_users_are_translated_into_weeks_via_users_fit():
    """Users needed by the learning curve become a users threshold and its crossing week."""
    t, users = planted(8, y0=400, growth=0.1)
    lift_gap = RuleGap("item_neighbourhood", "cf.lift_worth_having",
                       "evidence.itemknn_relative_lift", ">=", 0.1, 0.04, "fail", 0.06)
    fc = forecast_readiness(entries_from(users, gaps_last=[lift_gap], users_needed=300.0,
                                         curve_train_users=600.0))
    target = users[-1] * (600 + 300) / 600  # users scale with training users
    lc = fc.learning_curve
    assert lc.threshold == pytest.approx(target)
    assert (lc.weeks, lc.weeks_low, lc.weeks_high) == crossing_weeks(t, users, target)
    assert fc.next_tier.forecast == ("learning_curve",)
    assert fc.next_tier.weeks == lc.weeks


def test_requirements_that_do_not_grow_are_listed_not_forecast():
    """A next-tier rule on a flag (categories) gives a reason and no tier date."""
    _, users = planted(6)
    gap = RuleGap("segment_lists", "seg.has_categories", "signals.categories", ">=", 1.0,
                  0.0, "fail", 1.0)
    fc = forecast_readiness(entries_from(users, gaps_last=[gap], next_tier="segment_lists"))
    nt = fc.next_tier
    assert nt.weeks is None and "seg.has_categories" in nt.reason
    assert nt.not_forecast and fc.crossings == ()


def test_flat_history_gives_rule_reason_instead_of_week():
    """When the metric is flat, the rule's crossing carries the reason, not a week."""
    rng = np.random.default_rng(SEED)
    u5 = 120 + rng.normal(0, 3, 6)
    fc = forecast_readiness(entries_from(u5 * 3, users_ge_5=u5,
                                         gaps_last=[_users_ge_5_gap(u5[-1])]))
    (c,) = fc.crossings
    assert c.weeks is None and "flat" in c.reason
    assert fc.next_tier.weeks is None


def test_forecast_to_dict_is_plain_json():
    """The forecast's dict survives a JSON round trip with its form and point count."""
    _, u5 = planted(8, y0=40, growth=0.15)
    fc = forecast_readiness(entries_from(u5 * 3, users_ge_5=u5,
                                         gaps_last=[_users_ge_5_gap(u5[-1])]))
    d = json.loads(json.dumps(fc.to_dict(), allow_nan=False))
    assert d["points"] == 8 and d["users"]["form"] in ("exponential", "linear")
    assert d["crossings"][0]["target"] == "cf.users_with_history"


def test_backtest_rule_without_learning_curve_estimate_is_not_forecast():
    """A failing lift rule with no learning-curve estimate gives a reason, not a date."""
    _, users = planted(6)
    gap = RuleGap("item_neighbourhood", "cf.lift_significant", "evidence.itemknn_lift_low",
                  ">", 0.0, -0.01, "fail", 0.01)
    nt = forecast_readiness(entries_from(users, gaps_last=[gap])).next_tier
    assert nt.weeks is None and "backtest result" in nt.reason
