"""Accounts no person could produce, and days the logging seems to have missed.

Pure functions over the events frame (or its daily counts): no I/O, no messages. Every
threshold here is common practice, no published source; each is a keyword argument so a
caller can state and change it.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from advisor.config import AuditConfig
from advisor.load.model import LINE_COL, SOURCE_COL
from advisor.validate.model import QualityIssue

__all__ = [
    "DROP_RATIO",
    "DROP_WINDOW",
    "MIN_USERS_FOR_QUANTILE",
    "ImplausibleUsers",
    "anomaly_issues",
    "daily_counts",
    "implausible_users",
    "logging_gaps",
    "volume_drops",
]

#: Below this many users the top quantile of activity is decided by a handful of accounts
#: (the 0.999 quantile of 500 users interpolates between the two busiest), so a single bot
#: would set its own threshold; the volume rule is skipped. Common practice, no published source.
MIN_USERS_FOR_QUANTILE = 1000

#: A drop is a day with events below ``DROP_RATIO`` x the median of the ``DROP_WINDOW`` days
#: before it. Common practice, no published source.
DROP_RATIO = 0.1
DROP_WINDOW = 7


@dataclass(frozen=True, slots=True)
class ImplausibleUsers:
    """Accounts flagged as implausible, and why."""

    users: tuple[str, ...]
    """Every flagged account, busiest first."""
    by_volume: tuple[str, ...]
    """Accounts above ``factor`` x the activity quantile (counted events in the log)."""
    by_rate: tuple[str, ...]
    """Accounts with more than ``max_per_hour`` counted events in one clock hour (UTC)."""
    volume_threshold: float | None
    """Counted events above which an account is flagged by volume; ``None`` when the volume
    rule was skipped (fewer than ``min_users`` users)."""
    users_considered: int
    """Users with at least one counted event."""
    counted_events: dict[str, int]
    """Counted events of each flagged account."""

    def to_dict(self) -> dict:
        return {
            "users": list(self.users),
            "by_volume": list(self.by_volume),
            "by_rate": list(self.by_rate),
            "volume_threshold": None if self.volume_threshold is None
            else float(self.volume_threshold),
            "users_considered": int(self.users_considered),
            "counted_events": {k: int(v) for k, v in self.counted_events.items()},
        }


def implausible_users(
    events: pd.DataFrame,
    *,
    quantile: float = 0.999,
    factor: float = 3.0,
    max_per_hour: int = 300,
    min_users: int = MIN_USERS_FOR_QUANTILE,
) -> ImplausibleUsers:
    """Flag accounts whose activity is beyond a person's.

    Parameters
    ----------
    events : pandas.DataFrame
        Columns ``user``, ``ts`` (datetime64, UTC) and ``counts`` (bool); only rows that count
        as interactions are used.
    quantile, factor : float
        Volume rule: more counted events than ``factor`` x the ``quantile`` quantile of users'
        counted events.
    max_per_hour : int
        Rate rule: more counted events than this in one clock hour (UTC).
    min_users : int
        The volume rule is applied only with at least this many users.

    Returns
    -------
    ImplausibleUsers

    Notes
    -----
    The quantile is numpy's default (linear interpolation, Hyndman & Fan type 7). Either rule
    flags an account. Both thresholds are common practice, no published source: a person
    rarely produces 300 plays in an hour (one each 12 s), and an account three times beyond
    the 99.9th percentile is far outside the bulk of real users.

    Examples
    --------
    >>> ts = pd.Timestamp("2024-01-01", tz="UTC") + pd.to_timedelta(range(400), unit="s")
    >>> ev = pd.DataFrame({"user": ["bot"] * 400, "ts": ts, "counts": True})
    >>> implausible_users(ev, max_per_hour=300).by_rate
    ('bot',)
    """
    sub = events.loc[events["counts"].to_numpy(dtype=bool), ["user", "ts"]]
    codes, uniques = pd.factorize(sub["user"])
    per_user = np.bincount(codes, minlength=len(uniques)) if len(uniques) else np.zeros(0, int)
    threshold = None
    volume = np.zeros(len(uniques), dtype=bool)
    if len(uniques) >= min_users:
        threshold = float(factor * np.quantile(per_user, quantile))
        volume = per_user > threshold
    rate = np.zeros(len(uniques), dtype=bool)
    if len(sub):
        # Wall time in UTC, as plain datetime64, floored to the clock hour.
        utc = sub["ts"].dt.tz_convert("UTC").dt.tz_localize(None).to_numpy("datetime64[ns]")
        hour = utc.astype("datetime64[h]").astype(np.int64)
        span = int(hour.max() - hour.min() + 1)
        key = codes.astype(np.int64) * span + (hour - hour.min())
        keys, n = np.unique(key, return_counts=True)
        rate[np.unique(keys[n > max_per_hour] // span)] = True
    flagged = np.flatnonzero(volume | rate)
    order = flagged[np.argsort(-per_user[flagged], kind="stable")]
    name = [str(u) for u in uniques]
    return ImplausibleUsers(
        users=tuple(name[i] for i in order),
        by_volume=tuple(name[i] for i in order if volume[i]),
        by_rate=tuple(name[i] for i in order if rate[i]),
        volume_threshold=threshold,
        users_considered=len(uniques),
        counted_events={name[i]: int(per_user[i]) for i in order},
    )


def daily_counts(ts: pd.Series) -> pd.Series:
    """Events per UTC day, from the first to the last day with an event, zeros included.

    Parameters
    ----------
    ts : pandas.Series
        Event times, ``datetime64[ns, UTC]``.

    Returns
    -------
    pandas.Series
        int64 counts indexed by midnight UTC of each day (empty when ``ts`` is empty).

    Examples
    --------
    >>> ts = pd.Series(pd.to_datetime(["2024-01-01 10:00", "2024-01-03 09:00"], utc=True))
    >>> daily_counts(ts).tolist()
    [1, 0, 1]
    """
    days = ts.dropna().dt.floor("D")
    if days.empty:
        return pd.Series([], dtype=np.int64, index=pd.DatetimeIndex([], tz="UTC"))
    counts = days.value_counts()
    full = pd.date_range(days.min(), days.max(), freq="D")
    return counts.reindex(full, fill_value=0).astype(np.int64)


def logging_gaps(daily: pd.Series) -> tuple[dt.date, ...]:
    """Days with no event strictly inside the covered span.

    Parameters
    ----------
    daily : pandas.Series
        Output of :func:`daily_counts`.

    Returns
    -------
    tuple of datetime.date

    Notes
    -----
    A day without a single event in a running service usually means the logger or the
    export failed (common practice, no published source). The first and last day are never
    gaps, as the span is defined by them.

    Examples
    --------
    >>> ts = pd.Series(pd.to_datetime(["2024-01-01", "2024-01-03"], utc=True))
    >>> logging_gaps(daily_counts(ts))
    (datetime.date(2024, 1, 2),)
    """
    return tuple(d.date() for d in daily.index[daily.to_numpy() == 0])


def volume_drops(
    daily: pd.Series, *, window: int = 7, ratio: float = 0.1
) -> tuple[tuple[dt.date, int, float], ...]:
    """Days whose volume falls below ``ratio`` x the median of the ``window`` days before.

    Parameters
    ----------
    daily : pandas.Series
        Output of :func:`daily_counts`; leave out a last day that is not complete.
    window : int, default 7
        Trailing days whose median is the reference (all must precede the day).
    ratio : float, default 0.1
        A day with events but below this fraction of the reference is a drop.

    Returns
    -------
    tuple of (date, events that day, trailing median)

    Notes
    -----
    The median of the previous seven days resists a single odd day and spans one weekly
    cycle; 10% is far below ordinary weekday swings. Both are common practice, no published
    source. Days with no event at all are gaps (:func:`logging_gaps`), not drops.

    Examples
    --------
    >>> idx = pd.date_range("2024-01-01", periods=8, freq="D", tz="UTC")
    >>> volume_drops(pd.Series([100] * 7 + [3], index=idx))
    ((datetime.date(2024, 1, 8), 3, 100.0),)
    """
    ref = daily.shift(1).rolling(window, min_periods=window).median()
    hit = (daily > 0) & (daily < ratio * ref)
    return tuple((d.date(), int(daily[d]), float(ref[d])) for d in daily.index[hit.to_numpy()])


@dataclass(frozen=True, slots=True)
class RowLocator:
    """How an engine points a message at the first matching row: each function returns the
    ``(file, line)`` of the earliest such row."""

    first_of_users: Callable[[tuple[str, ...]], tuple[str, int]]
    """First row of any of these users."""
    first_from: Callable[[pd.Timestamp], tuple[str, int]]
    """First row at or after this instant."""
    first_on_day: Callable[[pd.Timestamp], tuple[str, int]]
    """First row on the UTC day starting at this instant."""


def anomaly_issues(
    events: pd.DataFrame,
    bots: ImplausibleUsers,
    *,
    as_of: pd.Timestamp,
    config: AuditConfig,
) -> tuple[list[QualityIssue], list[str]]:
    """Quality issues for implausible accounts, logging gaps and volume drops.

    Parameters
    ----------
    events : pandas.DataFrame
        Validated events (``user``, ``ts``, ``_source``, ``_line``).
    bots : ImplausibleUsers
        Output of :func:`implausible_users`.
    as_of : pandas.Timestamp
        The audit date; a last day it cuts short is not judged for a drop.
    config : AuditConfig
        Thresholds named in the messages, and ``exclude_implausible``.

    Returns
    -------
    (list of QualityIssue, list of str)
        The issues (rows stay in the events) and notes for the report.
    """
    ts = events["ts"].reset_index(drop=True)  # labels = positions, for _row
    one_day = pd.Timedelta(days=1)
    locate = RowLocator(
        first_of_users=lambda users: _row(
            events, int(np.flatnonzero(events["user"].isin(users).to_numpy())[0])),
        first_from=lambda t: _row(events, ts[ts >= t].idxmin()),
        first_on_day=lambda d: _row(events, ts[(ts >= d) & (ts < d + one_day)].idxmin()),
    )
    return issues_from_daily(daily_counts(ts), bots, as_of=as_of, config=config, locate=locate)


def issues_from_daily(
    daily: pd.Series,
    bots: ImplausibleUsers,
    *,
    as_of: pd.Timestamp,
    config: AuditConfig,
    locate: RowLocator,
) -> tuple[list[QualityIssue], list[str]]:
    """The anomaly issues from daily event counts (every day of the span, zeros included);
    shared by both engines so their messages cannot drift apart."""
    issues: list[QualityIssue] = []
    notes: list[str] = []
    if bots.users:
        file, line = locate.first_of_users(tuple(bots.users))
        rules = []
        if bots.by_volume:
            rules.append(f"{len(bots.by_volume)} above {bots.volume_threshold:,.0f} counted "
                         f"events, {config.implausible_factor:g} x the "
                         f"{config.implausible_quantile:g} quantile of users' activity")
        if bots.by_rate:
            rules.append(f"{len(bots.by_rate)} with more than {config.max_events_per_hour} "
                         "counted events in one clock hour")
        top = bots.users[0]
        if config.exclude_implausible:
            what = ("They stay in the counts but are left out of co-occurrence and the "
                    "backtest; set exclude_implausible = false under [audit] to keep them in")
        else:
            what = ("They are kept everywhere (exclude_implausible = false); set it to true "
                    "under [audit] to leave them out of co-occurrence and the backtest")
        issues.append(QualityIssue(
            code="implausible_user", count=len(bots.users), unit="users",
            severity="excluded" if config.exclude_implausible else "flagged",
            first_file=file, first_line=line,
            message=(f"{_count(len(bots.users), 'account')} beyond a person's activity, likely "
                     "automated or shared "
                     f"({'; '.join(rules)}); the busiest has "
                     f"{bots.counted_events[top]:,} counted events (first at {file} line "
                     f"{line}; ids are not printed). {what}, or raise max_events_per_hour or "
                     "implausible_factor if "
                     "they are real people.")))
    gaps = logging_gaps(daily)
    if gaps:
        resume = pd.Timestamp(gaps[0], tz="UTC") + pd.Timedelta(days=1)
        file, line = locate.first_from(resume)
        shown = ", ".join(str(d) for d in gaps[:5]) + (" ..." if len(gaps) > 5 else "")
        issues.append(QualityIssue(
            code="logging_gap", count=len(gaps), unit="days", severity="flagged",
            first_file=file, first_line=line,
            message=(f"{_count(len(gaps), 'day')} without a single event inside the covered span "
                     f"{daily.index[0].date()} to {daily.index[-1].date()}: {shown} (logging "
                     f"resumes at {file} line {line}); a running service logs every day. Check "
                     "whether logging was down or files are missing; activity over the span is "
                     "understated.")))
    drops = list(volume_drops(daily, window=DROP_WINDOW, ratio=DROP_RATIO))
    if drops and pd.notna(as_of):
        last = daily.index[-1]
        cut = as_of < last + pd.Timedelta(days=1) - pd.Timedelta(microseconds=1)
        if cut and drops[-1][0] == last.date():
            drops.pop()
            notes.append(f"The last day, {last.date()}, has few events but ends after the audit "
                         "date, so it is probably incomplete; it is not reported as a drop.")
    if drops:
        day0 = pd.Timestamp(drops[0][0], tz="UTC")
        file, line = locate.first_on_day(day0)
        shown = ", ".join(f"{d} ({c:,} event{'s' * (c != 1)} against a median of {m:,.0f})"
                          for d, c, m in drops[:5]) + (" ..." if len(drops) > 5 else "")
        issues.append(QualityIssue(
            code="volume_drop", count=len(drops), unit="days", severity="flagged",
            first_file=file, first_line=line,
            message=(f"{_count(len(drops), 'day')} below {DROP_RATIO:.0%} of the median daily "
                     f"volume of the {DROP_WINDOW} days before: {shown}; first at {file} line "
                     f"{line}. A partial export or a logging outage is likely; check those "
                     "days' files.")))
    return issues, notes


def _count(n: int, noun: str) -> str:
    return f"{n:,} {noun}{'' if n == 1 else 's'}"


def _row(events: pd.DataFrame, pos: int) -> tuple[str, int]:
    return str(events[SOURCE_COL].iat[pos]), int(events[LINE_COL].iat[pos])
