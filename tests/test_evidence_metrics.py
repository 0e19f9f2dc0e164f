"""Tests for advisor.evidence.metrics: NDCG@k, recall@k, top-k ranking, coverage inputs."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import ndcg_score

from advisor.evidence.metrics import (
    evaluate_scorer,
    long_tail_items,
    ndcg_at_k,
    ndcg_from_hits,
    recall_from_hits,
    top_k,
)


def test_ndcg_matches_references_binary_example():
    """Relevant at ranks 1 and 3 of 2 relevant gives NDCG@5 = 0.919721."""
    # REFERENCES.md [L]: sklearn.metrics.ndcg_score, binary case, ranks 1 and 3 of 2 relevant.
    assert ndcg_at_k([10, 11, 12, 13, 14], {10, 12}, k=5) == pytest.approx(0.919721, abs=1e-6)
    y_true = np.array([[1, 0, 1, 0, 0]])
    y_score = np.array([[5.0, 4.0, 3.0, 2.0, 1.0]])
    assert ndcg_score(y_true, y_score, k=5) == pytest.approx(0.919721, abs=1e-6)


@pytest.mark.parametrize("seed", range(8))
def test_ndcg_agrees_with_sklearn_on_random_binary_cases(seed):
    """NDCG@k over the full ranking equals sklearn's ndcg_score with binary relevance."""
    rng = np.random.default_rng(seed)
    n_items, k = int(rng.integers(5, 40)), int(rng.integers(1, 12))
    relevant = rng.random(n_items) < rng.uniform(0.05, 0.5)
    relevant[rng.integers(n_items)] = True
    scores = rng.permutation(n_items).astype(float)  # distinct: sklearn averages tied scores
    ranked = np.argsort(-scores)
    ours = ndcg_at_k(ranked.tolist(), set(np.flatnonzero(relevant).tolist()), k=k)
    # sklearn.metrics.ndcg_score(y_true, y_score, k=k), the reference implementation.
    assert ours == pytest.approx(ndcg_score(relevant[None, :].astype(int), scores[None, :], k=k))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.booleans(), min_size=1, max_size=15), st.integers(1, 30))
def test_ndcg_from_hits_stays_in_unit_range_and_is_one_for_perfect_lists(hits, n_rel):
    """NDCG@k lies in [0, 1] and is 1 when the top min(k, |relevant|) slots are all hits."""
    n_rel = max(n_rel, sum(hits))
    h = np.array([hits])
    value = ndcg_from_hits(h, np.array([n_rel]))[0]
    assert 0.0 <= value <= 1.0 + 1e-12
    perfect = np.zeros_like(h)
    perfect[0, :min(len(hits), n_rel)] = True
    assert ndcg_from_hits(perfect, np.array([n_rel]))[0] == pytest.approx(1.0)


def test_recall_uses_min_of_k_and_relevant_as_denominator():
    """Recall@3 with 2 hits is 2/3 for 5 relevant items and 2/2 for 2 relevant items."""
    hits = np.array([[True, False, True], [True, True, False]])
    # Hand-worked: min(3, 5) = 3 -> 2/3; min(3, 2) = 2 -> 2/2.
    assert recall_from_hits(hits, np.array([5, 2])).tolist() == pytest.approx([2 / 3, 1.0])


def test_top_k_never_returns_training_items():
    """Excluded (already consumed) items never appear ahead of unseen ones."""
    scores = np.array([[9.0, 8.0, 7.0, 1.0], [1.0, 2.0, 3.0, 4.0]])
    exclude = sp.csr_matrix(np.array([[1, 1, 0, 0], [0, 0, 0, 1]]))
    ranked = top_k(scores.copy(), exclude, 2)
    assert ranked.tolist() == [[2, 3], [2, 1]]


def test_top_k_marks_missing_slots_when_too_few_unseen_items():
    """A user with fewer unseen items than k gets -1 in the empty slots."""
    ranked = top_k(np.array([[1.0, 2.0, 3.0]]), sp.csr_matrix(np.array([[1, 0, 1]])), 3)
    assert ranked.tolist() == [[1, -1, -1]]


def test_long_tail_is_everything_outside_the_top_fifth():
    """With 10 items the head is the 2 most popular; the other 8 are the tail."""
    counts = np.array([1, 50, 2, 3, 40, 0, 0, 5, 6, 7])
    tail = long_tail_items(counts)
    assert np.flatnonzero(~tail).tolist() == [1, 4]


def test_evaluate_scorer_scores_a_hand_worked_case():
    """Two users, fixed scores: NDCG, recall and recommendation counts match hand values."""
    train = sp.csr_matrix(np.array([[1, 0, 0, 0], [0, 1, 0, 0]], dtype=np.float32))
    test = sp.csr_matrix(np.array([[0, 0, 1, 0], [0, 0, 0, 1]], dtype=np.float32))
    fixed = np.array([4.0, 3.0, 2.0, 1.0])
    m = evaluate_scorer(lambda h: np.tile(fixed, (h.shape[0], 1)), train, test,
                        np.array([0, 1]), k=2)
    # User 0: list [1, 2], hit at rank 2 -> 1/log2(3) = 0.6309; user 1: list [0, 2], no hit.
    assert m.ndcg.tolist() == pytest.approx([1 / np.log2(3), 0.0])
    assert m.recall.tolist() == [1.0, 0.0]
    assert m.recommended.tolist() == [1, 1, 2, 0]


def _random_log(seed: int, n_users: int = 300, n_items: int = 120, density: float = 0.05):
    """Invented binary log with many equal popularity counts (ties)."""
    rng = np.random.default_rng(seed)
    x = (rng.random((n_users, n_items)) < density * rng.random(n_items)[None, :] * 2)
    x[:5, :] = True  # users who have (almost) everything: fewer than k items left
    x[5, :] = False
    x[5, :n_items - 3] = True
    return sp.csr_matrix(x.astype(np.float32))


@pytest.mark.parametrize("seed", range(4))
def test_every_ranking_path_gives_the_dense_lists(seed):
    """The fixed-score and sparse ranking paths return exactly the lists top_k returns on
    the dense scores, ties and users with fewer than k unseen items included."""
    from advisor.evidence.candidates import fit_item_knn, fit_popularity
    from advisor.evidence.metrics import _ranking, top_k_fixed, top_k_sparse

    x = _random_log(seed)
    hist = x[:60]
    for cand in (fit_popularity(x), fit_item_knn(x, neighbours=5)):
        dense = top_k(np.array(cand.score(hist), dtype=np.float64, copy=True), hist, 10)
        if cand.fixed is not None:
            fast = top_k_fixed(_ranking(cand.fixed), hist, 10)
        else:
            pop = cand.popularity
            fast = top_k_sparse(cand.sparse(hist), pop, _ranking(pop), hist, 10)
        np.testing.assert_array_equal(fast, dense)
        assert (dense[:5] == -1).all() and (dense[5, 3:] == -1).all()


def test_evaluate_candidate_matches_the_dense_evaluation():
    """Per-user NDCG, recall and recommendation counts are the same on every path."""
    from advisor.evidence.candidates import fit_item_knn, fit_popularity
    from advisor.evidence.metrics import evaluate_candidate, evaluate_scorer

    x = _random_log(9, n_users=400)
    rng = np.random.default_rng(1)
    held = sp.csr_matrix((rng.random(x.shape) < 0.02) & (x.toarray() == 0), dtype=np.float32)
    users = np.flatnonzero(np.diff(held.indptr) > 0)
    for cand in (fit_popularity(x), fit_item_knn(x)):
        a = evaluate_candidate(cand, x, held, users, k=10)
        b = evaluate_scorer(cand.score, x, held, users, k=10)
        np.testing.assert_array_equal(a.ndcg, b.ndcg)
        np.testing.assert_array_equal(a.recall, b.recall)
        np.testing.assert_array_equal(a.recommended, b.recommended)


def _reference_top_k(scores: np.ndarray, exclude: sp.csr_matrix, k: int) -> np.ndarray:
    """Full sort of every row: best score first, equal scores by lower index, -1 for slots
    that only excluded items could fill (the definition top_k must meet)."""
    dense_ex = exclude.toarray() > 0
    out = np.full((scores.shape[0], k), -1, dtype=np.int64)
    for u, row in enumerate(scores):
        order = np.lexsort((np.arange(row.size), -row))
        order = order[~dense_ex[u, order]][:k]
        out[u, :order.size] = order
    return out


@pytest.mark.parametrize("n_items", [7, 150, 5_000])
@pytest.mark.parametrize("seed", range(3))
def test_top_k_equals_a_full_sort_with_ties_and_exclusions(n_items, seed):
    """The chunk-bounded selection returns exactly a full sort's lists: ties at and across
    the k-th place, rows whose top scores are all excluded, users with fewer than k unseen
    items, and catalogues narrower and wider than the chunking."""
    rng = np.random.default_rng(seed)
    n_users, k = 40, 10
    scores = rng.integers(0, 6, size=(n_users, n_items)).astype(np.float64)  # many ties
    scores[:10] = rng.random((10, n_items))
    scores[10] = 1.0  # one value everywhere
    ex = rng.random((n_users, n_items)) < 0.1
    ex[11] = scores[11] >= np.sort(scores[11])[-min(n_items, 50)]  # the best scores excluded
    ex[12, :] = True
    ex[12, :3] = False  # fewer than k unseen
    exclude = sp.csr_matrix(ex.astype(np.float32))
    expected = _reference_top_k(scores, exclude, min(k, n_items))
    np.testing.assert_array_equal(top_k(scores.copy(), exclude, k), expected)


def test_ranking_in_several_threads_gives_the_single_thread_metrics(monkeypatch):
    """Batches ranked in parallel threads write the same per-user metrics and counts."""
    import advisor.evidence.metrics as metrics
    from advisor.evidence.candidates import fit_item_knn, fit_popularity

    monkeypatch.setattr(metrics, "_SPARSE_BATCH", 7)  # many batches
    x = _random_log(11, n_users=300)
    rng = np.random.default_rng(2)
    held = sp.csr_matrix((rng.random(x.shape) < 0.03) & (x.toarray() == 0), dtype=np.float32)
    users = np.flatnonzero(np.diff(held.indptr) > 0)
    for cand in (fit_popularity(x), fit_item_knn(x)):
        one = metrics.evaluate_candidate(cand, x, held, users, k=10, workers=1)
        many = metrics.evaluate_candidate(cand, x, held, users, k=10, workers=3)
        np.testing.assert_array_equal(many.ndcg, one.ndcg)
        np.testing.assert_array_equal(many.recall, one.recall)
        np.testing.assert_array_equal(many.recommended, one.recommended)
