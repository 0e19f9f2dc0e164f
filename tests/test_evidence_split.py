"""Tests for advisor.evidence.split: protocol choice, hold-out, sampling."""

from __future__ import annotations

import numpy as np

from advisor.evidence.split import choose_split


def _returning_log(n_users: int, seed: int = 0):
    """Each user interacts with 10 items at random times over 100 days (users return)."""
    rng = np.random.default_rng(seed)
    user = np.repeat(np.arange(n_users), 10)
    item = np.concatenate([rng.choice(50, 10, replace=False) for _ in range(n_users)])
    ts = rng.integers(0, 100 * 86400, size=len(user))
    return user, item, ts


def test_global_time_split_when_enough_users_return():
    """Many returning users: train strictly before the cutoff, test from it on."""
    user, item, ts = _returning_log(300)
    s = choose_split(user, item, ts, 300, 50, rng=np.random.default_rng(0), max_test_users=10_000)
    assert s.summary.protocol == "global_time" and s.summary.is_temporal
    assert s.train_ts.max() < s.summary.cutoff_ts
    # About 20% of pairs fall at or after the cutoff (the stated test share).
    assert abs((ts >= s.summary.cutoff_ts).mean() - 0.2) < 0.01
    assert s.train.multiply(s.test).nnz == 0
    assert s.summary.returning_users >= 100


def test_per_user_holdout_when_users_arrive_once():
    """Each user in one sitting: few return, so the latest 20% of each history is held out."""
    n = 200
    user = np.repeat(np.arange(n), 10)
    item = np.tile(np.arange(10), n)
    start = np.repeat(np.arange(n) * 86400 * 5, 10)
    ts = start + np.tile(np.arange(10), n)  # item r is the user's r-th interaction
    s = choose_split(user, item, ts, n, 10, rng=np.random.default_rng(0), max_test_users=10_000)
    assert s.summary.protocol == "per_user_holdout" and not s.summary.is_temporal
    # floor(0.2 * 10) = 2 most recent items (8 and 9) held out for every user.
    assert set(s.test.indices.tolist()) == {8, 9}
    assert np.all(np.diff(s.test.indptr) == 2)
    assert s.train.multiply(s.test).nnz == 0


def test_holdout_keeps_one_item_for_short_histories_and_skips_single_item_users():
    """Two items: the later is held out; one item: the user is not evaluated."""
    user = np.array([0, 0, 1])
    item = np.array([0, 1, 2])
    ts = np.array([5, 9, 1])
    s = choose_split(user, item, ts, 2, 3, rng=np.random.default_rng(0), max_test_users=10)
    assert s.users.tolist() == [0]
    assert s.test.toarray()[0].tolist() == [0, 1, 0]
    assert s.train.toarray()[1].tolist() == [0, 0, 1]


def test_test_users_are_a_seeded_sample_of_the_stated_size():
    """Above the cap, exactly max_test_users are drawn, the same for the same seed."""
    user, item, ts = _returning_log(300)
    a = choose_split(user, item, ts, 300, 50, rng=np.random.default_rng(1), max_test_users=50)
    b = choose_split(user, item, ts, 300, 50, rng=np.random.default_rng(1), max_test_users=50)
    assert a.summary.sampled and a.summary.test_users == 50 == len(a.users)
    assert np.array_equal(a.users, b.users)
    assert set(np.flatnonzero(np.diff(a.test.indptr))) == set(a.users.tolist())


def test_shuffling_rows_does_not_change_a_global_split():
    """Row order of the pairs does not matter."""
    user, item, ts = _returning_log(300, seed=3)
    perm = np.random.default_rng(0).permutation(len(user))
    a = choose_split(user, item, ts, 300, 50, rng=np.random.default_rng(0), max_test_users=10_000)
    b = choose_split(user[perm], item[perm], ts[perm], 300, 50, rng=np.random.default_rng(0),
                     max_test_users=10_000)
    assert (a.train != b.train).nnz == 0 and (a.test != b.test).nnz == 0
