"""Pure Python shared by the out-of-core engines (DuckDB, Spark): issue messages, the
"nothing left to audit" checks, the weekly frame and id numbering.

The engines differ only in how they count; every message and every frame the later stages
read is built here (or in ``advisor.validate``), so the engines cannot drift apart in
wording or layout.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from advisor.aggregate._sql_validate import event_rules
from advisor.aggregate.pandas_engine import _WEEK, week_start
from advisor.config import AuditConfig
from advisor.errors import InsufficientDataError
from advisor.validate.anomalies import (
    MIN_USERS_FOR_QUANTILE,
    ImplausibleUsers,
    RowLocator,
    issues_from_daily,
)
from advisor.validate.checks import (
    QUARANTINE_REASONS,
    _row_issues,
    all_set_aside,
    duplicate_issue,
    unmapped_issue,
)
from advisor.validate.checks import _count as count
from advisor.validate.checks import _where as where
from advisor.validate.model import Catalog, QualityIssue, QualityReport, ValidatedLog
from advisor.validate.timestamps import ParsedTimestamps, resolve_as_of

__all__ = ["ScanStart", "anomaly_issues", "busiest_first", "check_enough", "count",
           "duplicate_issue", "finish_validation", "implausible_result", "quarantine_issues",
           "renumber", "start_validation", "unmapped_issue", "weekly_frame", "where"]


def renumber(codes: np.ndarray) -> np.ndarray:
    """Lookup table: dictionary code -> position in the sorted ``codes`` (int32)."""
    lut = np.full(int(codes.max()) + 1 if codes.size else 0, -1, dtype=np.int32)
    lut[codes] = np.arange(codes.size, dtype=np.int32)
    return lut


def quarantine_issues(q: pd.DataFrame, qrows: pd.DataFrame, reason: np.ndarray,
                       rules: pd.DataFrame, as_of: pd.Timestamp, config: AuditConfig,
                       cat_src: str | None) -> list[QualityIssue]:
    """The quarantine issues, by the in-memory path's own message code."""
    if len(q) == 0:
        return []
    r = q["r"].to_numpy(dtype=np.int64)
    rule = {"kind": rules["kind"].to_numpy(dtype=object)[r],
            "lo": rules["lo"].to_numpy(dtype=float)[r],
            "hi": rules["hi"].to_numpy(dtype=float)[r],
            "mapped": rules["mapped"].to_numpy(dtype=bool)[r]}
    typed = pd.DataFrame({"item": q["item"].astype("str"), "event": q["event"].astype("str"),
                          "value": q["value"].astype(np.float64)})
    none = np.zeros(len(q), dtype=bool)
    return _row_issues(qrows, reason, none, rule, none, typed, as_of, config, cat_src)


def check_enough(n_rows: int, rows_used: int, qrows: pd.DataFrame, reason: np.ndarray,
                 counted: Callable[[], int], event_types: Callable[[], dict[str, int]],
                 mapping: dict[str, str]) -> None:
    """Raise :class:`InsufficientDataError` when nothing is left to audit (no rows, every
    row set aside, or no kept event that counts); ``counted`` and ``event_types`` are asked
    only when needed (each is a query on a large log)."""
    if n_rows == 0:
        raise InsufficientDataError("the log has no rows; nothing to audit.")
    if rows_used == 0:
        parts = []
        for i, code in enumerate(QUARANTINE_REASONS, start=1):
            hits = np.flatnonzero(reason == i)
            if hits.size:
                file = str(qrows["_source"].iat[hits[0]])
                line = int(qrows["_line"].iat[hits[0]])
                parts.append(f"{code} {hits.size:,} ({where(file, line)})")
        raise all_set_aside(n_rows, parts, mapping)
    if counted() == 0:
        shown = ", ".join(f"{t!r} {c:,}" for t, c in list(event_types().items())[:10])
        raise InsufficientDataError(
            f"none of the {rows_used:,} events kept counts as an interaction (event types: "
            f"{shown}). Mark the type that records use (a play, a view, a purchase) with "
            "counts = true under [events.<type>] in the config file."
        )


def weekly_frame(w_every, c_every, c_inter, w_counted, active, returning,
                  user_first: np.ndarray, item_first: np.ndarray) -> pd.DataFrame:
    """The weekly frame from per-week counts (weeks as epoch seconds of their Monday)."""
    w_all = np.asarray(w_every, dtype=np.int64)
    weeks = np.arange(w_all.min(), w_all.max() + 1, _WEEK)
    n = weeks.size

    def spread(w, c) -> np.ndarray:
        out = np.zeros(n, dtype=np.int64)
        out[(np.asarray(w, dtype=np.int64) - weeks[0]) // _WEEK] = np.asarray(c)
        return out

    new_users = np.bincount((week_start(user_first) - weeks[0]) // _WEEK, minlength=n)
    new_items = np.bincount((week_start(item_first) - weeks[0]) // _WEEK, minlength=n)
    return pd.DataFrame({
        "week": pd.to_datetime(weeks, unit="s", utc=True).date,
        "events": spread(w_every, c_every),
        "interactions": spread(w_every, c_inter),
        "active_users": spread(w_counted, active),
        "returning_users": spread(w_counted, returning),
        "new_users": new_users.astype(np.int64),
        "new_items": new_items.astype(np.int64),
    })


@dataclass(frozen=True, slots=True)
class ScanStart:
    """What an out-of-core engine's first scan settles before any row is judged."""

    notes: list[str]
    """Notes so far (skipped files, timestamps, as-of date, event column); the engine adds
    its own."""
    timestamp_format: str
    as_of: pd.Timestamp
    has_event: bool
    event_map: pd.DataFrame | None
    """Each event text's rule number (``None`` without an event column)."""
    rules: pd.DataFrame
    """One row per event rule: counts, value kind and bounds, mapped."""
    missing_r: int
    """Rule number of rows with no event type."""


def start_validation(skipped_files, per_event: pd.DataFrame, stats: dict,
                     mapping: dict, config: AuditConfig) -> ScanStart:
    """The notes, as-of date and event rule tables from the scan statistics, as the
    in-memory path words and orders them (the same for DuckDB and Spark)."""
    notes: list[str] = []
    if skipped_files:
        sk = skipped_files
        notes.append(f"Files skipped in the log folder (unsupported type): "
                     f"{', '.join(sk[:10])}{' ...' if len(sk) > 10 else ''}.")
    parsed = ParsedTimestamps(values=pd.Series([], dtype="datetime64[ns, UTC]"),
                              missing=np.zeros(0, bool), bad=np.zeros(0, bool),
                              kinds=stats["kinds"], naive=stats["naive"],
                              date_only=stats["date_only"])
    as_of, as_of_note = resolve_as_of(config.as_of, stats["ts_max"])
    notes.extend(parsed.notes())
    notes.append(as_of_note)
    has_event = "event" in mapping
    keys = None
    if has_event:
        keys = per_event.loc[per_event["ev_key"].notna()].sort_values("first")["ev_key"]
    em, rules, missing_r, note = event_rules(keys, config, mapping.get("value"))
    if note:
        notes.append(note)
    return ScanStart(notes, parsed.format, as_of, has_event, em, rules, missing_r)


def finish_validation(*, bots: ImplausibleUsers,
                      anomalies: tuple[list[QualityIssue], list[str]],
                      issues: list[QualityIssue], notes: list[str],
                      catalog_issues, n_rows: int, rows_used: int,
                      quarantine: pd.DataFrame, duplicates: int, timestamp_format: str,
                      as_of: pd.Timestamp, catalog: Catalog | None,
                      config: AuditConfig) -> ValidatedLog:
    """The :class:`ValidatedLog` of an out-of-core engine (``events = None``) from what it
    counted: notes and issues in the in-memory path's order and wording."""
    if bots.volume_threshold is None:
        notes.append(
            f"Only {bots.users_considered:,} users count interactions (fewer than "
            f"{MIN_USERS_FOR_QUANTILE:,}): the rule 'more than {config.implausible_factor:g} "
            f"x the {config.implausible_quantile:g} quantile of activity' was skipped, as so "
            "few users cannot define it; the hourly rule "
            f"(more than {config.max_events_per_hour} counted events in a clock hour) "
            "applies.")
    found, said = anomalies
    issues.extend(found)
    notes.extend(said)
    issues.extend(catalog_issues)
    issues.sort(key=lambda i: (i.unit != "rows", -i.count))
    quality = QualityReport(
        rows_read=n_rows, rows_used=rows_used, rows_quarantined=len(quarantine),
        duplicates_dropped=duplicates, issues=tuple(issues), timestamp_format=timestamp_format,
        notes=tuple(notes))
    return ValidatedLog(events=None, quarantine=quarantine, quality=quality,
                        implausible_users=bots.users, as_of=as_of, catalog=catalog)


_DAY_NS = 86_400_000_000_000


def busiest_first(volume: np.ndarray, rate: np.ndarray, counts: np.ndarray,
                  first: np.ndarray) -> np.ndarray:
    """Positions of the flagged users, busiest first; ties in order of first appearance, as
    ``pandas.factorize`` numbers them on the in-memory path."""
    flagged = np.flatnonzero(volume | rate)
    return flagged[np.lexsort((np.asarray(first)[flagged], -counts[flagged]))]


def implausible_result(order: np.ndarray, name, counts: np.ndarray, volume: np.ndarray,
                       rate: np.ndarray, threshold: float | None,
                       considered: int) -> ImplausibleUsers:
    """:class:`ImplausibleUsers` from the flagged positions ``order`` and ``name[i]``, the id
    of the user at position ``i``."""
    return ImplausibleUsers(
        users=tuple(str(name[i]) for i in order),
        by_volume=tuple(str(name[i]) for i in order if volume[i]),
        by_rate=tuple(str(name[i]) for i in order if rate[i]),
        volume_threshold=threshold,
        users_considered=considered,
        counted_events={str(name[i]): int(counts[i]) for i in order},
    )


def anomaly_issues(day: np.ndarray, events: np.ndarray, bots: ImplausibleUsers, *,
                   as_of: pd.Timestamp, config: AuditConfig,
                   first_of_users: Callable[[tuple[str, ...]], tuple[str, int]],
                   first_at: Callable[[str], tuple[str, int]]
                   ) -> tuple[list[QualityIssue], list[str]]:
    """The issues of :func:`advisor.validate.anomalies.issues_from_daily` from usable events
    per day (``day``: days since the epoch, sorted); ``first_at`` takes a SQL condition on
    ``ts`` (epoch nanoseconds) and names the first matching row."""
    index = pd.to_datetime(np.asarray(day, dtype=np.int64) * _DAY_NS, unit="ns", utc=True)
    full = pd.date_range(index.min(), index.max(), freq="D")
    daily = pd.Series(np.asarray(events, dtype=np.int64), index=index).reindex(
        full, fill_value=0).astype(np.int64)
    locate = RowLocator(
        first_of_users=first_of_users,
        first_from=lambda t: first_at(f"ts >= {t.value}"),
        first_on_day=lambda d: first_at(f"ts >= {d.value} AND ts < {d.value + _DAY_NS}"),
    )
    return issues_from_daily(daily, bots, as_of=as_of, config=config, locate=locate)
