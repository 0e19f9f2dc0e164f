"""How much history users have, and whether they come back."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from advisor.aggregate.model import Aggregates

ACTIVITY_LEVELS = (1, 2, 3, 5, 10, 20)


@dataclass(frozen=True, slots=True)
class ActivityProfile:
    """Distribution of distinct items per user, and week-over-week return."""

    levels: tuple[int, ...]
    """Thresholds m for the shares below."""
    users_at_least: tuple[int, ...]
    """Users with at least m distinct items, for each m in ``levels``."""
    share_at_least: tuple[float, ...]
    """Share of users with at least m distinct items."""
    median_items: float
    """Median distinct items per user."""
    mean_items: float
    """Mean distinct items per user."""
    returning_share: float | None
    """Users active in both of two consecutive weeks / users active in the first of them,
    pooled over the last (up to) four week pairs; None with fewer than two weeks."""

    def at_least(self, m: int) -> int:
        """Users with at least ``m`` distinct items; ``m`` must be one of ``levels``."""
        return self.users_at_least[self.levels.index(m)]

    def to_dict(self) -> dict:
        return {
            "levels": list(self.levels),
            "users_at_least": list(self.users_at_least),
            "share_at_least": list(self.share_at_least),
            "median_items": self.median_items,
            "mean_items": self.mean_items,
            "returning_share": self.returning_share,
        }


def share_at_least(counts: np.ndarray, levels) -> tuple[np.ndarray, np.ndarray]:
    """Number and share of units whose count is at least each level.

    Examples
    --------
    >>> n, s = share_at_least(np.array([1, 2, 5, 7]), (1, 5))
    >>> n.tolist(), s.tolist()
    ([4, 2], [1.0, 0.5])
    """
    counts = np.sort(np.asarray(counts))
    levels = np.asarray(levels)
    n = counts.size - np.searchsorted(counts, levels, side="left")
    share = n / counts.size if counts.size else np.full(levels.shape, np.nan)
    return n, share


def activity_profile(agg: Aggregates, *, levels=ACTIVITY_LEVELS) -> ActivityProfile:
    """User activity distribution from the aggregates."""
    n, s = share_at_least(agg.user_items, levels)
    weekly = agg.weekly
    ret = None
    if len(weekly) >= 2:
        prev = weekly["active_users"].to_numpy()[:-1][-4:]
        back = weekly["returning_users"].to_numpy()[1:][-4:]
        ret = float(back.sum() / prev.sum()) if prev.sum() else None
    return ActivityProfile(
        levels=tuple(int(x) for x in levels),
        users_at_least=tuple(int(x) for x in n),
        share_at_least=tuple(float(x) for x in s),
        median_items=float(np.median(agg.user_items)),
        mean_items=float(np.mean(agg.user_items)),
        returning_share=ret,
    )
