"""In-memory aggregation with pandas and numpy (the default engine for logs that fit in memory)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from advisor.aggregate.model import Aggregates, labels_in
from advisor.errors import InsufficientDataError
from advisor.validate.model import ValidatedLog

_WEEK = 7 * 86400
# 1970-01-01 was a Thursday; shifting by 3 days makes week numbers start on Mondays.
_MONDAY_SHIFT = 3 * 86400


def epoch_seconds(ts: pd.Series) -> np.ndarray:
    """Epoch seconds (int64) of a UTC datetime series, whatever its resolution."""
    return (ts - pd.Timestamp(0, tz="UTC")) // pd.Timedelta(seconds=1)


def week_start(seconds: np.ndarray) -> np.ndarray:
    """Epoch seconds of the Monday 00:00 UTC that starts each timestamp's week."""
    return (seconds + _MONDAY_SHIFT) // _WEEK * _WEEK - _MONDAY_SHIFT


def aggregate(log: ValidatedLog) -> Aggregates:
    """Compute :class:`Aggregates` from a validated log.

    Raises
    ------
    InsufficientDataError
        If no event counts as an interaction.
    """
    ev = log.events
    counted = ev[ev["counts"].to_numpy(dtype=bool)]
    if counted.empty:
        raise InsufficientDataError(
            f"none of the {len(ev)} usable events counts as an interaction (event types found: "
            f"{', '.join(sorted(map(str, ev['event'].unique()))[:10])}); map at least one event "
            "type with counts = true in the [events] section of the config file"
        )
    secs = epoch_seconds(counted["ts"]).to_numpy(dtype=np.int64)
    user_codes, user_labels = pd.factorize(counted["user"].to_numpy(dtype=object), sort=True)
    seen_codes, seen_labels = pd.factorize(counted["item"].to_numpy(dtype=object), sort=True)
    n_users, n_seen = len(user_labels), len(seen_labels)

    item_labels = np.asarray(seen_labels, dtype=object)
    if log.catalog is not None:
        cat_ids = log.catalog.items["item"].to_numpy(dtype=object)
        unseen = np.setdiff1d(cat_ids.astype(str), item_labels.astype(str))
        item_labels = np.concatenate([item_labels, unseen.astype(object)])
    n_items = item_labels.size

    frame = pd.DataFrame({"u": user_codes.astype(np.int32), "i": seen_codes.astype(np.int32),
                          "t": secs})
    grouped = frame.groupby(["u", "i"], sort=True)
    pairs = grouped.agg(first_ts=("t", "min"), last_ts=("t", "max")).reset_index()
    pairs = pairs.rename(columns={"u": "user_idx", "i": "item_idx"})

    pu, pi = pairs["user_idx"].to_numpy(), pairs["item_idx"].to_numpy()
    user_items = np.bincount(pu, minlength=n_users).astype(np.int64)
    item_users = np.bincount(pi, minlength=n_items).astype(np.int64)
    user_events = np.bincount(user_codes, minlength=n_users).astype(np.int64)
    item_events = np.bincount(seen_codes, minlength=n_items).astype(np.int64)

    user_first = np.full(n_users, np.iinfo(np.int64).max)
    np.minimum.at(user_first, user_codes, secs)
    user_last = np.full(n_users, np.iinfo(np.int64).min)
    np.maximum.at(user_last, user_codes, secs)
    item_first = np.full(n_items, -1, dtype=np.int64)
    first_seen = np.full(n_seen, np.iinfo(np.int64).max)
    np.minimum.at(first_seen, seen_codes, secs)
    item_first[:n_seen] = first_seen

    implausible = labels_in(np.asarray(user_labels, dtype=object), log.implausible_users)

    all_secs = epoch_seconds(ev["ts"]).to_numpy(dtype=np.int64)
    weekly = _weekly(all_secs, secs, user_codes, seen_codes, user_first, first_seen)

    return Aggregates(
        user_labels=np.asarray(user_labels, dtype=object),
        item_labels=item_labels,
        n_seen_items=n_seen,
        pairs=pairs,
        user_items=user_items,
        user_events=user_events,
        user_first_ts=user_first,
        user_last_ts=user_last,
        item_users=item_users,
        item_events=item_events,
        item_first_ts=item_first,
        weekly=weekly,
        implausible=implausible,
        counted_events=int(len(counted)),
        all_events=int(len(ev)),
        first_ts=int(secs.min()),
        last_ts=int(secs.max()),
    )


def _weekly(all_secs, secs, user_codes, item_codes, user_first, item_first) -> pd.DataFrame:
    """Per-week counts over the covered span; weeks with no events appear with zeros."""
    wk_all = week_start(all_secs)
    wk = week_start(secs)
    weeks = np.arange(wk_all.min(), wk_all.max() + 1, _WEEK)
    idx_all = (wk_all - weeks[0]) // _WEEK
    idx = (wk - weeks[0]) // _WEEK
    n = weeks.size
    events = np.bincount(idx_all, minlength=n)
    interactions = np.bincount(idx, minlength=n)
    active = pd.DataFrame({"w": idx, "u": user_codes}).drop_duplicates()
    active_users = np.bincount(active["w"].to_numpy(), minlength=n)
    # A user "returns" in week w when active in both w-1 and w.
    aw = active["w"].to_numpy().astype(np.int64)
    key = active["u"].to_numpy().astype(np.int64) * n + aw
    back = (aw > 0) & np.isin(key - 1, key)
    returning = np.bincount(aw[back], minlength=n)
    new_users = np.bincount((week_start(user_first) - weeks[0]) // _WEEK, minlength=n)
    new_items = np.bincount((week_start(item_first) - weeks[0]) // _WEEK, minlength=n)
    return pd.DataFrame({
        "week": pd.to_datetime(weeks, unit="s", utc=True).date,
        "events": events.astype(np.int64),
        "interactions": interactions.astype(np.int64),
        "active_users": active_users.astype(np.int64),
        "returning_users": returning.astype(np.int64),
        "new_users": new_users.astype(np.int64),
        "new_items": new_items.astype(np.int64),
    })
