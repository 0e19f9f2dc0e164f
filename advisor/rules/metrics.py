"""Flatten the profile (and evidence) into the named metrics the rules read.

Metric names are part of the rules-file interface: ``advisor rules --metrics`` lists them
with their values, and the README documents each one.
"""

from __future__ import annotations

import math

from advisor.profile.bundle import Profile
from advisor.validate.model import QualityReport

#: Meaning of each metric family, for the documentation and ``advisor rules``.
METRIC_DOCS = {
    "volume.events": "usable events of every type",
    "volume.interactions": "events that count as interactions",
    "volume.users": "distinct users with a counted interaction",
    "volume.items_seen": "distinct items with a counted interaction",
    "volume.catalogue_items": "catalogue items (plus seen items missing from it)",
    "volume.pairs": "distinct user-item pairs",
    "volume.density": "distinct pairs / (users x catalogue items)",
    "volume.span_days": "days from first to last counted interaction",
    "volume.weeks": "calendar weeks touched by the log",
    "activity.users_ge_M": "users with at least M distinct items (M = 1, 2, 3, 5, 10, 20)",
    "activity.share_ge_M": "share of users with at least M distinct items",
    "activity.median_items": "median distinct items per user",
    "activity.returning_share": "share of a week's active users active again the next week",
    "support.items_ge_M": "catalogue items with at least M distinct users "
                          "(M = 1, 5, 10, 20, 50, 100)",
    "support.share_ge_M": "share of the catalogue with at least M distinct users",
    "support.coverage": "share of the catalogue with any counted interaction",
    "longtail.top20_share": "share of interactions on the most popular 20% of items",
    "longtail.gini": "Gini coefficient of interactions per catalogue item",
    "cooc.share_items_ge_K_neighbours": "share of seen items with at least K significant "
                                        "neighbours",
    "cooc.share_interactions_ge_K_neighbours": "share of interactions on such items",
    "cooc.pairs_significant": "item pairs whose co-consumption is above chance",
    "cooc.median_neighbours": "median significant neighbours per seen item",
    "ratings.ratings": "rating events (latest per user and item)",
    "ratings.items_ge_M": "items with at least M ratings (M = 1, 5, 10, 20, 50)",
    "categories.count": "distinct categories",
    "categories.rows_supportable": "categories that can fill a 10-item row of supported items",
    "categories.share_focused": "share of users (3+ items) with half their items in one category",
    "categories.median_concentration": "median Herfindahl index of users' category shares",
    "signals.progress": "1 if the log carries progress values, else 0",
    "signals.ratings": "1 if ratings are present (log or catalogue), else 0",
    "signals.added_dates": "1 if the catalogue has dates added, else 0",
    "signals.categories": "1 if the catalogue has categories, else 0",
    "signals.item_features": "1 if the catalogue has categories or titles, else 0",
    "catalogue.items_added_28d": "catalogue items added in the last 28 days",
    "quality.quarantined_share": "share of rows read that were quarantined",
    "evidence.*": "backtest results (see the evidence section of the README)",
}


def _clean(v):
    if v is None:
        return None
    if isinstance(v, bool):
        return float(v)
    v = float(v)
    return None if math.isnan(v) else v


def quality_metrics(q: QualityReport) -> dict[str, float | None]:
    """Metrics from the data-quality report.

    Examples
    --------
    >>> from advisor.validate.model import QualityReport
    >>> quality_metrics(QualityReport(200, 150, 40, 10, (), "iso8601"))
    {'quality.quarantined_share': 0.2}
    """
    share = q.rows_quarantined / q.rows_read if q.rows_read else None
    return {"quality.quarantined_share": share}


def profile_metrics(p: Profile) -> dict[str, float | None]:
    """Every profile metric by name (None when it could not be measured)."""
    m: dict[str, float | None] = {}
    v = p.volume
    for k in ("events", "interactions", "users", "items_seen", "catalogue_items", "pairs",
              "density", "span_days", "weeks"):
        m[f"volume.{k}"] = getattr(v, k)
    a = p.activity
    for lvl, n, s in zip(a.levels, a.users_at_least, a.share_at_least):
        m[f"activity.users_ge_{lvl}"] = n
        m[f"activity.share_ge_{lvl}"] = s
    m["activity.median_items"] = a.median_items
    m["activity.returning_share"] = a.returning_share
    s = p.support
    for lvl, n, sh in zip(s.levels, s.items_at_least, s.share_at_least):
        m[f"support.items_ge_{lvl}"] = n
        m[f"support.share_ge_{lvl}"] = sh
    m["support.coverage"] = s.coverage
    m["longtail.top20_share"] = p.long_tail.top20_share
    m["longtail.gini"] = p.long_tail.gini
    c = p.cooccurrence
    for k, si, sx in zip(c.k_thresholds, c.item_share, c.interaction_share):
        m[f"cooc.share_items_ge_{k}_neighbours"] = si
        m[f"cooc.share_interactions_ge_{k}_neighbours"] = sx
    m["cooc.pairs_significant"] = c.pairs_significant
    m["cooc.median_neighbours"] = c.median_neighbours
    r = p.ratings
    if r is not None:
        m["ratings.ratings"] = r.ratings
        for lvl, n in zip(r.levels, r.items_at_least):
            m[f"ratings.items_ge_{lvl}"] = n
    cat = p.categories
    if cat is not None:
        m["categories.count"] = cat.categories
        m["categories.rows_supportable"] = cat.rows_supportable
        m["categories.share_focused"] = cat.share_focused
        m["categories.median_concentration"] = cat.median_concentration
    sig = p.signals
    m["signals.progress"] = sig.progress_events > 0
    m["signals.ratings"] = sig.rating_events > 0 or sig.catalogue_ratings
    m["signals.added_dates"] = sig.added_dates
    m["signals.categories"] = sig.categories
    m["signals.item_features"] = sig.categories or sig.titles
    m["catalogue.items_added_28d"] = sig.items_added_28d
    return {k: _clean(x) for k, x in m.items()}
