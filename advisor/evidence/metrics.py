"""Top-k ranking over the full catalogue and the per-user accuracy metrics.

Every candidate scores every item for every test user (never a sampled candidate set,
Krichene & Rendle 2020); items the user already has in training are never recommended.
"""

from __future__ import annotations

from collections.abc import Callable, Collection, Sequence
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

__all__ = [
    "UserMetrics",
    "evaluate_scorer",
    "long_tail_items",
    "ndcg_at_k",
    "ndcg_from_hits",
    "recall_from_hits",
    "top_k",
]

_BATCH_CELLS = 4_000_000
"""Score-matrix cells per batch (users x items): bounds memory to ~32 MB of float64."""


def _discounts(k: int) -> np.ndarray:
    return 1.0 / np.log2(np.arange(2, k + 2, dtype=np.float64))


def ndcg_from_hits(hits: np.ndarray, n_relevant: np.ndarray) -> np.ndarray:
    """NDCG@k per user from a boolean hit matrix (users x ranks) and relevant counts.

    Parameters
    ----------
    hits : ndarray of bool, shape (n_users, k)
        ``hits[u, r]`` is True when the item at rank ``r + 1`` is relevant for user ``u``.
    n_relevant : ndarray of int, shape (n_users,)
        Number of relevant (held-out) items per user; must be at least 1.

    Returns
    -------
    ndarray of float, shape (n_users,)
        NDCG@k in [0, 1].

    Notes
    -----
    Binary gains: DCG@k = sum_r hit_r / log2(r + 1), ideal DCG@k puts min(k, |relevant|)
    hits at the top ranks (Jarvelin & Kekalainen 2002). Using log2(r + 1) for every rank
    including the first is the form scikit-learn's ``ndcg_score`` uses.

    References
    ----------
    Jarvelin, K. & Kekalainen, J. (2002). Cumulated gain-based evaluation of IR techniques.
    ACM TOIS 20(4), 422-446.

    Examples
    --------
    >>> ndcg_from_hits(np.array([[True, False, True, False, False]]), np.array([2]))
    array([0.91972079])
    """
    hits = np.asarray(hits, dtype=bool)
    k = hits.shape[1]
    disc = _discounts(k)
    dcg = hits @ disc
    ideal_cum = np.concatenate([[0.0], np.cumsum(disc)])
    idcg = ideal_cum[np.minimum(np.asarray(n_relevant), k)]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(idcg > 0, dcg / idcg, 0.0)


def recall_from_hits(hits: np.ndarray, n_relevant: np.ndarray) -> np.ndarray:
    """Recall@k per user, with denominator min(k, |relevant|).

    Parameters
    ----------
    hits : ndarray of bool, shape (n_users, k)
        Hit matrix as in :func:`ndcg_from_hits`.
    n_relevant : ndarray of int, shape (n_users,)
        Number of relevant items per user.

    Returns
    -------
    ndarray of float, shape (n_users,)
        Recall@k in [0, 1].

    Notes
    -----
    The denominator min(k, |relevant|) makes a perfect list score 1 even when a user has more
    held-out items than slots; with |relevant| alone heavy users could never reach 1.

    Examples
    --------
    >>> recall_from_hits(np.array([[True, False, True]]), np.array([5]))
    array([0.66666667])
    """
    hits = np.asarray(hits, dtype=bool)
    denom = np.minimum(np.asarray(n_relevant), hits.shape[1])
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(denom > 0, hits.sum(axis=1) / denom, 0.0)


def ndcg_at_k(ranked: Sequence[int], relevant: Collection[int], *, k: int) -> float:
    """NDCG@k of one ranked list against a set of relevant items (binary gains).

    Parameters
    ----------
    ranked : sequence of int
        Recommended items, best first.
    relevant : collection of int
        Relevant items.
    k : int
        Cut-off.

    Returns
    -------
    float
        NDCG@k in [0, 1]; 0 when nothing is relevant.

    Examples
    --------
    >>> round(ndcg_at_k([7, 1, 8, 2, 3], {7, 8}, k=5), 6)
    0.919721
    """
    rel = set(relevant)
    hits = np.zeros((1, k), dtype=bool)
    for r, item in enumerate(list(ranked)[:k]):
        hits[0, r] = item in rel
    return float(ndcg_from_hits(hits, np.array([len(rel)]))[0])


def top_k(scores: np.ndarray, exclude: sp.csr_matrix, k: int) -> np.ndarray:
    """Indices of the k best-scored items per row, best first, excluding given items.

    Parameters
    ----------
    scores : ndarray of float, shape (n_users, n_items)
        Scores; modified in place (excluded cells set to -inf).
    exclude : csr_matrix, shape (n_users, n_items)
        Nonzero cells are items the user already has; they are never returned ahead of an
        item that is not excluded.
    k : int
        List length (at most n_items).

    Returns
    -------
    ndarray of int, shape (n_users, k)
        Item indices; a slot whose score is -inf is marked -1 (the user has fewer than k
        unseen items).

    Examples
    --------
    >>> top_k(np.array([[3.0, 1.0, 2.0]]), sp.csr_matrix([[1, 0, 0]]), 2)
    array([[2, 1]])
    """
    n_items = scores.shape[1]
    k = min(k, n_items)
    rows = np.repeat(np.arange(exclude.shape[0]), np.diff(exclude.indptr))
    scores[rows, exclude.indices] = -np.inf
    part = np.argpartition(-scores, k - 1, axis=1)[:, :k] if k < n_items else (
        np.tile(np.arange(n_items), (scores.shape[0], 1)))
    vals = np.take_along_axis(scores, part, axis=1)
    order = np.argsort(-vals, axis=1, kind="stable")
    ranked = np.take_along_axis(part, order, axis=1)
    ranked[~np.isfinite(np.take_along_axis(vals, order, axis=1))] = -1
    return ranked


def long_tail_items(counts: np.ndarray, *, head_share: float = 0.2) -> np.ndarray:
    """Boolean mask of long-tail items: outside the top ``head_share`` of items by count.

    Notes
    -----
    The short head is the top 20% of catalogue items by training interactions (common
    practice in long-tail papers; no single published source). Ties at the boundary are
    broken by item index, so the head holds exactly ceil(head_share * n_items) items.

    Examples
    --------
    >>> long_tail_items(np.array([5, 0, 9, 1, 2]))
    array([ True,  True, False,  True,  True])
    """
    n = len(counts)
    head = int(np.ceil(head_share * n))
    order = np.argsort(-np.asarray(counts), kind="stable")
    tail = np.ones(n, dtype=bool)
    tail[order[:head]] = False
    return tail


@dataclass(frozen=True, slots=True)
class UserMetrics:
    """Per-user metrics of one candidate, aligned with the evaluated users."""

    ndcg: np.ndarray
    """NDCG@k per user."""
    recall: np.ndarray
    """Recall@k per user."""
    recommended: np.ndarray
    """Times each item was recommended across the users (length n_items)."""


def evaluate_scorer(score: Callable[[sp.csr_matrix], np.ndarray], train: sp.csr_matrix,
                    test: sp.csr_matrix, users: np.ndarray, *, k: int) -> UserMetrics:
    """Rank the full catalogue for each user and score the list against the held-out items.

    Parameters
    ----------
    score : callable
        Maps the training rows of a batch of users (csr, batch x n_items) to dense scores.
    train, test : csr_matrix, shape (n_users, n_items)
        Training and held-out interactions (binary).
    users : ndarray of int
        Users to evaluate; each must have at least one held-out item.
    k : int
        List length.

    Returns
    -------
    UserMetrics
        Per-user NDCG@k and recall@k, and recommendation counts per item.
    """
    n_items = train.shape[1]
    k_eff = min(k, n_items)
    batch = max(1, _BATCH_CELLS // max(n_items, 1))
    ndcg = np.empty(len(users))
    recall = np.empty(len(users))
    recommended = np.zeros(n_items, dtype=np.int64)
    for start in range(0, len(users), batch):
        u = users[start:start + batch]
        hist = train[u]
        scores = np.array(score(hist), dtype=np.float64, copy=True)
        ranked = top_k(scores, hist, k_eff)
        held = test[u]
        valid = ranked >= 0
        safe = np.where(valid, ranked, 0)
        hits = (np.take_along_axis(held.toarray(), safe, axis=1) > 0) & valid
        n_rel = np.diff(held.indptr)
        ndcg[start:start + len(u)] = ndcg_from_hits(hits, n_rel)
        recall[start:start + len(u)] = recall_from_hits(hits, n_rel)
        recommended += np.bincount(ranked[valid], minlength=n_items)
    return UserMetrics(ndcg=ndcg, recall=recall, recommended=recommended)
