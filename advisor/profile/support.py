"""Per-item support (distinct users per item) and long-tail concentration."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from advisor.aggregate.model import Aggregates
from advisor.profile.activity import share_at_least
from advisor.stats.inequality import gini, lorenz_curve, top_share

SUPPORT_LEVELS = (1, 5, 10, 20, 50, 100)


@dataclass(frozen=True, slots=True)
class SupportProfile:
    """How many distinct users each catalogue item has."""

    levels: tuple[int, ...]
    """Thresholds m for the shares below."""
    items_at_least: tuple[int, ...]
    """Catalogue items with at least m distinct users."""
    share_at_least: tuple[float, ...]
    """Share of the catalogue with at least m distinct users."""
    coverage: float
    """Share of the catalogue with at least one counted interaction."""
    median_users: float
    """Median distinct users per catalogue item (unseen items count as zero)."""

    def to_dict(self) -> dict:
        return {
            "levels": list(self.levels),
            "items_at_least": list(self.items_at_least),
            "share_at_least": list(self.share_at_least),
            "coverage": self.coverage,
            "median_users": self.median_users,
        }


@dataclass(frozen=True, slots=True)
class LongTailProfile:
    """Concentration of interactions on few items."""

    top20_share: float
    """Share of counted interactions on the most popular 20% of catalogue items."""
    gini: float
    """Gini coefficient of counted interactions per catalogue item (population form, unseen
    catalogue items included as zeros)."""
    lorenz_population: tuple[float, ...]
    """Lorenz curve x: cumulative share of items, least popular first."""
    lorenz_value: tuple[float, ...]
    """Lorenz curve y: cumulative share of interactions."""

    def to_dict(self) -> dict:
        return {
            "top20_share": self.top20_share,
            "gini": self.gini,
            "gini_estimator": "population (mean absolute difference / 2 mean), no n/(n-1)",
            "lorenz": {"population_share": list(self.lorenz_population),
                       "value_share": list(self.lorenz_value)},
        }


def support_profile(agg: Aggregates, *, levels=SUPPORT_LEVELS) -> SupportProfile:
    """Item support over the whole catalogue (unseen catalogue items included)."""
    n, s = share_at_least(agg.item_users, levels)
    return SupportProfile(
        levels=tuple(int(x) for x in levels),
        items_at_least=tuple(int(x) for x in n),
        share_at_least=tuple(float(x) for x in s),
        coverage=float(np.mean(agg.item_users > 0)),
        median_users=float(np.median(agg.item_users)),
    )


def long_tail_profile(agg: Aggregates) -> LongTailProfile:
    """Short-head share, Gini and Lorenz curve of item popularity."""
    counts = agg.item_events.astype(float)
    curve = lorenz_curve(counts, points=21)
    return LongTailProfile(
        top20_share=float(top_share(counts, fraction=0.2)),
        gini=float(gini(counts)),
        lorenz_population=tuple(float(x) for x in curve.population_share),
        lorenz_value=tuple(float(x) for x in curve.value_share),
    )
