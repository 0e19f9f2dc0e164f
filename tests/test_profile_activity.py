"""Tests for advisor.profile.activity: distinct items per user and week-over-week return.

Expected shares are worked by hand on small counts and cross-checked with a direct numpy
count (``np.mean(counts >= m)``).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from builders import build_log

from advisor.aggregate import aggregate
from advisor.profile.activity import ACTIVITY_LEVELS, activity_profile, share_at_least

HAND = [
    ("u1", "a", "2024-01-01T10:00:00Z"),
    ("u1", "a", "2024-01-03T10:00:00Z"),
    ("u1", "b", "2024-01-07T23:59:59Z"),
    ("u2", "a", "2024-01-08T00:00:00Z"),
    ("u1", "c", "2024-01-09T00:00:00Z"),
    ("u2", "x", "2024-01-10T00:00:00Z", "impression"),
    ("u3", "b", "2024-01-24T00:00:00Z"),
    ("u2", "c", "2024-01-25T00:00:00Z"),
]


def test_share_at_least_counts_units_reaching_each_level():
    """Counts 1, 2, 2, 5, 7, 20: how many reach 1, 2, 3, 5, 10, 20 (worked by hand)."""
    counts = np.array([7, 1, 2, 20, 5, 2])
    n, s = share_at_least(counts, (1, 2, 3, 5, 10, 20))
    assert n.tolist() == [6, 5, 3, 3, 1, 1]
    assert s.tolist() == pytest.approx([6 / 6, 5 / 6, 3 / 6, 3 / 6, 1 / 6, 1 / 6])
    for m, share in zip((1, 2, 3, 5, 10, 20), s):
        assert share == pytest.approx(np.mean(counts >= m))  # direct numpy count


def test_share_at_least_is_nan_without_units():
    """No units gives zero counts and NaN shares, not a division error."""
    n, s = share_at_least(np.array([], dtype=int), (1, 5))
    assert n.tolist() == [0, 0]
    assert np.isnan(s).all()


def test_activity_profile_on_a_hand_worked_log():
    """Users with 3, 2 and 1 distinct items give the hand-worked shares, median and mean."""
    a = activity_profile(aggregate(build_log(HAND)))
    assert a.levels == ACTIVITY_LEVELS == (1, 2, 3, 5, 10, 20)
    assert a.users_at_least == (3, 2, 1, 0, 0, 0)
    assert a.share_at_least == pytest.approx((1.0, 2 / 3, 1 / 3, 0.0, 0.0, 0.0))
    assert a.median_items == 2.0 and a.mean_items == 2.0
    assert a.at_least(3) == 1
    with pytest.raises(ValueError):
        a.at_least(4)  # only the computed levels are available


def test_returning_share_pools_the_last_week_pairs():
    """Returning share = returning users over the previous week's active users, pooled."""
    # Active per week: {u1}, {u1, u2}, {}, {u2, u3}; returning: -, {u1}, {}, {}.
    # Pairs (w1,w2), (w2,w3), (w3,w4): 1 + 0 + 0 returning over 1 + 2 + 0 active = 1/3.
    a = activity_profile(aggregate(build_log(HAND)))
    assert a.returning_share == pytest.approx(1 / 3)


def test_returning_share_uses_only_the_last_four_week_pairs():
    """Older week pairs than the last four do not enter the returning share."""
    rows = [("u1", "a", "2024-01-01T00:00:00Z"), ("u1", "b", "2024-01-08T00:00:00Z")]  # returns
    # Six more weeks with one new user each, none returning.
    for k, day in enumerate(("2024-01-15", "2024-01-22", "2024-01-29", "2024-02-05",
                             "2024-02-12")):
        rows.append((f"n{k}", "a", f"{day}T00:00:00Z"))
    a = activity_profile(aggregate(build_log(rows)))
    # Week pairs: (1,2) returning 1 of 1 falls outside the last four pairs (3..7);
    # the last four pairs have 0 returning over 1 + 1 + 1 + 1 active.
    assert a.returning_share == 0.0


def test_returning_share_is_none_with_a_single_week():
    """One week has no week pair, so no returning share."""
    a = activity_profile(aggregate(build_log([("u", "a", "2024-01-01T00:00:00Z"),
                                              ("v", "b", "2024-01-02T00:00:00Z")])))
    assert a.returning_share is None


def test_activity_to_dict_is_json_safe():
    """``to_dict`` survives strict JSON with plain lists and floats."""
    d = json.loads(json.dumps(activity_profile(aggregate(build_log(HAND))).to_dict()))
    assert d["users_at_least"] == [3, 2, 1, 0, 0, 0]
    assert d["returning_share"] == pytest.approx(1 / 3)
