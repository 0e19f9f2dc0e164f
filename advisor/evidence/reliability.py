"""Split-half reliability of item neighbour lists, projected with Spearman-Brown.

If two random halves of the users give each item much the same neighbours, the lists reflect
taste rather than chance; if they disagree, more data is needed before item neighbours can
be trusted. Spearman-Brown projects the agreement to the full data and beyond.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sp

from advisor.evidence.model import NeighbourReliability
from advisor.evidence.similarity import (
    ALPHA,
    NEIGHBOURS,
    similarity_blocks,
    top_neighbours_sparse,
)

__all__ = [
    "MIN_HALF_SUPPORT",
    "neighbour_reliability",
    "spearman_brown",
    "spearman_brown_factor",
]

MIN_HALF_SUPPORT = 2
"""Users an item needs in each half to be compared: with one user its similarities are all 0
or 1 over that user's few items (common practice, no published source)."""

_MEASURE = ("per-item Pearson correlation between the two halves' similarity rows over "
            "all other items, averaged through Fisher's z")


#: Items compared at most (seeded sample beyond it); bounds cost on large catalogues.
MAX_ITEMS_COMPARED = 2000


def spearman_brown(rho: float, factor: float) -> float:
    """Reliability at ``factor`` times the data, from reliability ``rho`` at the current size.

    Notes
    -----
    rho_k = k rho / (1 + (k - 1) rho) (Spearman 1910; Brown 1910). It assumes the added data
    are parallel to the measured data (same users, same behaviour, exchangeable); neighbour
    similarities are ratios of counts rather than sums of parallel parts, so the projection
    is an approximation.

    References
    ----------
    Spearman, C. (1910). Correlation calculated from faulty data. Br. J. Psychol. 3, 271-295.
    Brown, W. (1910). Some experimental results in the correlation of mental abilities.
    Br. J. Psychol. 3, 296-322.

    Examples
    --------
    >>> round(spearman_brown(0.5, 2.0), 4)
    0.6667
    """
    return factor * rho / (1.0 + (factor - 1.0) * rho)


def spearman_brown_factor(rho: float, target: float) -> float | None:
    """Multiple of the current data for reliability ``rho`` to reach ``target``.

    Inverts :func:`spearman_brown`: k = target (1 - rho) / (rho (1 - target)). None unless
    0 < rho < 1 and 0 < target < 1 (with rho <= 0 no amount of data is projected to help).

    Examples
    --------
    >>> round(spearman_brown_factor(0.5, 0.8), 6)
    4.0
    """
    if not (0 < rho < 1 and 0 < target < 1):
        return None
    return target * (1.0 - rho) / (rho * (1.0 - target))


def _row_pearson(sa: sp.csr_matrix, sb: sp.csr_matrix) -> np.ndarray:
    """Pearson correlation of matching rows over all columns except the row's own item.

    Computed from the rows' sums, sums of squares and cross products, so only the stored
    entries are touched; the diagonal holds no entry in either block and adds nothing to the
    sums, only the count drops by one. Rows constant in either half give NaN.
    """
    a = sa.astype(np.float64)
    b = sb.astype(np.float64)
    n = a.shape[1] - 1

    def row_sum(m: sp.csr_matrix) -> np.ndarray:
        return np.asarray(m.sum(axis=1)).ravel()

    sum_a, sum_b = row_sum(a), row_sum(b)
    cov = row_sum(a.multiply(b)) - sum_a * sum_b / n
    var_a = row_sum(a.multiply(a)) - sum_a ** 2 / n
    var_b = row_sum(b.multiply(b)) - sum_b ** 2 / n
    with np.errstate(invalid="ignore", divide="ignore"):
        r = cov / np.sqrt(var_a * var_b)
    return np.where((var_a > 1e-12) & (var_b > 1e-12), r, np.nan)


def _row_jaccard(sa: sp.csr_matrix, sb: sp.csr_matrix, k: int, items: np.ndarray
                 ) -> np.ndarray:
    """Jaccard overlap of the two halves' top-k neighbour sets per row (positive sims only).

    Row ``r`` of both blocks is item ``items[r]``.
    """
    n_items = sa.shape[1]
    ra, ca, _ = top_neighbours_sparse(sa, k, items=items)
    rb, cb, _ = top_neighbours_sparse(sb, k, items=items)
    position = np.full(n_items, -1, dtype=np.int64)
    position[items] = np.arange(items.size)
    shared = np.intersect1d(ra * n_items + ca, rb * n_items + cb, assume_unique=True)
    inter = np.bincount(position[shared // n_items], minlength=items.size)
    union = (np.bincount(position[ra], minlength=items.size)
             + np.bincount(position[rb], minlength=items.size) - inter)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(union > 0, inter / union, np.nan)


def neighbour_reliability(train: sp.csr_matrix, *, rng: np.random.Generator,
                          neighbours: int = NEIGHBOURS, alpha: float = ALPHA,
                          target: float = 0.8,
                          min_support: int = MIN_HALF_SUPPORT,
                          max_items: int = MAX_ITEMS_COMPARED) -> NeighbourReliability:
    """Split-half agreement of item neighbour lists and the data a target reliability needs.

    Parameters
    ----------
    train : csr_matrix, shape (n_users, n_items)
        Binary training interactions.
    rng : numpy.random.Generator
        Seeded generator for the split into halves.
    neighbours : int, optional
        Neighbours per item (as the item-neighbour candidate).
    alpha : float, optional
        Similarity exponent (as the item-neighbour candidate).
    target : float, optional
        Target reliability.
    min_support : int, optional
        Users an item needs in each half to be compared.
    max_items : int, optional
        At most this many eligible items (a seeded sample) are compared.

    Returns
    -------
    NeighbourReliability
        Half agreement, Spearman-Brown projection to full size, and extra users needed.

    Notes
    -----
    Users with training data are permuted (seeded) and cut in two halves; conditional-
    probability similarities (as used by the item-neighbour candidate) are computed in each.
    For every item with ``min_support`` users in both halves, the Pearson correlation of its
    two similarity rows over all other items is the split-half agreement; items' correlations
    are averaged through Fisher's z (clipped at |r| = 0.999). Correlating whole rows avoids
    the selection bias of correlating only the pairs that made either half's top-k list
    (those are high in one half by construction, which drives the correlation negative).
    The top-k list is read off the row, so a reliable row gives a stable list. The full-data
    reliability is the Spearman-Brown projection at k = 2; the users needed for ``target``
    invert the same formula (extra users beyond today's). Rare items excluded by
    ``min_support`` are usually the least reliable, so the figure describes items with some
    data. On large catalogues a seeded sample of ``max_items`` eligible items is compared.
    The mean Jaccard overlap of the halves' top-k lists is reported beside it as a
    plain description (no projection). Popularity of the neighbours is part of every row,
    so a log without taste structure can still give stable (popularity-shaped) rows.

    References
    ----------
    Deshpande & Karypis (2004) ACM TOIS 22(1); Spearman (1910); Brown (1910).
    """
    users = np.flatnonzero(np.diff(train.indptr) > 0)
    perm = rng.permutation(users)
    half = len(perm) // 2
    xa, xb = train[np.sort(perm[:half])], train[np.sort(perm[half:2 * half])]
    fa = np.asarray(xa.sum(axis=0)).ravel()
    fb = np.asarray(xb.sum(axis=0)).ravel()
    eligible = (fa >= min_support) & (fb >= min_support)
    items = np.flatnonzero(eligible)
    if items.size > max_items:
        # Each compared item costs its similarity row (a product over its users' histories)
        # in both halves; a seeded sample of items bounds that on large catalogues (the mean
        # over items is estimated).
        items = np.sort(rng.choice(items, size=max_items, replace=False))
    corr, overlap = [], []
    if items.size >= 1 and half >= min_support:
        for (start, sa), (_, sb) in zip(similarity_blocks(xa, alpha=alpha, rows=items),
                                        similarity_blocks(xb, alpha=alpha, rows=items)):
            corr.append(_row_pearson(sa, sb))
            overlap.append(_row_jaccard(sa, sb, neighbours,
                                        items[start:start + sa.shape[0]]))
    r = np.concatenate(corr) if corr else np.array([])
    r = r[np.isfinite(r)]
    jac = np.concatenate(overlap) if overlap else np.array([])
    jac = jac[np.isfinite(jac)]
    base = dict(measure=_MEASURE, neighbours=neighbours, users=2 * half,
                items_compared=len(r), target=target,
                top_k_overlap=float(jac.mean()) if len(jac) else None)
    if len(r) == 0:
        return NeighbourReliability(half_agreement=None, reliability=None, users_needed=None,
                                    status="not_estimable", **base)
    half_rho = float(np.tanh(np.arctanh(np.clip(r, -0.999, 0.999)).mean()))
    full = spearman_brown(half_rho, 2.0) if half_rho > -1 else None
    status, needed = "not_estimable", None
    if full is not None and full >= target:
        status = "met"
    elif full is not None and full > 0:
        factor = spearman_brown_factor(full, target)
        if factor is not None:
            status = "estimated"
            needed = int(math.ceil((factor - 1.0) * 2 * half))
    return NeighbourReliability(half_agreement=half_rho, reliability=full,
                                users_needed=needed, status=status, **base)
