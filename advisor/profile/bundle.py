"""All profiles of one audit, computed from the validated log and its aggregates."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from advisor.aggregate.model import Aggregates
from advisor.aggregate.summary import EventSummary, summarize_events
from advisor.config import AuditConfig
from advisor.profile.activity import ActivityProfile, activity_profile
from advisor.profile.categories import CategoryProfile, category_profile
from advisor.profile.cooccurrence import CooccurrenceProfile, cooccurrence_profile
from advisor.profile.ratings import RatingProfile, rating_profile
from advisor.profile.signals import Signals, signals
from advisor.profile.support import (
    LongTailProfile,
    SupportProfile,
    long_tail_profile,
    support_profile,
)
from advisor.profile.volume import VolumeProfile, volume_profile
from advisor.validate.model import ValidatedLog


@dataclass(frozen=True, slots=True)
class Profile:
    """Every profiler's result for one audit."""

    volume: VolumeProfile
    activity: ActivityProfile
    support: SupportProfile
    long_tail: LongTailProfile
    cooccurrence: CooccurrenceProfile
    ratings: RatingProfile | None
    categories: CategoryProfile | None
    signals: Signals
    history_cap: int
    """Most recent distinct items per user used for co-occurrence."""
    users_excluded: int
    """Implausible accounts left out of co-occurrence."""

    def to_dict(self) -> dict:
        return {
            "volume": self.volume.to_dict(),
            "activity": self.activity.to_dict(),
            "support": self.support.to_dict(),
            "long_tail": self.long_tail.to_dict(),
            "cooccurrence": {**self.cooccurrence.to_dict(), "history_cap": self.history_cap,
                             "users_excluded": self.users_excluded},
            "ratings": None if self.ratings is None else self.ratings.to_dict(),
            "categories": None if self.categories is None else self.categories.to_dict(),
            "signals": self.signals.to_dict(),
        }


def item_categories(agg: Aggregates, log: ValidatedLog) -> list[tuple[str, ...]]:
    """Categories of each item number (empty tuple when unknown)."""
    if log.catalog is None:
        return [()] * agg.n_items
    lookup = dict(zip(log.catalog.items["item"], log.catalog.items["categories"]))
    return [tuple(lookup.get(str(i), ())) for i in agg.item_labels]


def exposed_users(agg: Aggregates, exclude_implausible: bool = True) -> np.ndarray:
    """Per item, the users who could have consumed it: those whose latest interaction is at
    or after the item's first one (every user for an item never seen).

    Notes
    -----
    In a growing service, users who left before an item appeared could not take it; counting
    them in its base rate understates the rate and makes pairs of new items look
    co-consumed above chance. Users whose last interaction precedes the item's first are
    left out; users still active after it are assumed exposed (assumption stated in the
    report: without impression data, exposure is inferred from activity).
    """
    last = agg.user_last_ts
    if exclude_implausible and agg.implausible.any():
        last = last[~agg.implausible]
    last = np.sort(last)
    first = agg.item_first_ts
    exposed = last.size - np.searchsorted(last, first, side="left")
    return np.where(first >= 0, exposed, last.size).astype(np.int64)


def build_profile(log: ValidatedLog, agg: Aggregates, config: AuditConfig,
                  matrix=None, *, events: EventSummary | None = None) -> Profile:
    """Run every profiler.

    ``matrix`` is the capped user x item matrix (computed here when not given). ``events`` is
    the engine's :class:`EventSummary`; when ``None`` it is computed from ``log.events``
    (the in-memory engine).
    """
    if events is None:
        events = summarize_events(log.events, agg)
    if matrix is None:
        matrix = agg.matrix(cap=config.history_cap, exclude_implausible=config.exclude_implausible)
    cooc = cooccurrence_profile(matrix, confidence=config.confidence,
                                min_pair_users=config.min_pair_users,
                                item_weights=agg.item_events.astype(float),
                                exposed_users=exposed_users(agg, config.exclude_implausible),
                                false_discovery_control=True)
    ratings = _ratings(events, config)
    cats = None
    if log.catalog is not None and log.catalog.has_categories:
        cats = category_profile(agg.pairs, item_categories(agg, log), agg.item_users)
    return Profile(
        volume=volume_profile(agg),
        activity=activity_profile(agg),
        support=support_profile(agg),
        long_tail=long_tail_profile(agg),
        cooccurrence=cooc,
        ratings=ratings,
        categories=cats,
        signals=signals(log, events),
        history_cap=config.history_cap,
        users_excluded=int(agg.implausible.sum()) if config.exclude_implausible else 0,
    )


def _ratings(events: EventSummary, config: AuditConfig) -> RatingProfile | None:
    r = events.ratings
    if r is None:
        return None
    return rating_profile(r["item_idx"].to_numpy(dtype=np.int64),
                          r["user_idx"].to_numpy(dtype=np.int64),
                          r["ts"].to_numpy(dtype=np.int64),
                          r["value"].to_numpy(dtype=float), confidence=config.confidence)
