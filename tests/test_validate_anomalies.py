"""Implausible accounts, logging gaps and volume drops, on logs with planted structure."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from advisor.config import AuditConfig
from advisor.validate.anomalies import (
    MIN_USERS_FOR_QUANTILE,
    anomaly_issues,
    daily_counts,
    implausible_users,
    logging_gaps,
    volume_drops,
)

START = pd.Timestamp("2024-03-01", tz="UTC")


def _events(users, seconds, counts=True) -> pd.DataFrame:
    n = len(users)
    return pd.DataFrame({
        "user": pd.Series(users, dtype="str"),
        "ts": START + pd.to_timedelta(np.asarray(seconds), unit="s"),
        "counts": counts,
        "_source": "log.csv",
        "_line": np.arange(2, n + 2),
    })


def _crowd(n_users: int, seed: int = 1) -> tuple[list[str], np.ndarray]:
    """Users with Poisson(20)+1 events spread over 30 days (invented, planted-structure data)."""
    rng = np.random.default_rng(seed)
    per = rng.poisson(20, n_users) + 1
    users = np.repeat([f"u{i}" for i in range(n_users)], per).tolist()
    seconds = rng.integers(0, 30 * 86400, len(users))
    return users, seconds


def test_planted_heavy_account_is_flagged_by_volume_against_numpy_quantile():
    """With 1,500 users, a 2,000-event account spread thinly over a month is flagged by volume."""
    users, seconds = _crowd(1500)
    bot_seconds = np.linspace(0, 30 * 86400 - 1, 2000).astype(int)  # ~3 per hour: rate rule quiet
    ev = _events(users + ["bot"] * 2000, np.concatenate([seconds, bot_seconds]))
    res = implausible_users(ev, quantile=0.999, factor=3.0, max_per_hour=300)
    per_user = ev.groupby("user").size().to_numpy()
    # numpy.quantile (linear, the documented method) is the reference for the threshold.
    assert res.volume_threshold == pytest.approx(3.0 * np.quantile(per_user, 0.999))
    assert res.users == ("bot",) and res.by_volume == ("bot",) and res.by_rate == ()
    assert res.counted_events == {"bot": 2000}
    assert res.users_considered == 1501


def test_planted_burst_account_is_flagged_by_the_hourly_rule():
    """400 plays inside one clock hour exceed 300 per hour; 300 exactly do not."""
    users, seconds = _crowd(50)
    burst = ["burst"] * 400
    edge = ["edge"] * 300
    ev = _events(users + burst + edge,
                 np.concatenate([seconds, 7200 + np.arange(400) * 9, 3600 + np.arange(300) * 12]))
    res = implausible_users(ev, max_per_hour=300)
    assert res.by_rate == ("burst",)
    assert res.volume_threshold is None  # 52 users: the quantile rule is skipped


def test_burst_split_across_two_clock_hours_is_judged_per_clock_hour():
    """400 events from 10:30 to 11:30 are 200 per clock hour, so not flagged at 300."""
    ev = _events(["b"] * 400, 10.5 * 3600 + np.arange(400) * 9)
    assert implausible_users(ev, max_per_hour=300).users == ()


def test_volume_rule_is_skipped_below_the_minimum_user_count():
    """Below MIN_USERS_FOR_QUANTILE users even a huge account is not judged by volume."""
    users, seconds = _crowd(MIN_USERS_FOR_QUANTILE - 2)  # with the bot: one short
    bot_seconds = np.linspace(0, 30 * 86400 - 1, 5000).astype(int)
    res = implausible_users(_events(users + ["bot"] * 5000,
                                    np.concatenate([seconds, bot_seconds])))
    assert res.volume_threshold is None and res.users == ()


def test_events_that_do_not_count_are_ignored():
    """Impressions (counts=False) do not make an account implausible."""
    ev = _events(["shown"] * 1000, np.arange(1000), counts=False)
    res = implausible_users(ev, max_per_hour=300)
    assert res.users == () and res.users_considered == 0


def test_daily_counts_cover_the_span_with_zeros():
    """Days are UTC calendar days from first to last event, empty days counted as 0."""
    ts = pd.Series(pd.to_datetime(["2024-03-01 23:59", "2024-03-02 00:01", "2024-03-04 12:00",
                                   "2024-03-04 13:00"], utc=True))
    daily = daily_counts(ts)
    assert daily.tolist() == [1, 1, 0, 2]
    assert daily.index[0] == pd.Timestamp("2024-03-01", tz="UTC")


def test_planted_missing_day_is_a_logging_gap():
    """A month of hourly events with one day removed reports exactly that day."""
    hours = pd.date_range("2024-03-01", "2024-03-31 23:00", freq="h", tz="UTC")
    hours = hours[hours.normalize() != pd.Timestamp("2024-03-17", tz="UTC")]
    assert logging_gaps(daily_counts(pd.Series(hours))) == (dt.date(2024, 3, 17),)


def test_span_ends_are_never_gaps():
    """One event on each of two far-apart days: only the days between are gaps."""
    ts = pd.Series(pd.to_datetime(["2024-03-01", "2024-03-04"], utc=True))
    assert logging_gaps(daily_counts(ts)) == (dt.date(2024, 3, 2), dt.date(2024, 3, 3))


def test_planted_drop_is_found_and_steady_volume_is_not():
    """A day at 5% of the usual volume is a drop; ordinary weekly swings are not."""
    idx = pd.date_range("2024-03-01", periods=28, freq="D", tz="UTC")
    weekly = np.tile([100, 110, 90, 95, 105, 60, 55], 4)
    steady = pd.Series(weekly, index=idx)
    assert volume_drops(steady) == ()
    dropped = steady.copy()
    dropped.iloc[20] = 5
    # Reference: pandas median of the seven days before (statistics.median would agree).
    ref = float(np.median(weekly[13:20]))
    assert volume_drops(dropped) == ((idx[20].date(), 5, ref),)


def test_drop_needs_a_full_trailing_week():
    """The first seven days have no reference, so they are never drops."""
    idx = pd.date_range("2024-03-01", periods=8, freq="D", tz="UTC")
    assert volume_drops(pd.Series([100, 1, 100, 100, 100, 100, 100, 100], index=idx)) == ()


def _hourly(days: int, skip: tuple[int, ...] = (), low: dict | None = None) -> pd.DataFrame:
    """Planted log: 24 events a day (one per hour) from user 'u', some days removed/thinned."""
    rows = []
    for d in range(days):
        if d in skip:
            continue
        per_day = (low or {}).get(d, 24)
        rows.extend(d * 86400 + h * 3600 for h in range(per_day))
    return _events(["u"] * len(rows), rows)


def test_anomaly_issues_point_at_where_logging_resumes():
    """The gap issue lists the day and the file/line of the first event after it."""
    ev = _hourly(20, skip=(9,))
    issues, _ = anomaly_issues(ev, implausible_users(ev), as_of=ev["ts"].max(),
                               config=AuditConfig())
    (gap,) = [i for i in issues if i.code == "logging_gap"]
    assert gap.count == 1 and gap.unit == "days" and "2024-03-10" in gap.message
    first_after = ev.index[ev["ts"] >= pd.Timestamp("2024-03-11", tz="UTC")][0]
    assert gap.first_line == ev["_line"].iat[first_after] and gap.first_file == "log.csv"


def test_partial_last_day_is_not_reported_as_a_drop():
    """A thin last day cut by the audit date is noted, not reported; a complete one is reported."""
    ev = _hourly(15, low={14: 1})
    as_of = ev["ts"].max()  # 2024-03-15 00:00: the day has barely begun
    issues, notes = anomaly_issues(ev, implausible_users(ev), as_of=as_of,
                                   config=AuditConfig())
    assert not [i for i in issues if i.code == "volume_drop"]
    assert any("probably incomplete" in n for n in notes)
    end_of_day = pd.Timestamp("2024-03-15 23:59:59.999999", tz="UTC")
    issues, _ = anomaly_issues(ev, implausible_users(ev), as_of=end_of_day,
                               config=AuditConfig())
    (drop,) = [i for i in issues if i.code == "volume_drop"]
    assert "2024-03-15 (1 event against a median of 24)" in drop.message


def test_implausible_issue_says_excluded_or_flagged_per_config():
    """The severity follows exclude_implausible, the message gives the switch, and it names no
    user id (reports do not list raw user ids)."""
    ev = _events(["b"] * 400, np.arange(400))
    bots = implausible_users(ev)
    (issue,) = anomaly_issues(ev, bots, as_of=ev["ts"].max(), config=AuditConfig())[0]
    assert issue.severity == "excluded" and issue.unit == "users" and issue.count == 1
    assert "exclude_implausible = false" in issue.message and "'b'" not in issue.message
    kept = AuditConfig(exclude_implausible=False)
    (issue,) = anomaly_issues(ev, bots, as_of=ev["ts"].max(), config=kept)[0]
    assert issue.severity == "flagged"
