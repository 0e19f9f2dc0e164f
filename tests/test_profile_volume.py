"""Tests for advisor.profile.volume (size, density, growth) and advisor.profile.signals.

Expected numbers are MovieLens 100K's published figures (REFERENCES.md [P]) and counts
worked by hand from small logs (each worked out in a comment).
"""

from __future__ import annotations

import json

import pandas as pd
import pytest
from builders import build_log

from advisor.aggregate import aggregate
from advisor.profile.signals import signals
from advisor.profile.volume import density, volume_profile

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


def test_density_matches_movielens_100k_published_figure():
    """100,000 ratings over 943 users and 1,682 items fill 6.3047% of the matrix."""
    # MovieLens 100K published figures: density 0.063047 (REFERENCES.md [P]).
    assert round(density(100_000, 943, 1682), 6) == 0.063047


def test_density_matches_netflix_prize_published_figure():
    """100,480,507 ratings over 480,189 users and 17,770 items fill 1.1776% of the matrix."""
    # Netflix Prize training set published figures: density 0.011776 (REFERENCES.md [P]).
    assert round(density(100_480_507, 480_189, 17_770), 6) == 0.011776


def test_density_is_nan_without_users_or_items():
    """An empty matrix has no density (NaN), not a division error."""
    assert density(0, 0, 10) != density(0, 0, 10)
    assert density(0, 5, 0) != density(0, 5, 0)


def test_volume_profile_counts_a_hand_worked_log():
    """Events, interactions, users, items, pairs, density, span and weeks of a small log."""
    v = volume_profile(aggregate(build_log(HAND, catalog=["a", "b", "c", "y", "z"])))
    assert v.events == 8  # every row, the impression included
    assert v.interactions == 7  # the impression does not count
    assert (v.users, v.items_seen, v.catalogue_items) == (3, 3, 5)
    assert v.pairs == 6  # u1 a b c, u2 a c, u3 b
    assert v.density == pytest.approx(6 / 15)  # 6 pairs / (3 users x 5 catalogue items)
    # 2024-01-01T10:00 to 2024-01-25T00:00 = 23 days 14 hours
    assert v.span_days == pytest.approx(23 + 14 / 24)
    assert v.weeks == 4  # weeks of 01-01, 01-08, 01-15 (empty), 01-22
    assert v.user_growth_last4 is None  # fewer than five weeks


def test_catalogue_items_equal_seen_items_without_catalogue():
    """Without a catalogue the item count is the seen items, and density uses them."""
    v = volume_profile(aggregate(build_log(HAND)))
    assert v.catalogue_items == v.items_seen == 3
    assert v.density == pytest.approx(6 / 9)


def test_user_growth_compares_last_four_weeks_with_the_weeks_before():
    """Growth is new users in the last four weeks over users who arrived before them."""
    rows = [  # Mondays of six consecutive weeks from 2024-01-01
        ("a", "i", "2024-01-01T00:00:00Z"), ("b", "i", "2024-01-02T00:00:00Z"),
        ("c", "i", "2024-01-03T00:00:00Z"),  # week 1: 3 new
        ("d", "i", "2024-01-08T00:00:00Z"),  # week 2: 1 new
        ("a", "j", "2024-01-15T00:00:00Z"),  # week 3: 0 new (a returns)
        ("e", "i", "2024-01-22T00:00:00Z"),  # week 4: 1 new
        ("f", "i", "2024-01-29T00:00:00Z"),  # week 5: 1 new
        ("b", "j", "2024-02-05T00:00:00Z"),  # week 6: 0 new
    ]
    v = volume_profile(aggregate(build_log(rows)))
    assert v.weeks == 6
    assert v.user_growth_last4 == pytest.approx(2 / 4)  # weeks 3-6: e, f; before: a b c d


def test_volume_to_dict_is_json_safe_plain_python():
    """``to_dict`` survives strict JSON and keeps the weekly rows with ISO dates."""
    v = volume_profile(aggregate(build_log(HAND)))
    d = json.loads(json.dumps(v.to_dict(), allow_nan=False))
    assert d["pairs"] == 6 and d["weeks"] == 4
    assert d["weekly"][0] == {"week": "2024-01-01", "events": 3, "interactions": 3,
                              "active_users": 1, "returning_users": 0, "new_users": 1,
                              "new_items": 2}


def test_signals_count_values_by_kind_and_event_types():
    """Rating and progress values are counted by kind; every event type is tallied."""
    rows = [
        ("u1", "a", "2024-01-01T00:00:00Z", "rating", 4.0),
        ("u1", "b", "2024-01-02T00:00:00Z", "rating", None),  # no value: not a rating signal
        ("u2", "a", "2024-01-03T00:00:00Z", "progress", 0.5),
        ("u2", "b", "2024-01-04T00:00:00Z", "impression"),
    ]
    s = signals(build_log(rows))
    assert (s.rating_events, s.progress_events, s.price_events) == (1, 1, 0)
    assert s.event_types == {"rating": 2, "progress": 1, "impression": 1}
    assert not s.catalogue and s.items_added_28d is None and not s.sessions
    json.dumps(s.to_dict(), allow_nan=False)


def test_signals_count_items_added_in_the_28_days_up_to_the_audit_date():
    """Items added in (as_of - 28 days, as_of] count as recent; older or later ones do not."""
    as_of = "2024-03-01T00:00:00Z"
    catalog = [
        {"item": "a", "added": "2024-02-02T00:00:00Z", "title": "A"},  # 28 days before: out
        {"item": "b", "added": "2024-02-02T00:00:01Z", "categories": "x|y"},  # just inside
        {"item": "c", "added": "2024-03-01T00:00:00Z"},  # on the audit date: in
        {"item": "d", "added": "2024-03-02T00:00:00Z"},  # after the audit date: out
        {"item": "e"},  # no date
    ]
    s = signals(build_log([("u", "a", "2024-02-20T00:00:00Z")], catalog=catalog, as_of=as_of))
    assert pd.Timestamp(as_of) - pd.Timedelta(days=28) == pd.Timestamp("2024-02-02T00:00:00Z")
    assert s.items_added_28d == 2
    assert s.catalogue and s.added_dates and s.categories and s.titles
    assert not s.catalogue_ratings
