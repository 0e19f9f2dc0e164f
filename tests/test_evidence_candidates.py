"""Tests for advisor.evidence.candidates and similarity: fitted models against their formulas."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from advisor.evidence.candidates import (
    ease_weights,
    fit_category_popularity,
    fit_ease,
    fit_item_knn,
    fit_popularity,
    fit_pure_svd,
    fit_recent_popularity,
    latent_fitter,
)
from advisor.evidence.similarity import item_neighbours, similarity_blocks


def _random_matrix(seed: int, users: int = 30, items: int = 12, p: float = 0.3):
    rng = np.random.default_rng(seed)
    return sp.csr_matrix((rng.random((users, items)) < p).astype(np.float32))


def test_ease_weights_match_the_closed_form_with_a_direct_inverse():
    """B = I - P diagMat(1/diag(P)), P = (X'X + lambda I)^-1, diag(B) = 0 (Steck 2019)."""
    x = _random_matrix(0).toarray().astype(np.float64)
    lam = 5.0
    # Steck (2019) WWW, closed form, computed here directly with numpy.linalg.inv.
    p = np.linalg.inv(x.T @ x + lam * np.eye(x.shape[1]))
    expected = np.eye(x.shape[1]) - p @ np.diag(1.0 / np.diag(p))
    np.fill_diagonal(expected, 0.0)
    assert np.allclose(ease_weights(x.T @ x, lam), expected)


def test_ease_weights_minimise_the_constrained_ridge_objective():
    """Perturbing B off the diagonal never lowers ||X - XB||^2 + lambda ||B||^2 (Steck 2019)."""
    x = _random_matrix(1).toarray().astype(np.float64)
    lam = 3.0
    b = ease_weights(x.T @ x, lam)

    def loss(m):
        return np.sum((x - x @ m) ** 2) + lam * np.sum(m ** 2)

    rng = np.random.default_rng(0)
    for _ in range(5):
        e = rng.normal(scale=1e-3, size=b.shape)
        np.fill_diagonal(e, 0.0)
        assert loss(b + e) >= loss(b)


def test_ease_on_active_items_equals_ease_on_the_full_catalogue():
    """Leaving out items with no training data does not change any score."""
    x = _random_matrix(2).toarray()
    x[:, [3, 7]] = 0.0
    xs = sp.csr_matrix(x)
    full = x @ ease_weights(x.T.astype(float) @ x, 100.0)
    got = fit_ease(xs).score(xs)
    # Ties are broken by a popularity bonus of at most 1e-6 of the row maximum.
    assert np.allclose(got, full, atol=1e-5 * np.abs(full).max())


def test_conditional_probability_similarity_matches_the_counting_formula():
    """sim(i, j) = Freq(ij) / (Freq(i) Freq(j)^alpha), counted with loops (D&K 2004)."""
    x = _random_matrix(3).toarray()
    alpha = 0.5
    n = x.shape[1]
    expected = np.zeros((n, n))
    for i in range(n):
        for j in range(n):
            fi, fj, fij = x[:, i].sum(), x[:, j].sum(), (x[:, i] * x[:, j]).sum()
            if i != j and fi > 0 and fj > 0:
                expected[i, j] = fij / (fi * fj ** alpha)
    got = np.vstack([s.toarray() for _, s in similarity_blocks(sp.csr_matrix(x), alpha=alpha)])
    assert np.allclose(got, expected, atol=1e-6)


def test_item_neighbours_keep_top_k_weights_summing_to_one():
    """Each item keeps at most k positive neighbours, normalised to sum to 1."""
    w = item_neighbours(_random_matrix(4), neighbours=3).toarray()
    assert ((w > 0).sum(axis=1) <= 3).all()
    assert np.allclose(w.sum(axis=1)[w.sum(axis=1) > 0], 1.0)
    assert np.all(np.diag(w) == 0)


@pytest.mark.parametrize("seed", range(3))
def test_item_neighbours_are_each_rows_top_k_of_the_counting_formula(seed, monkeypatch):
    """Each item's kept neighbours are the k largest positive entries of its similarity row
    (ties to the lower item index), also when the rows are computed in many small blocks."""
    import advisor.evidence.similarity as similarity

    monkeypatch.setattr(similarity, "_BLOCK_PRODUCTS", 50)  # many blocks
    x = _random_matrix(10 + seed)
    k = 3
    dense = np.vstack([s.toarray() for _, s in similarity_blocks(x, alpha=0.5)]).astype(np.float64)
    w = item_neighbours(x, neighbours=k, alpha=0.5).toarray()
    for i in range(dense.shape[0]):
        row = dense[i]
        order = np.lexsort((np.arange(row.size), -row))
        expected = sorted(j for j in order[:k] if row[j] > 0)
        assert sorted(np.flatnonzero(w[i]).tolist()) == expected


def test_item_knn_scores_sum_neighbour_weights_over_the_users_items():
    """A user's score for j is the sum of normalised sim(i, j) over the user's items i."""
    x = _random_matrix(5)
    w = item_neighbours(x).toarray()
    hist = x[:4]
    expected = hist.toarray() @ w
    got = fit_item_knn(x).score(hist)
    assert np.allclose(got, expected, atol=1e-5)


def test_popularity_counts_training_users_per_item():
    """Popularity scores are the column sums of the training matrix."""
    x = _random_matrix(6)
    got = fit_popularity(x).score(x[:2])
    assert np.array_equal(got[0], np.asarray(x.sum(axis=0)).ravel())


def test_recent_popularity_ranks_the_window_first_then_all_time():
    """Items seen in the trailing window rank above items seen only earlier."""
    x = sp.csr_matrix(np.array([[1, 1, 1], [1, 1, 0], [1, 0, 0]], dtype=np.float32))
    item = np.array([0, 1, 2, 0, 1, 0])
    day = 86400
    ts = np.array([0, 0, 99, 0, 0, 0]) * day
    order = np.argsort(-fit_recent_popularity(x, item, ts, 100 * day).score(x[:1])[0])
    assert order.tolist() == [2, 0, 1]


def test_category_popularity_favours_the_users_main_category():
    """A user with mostly category-1 items gets category-1 items first."""
    x = sp.csr_matrix(np.array([[1, 1, 1, 0], [0, 1, 1, 1], [1, 0, 0, 0]], dtype=np.float32))
    cat = np.array([0, 1, 1, -1])
    hist = sp.csr_matrix(np.array([[0, 1, 1, 0]], dtype=np.float32))
    scores = fit_category_popularity(x, cat).score(hist)[0]
    assert set(np.argsort(-scores)[:2].tolist()) == {1, 2}


def test_pure_svd_projects_onto_the_top_singular_vectors():
    """Scores equal x_u V V' with V the top-f right singular vectors (numpy SVD)."""
    x = _random_matrix(7, users=40, items=15)
    f = 4
    # numpy.linalg.svd as the reference factorisation (Cremonesi et al. 2010 PureSVD).
    _, _, vt = np.linalg.svd(x.toarray().astype(float), full_matrices=False)
    v = vt[:f].T
    expected = x.toarray() @ v @ v.T
    got = fit_pure_svd(x, factors=f, seed=0).score(x)
    assert np.allclose(got, expected, atol=1e-4 * np.abs(expected).max())


def test_pure_svd_drops_factors_of_a_matrix_with_lower_rank():
    """A matrix of rank 3 asked for 6 factors keeps 3: each training row projects onto the
    row space, which holds it, so the scores reproduce the rows (no arbitrary directions)."""
    rng = np.random.default_rng(2)
    patterns = (rng.random((3, 12)) < 0.4).astype(np.float32)
    x = sp.csr_matrix(patterns[rng.integers(0, 3, size=30)])
    # numpy.linalg.matrix_rank as the reference rank.
    assert np.linalg.matrix_rank(x.toarray()) == 3
    cand = fit_pure_svd(x, factors=6, seed=0)
    assert cand.method == "PureSVD (3 factors)"
    got = cand.score(x)
    assert np.allclose(got, x.toarray(), atol=1e-4)


def test_latent_fitter_switches_to_pure_svd_for_large_catalogues():
    """EASE up to the item limit, PureSVD above it."""
    x = _random_matrix(8, users=40, items=20)
    assert latent_fitter(x, seed=0)(x).method.startswith("EASE")
    assert latent_fitter(x, seed=0, max_ease_items=10)(x).method.startswith("PureSVD")


@pytest.mark.parametrize("fit", [fit_popularity, fit_item_knn, fit_ease])
def test_candidates_return_one_score_per_user_and_item(fit):
    """Every candidate scores the full catalogue for every user in the batch."""
    x = _random_matrix(9)
    assert fit(x).score(x[:5]).shape == (5, x.shape[1])
