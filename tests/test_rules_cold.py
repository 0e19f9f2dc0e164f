"""Tests for advisor.rules.cold: cold users by activity band, cold items and their placement.

``more_users_needed`` is checked against statsmodels
``samplesize_confint_proportion(p, p - base)`` (normal-approximation sample size, REFERENCES.md
[L]); counts and orders are worked by hand on the small cases below.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from builders import build_log
from statsmodels.stats.proportion import samplesize_confint_proportion

from advisor.aggregate import aggregate
from advisor.rules.cold import DAY, cold_items, cold_users, more_users_needed

AS_OF = 1_700_000_000


def _sm_needed(p, base, support, min_users):
    """statsmodels sample size for half-width p - base, ceiling, floored, minus support."""
    n = math.ceil(samplesize_confint_proportion(p, p - base))  # statsmodels, alpha=0.05
    return max(max(n, min_users) - support, 0)


# ------------------------------------------------------------------ cold users

# (distinct items, last interaction relative to the as-of date, active in the last 28 days?)
USERS = [
    (1, -1 * DAY, True),
    (2, -28 * DAY, False),  # exactly 28 days ago: outside (the window is open on the left)
    (4, -28 * DAY + 1, True),
    (5, 0, True),
    (7, -100 * DAY, False),
    (25, -3 * DAY, True),
    (3, -2 * DAY, True),
]


def _cold_users(**kw):
    items = np.array([u[0] for u in USERS])
    last = np.array([AS_OF + u[1] for u in USERS])
    return cold_users(items, last, AS_OF, threshold=5, threshold_source="default", **kw)


def test_cold_users_counts_active_users_below_the_threshold():
    """Active users (last 28 days) with fewer than 5 items are cold: 3 of 5 (by hand)."""
    c = _cold_users()
    assert c.active_users == sum(u[2] for u in USERS) == 5
    assert c.cold_active_users == 3  # 1, 4 and 3 items; the 2-item user is not active
    assert c.cold_share == pytest.approx(3 / 5)
    assert (c.threshold, c.threshold_source, c.active_days) == (5, "default", 28)


def test_cold_users_bands_count_users_and_active_users():
    """Each activity band counts all users and active users in it (worked by hand)."""
    b = _cold_users().bands
    assert b["band"].tolist() == ["1", "2", "3-5", "6-10", "11-20", "21+"]
    assert b["users"].tolist() == [1, 1, 3, 1, 0, 1]
    assert b["active_users"].tolist() == [1, 0, 3, 0, 0, 1]
    assert b["max_items"].isna().tolist() == [False] * 5 + [True]
    cold = dict(zip(b["band"], b["cold"]))
    assert cold["1"] and cold["2"] and not cold["3-5"] and not cold["6-10"] and not cold["21+"]
    # threshold 5: of the band 3-5, only the active users with 3 or 4 items are cold
    assert b["cold_active_users"].tolist() == [1, 0, 2, 0, 0, 0]


def test_cold_users_window_follows_active_days():
    """A longer activity window takes in users whose last interaction is older."""
    c = _cold_users(active_days=120)
    assert c.active_users == 7 and c.cold_active_users == 4


def test_cold_users_with_no_active_user_has_no_share():
    """Nobody active: the cold share is None, not a division error."""
    c = cold_users(np.array([1, 2]), np.array([0, 0]), AS_OF, threshold=5,
                   threshold_source="default")
    assert c.active_users == 0 and c.cold_share is None
    json.dumps(c.to_dict(), allow_nan=False)


# ------------------------------------------------------------------ more users needed

def test_more_users_needed_matches_statsmodels_sample_size():
    """Extra users = ceil(statsmodels sample size for half-width p - base), floored at
    min_users, minus current support, never below zero."""
    support = np.array([3, 20, 2, 500])
    p = np.array([0.4, 0.3, 0.9, 0.5])
    base = np.array([0.1, 0.1, 0.1, 0.2])
    needed, basis = more_users_needed(support, p, base, min_users=10)
    want = [_sm_needed(p[k], base[k], support[k], 10) for k in range(4)]
    assert needed.tolist() == want
    assert want == [8, 1, 8, 0]  # 11 - 3; 21 - 20; floor 10 - 2 (sample size is 1); enough
    assert basis.tolist() == ["own pair"] * 4


def test_more_users_needed_at_other_confidence_levels():
    """The confidence level reaches the sample size (statsmodels alpha = 1 - confidence)."""
    needed, _ = more_users_needed(np.array([0]), np.array([0.35]), np.array([0.3]),
                                  min_users=1, confidence=0.9)
    assert needed[0] == math.ceil(samplesize_confint_proportion(0.35, 0.05, alpha=0.1))


def test_more_users_needed_is_nan_when_p_does_not_exceed_the_base_rate():
    """No amount of data makes a neighbour whose rate is at or below the base rate."""
    needed, basis = more_users_needed(np.array([5, 5]), np.array([0.2, 0.1]),
                                      np.array([0.2, 0.3]), min_users=10)
    assert np.isnan(needed).all()
    assert basis.tolist() == ["no estimate", "no estimate"]


def test_more_users_needed_fills_items_without_pairs_from_the_typical_pair():
    """Items with no scored pair get the pooled estimate; without a pool, no estimate."""
    support = np.array([0, 4])
    p = np.array([np.nan, np.nan])
    needed, basis = more_users_needed(support, p, p, min_users=10, pooled_p=0.5,
                                      pooled_base=0.2)
    assert needed.tolist() == [_sm_needed(0.5, 0.2, 0, 10), _sm_needed(0.5, 0.2, 4, 10)]
    assert needed.tolist() == [11, 7]  # ceil(10.67) = 11
    assert basis.tolist() == ["typical pair", "typical pair"]
    needed, basis = more_users_needed(support, p, p, min_users=10)
    assert np.isnan(needed).all() and basis.tolist() == ["no estimate"] * 2
    # A pool whose rate does not beat its base gives no estimate either.
    needed, _ = more_users_needed(support, p, p, min_users=10, pooled_p=0.2, pooled_base=0.2)
    assert np.isnan(needed).all()


# ------------------------------------------------------------------ cold items

_ITEMS = [
    # item, users, neighbours, added (catalogue), first seen
    ("old_pop", 8, 2, "2023-01-02", "2023-01-05"),
    ("new_a", 2, 0, "2024-03-04", "2024-03-05"),  # Monday of the latest week
    ("new_b", 5, 0, "2024-03-06", "2024-03-06"),  # same week, more users
    ("mid", 3, 0, None, "2024-02-14"),  # no date added: first interaction decides
    ("never", 0, 0, "2024-02-01", None),
    ("never_nodate", 0, 0, None, None),
    ("warm", 30, 3, "2024-03-05", "2024-03-05"),  # enough users and neighbours: not cold
    ("noneigh", 15, 0, "2022-06-01", "2022-06-01"),
]


def _cold_items(catalog=True, min_neighbours=1):
    labels = np.array([r[0] for r in _ITEMS], dtype=object)
    users = np.array([r[1] for r in _ITEMS])
    neigh = np.array([r[2] for r in _ITEMS])
    first = np.array([-1 if r[4] is None else int(pd.Timestamp(r[4], tz="UTC").timestamp())
                      for r in _ITEMS])
    best_p = np.array([0.5 if n > 0 else np.nan for n in neigh])
    best_b = np.array([0.2 if n > 0 else np.nan for n in neigh])
    cat = None
    if catalog:
        cat = pd.DataFrame({"item": labels.astype(str),
                            "title": [r[0].upper() for r in _ITEMS],
                            "added": pd.to_datetime([r[3] for r in _ITEMS], utc=True)})
    return cold_items(labels, users, neigh, best_p, best_b, min_users=10,
                      min_neighbours=min_neighbours, confidence=0.95, item_first_ts=first,
                      catalog=cat)


def test_cold_items_rank_recently_added_first_then_most_users():
    """Latest week added first; within a week most users first; undated never-seen last."""
    c = _cold_items()
    assert c.placement["item"].tolist() == ["new_b", "new_a", "mid", "never", "old_pop",
                                            "noneigh", "never_nodate"]
    assert c.placement["rank"].tolist() == list(range(1, 8))
    assert c.placement["title"].tolist()[:2] == ["NEW_B", "NEW_A"]


def test_cold_items_counts_by_reason():
    """Seven of eight items are cold: two never seen, four thin, one without neighbours."""
    c = _cold_items()
    assert (c.catalogue_items, c.cold, c.never_seen, c.low_support, c.no_neighbours) == (
        8, 7, 2, 4, 1)
    assert c.share == pytest.approx(7 / 8)
    reasons = dict(zip(c.placement["item"], c.placement["reason"]))
    assert reasons["never"] == reasons["never_nodate"] == "never consumed"
    assert reasons["new_a"] == "fewer than 10 distinct users"
    assert reasons["noneigh"] == "no neighbour above chance yet"
    assert _cold_items(min_neighbours=2).placement.set_index("item").loc[
        "noneigh", "reason"] == "fewer than 2 neighbours above chance"


def test_cold_items_estimates_use_own_pair_or_the_typical_pair():
    """Items with a scored pair use it; others use the median of items with neighbours."""
    tab = _cold_items().placement.set_index("item")
    # old_pop has its own pair (0.5 vs 0.2, 8 users); the pool is the median over old_pop and
    # warm, also 0.5 vs 0.2; statsmodels sample size ceil(10.67) = 11.
    assert tab.loc["old_pop", "estimate_basis"] == "own pair"
    assert tab.loc["old_pop", "more_users_needed"] == _sm_needed(0.5, 0.2, 8, 10) == 3
    assert tab.loc["never", "estimate_basis"] == "typical pair"
    assert tab.loc["never", "more_users_needed"] == _sm_needed(0.5, 0.2, 0, 10) == 11
    # 15 users already exceed the estimate of 11 and still no neighbour: no number, not a zero.
    assert np.isnan(tab.loc["noneigh", "more_users_needed"])
    assert tab.loc["noneigh", "estimate_basis"] == (
        "estimate reached, still no neighbour above chance")


def test_cold_items_without_a_catalogue_rank_by_first_interaction():
    """Without a catalogue, recency comes from each item's first interaction."""
    c = _cold_items(catalog=False)
    assert c.placement["item"].tolist() == ["new_b", "new_a", "mid", "old_pop", "noneigh",
                                            "never", "never_nodate"]
    assert c.placement["added"].isna().all() and c.placement["title"].isna().all()


def test_never_seen_catalogue_items_from_aggregate_are_cold_and_never_consumed():
    """Catalogue items nobody touched, as numbered by the aggregate stage, are listed."""
    log = build_log([("u1", "a", "2024-01-01T00:00:00Z"), ("u2", "a", "2024-01-02T00:00:00Z"),
                     ("u1", "b", "2024-01-03T00:00:00Z")],
                    catalog=[{"item": "a"}, {"item": "b"},
                             {"item": "shelf", "added": "2023-12-31T00:00:00Z"}])
    agg = aggregate(log)
    none = np.full(agg.n_items, np.nan)
    c = cold_items(agg.item_labels, agg.item_users, np.zeros(agg.n_items, int), none, none,
                   min_users=2, min_neighbours=1, confidence=0.95,
                   item_first_ts=agg.item_first_ts, catalog=log.catalog.items)
    tab = c.placement.set_index("item")
    assert tab.loc["shelf", "reason"] == "never consumed" and tab.loc["shelf", "users"] == 0
    assert pd.isna(tab.loc["shelf", "first_seen"])
    assert tab.loc["b", "reason"] == "fewer than 2 distinct users"
    assert c.never_seen == 1 and c.cold == 3


def test_cold_results_to_dict_are_strict_json():
    """``to_dict`` gives plain JSON types: dates as ISO text, NaN as None."""
    d = json.loads(json.dumps(_cold_items().to_dict(limit=None), allow_nan=False))
    head = d["placement_head"]
    assert len(head) == 7 and head[0]["item"] == "new_b"
    assert head[0]["added"].startswith("2024-03-06")
    assert head[-1]["added"] is None and head[-1]["first_seen"] is None
    assert len(_cold_items().to_dict(limit=3)["placement_head"]) == 3
    json.dumps(_cold_users().to_dict(), allow_nan=False)
