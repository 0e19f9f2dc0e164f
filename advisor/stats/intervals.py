"""Binomial proportion intervals: Wilson score intervals and the sample size they need.

Pure functions, vectorised over numpy arrays; the arithmetic is delegated to statsmodels
(``statsmodels.stats.proportion``) so that our numbers are a well-kept library's numbers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from statsmodels.stats.proportion import proportion_confint, samplesize_confint_proportion

from advisor.errors import ConfigError, LogFormatError

__all__ = ["Interval", "users_needed", "wilson_interval", "wilson_lower_bound"]


@dataclass(frozen=True, slots=True)
class Interval:
    """A two-sided confidence interval for a binomial proportion (or an array of them).

    Each field is a ``float`` when the inputs were scalars and a numpy array of floats when
    they were arrays. Entries with zero trials are NaN in all three fields.
    """

    estimate: float | np.ndarray
    """Observed proportion successes / trials (a share between 0 and 1)."""
    low: float | np.ndarray
    """Lower end of the interval (share between 0 and 1)."""
    high: float | np.ndarray
    """Upper end of the interval (share between 0 and 1)."""
    confidence: float
    """Two-sided confidence level the interval was built for, e.g. 0.95."""

    def to_dict(self) -> dict:
        """JSON-safe plain Python: floats (or lists of floats), NaN written as ``None``."""
        return {
            "estimate": _plain(self.estimate),
            "low": _plain(self.low),
            "high": _plain(self.high),
            "confidence": float(self.confidence),
        }


def _plain(value: float | np.ndarray) -> float | None | list:
    if np.ndim(value) == 0:
        v = float(value)
        return None if math.isnan(v) else v
    return [None if math.isnan(v) else float(v) for v in np.asarray(value, float).ravel()]


def _check_confidence(confidence: float, where: str) -> float:
    try:
        c = float(confidence)
    except (TypeError, ValueError):
        c = float("nan")
    if isinstance(confidence, bool) or not 0.0 < c < 1.0:
        raise ConfigError(
            f"{where}: confidence must be a number strictly between 0 and 1 (e.g. 0.95), "
            f"got {confidence!r}; pass the two-sided level as a fraction, not a percentage"
        )
    return c


def _counts(successes, trials, where: str) -> tuple[np.ndarray, np.ndarray]:
    s = np.asarray(successes, dtype=float)
    n = np.asarray(trials, dtype=float)
    try:
        s, n = np.broadcast_arrays(s, n)
    except ValueError:
        raise LogFormatError(
            f"{where}: successes has shape {np.shape(successes)} and trials has shape "
            f"{np.shape(trials)}; expected equal or broadcastable shapes; pass one count "
            "pair per proportion"
        ) from None
    bad = ~np.isfinite(s) | ~np.isfinite(n) | (s < 0) | (n < 0) | (s > n)
    if bad.any():
        i = int(np.flatnonzero(bad.ravel())[0])
        raise LogFormatError(
            f"{where}: {int(bad.sum())} count pair(s) are not valid proportions "
            f"(first at position {i}: successes={s.ravel()[i]!r}, trials={n.ravel()[i]!r}); "
            "expected finite counts with 0 <= successes <= trials; check how the counts "
            "were aggregated"
        )
    return s, n


def wilson_interval(successes, trials, *, confidence: float = 0.95) -> Interval:
    """Wilson score interval for a binomial proportion, vectorised.

    Parameters
    ----------
    successes : int or array_like
        Number of successes (for example users who also consumed item x).
    trials : int or array_like
        Number of trials (for example users who consumed item y); broadcast against
        ``successes``.
    confidence : float, optional
        Two-sided confidence level, strictly between 0 and 1. Default 0.95.

    Returns
    -------
    Interval
        ``estimate``, ``low`` and ``high``; floats for scalar input, arrays otherwise.
        Where ``trials == 0`` all three are NaN (no information, no warning).

    Raises
    ------
    ConfigError
        If ``confidence`` is not strictly between 0 and 1.
    LogFormatError
        If a count is negative, not finite, or ``successes > trials``.

    Notes
    -----
    With ``z`` the ``1 - (1 - confidence) / 2`` normal quantile and ``p = s / n``, the
    Wilson interval is ``(p + z^2/2n +- z sqrt(p(1-p)/n + z^2/4n^2)) / (1 + z^2/n)``;
    computed by ``statsmodels.stats.proportion.proportion_confint(method="wilson")``. It is
    used instead of the textbook normal (Wald) interval because the Wald interval collapses
    to zero width at 0 or n successes and under-covers for small ``n`` (Brown, Cai &
    DasGupta 2001). Assumes independent trials with one common success probability. The
    Wilson interval still under-covers somewhat for very small ``n`` with ``p`` near 0
    or 1 (Brown et al. 2001); treat intervals from a handful of trials as rough.

    References
    ----------
    .. [1] Wilson, E. B. (1927). Probable inference, the law of succession, and
       statistical inference. JASA 22:209-212.
    .. [2] Newcombe, R. G. (1998). Two-sided confidence intervals for the single
       proportion: comparison of seven methods. Statistics in Medicine 17:857-872.
    .. [3] Brown, L. D., Cai, T. T. & DasGupta, A. (2001). Interval estimation for a
       binomial proportion. Statistical Science 16(2):101-133.

    Examples
    --------
    >>> ci = wilson_interval(81, 263)
    >>> round(ci.low, 4), round(ci.high, 4)
    (0.2553, 0.3662)
    """
    c = _check_confidence(confidence, "wilson_interval")
    scalar = np.ndim(successes) == 0 and np.ndim(trials) == 0
    s, n = _counts(successes, trials, "wilson_interval")
    empty = n == 0
    # statsmodels divides by nobs; feed 1 where there are no trials and blank those out
    # afterwards, so a catalogue of unseen items does not spray RuntimeWarnings.
    n_safe = np.where(empty, 1.0, n)
    low, high = proportion_confint(s, n_safe, alpha=1.0 - c, method="wilson")
    low = np.where(empty, np.nan, np.clip(np.asarray(low, float), 0.0, 1.0))
    high = np.where(empty, np.nan, np.clip(np.asarray(high, float), 0.0, 1.0))
    est = np.where(empty, np.nan, s / n_safe)
    if scalar:
        return Interval(float(est), float(low), float(high), c)
    return Interval(est, low, high, c)


def wilson_lower_bound(successes, trials, *, confidence: float = 0.95):
    """Lower end of the Wilson score interval, for ranking items by a share.

    Parameters
    ----------
    successes : int or array_like
        Positive outcomes per item (for example positive ratings).
    trials : int or array_like
        All outcomes per item (for example all ratings).
    confidence : float, optional
        Two-sided confidence level of the interval whose lower end is returned.

    Returns
    -------
    float or numpy.ndarray
        The lower bound; NaN where ``trials == 0``. In a descending
        ``numpy.argsort(-bound)`` NaN entries sort last, so unseen items rank below all
        seen ones.

    Raises
    ------
    ConfigError, LogFormatError
        As :func:`wilson_interval`.

    Notes
    -----
    Ranking by the lower bound rather than the raw share keeps an item with 2 positives
    out of 2 below one with 90 out of 100: a share backed by few trials is discounted.
    The interval is Wilson's (1927); using its lower end as a ranking score is common
    practice, no published source.

    References
    ----------
    .. [1] Wilson, E. B. (1927). Probable inference, the law of succession, and
       statistical inference. JASA 22:209-212.

    Examples
    --------
    >>> bool(wilson_lower_bound(2, 2) < wilson_lower_bound(90, 100))
    True
    """
    return wilson_interval(successes, trials, confidence=confidence).low


def users_needed(p, half_width, *, confidence: float = 0.95):
    """Trials needed so an interval for a proportion near ``p`` is at most ``half_width`` wide.

    Parameters
    ----------
    p : float or array_like
        Anticipated proportion, between 0 and 1.
    half_width : float or array_like
        Wanted half-width of the interval (a share, strictly between 0 and 1), broadcast
        against ``p``.
    confidence : float, optional
        Two-sided confidence level. Default 0.95.

    Returns
    -------
    int or numpy.ndarray
        Number of trials (users), rounded up; at least 1. ``int`` for scalar input,
        an ``int64`` array otherwise.

    Raises
    ------
    ConfigError
        If ``confidence``, ``p`` or ``half_width`` is out of range.

    Notes
    -----
    Uses the normal-approximation formula ``n = z^2 p (1 - p) / E^2``
    (``statsmodels.stats.proportion.samplesize_confint_proportion``), with ``z`` the
    ``1 - (1 - confidence) / 2`` normal quantile and ``E`` the half-width. The Wilson
    interval the report shows is not exactly this wide: for moderate ``p`` and the
    resulting ``n`` the two widths agree closely, so the formula serves as an
    approximation to the Wilson width. It is weak near ``p = 0`` or ``1``, where it
    understates the need (at ``p = 0`` it gives 0, floored here to 1 trial); for rare
    events use the rule of three instead (about ``3 / E`` trials for a 95% upper bound of
    ``E`` after zero events; Jovanovic & Levy 1997).

    References
    ----------
    .. [1] Wilson, E. B. (1927). Probable inference, the law of succession, and
       statistical inference. JASA 22:209-212.
    .. [2] Jovanovic, B. D. & Levy, P. S. (1997). A look at the rule of three. The
       American Statistician 51:137-139.

    Examples
    --------
    >>> users_needed(0.5, 0.05)
    385
    """
    c = _check_confidence(confidence, "users_needed")
    scalar = np.ndim(p) == 0 and np.ndim(half_width) == 0
    pa = np.asarray(p, dtype=float)
    ea = np.asarray(half_width, dtype=float)
    if not np.all((pa >= 0.0) & (pa <= 1.0)):
        raise ConfigError(
            f"users_needed: p must lie between 0 and 1, got {p!r}; pass a proportion, "
            "not a percentage"
        )
    if not np.all((ea > 0.0) & (ea < 1.0)):
        raise ConfigError(
            f"users_needed: half_width must be strictly between 0 and 1, got {half_width!r}; "
            "pass the wanted half-width as a share, e.g. 0.05 for +-5 points"
        )
    n = samplesize_confint_proportion(pa, ea, alpha=1.0 - c)
    # Guard the ceiling against representation error (e.g. 100.00000000000001 -> 101).
    out = np.maximum(np.ceil(np.asarray(n, float) - 1e-9), 1).astype(np.int64)
    if scalar:
        return int(out)
    return out

