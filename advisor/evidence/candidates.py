"""Candidate recommenders fitted on the training matrix, numpy / scipy.sparse only.

Each fit returns a :class:`Candidate` whose ``score`` maps the training rows of a batch of
users to dense scores over the full catalogue. Higher is better; the caller removes items
the user already has.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import svds

from advisor.evidence.similarity import ALPHA, NEIGHBOURS, item_neighbours

__all__ = [
    "EASE_L2",
    "EASE_MAX_ITEMS",
    "RECENT_DAYS",
    "SVD_FACTORS",
    "Candidate",
    "ease_weights",
    "fit_category_popularity",
    "fit_ease",
    "fit_item_knn",
    "fit_popularity",
    "fit_pure_svd",
    "fit_recent_popularity",
    "latent_fitter",
]

RECENT_DAYS = 28
"""Trailing window of recent popularity, days (common practice, no published source)."""

EASE_L2 = 100.0
"""EASE ridge strength lambda. Fixed, not tuned on a validation slice: Steck (2019) tuned
values in the hundreds on large sets; no published rule exists for small logs."""

EASE_MAX_ITEMS = 2500
"""Largest number of items with training data for which EASE is fitted. Its dense inverse
costs O(n^3): 2,000 items take about 0.6 s and 8,000 about 40 s on a 2-core machine, so
larger catalogues use PureSVD instead."""

SVD_FACTORS = 50
"""PureSVD factors (Cremonesi et al. 2010 report tens to a few hundred; 50 suits small logs)."""

_RANK_TOL = 1e-10
"""Singular values below this fraction of the largest count as zero (numerical rank)."""


@dataclass(frozen=True, slots=True)
class Candidate:
    """A fitted candidate recommender."""

    name: str
    """Short identifier."""
    method: str
    """What was fitted, with its settings."""
    personalised: bool
    """True when scores depend on the user's own items."""
    score: Callable[[sp.csr_matrix], np.ndarray]
    """Training rows of a batch of users -> dense scores (batch x n_items)."""
    fixed: np.ndarray | None = None
    """For a candidate that gives every user the same scores: those scores (one per item),
    so the evaluation can rank once instead of per user. ``score`` gives the same values."""
    sparse: Callable[[sp.csr_matrix], sp.csr_matrix] | None = None
    """For a candidate whose scores are non-negative sparse personal scores with popularity
    tie-breaking (:func:`_with_popularity_ties`): the personal part, so the evaluation can
    rank over the user's candidate items only. ``score`` gives the same ranking."""
    popularity: np.ndarray | None = None
    """Tie-breaking popularity of a ``sparse`` candidate (training users per item)."""


def _item_counts(train: sp.csr_matrix) -> np.ndarray:
    return np.asarray(train.sum(axis=0), dtype=np.float64).ravel()


def _with_popularity_ties(scores: np.ndarray, popularity: np.ndarray) -> np.ndarray:
    """Break ties (and all-zero rows) by popularity, the fallback a deployed row would use.

    A bonus of at most one part in a million of each row's largest absolute score is added in
    proportion to popularity, so it reorders only near-ties. A float64 ``scores`` is updated
    in place (callers pass arrays of their own).
    """
    scores = np.array(scores, dtype=np.float64, copy=None)  # no copy when already float64
    top = np.maximum(scores.max(axis=1, keepdims=True), -scores.min(axis=1, keepdims=True))
    eps = 1e-6 * np.where(top > 0, top, 1.0)
    pmax = popularity.max() if popularity.size and popularity.max() > 0 else 1.0
    bonus = popularity / pmax
    for row, e in zip(scores, eps[:, 0]):  # row by row: no temporary the size of the batch
        row += e * bonus
    return scores


def fit_popularity(train: sp.csr_matrix) -> Candidate:
    """Global popularity: items ranked by the number of training users.

    Examples
    --------
    >>> c = fit_popularity(sp.csr_matrix(np.array([[1, 0, 1], [0, 0, 1]], dtype=np.float32)))
    >>> c.score(sp.csr_matrix((1, 3), dtype=np.float32)).tolist()
    [[1.0, 0.0, 2.0]]
    """
    pop = _item_counts(train)
    return Candidate("popularity", "global popularity (training users per item)", False,
                     lambda hist: np.broadcast_to(pop, (hist.shape[0], len(pop))), fixed=pop)


def fit_recent_popularity(train: sp.csr_matrix, item: np.ndarray, ts: np.ndarray,
                          reference_ts: int, *, days: int = RECENT_DAYS) -> Candidate:
    """Popularity in the trailing window before ``reference_ts``, ties broken by all-time counts.

    Examples
    --------
    >>> x = sp.csr_matrix(np.array([[1, 1, 0]], dtype=np.float32))
    >>> c = fit_recent_popularity(x, np.array([0, 1]), np.array([0, 90 * 86400]), 100 * 86400)
    >>> np.argmax(c.score(x)[0])
    np.int64(1)
    """
    pop = _item_counts(train)
    recent = np.bincount(item[ts >= reference_ts - days * 86400],
                         minlength=train.shape[1]).astype(np.float64)
    # Lexicographic order (recent first, then all-time) stays exact in float64 for any log
    # below 2**26 users per item.
    key = recent * (pop.max() + 1.0) + pop
    return Candidate("recent_popularity", f"popularity over the last {days} days of training",
                     False, lambda hist: np.broadcast_to(key, (hist.shape[0], len(key))),
                     fixed=key)


def fit_category_popularity(train: sp.csr_matrix, item_category: np.ndarray) -> Candidate:
    """Popularity within the user's most frequent category, then global popularity.

    Users whose training items carry no category get global popularity; ties between
    categories go to the lowest category code.

    Examples
    --------
    >>> x = sp.csr_matrix(np.array([[1, 0, 0], [1, 0, 1], [0, 1, 1]], dtype=np.float32))
    >>> c = fit_category_popularity(x, np.array([0, 1, 0]))
    >>> c.score(sp.csr_matrix(np.array([[0, 1, 0]], dtype=np.float32))).tolist()
    [[2.0, 4.0, 2.0]]
    """
    pop = _item_counts(train)
    cat = np.asarray(item_category, dtype=np.int64)
    has = cat >= 0
    n_cats = int(cat.max()) + 1 if has.any() else 0
    onehot = sp.csr_matrix((np.ones(int(has.sum())), (np.flatnonzero(has), cat[has])),
                           shape=(len(cat), max(n_cats, 1)))
    bonus = pop.max() + 1.0

    def score(hist: sp.csr_matrix) -> np.ndarray:
        per_cat = np.asarray((hist @ onehot).todense())
        fav = per_cat.argmax(axis=1)
        known = per_cat.max(axis=1) > 0
        in_fav = (cat[None, :] == fav[:, None]) & known[:, None]
        return pop[None, :] + bonus * in_fav

    return Candidate("category_popularity",
                     "popularity within the user's most frequent category", False, score)


def fit_item_knn(train: sp.csr_matrix, *, neighbours: int = NEIGHBOURS,
                 alpha: float = ALPHA) -> Candidate:
    """Item-item collaborative filtering with conditional-probability similarity.

    Notes
    -----
    Each item keeps its top ``neighbours`` by sim(i, j) = Freq(ij) / (Freq(i) Freq(j)^alpha),
    weights normalised to sum to 1 per item; a user's score for j sums the weights from the
    user's items (Deshpande & Karypis 2004). Ties are broken by popularity.

    References
    ----------
    Deshpande, M. & Karypis, G. (2004). Item-based top-N recommendation algorithms.
    ACM TOIS 22(1), 143-177.
    """
    w = item_neighbours(train, neighbours=neighbours, alpha=alpha)
    pop = _item_counts(train)

    def personal(hist: sp.csr_matrix) -> sp.csr_matrix:
        return (hist @ w).tocsr()

    def score(hist: sp.csr_matrix) -> np.ndarray:
        return _with_popularity_ties(personal(hist).toarray(), pop)

    return Candidate("itemknn", f"item-item CF, conditional probability (alpha={alpha}), "
                     f"top-{neighbours} neighbours", True, score, sparse=personal,
                     popularity=pop)


def ease_weights(gram: np.ndarray, l2: float) -> np.ndarray:
    """EASE item-item weights from the Gram matrix X'X (closed form, Steck 2019).

    Parameters
    ----------
    gram : ndarray, shape (n, n)
        X'X of the binary interaction matrix.
    l2 : float
        Ridge strength lambda (> 0).

    Returns
    -------
    ndarray, shape (n, n)
        B = I - P diagMat(1 / diag(P)), P = (X'X + lambda I)^-1; diag(B) = 0.

    References
    ----------
    Steck, H. (2019). Embarrassingly shallow autoencoders for sparse data. WWW 2019.

    Examples
    --------
    >>> ease_weights(np.array([[2.0, 1.0], [1.0, 1.0]]), 1.0).round(3).tolist()
    [[0.0, 0.333], [0.5, 0.0]]
    """
    p = np.linalg.inv(gram + l2 * np.eye(gram.shape[0]))
    b = -p / np.diag(p)[None, :]
    np.fill_diagonal(b, 0.0)
    return b


def fit_ease(train: sp.csr_matrix, *, l2: float = EASE_L2) -> Candidate:
    """EASE fitted on the items that have training data.

    Notes
    -----
    An item without training interactions has a zero row and column in X'X, so its EASE
    weights are exactly zero; leaving it out of the inverse changes nothing and saves cost.
    """
    pop = _item_counts(train)
    active = np.flatnonzero(pop > 0)
    xa = train[:, active]
    b = ease_weights((xa.T @ xa).toarray().astype(np.float64), l2)
    n_items = train.shape[1]

    def score(hist: sp.csr_matrix) -> np.ndarray:
        out = np.zeros((hist.shape[0], n_items))
        out[:, active] = hist[:, active] @ b
        return _with_popularity_ties(out, pop)

    return Candidate("latent", f"EASE (lambda={l2:g}) on {len(active)} items", True, score)


def fit_pure_svd(train: sp.csr_matrix, *, factors: int = SVD_FACTORS,
                 seed: int = 0) -> Candidate:
    """PureSVD: truncated SVD of the binary matrix, scores x_u V V' (Cremonesi et al. 2010).

    Notes
    -----
    The number of factors is capped below the smaller matrix side. The truncated SVD is
    PROPACK's Lanczos bidiagonalisation (``svds(solver="propack")``, to machine precision;
    about three times faster than ARPACK on the Gram matrix here, with the same singular
    values), started from a seeded random vector, so the fit is reproducible. On a matrix of
    lower rank than ``factors`` PROPACK stops and ARPACK is used; the factors whose singular
    value is zero carry no information (their directions are arbitrary) and are dropped.

    References
    ----------
    Cremonesi, P., Koren, Y. & Turrin, R. (2010). Performance of recommender algorithms on
    top-N recommendation tasks. RecSys 2010.
    """
    pop = _item_counts(train)
    f = max(1, min(factors, min(train.shape) - 1))
    x = train.astype(np.float64)
    try:
        _, sv, vt = svds(x, k=f, solver="propack", random_state=seed)
    except np.linalg.LinAlgError:  # PROPACK stops on a matrix of rank below f; ARPACK copes
        _, sv, vt = svds(x, k=f, solver="arpack", random_state=seed)
    keep = sv > _RANK_TOL * max(float(sv.max()), np.finfo(float).tiny)
    # sparse @ dense copies a non-contiguous operand per call: keep V contiguous.
    v = np.ascontiguousarray(vt[keep].T)

    def score(hist: sp.csr_matrix) -> np.ndarray:
        return _with_popularity_ties(np.asarray(hist @ v) @ v.T, pop)

    return Candidate("latent", f"PureSVD ({v.shape[1]} factors)", True, score)


def latent_fitter(train: sp.csr_matrix, *, seed: int,
                  max_ease_items: int = EASE_MAX_ITEMS) -> Callable[[sp.csr_matrix], Candidate]:
    """Choose the latent-factor model once, from the full training data.

    EASE when at most ``max_ease_items`` items have training data, else PureSVD. The choice is
    made once so that refits on subsamples (the learning curve) use the same model.

    Examples
    --------
    >>> x = sp.csr_matrix(np.eye(3, dtype=np.float32))
    >>> latent_fitter(x, seed=0)(x).method
    'EASE (lambda=100) on 3 items'
    """
    active = int((np.diff(train.tocsc().indptr) > 0).sum())
    if active <= max_ease_items or min(train.shape) < 3:
        return fit_ease
    return lambda t: fit_pure_svd(t, seed=seed)
