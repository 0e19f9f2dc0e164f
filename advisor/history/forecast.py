"""Readiness forecast: when will what the next tier still lacks be within reach?

The weekly growth of a count (users, interactions, users with five or more items, ...) is
fitted over the stored audits with statsmodels OLS, as exponential growth (``log(value)``
linear in the week) or linear growth, whichever has the lower AIC on the count's own scale.
For each blocking rule that a count fails, the fit is extrapolated to the week the count
crosses the rule's threshold, with an interval from the prediction intervals. The learning
curve's "extra training users for the target lift" is translated into weeks through the
users fit. Too few audits, or a flat or falling trend, give a reason instead of a number.
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date, timedelta
from typing import Any

import numpy as np
from statsmodels.regression.linear_model import OLS
from statsmodels.tools.tools import add_constant
from statsmodels.stats.stattools import durbin_watson

from advisor.history.entry import HistoryEntry

__all__ = ["ASSUMPTION", "DEFAULT_HORIZON_WEEKS", "FORMS", "MIN_POINTS", "Crossing",
           "Forecast", "GrowthFit", "Projection", "TierReach", "crossing_weeks",
           "fit_growth", "forecast_readiness", "is_count_metric"]

#: Fewest audits a growth fit is made from. With two parameters, three points leave one
#: degree of freedom: the t quantile (12.7 at 95%) makes the interval wide unless growth is
#: near-exact, which is the honest answer after three weeks; fewer points give no interval.
MIN_POINTS = 3

#: Furthest a crossing is looked for, in weeks after the last audit (common practice, no
#: published source: a year is already a long extrapolation from a few months of audits).
DEFAULT_HORIZON_WEEKS = 52

#: Weeks after the last audit for which each growth fit lists projected values.
PROJECTION_WEEKS = 8

FORMS = ("auto", "exponential", "linear")

ASSUMPTION = ("Growth continues as in the fitted window: the same trend, with week-to-week "
              "scatter like the past. A launch, a campaign, a season or a change in logging "
              "breaks it.")

#: Metrics that grow with traffic and can therefore be extrapolated in time.
_COUNT_METRIC = re.compile(
    r"^(volume\.(events|interactions|users|items_seen|pairs)"
    r"|activity\.users_ge_\d+|support\.items_ge_\d+"
    r"|ratings\.(ratings|items_ge_\d+)|cooc\.pairs_significant)$")

_EQUATIONS = {"exponential": "log({m}) = a + b * week", "linear": "{m} = a + b * week"}


def is_count_metric(metric: str) -> bool:
    """True for a volume or activity count that grows with traffic.

    Examples
    --------
    >>> is_count_metric("activity.users_ge_5"), is_count_metric("volume.density")
    (True, False)
    """
    return bool(_COUNT_METRIC.match(metric))


def _clean(x: Any) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


@dataclass(frozen=True, slots=True)
class Projection:
    """The fitted value some weeks after the last audit, with its prediction interval."""

    weeks_ahead: int
    """Weeks after the last audit."""
    date: str | None
    """That week's date (``YYYY-MM-DD``), when the audits' dates are known."""
    value: float
    """Fitted value (for exponential growth the back-transformed mean of the log, i.e. the
    median), in the metric's unit."""
    low: float
    """Lower end of the prediction interval for a new audit's value."""
    high: float
    """Upper end of that interval."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return {k: getattr(self, k) for k in self.__slots__}


@dataclass(frozen=True, slots=True)
class GrowthFit:
    """Weekly growth of one metric, fitted over the stored audits."""

    metric: str
    """Metric fitted, e.g. ``volume.users``."""
    form: str
    """``exponential`` or ``linear``."""
    equation: str
    """The fitted model, in words (``week`` = weeks since the first audit)."""
    points: int
    """Audits the fit rests on."""
    last_week: float
    """Week index of the last audit (weeks since the first)."""
    intercept: float
    """Fitted a, on the fitted scale (log units for exponential growth)."""
    slope: float
    """Fitted b per week, on the fitted scale."""
    slope_low: float
    """Lower end of the slope's confidence interval."""
    slope_high: float
    """Upper end of that interval."""
    weekly_growth: float
    """Growth per week: a share (0.1 = +10%/week) for exponential growth, the metric's unit
    per week for linear growth."""
    weekly_growth_low: float
    """Lower end of the weekly growth's confidence interval."""
    weekly_growth_high: float
    """Upper end of that interval."""
    aic_exponential: float | None
    """AIC of the exponential fit on the metric's own scale (None: not fitted)."""
    aic_linear: float | None
    """AIC of the linear fit (None: not fitted)."""
    durbin_watson: float | None
    """Durbin-Watson statistic of the residuals (near 2: no serial correlation; well below
    2: the intervals are too narrow)."""
    growing: bool
    """True when the slope's interval lies above zero."""
    reason: str | None
    """Why no crossing is forecast from this fit (None when growing)."""
    projections: tuple[Projection, ...]
    """Fitted values for the next weeks (empty when not growing)."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        d = {k: getattr(self, k) for k in self.__slots__}
        d["projections"] = [p.to_dict() for p in self.projections]
        return d


@dataclass(frozen=True, slots=True)
class Crossing:
    """When a growing metric is forecast to reach a threshold."""

    target: str
    """What is forecast: a rule id, or ``learning_curve``."""
    tier: str | None
    """Tier of the rule (None for the learning curve)."""
    metric: str
    """Metric extrapolated."""
    threshold: float
    """Value to reach, in the metric's unit."""
    latest: float | None
    """Value at the last audit."""
    weeks: int | None
    """Weeks after the last audit when the fitted trend first reaches the threshold (None:
    see ``reason``)."""
    weeks_low: int | None
    """Earliest week: the upper end of the prediction interval reaches the threshold."""
    weeks_high: int | None
    """Latest week: the lower end of the prediction interval reaches it (None: not within
    the horizon, the interval is open-ended)."""
    date: str | None
    """Date of ``weeks`` (``YYYY-MM-DD``)."""
    date_low: str | None
    """Date of ``weeks_low``."""
    date_high: str | None
    """Date of ``weeks_high``."""
    reason: str | None
    """Why there is no number, or a caveat (None: a plain estimate)."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return {k: getattr(self, k) for k in self.__slots__}


@dataclass(frozen=True, slots=True)
class TierReach:
    """When the next tier's traffic-driven requirements are all forecast to be met."""

    tier: str
    """Id of the next tier."""
    weeks: int | None
    """Weeks after the last audit (the latest of its requirements' crossings)."""
    weeks_low: int | None
    """Latest of the requirements' earliest weeks."""
    weeks_high: int | None
    """Latest of the requirements' latest weeks (None: open-ended)."""
    date: str | None
    """Date of ``weeks``."""
    date_low: str | None
    """Date of ``weeks_low``."""
    date_high: str | None
    """Date of ``weeks_high``."""
    forecast: tuple[str, ...]
    """Requirements combined: rule ids, and ``learning_curve`` for the lift rules."""
    not_forecast: tuple[str, ...]
    """Requirements that do not grow with traffic, one sentence each."""
    reason: str | None
    """Why there is no number (None: an estimate)."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        d = {k: getattr(self, k) for k in self.__slots__}
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in d.items()}


@dataclass(frozen=True, slots=True)
class Forecast:
    """Readiness forecast over the stored audits."""

    confidence: float
    """Confidence level of every interval (slope and prediction intervals)."""
    points: int
    """Audits in the history."""
    first_as_of: str | None
    """As-of date of the first audit (week 0)."""
    last_as_of: str | None
    """As-of date of the last audit; weeks ahead are counted from it."""
    form: str
    """Growth form asked for: ``auto`` (lower AIC), ``exponential`` or ``linear``."""
    horizon_weeks: int
    """Furthest week after the last audit a crossing is looked for."""
    assumption: str
    """What every number here assumes."""
    users: GrowthFit | None
    """Weekly growth of users (None: too few audits)."""
    interactions: GrowthFit | None
    """Weekly growth of interactions (None: too few audits)."""
    crossings: tuple[Crossing, ...]
    """Every failing blocking rule on a count, at the last audit, lowest tier first."""
    learning_curve: Crossing | None
    """Weeks until the users the learning curve asks for (None: no estimate stored)."""
    next_tier: TierReach | None
    """When the next tier's traffic-driven requirements are met (None: at the top)."""
    reason: str | None
    """Why there is no forecast at all (None: see the parts)."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        sub = lambda x: None if x is None else x.to_dict()  # noqa: E731
        return {
            "confidence": self.confidence, "points": self.points,
            "first_as_of": self.first_as_of, "last_as_of": self.last_as_of,
            "form": self.form, "horizon_weeks": self.horizon_weeks,
            "assumption": self.assumption, "users": sub(self.users),
            "interactions": sub(self.interactions),
            "crossings": [c.to_dict() for c in self.crossings],
            "learning_curve": sub(self.learning_curve), "next_tier": sub(self.next_tier),
            "reason": self.reason,
        }


# ------------------------------------------------------------------------------ fitting


@dataclass(frozen=True, slots=True)
class _Fitted:
    """A growth fit with the statsmodels results behind it (private)."""

    public: GrowthFit
    results: Any
    log: bool

    def predict(self, weeks: np.ndarray, alpha: float):
        """Fitted value and prediction interval at week indices, on the metric's scale."""
        frame = self.results.get_prediction(
            add_constant(np.asarray(weeks, float), has_constant="add")
        ).summary_frame(alpha=alpha)
        cols = (frame["mean"].to_numpy(), frame["obs_ci_lower"].to_numpy(),
                frame["obs_ci_upper"].to_numpy())
        return tuple(np.exp(c) if self.log else c for c in cols)


def _fit(weeks: Sequence[float], values: Sequence[float], *, metric: str, confidence: float,
         form: str, origin: date | None) -> _Fitted | str:
    """Fit, or a reason string when the series cannot be fitted."""
    if form not in FORMS:
        raise ValueError(f"form must be one of {FORMS}, got {form!r}")
    x = np.asarray(weeks, float)
    y = np.asarray(values, float)
    if len(x) < MIN_POINTS:
        return (f"only {len(x)} audit(s) with {metric}; a growth forecast needs at least "
                f"{MIN_POINTS} weekly audits")
    alpha = 1.0 - confidence
    design = add_constant(x, has_constant="add")
    fits: dict[str, Any] = {}
    aic: dict[str, float | None] = {"exponential": None, "linear": None}
    positive = bool(np.all(y > 0))
    # A perfectly straight series has zero residuals: its log-likelihood is +inf and
    # statsmodels warns; the AIC is then -inf and still picks the right form.
    with warnings.catch_warnings(), np.errstate(divide="ignore", invalid="ignore"):
        warnings.simplefilter("ignore", RuntimeWarning)
        if form in ("auto", "linear"):
            fits["linear"] = OLS(y, design).fit()
            aic["linear"] = float(fits["linear"].aic)
        if form in ("auto", "exponential") and positive:
            fits["exponential"] = OLS(np.log(y), design).fit()
            # Jacobian of y -> log y: the log model's likelihood of y itself is its
            # likelihood of log y times prod(1 / y), so its AIC on y's scale gains
            # 2 * sum(log y) (as in comparing Box-Cox lambda = 0 with lambda = 1).
            aic["exponential"] = float(fits["exponential"].aic + 2.0 * np.log(y).sum())
    if not fits:
        return f"{metric} has zero or negative values, so exponential growth cannot be fitted"
    if form == "auto" and len(fits) == 2:
        chosen = min(fits, key=lambda k: aic[k] if not math.isnan(aic[k]) else math.inf)
    else:
        chosen = next(iter(fits))
    res = fits[chosen]
    log = chosen == "exponential"
    a, b = (float(v) for v in res.params)
    lo, hi = (float(v) for v in np.asarray(res.conf_int(alpha))[1])
    if log:
        growth, g_lo, g_hi = math.expm1(b), math.expm1(lo), math.expm1(hi)
    else:
        growth, g_lo, g_hi = b, lo, hi
    with warnings.catch_warnings(), np.errstate(divide="ignore", invalid="ignore"):
        warnings.simplefilter("ignore", RuntimeWarning)
        dw = _clean(durbin_watson(np.asarray(res.resid)))
    growing = lo > 0
    pct = f"{confidence:.0%}"
    reason = None
    if not growing:
        where = "is below zero" if hi < 0 else "includes zero"
        word = "falling" if hi < 0 else "flat"
        reason = (f"{metric} is {word}: the weekly slope's {pct} interval [{lo:.3g}, {hi:.3g}] "
                  f"{where}, so no date can be forecast")
    public = GrowthFit(
        metric=metric, form=chosen, equation=_EQUATIONS[chosen].format(m=metric),
        points=int(len(x)), last_week=float(x[-1]), intercept=a, slope=b, slope_low=lo,
        slope_high=hi, weekly_growth=growth, weekly_growth_low=g_lo, weekly_growth_high=g_hi,
        aic_exponential=_clean(aic["exponential"]), aic_linear=_clean(aic["linear"]),
        durbin_watson=dw, growing=growing, reason=reason, projections=())
    fitted = _Fitted(public, res, log)
    if growing:
        ks = np.arange(1, PROJECTION_WEEKS + 1)
        mean, low, high = fitted.predict(x[-1] + ks, alpha)
        last = None if origin is None else origin + timedelta(days=round(7 * x[-1]))
        projections = tuple(
            Projection(int(k), _week_date(last, int(k)), float(m), float(lw), float(h))
            for k, m, lw, h in zip(ks, mean, low, high))
        fitted = _Fitted(_replace_projections(public, projections), res, log)
    return fitted


def _replace_projections(fit: GrowthFit, projections: tuple[Projection, ...]) -> GrowthFit:
    d = {k: getattr(fit, k) for k in fit.__slots__}
    d["projections"] = projections
    return GrowthFit(**d)


def _week_date(last: date | None, k: int | None) -> str | None:
    if last is None or k is None:
        return None
    return (last + timedelta(days=7 * k)).isoformat()


def fit_growth(weeks: Sequence[float], values: Sequence[float], *, metric: str = "value",
               confidence: float = 0.95, form: str = "auto") -> GrowthFit | None:
    """Fit the weekly growth of one metric.

    Parameters
    ----------
    weeks : sequence of float
        Week index of each audit (weeks since the first; need not be whole or evenly spaced).
    values : sequence of float
        The metric at each audit, in its own unit.
    metric : str
        Name used in the equation and messages.
    confidence : float
        Level of the slope and prediction intervals.
    form : {"auto", "exponential", "linear"}
        ``auto`` fits both and keeps the lower AIC on the metric's own scale.

    Returns
    -------
    GrowthFit or None
        None when there are fewer than :data:`MIN_POINTS` values, or no usable form.

    Notes
    -----
    Exponential growth is OLS of ``log(value)`` on ``[1, week]``; linear growth is OLS of
    ``value`` on ``[1, week]`` (``statsmodels.api.OLS``). The weekly growth of the exponential
    form is ``exp(b) - 1``. To compare the two forms by AIC (Akaike 1974) on one scale, the
    exponential fit's AIC gains ``2 * sum(log value)``, the Jacobian of the log transform, as
    when Box & Cox (1964) compare transformations by likelihood.

    Weakness: cumulative counts have serially correlated residuals (a good week lifts every
    later audit), which OLS ignores; the slope and prediction intervals are then too narrow.
    ``durbin_watson`` (Durbin & Watson 1950) flags it: well below 2 means read the intervals
    as a lower bound on the uncertainty. With few audits, AIC may pick either form.

    References
    ----------
    Akaike, H. (1974). A new look at the statistical model identification. IEEE
    Transactions on Automatic Control 19(6), 716-723.
    Box, G. E. P. & Cox, D. R. (1964). An analysis of transformations. Journal of the Royal
    Statistical Society B 26(2), 211-252.
    Durbin, J. & Watson, G. S. (1950). Testing for serial correlation in least squares
    regression I. Biometrika 37(3/4), 409-428.

    Examples
    --------
    >>> fit = fit_growth([0, 1, 2, 3, 4], [100, 121, 144, 175, 208], form="exponential")
    >>> fit.form, round(fit.weekly_growth, 2), fit.growing
    ('exponential', 0.2, True)
    """
    out = _fit(weeks, values, metric=metric, confidence=confidence, form=form, origin=None)
    return None if isinstance(out, str) else out.public


def _crossing(fitted: _Fitted, threshold: float, *, confidence: float, horizon: int
              ) -> tuple[int | None, int | None, int | None]:
    x_last = fitted.public.last_week
    ks = np.arange(1, horizon + 1)
    mean, low, high = fitted.predict(x_last + ks, 1.0 - confidence)

    def first(reached: np.ndarray) -> int | None:
        idx = np.flatnonzero(reached)
        return int(ks[idx[0]]) if len(idx) else None

    return first(mean >= threshold), first(high >= threshold), first(low >= threshold)


def crossing_weeks(weeks: Sequence[float], values: Sequence[float], threshold: float, *,
                   confidence: float = 0.95, form: str = "auto",
                   horizon_weeks: int = DEFAULT_HORIZON_WEEKS
                   ) -> tuple[int | None, int | None, int | None]:
    """Weeks after the last audit when a growing metric reaches ``threshold``.

    Returns
    -------
    (weeks, weeks_low, weeks_high) : tuple of int or None
        First whole week (1 = the next weekly audit) at which the fitted value, the upper
        end and the lower end of the prediction interval reach the threshold. None when not
        within ``horizon_weeks``, or when the series is too short or not growing.

    Notes
    -----
    The interval is the set of weeks at which a new audit's value equal to the threshold
    lies inside the prediction interval: the inverse-prediction (calibration) interval of
    Eisenhart (1939), read off a grid of whole weeks. It inherits the fit's assumptions
    (see :func:`fit_growth`): it is a statement about the fitted trend continuing, not about
    events the history has not seen.

    References
    ----------
    Eisenhart, C. (1939). The interpretation of certain regression methods and their use in
    biological and industrial research. Annals of Mathematical Statistics 10(2), 162-186.

    Examples
    --------
    >>> crossing_weeks([0, 1, 2, 3, 4, 5], [100, 119, 146, 172, 209, 247], 500,
    ...                form="exponential")
    (4, 4, 5)
    """
    out = _fit(weeks, values, metric="value", confidence=confidence, form=form, origin=None)
    if isinstance(out, str) or not out.public.growing:
        return None, None, None
    return _crossing(out, threshold, confidence=confidence, horizon=horizon_weeks)


# ------------------------------------------------------------------------------ forecast


def _series(entries: Sequence[HistoryEntry], metric: str, origin: date
            ) -> tuple[list[float], list[float]]:
    xs, ys = [], []
    for e in entries:
        v = _clean(e.metrics.get(metric))
        if v is None:
            continue
        xs.append((date.fromisoformat(e.as_of_date) - origin).days / 7.0)
        ys.append(v)
    return xs, ys


def forecast_readiness(entries: Sequence[HistoryEntry], *, confidence: float = 0.95,
                       form: str = "auto",
                       horizon_weeks: int = DEFAULT_HORIZON_WEEKS) -> Forecast:
    """Forecast when the next tier's traffic-driven requirements will be met.

    Parameters
    ----------
    entries : sequence of HistoryEntry
        Stored audits, any order.
    confidence : float
        Level of every interval.
    form : {"auto", "exponential", "linear"}
        Growth form (see :func:`fit_growth`).
    horizon_weeks : int
        Furthest week after the last audit a crossing is looked for.

    Returns
    -------
    Forecast
        Growth fits of users and interactions; for each blocking rule on a count that the
        last audit fails, the week its metric is forecast to cross the threshold (fitting
        that metric's own history); the learning curve's users translated into weeks; and
        for the next tier, the latest of its requirements' weeks. Reasons replace numbers
        when the history is shorter than :data:`MIN_POINTS` audits or a trend is flat.

    Notes
    -----
    Requirements of the next tier are combined by taking the latest of their weeks (and of
    their interval ends): a tier is within reach when all are met. That is a simple bound,
    not a joint interval. Lift rules (``evidence.*lift*``) are forecast only through the
    learning curve, whose "extra training users" are scaled to all users assuming training
    users stay the same share of users. Rules that do not grow with traffic (categories,
    item features) are listed, not forecast.

    Examples
    --------
    >>> forecast_readiness([]).reason
    'only 0 audit(s) in the history; a growth forecast needs at least 4 weekly audits'
    """
    if not 0 < confidence < 1:
        raise ValueError(f"confidence must be between 0 and 1, got {confidence}")
    if form not in FORMS:
        raise ValueError(f"form must be one of {FORMS}, got {form!r}")
    if horizon_weeks < 1:
        raise ValueError(f"horizon_weeks must be at least 1, got {horizon_weeks}")
    ordered = sorted(entries, key=lambda e: e.as_of_date)
    n = len(ordered)
    base = dict(confidence=confidence, points=n, form=form, horizon_weeks=int(horizon_weeks),
                assumption=ASSUMPTION,
                first_as_of=ordered[0].as_of_date if ordered else None,
                last_as_of=ordered[-1].as_of_date if ordered else None)
    if n < MIN_POINTS:
        return Forecast(**base, users=None, interactions=None, crossings=(),
                        learning_curve=None, next_tier=None,
                        reason=(f"only {n} audit(s) in the history; a growth forecast needs "
                                f"at least {MIN_POINTS} weekly audits"))
    origin = date.fromisoformat(ordered[0].as_of_date)
    last_date = date.fromisoformat(ordered[-1].as_of_date)
    cache: dict[str, _Fitted | str] = {}

    def fitted(metric: str) -> _Fitted | str:
        if metric not in cache:
            xs, ys = _series(ordered, metric, origin)
            cache[metric] = _fit(xs, ys, metric=metric, confidence=confidence, form=form,
                                 origin=origin)
        return cache[metric]

    def public(metric: str) -> GrowthFit | None:
        f = fitted(metric)
        return None if isinstance(f, str) else f.public

    def cross(target: str, tier: str | None, metric: str, threshold: float,
              latest: float | None, note: str | None = None) -> Crossing:
        f = fitted(metric)
        empty = dict(weeks=None, weeks_low=None, weeks_high=None, date=None, date_low=None,
                     date_high=None)
        if isinstance(f, str) or not f.public.growing:
            reason = f if isinstance(f, str) else f.public.reason
            return Crossing(target, tier, metric, float(threshold), latest, **empty,
                            reason=reason)
        w, lo, hi = _crossing(f, threshold, confidence=confidence, horizon=horizon_weeks)
        reason = note
        if lo is None:
            return Crossing(target, tier, metric, float(threshold), latest, **empty,
                            reason=(f"not within {horizon_weeks} weeks even at the upper end "
                                    f"of the {confidence:.0%} prediction interval"))
        if w is None:
            reason = (f"the fitted trend does not reach it within {horizon_weeks} weeks; "
                      "only the interval's upper end does")
        elif hi is None:
            reason = _join(note, f"the interval is open-ended: its lower end does not reach "
                                 f"the threshold within {horizon_weeks} weeks")
        span = f.public.last_week
        if w is not None and w > span:
            # Extrapolating further ahead than the history reaches back rests the date on
            # the growth form more than on the data.
            reason = _join(reason, f"indicative: beyond the {span:.0f}-week history")
        return Crossing(target, tier, metric, float(threshold), latest, weeks=w,
                        weeks_low=lo, weeks_high=hi, date=_week_date(last_date, w),
                        date_low=_week_date(last_date, lo), date_high=_week_date(last_date, hi),
                        reason=reason)

    last = ordered[-1]
    crossings = tuple(
        cross(g.rule, g.tier, g.metric, g.threshold, g.value)
        for g in last.gaps
        if g.outcome in ("fail", "borderline") and g.op in (">=", ">")
        and is_count_metric(g.metric))

    curve = None
    if last.users_needed is not None and last.users is not None:
        train = last.curve_train_users
        if train:
            target_users = last.users * (train + last.users_needed) / train
            note = (f"the learning curve asks for {last.users_needed:,.0f} more training users "
                    f"({train:,.0f} today), scaled to all users assuming training users stay "
                    "the same share of them")
        else:
            target_users = last.users + last.users_needed
            note = (f"the learning curve asks for {last.users_needed:,.0f} more training "
                    "users, counted one for one as users (optimistic: training uses a subset)")
        curve = cross("learning_curve", None, "volume.users", target_users, last.users, note)

    reach = _tier_reach(last, crossings, curve, last_date)
    return Forecast(**base, users=public("volume.users"),
                    interactions=public("volume.interactions"), crossings=crossings,
                    learning_curve=curve, next_tier=reach, reason=None)


def _join(a: str | None, b: str) -> str:
    return b if not a else f"{a}; {b}"


def _tier_reach(last: HistoryEntry, crossings: tuple[Crossing, ...], curve: Crossing | None,
                last_date: date) -> TierReach | None:
    tier = last.next_tier
    if tier is None:
        return None
    parts: list[Crossing] = []
    not_forecast: list[str] = []
    curve_used = False
    by_rule = {c.target: c for c in crossings if c.tier == tier}
    for g in last.gaps:
        if g.tier != tier:
            continue
        if g.rule in by_rule:
            parts.append(by_rule[g.rule])
        elif g.metric.startswith("evidence.") and "lift" in g.metric and curve is not None:
            if not curve_used:
                parts.append(curve)
                curve_used = True
        elif g.outcome == "not_measured":
            not_forecast.append(f"{g.rule}: {g.metric} was not measured at the last audit")
        elif g.metric.startswith("evidence."):
            not_forecast.append(f"{g.rule}: {g.metric} is a backtest result with no "
                                "learning-curve estimate of the users it needs")
        else:
            not_forecast.append(f"{g.rule}: {g.metric} does not grow with traffic, so it "
                                "cannot be forecast from growth")
    names = tuple(c.target for c in parts)
    empty = dict(weeks=None, weeks_low=None, weeks_high=None, date=None, date_low=None,
                 date_high=None)
    if not_forecast:
        return TierReach(tier, **empty, forecast=names, not_forecast=tuple(not_forecast),
                         reason="some requirements cannot be forecast from growth: "
                                + "; ".join(not_forecast))
    if not parts:
        return TierReach(tier, **empty, forecast=(), not_forecast=(),
                         reason="every blocking rule of this tier passes at the last audit")
    missing = [c for c in parts if c.weeks is None or c.weeks_low is None]
    if missing:
        return TierReach(tier, **empty, forecast=names, not_forecast=(),
                         reason="; ".join(f"{c.target}: {c.reason}" for c in missing))
    w = max(c.weeks for c in parts)
    lo = max(c.weeks_low for c in parts)
    hi = None if any(c.weeks_high is None for c in parts) else max(c.weeks_high for c in parts)
    return TierReach(tier, weeks=w, weeks_low=lo, weeks_high=hi,
                     date=_week_date(last_date, w), date_low=_week_date(last_date, lo),
                     date_high=_week_date(last_date, hi), forecast=names, not_forecast=(),
                     reason=None if hi is not None else
                     "open-ended: at least one requirement's interval does not close within "
                     "the horizon")
