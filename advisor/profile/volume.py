"""Volume, growth and density of the counted interactions."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from advisor.aggregate.model import Aggregates


@dataclass(frozen=True, slots=True)
class VolumeProfile:
    """How much data there is, and how fast it grows."""

    events: int
    """Usable events of every type (impressions included)."""
    interactions: int
    """Events that count as interactions."""
    users: int
    """Distinct users with at least one counted interaction."""
    items_seen: int
    """Distinct items with at least one counted interaction."""
    catalogue_items: int
    """Items in the catalogue plus seen items missing from it (equals ``items_seen`` without a
    catalogue)."""
    pairs: int
    """Distinct user-item pairs."""
    density: float
    """Distinct pairs / (users x catalogue items), in [0, 1]."""
    span_days: float
    """Days from the first to the last counted interaction."""
    weeks: int
    """Calendar weeks (Monday to Sunday, UTC) the log touches."""
    weekly: pd.DataFrame
    """Per-week events, interactions, active, returning, new users and new items."""
    user_growth_last4: float | None
    """New users in the last 4 complete-or-partial weeks / users before them (None if < 5 weeks)."""

    def to_dict(self) -> dict:
        return {
            "events": self.events,
            "interactions": self.interactions,
            "users": self.users,
            "items_seen": self.items_seen,
            "catalogue_items": self.catalogue_items,
            "pairs": self.pairs,
            "density": self.density,
            "span_days": self.span_days,
            "weeks": self.weeks,
            "user_growth_last4": self.user_growth_last4,
            "weekly": [
                {k: (str(v) if k == "week" else int(v)) for k, v in row.items()}
                for row in self.weekly.to_dict(orient="records")
            ],
        }


def density(pairs: int, users: int, items: int) -> float:
    """Share of the user x item matrix that is filled.

    Notes
    -----
    ``density = |distinct (u, i) pairs| / (|U| * |I|)``, the "sparsity" complement used to
    describe rating data sets (e.g. Adomavicius & Zhang 2012, ACM TMIS 3(1)).

    Examples
    --------
    >>> density(100_000, 943, 1682)  # MovieLens 100K's published figures
    0.06304669364224531
    """
    if users <= 0 or items <= 0:
        return float("nan")
    return pairs / (users * items)


def volume_profile(agg: Aggregates) -> VolumeProfile:
    """Volume, growth and density from the aggregates."""
    weekly = agg.weekly
    growth = None
    if len(weekly) >= 5:
        before = int(weekly["new_users"].iloc[:-4].sum())
        recent = int(weekly["new_users"].iloc[-4:].sum())
        growth = recent / before if before else None
    return VolumeProfile(
        events=agg.all_events,
        interactions=agg.counted_events,
        users=agg.n_users,
        items_seen=agg.n_seen_items,
        catalogue_items=agg.n_items,
        pairs=int(len(agg.pairs)),
        density=density(len(agg.pairs), agg.n_users, agg.n_items),
        span_days=(agg.last_ts - agg.first_ts) / 86400.0,
        weeks=int(len(weekly)),
        weekly=weekly,
        user_growth_last4=growth,
    )
