"""Divide the interactions into training and test data, choosing a protocol that fits the log.

A global time split (train before one cutoff, test after it) is the honest protocol: the
model sees nothing from the future. It needs users who come back after the cutoff. When too
few do (a young service, or a log where most users arrive once), the fallback is a per-user
hold-out of each user's most recent items, which lets other users' later behaviour leak into
training and is flagged as such.

References
----------
Ji, Y., Sun, A., Zhang, J. & Li, C. (2023). A critical study on data leakage in recommender
system offline evaluation. ACM TOIS 41(3).
Meng, Z., McCreadie, R., Macdonald, C. & Ounis, I. (2020). Exploring data splitting
strategies for the evaluation of recommendation models. RecSys 2020.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from advisor.evidence.model import SplitSummary

__all__ = ["MIN_RETURNING_USERS", "TEST_SHARE", "Split", "choose_split", "to_matrix"]

MIN_RETURNING_USERS = 100
"""Returning users needed for the global time split (common practice, no published source:
fewer leaves per-user intervals too wide to read)."""

TEST_SHARE = 0.2
"""Share of interactions in the test window / of each user's items held out (the usual 80/20,
common practice, no published source)."""


@dataclass(frozen=True, slots=True)
class Split:
    """Working data of a split (matrices for the candidates; not part of the audit result)."""

    train: sp.csr_matrix
    """Training interactions, users x items, binary float32."""
    test: sp.csr_matrix
    """Held-out interactions of the evaluated users, users x items, binary float32."""
    train_item: np.ndarray
    """Item index of each training pair (for the recent-popularity window)."""
    train_ts: np.ndarray
    """Timestamp of each training pair, epoch seconds."""
    users: np.ndarray
    """Evaluated users, sorted."""
    summary: SplitSummary
    """What was done, for the report."""


def to_matrix(users: np.ndarray, items: np.ndarray, n_users: int,
              n_items: int) -> sp.csr_matrix:
    """Binary users x items CSR matrix (float32) from index arrays; duplicates count once.

    Examples
    --------
    >>> to_matrix(np.array([0, 0, 1]), np.array([1, 1, 0]), 2, 2).toarray()
    array([[0., 1.],
           [1., 0.]], dtype=float32)
    """
    m = sp.csr_matrix((np.ones(len(users), dtype=np.float32), (users, items)),
                      shape=(n_users, n_items))
    m.sum_duplicates()
    m.data[:] = 1.0
    return m


def _global_time(ts: np.ndarray, user: np.ndarray, n_users: int,
                 test_share: float) -> tuple[int, np.ndarray, int]:
    """Cutoff, training mask and number of returning users of a global time split."""
    order = np.sort(ts)
    cutoff = int(order[min(len(order) - 1, int(np.floor((1 - test_share) * len(order))))])
    is_train = ts < cutoff
    has_train = np.bincount(user[is_train], minlength=n_users) > 0
    has_test = np.bincount(user[~is_train], minlength=n_users) > 0
    return cutoff, is_train, int((has_train & has_test).sum())


def _per_user_holdout(ts: np.ndarray, user: np.ndarray, n_users: int, test_share: float,
                      rng: np.random.Generator) -> np.ndarray:
    """Training mask of a per-user hold-out of each user's most recent items.

    Users with at least 2 items keep max(1, floor(test_share * n)) most recent items for the
    test; ties in time are broken at random (seeded) rather than by item index, so the item
    numbering cannot decide which item is held out.
    """
    tiebreak = rng.permutation(len(ts))
    order = np.lexsort((tiebreak, ts, user))
    u_sorted = user[order]
    counts = np.bincount(user, minlength=n_users)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    pos = np.arange(len(order)) - starts[u_sorted]
    from_end = counts[u_sorted] - 1 - pos
    n_test = np.maximum(1, np.floor(test_share * counts).astype(np.int64))
    test_sorted = (counts[u_sorted] >= 2) & (from_end < n_test[u_sorted])
    is_train = np.ones(len(ts), dtype=bool)
    is_train[order[test_sorted]] = False
    return is_train


def choose_split(user: np.ndarray, item: np.ndarray, ts: np.ndarray, n_users: int,
                 n_items: int, *, rng: np.random.Generator, max_test_users: int,
                 min_returning_users: int = MIN_RETURNING_USERS,
                 test_share: float = TEST_SHARE,
                 population_users: int | None = None) -> Split:
    """Split distinct (user, item) pairs into training and test data.

    Parameters
    ----------
    user, item, ts : ndarray
        One entry per distinct pair: user index, item index, first-interaction time (epoch s).
    n_users, n_items : int
        Sizes of the index spaces.
    rng : numpy.random.Generator
        Seeded generator for tie-breaking and the test-user sample.
    max_test_users : int
        Cap on evaluated users; above it a seeded sample without replacement is drawn.
    min_returning_users : int, optional
        Returning users needed for the global time split.
    test_share : float, optional
        Share of interactions after the cutoff / of each user's items held out.
    population_users : int, optional
        When the pairs are those of a seeded sample of the log's users, how many users the
        log has (reported in the summary); None: the pairs are every user's.

    Returns
    -------
    Split
        Matrices, evaluated users and a summary.

    Notes
    -----
    Global time split: the cutoff is the timestamp at the (1 - test_share) quantile of all
    pairs; training is every pair strictly before it, the test window everything from it on.
    Test users are those with training history and a new item in the window (pairs are
    distinct, so a test item is never a training item). Users who first appear after the
    cutoff are cold users and are not evaluated here. Chosen when at least
    ``min_returning_users`` users return.

    Per-user hold-out otherwise: each user with at least 2 items holds out their most recent
    max(1, floor(test_share * n)) items. Other users' later interactions stay in training,
    so the model can learn from the future (Ji et al. 2023); protocol choice also changes
    which model wins (Meng et al. 2020). The result is flagged ``is_temporal=False``.

    References
    ----------
    Ji et al. (2023) ACM TOIS 41(3); Meng et al. (2020) RecSys.

    Examples
    --------
    >>> s = choose_split(np.array([0, 0, 1, 1]), np.array([0, 1, 0, 2]),
    ...                  np.array([1, 2, 3, 4]), 2, 3,
    ...                  rng=np.random.default_rng(0), max_test_users=10)
    >>> s.summary.protocol, s.users.tolist()
    ('per_user_holdout', [0, 1])
    """
    user = np.asarray(user, dtype=np.int64)
    item = np.asarray(item, dtype=np.int64)
    ts = np.asarray(ts, dtype=np.int64)
    cutoff, is_train, returning = _global_time(ts, user, n_users, test_share)
    if returning >= min_returning_users:
        protocol, temporal = "global_time", True
        reason = (f"{returning} users came back after the cutoff (at least "
                  f"{min_returning_users} needed), so the model is tested on a later window.")
        reference_ts = cutoff
    else:
        protocol, temporal = "per_user_holdout", False
        reason = (f"only {returning} users came back after a global cutoff (fewer than "
                  f"{min_returning_users}), so each user's most recent items are held out; "
                  "this protocol lets later behaviour of other users leak into training.")
        is_train = _per_user_holdout(ts, user, n_users, test_share, rng)
        cutoff = None
        reference_ts = int(ts[is_train].max()) if is_train.any() else int(ts.max())
    train = to_matrix(user[is_train], item[is_train], n_users, n_items)
    test_all = to_matrix(user[~is_train], item[~is_train], n_users, n_items)
    has_train = np.diff(train.indptr) > 0
    eligible = np.flatnonzero(has_train & (np.diff(test_all.indptr) > 0))
    sampled = len(eligible) > max_test_users
    users = np.sort(rng.choice(eligible, max_test_users, replace=False)) if sampled else eligible
    keep = np.zeros(n_users, dtype=np.float32)
    keep[users] = 1.0
    test = (sp.diags(keep) @ test_all).tocsr()
    test.eliminate_zeros()
    summary = SplitSummary(
        protocol=protocol, is_temporal=temporal, reason=reason, cutoff_ts=cutoff,
        reference_ts=reference_ts, returning_users=returning,
        min_returning_users=min_returning_users, test_share=test_share,
        train_pairs=int(train.nnz), test_pairs=int(test.nnz), train_users=int(has_train.sum()),
        eligible_test_users=len(eligible), test_users=len(users),
        max_test_users=max_test_users, sampled=sampled,
        population_users=int(population_users if population_users is not None
                             else np.unique(user).size),
        users_sampled=population_users is not None)
    return Split(train=train, test=test, train_item=item[is_train], train_ts=ts[is_train],
                 users=users, summary=summary)
