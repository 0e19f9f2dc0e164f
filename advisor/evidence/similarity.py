"""Conditional-probability item similarity, computed in blocks of items to bound memory.

Shared by the item-neighbour candidate and the neighbour-reliability check, so both judge
the same neighbour lists.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import scipy.sparse as sp

__all__ = ["ALPHA", "NEIGHBOURS", "item_neighbours", "similarity_blocks",
           "top_neighbours_sparse"]

ALPHA = 0.5
"""Exponent on the neighbour's frequency: 0 gives P(j|i), which favours popular neighbours;
0.5 is a middle value of the range Deshpande & Karypis (2004) explore. Not tuned here."""

NEIGHBOURS = 20
"""Neighbours kept per item (Deshpande & Karypis 2004 use about 10-20)."""

_BLOCK_CELLS = 4_000_000
"""Similarity cells per block (items in block x all items)."""


_BLOCK_PRODUCTS = 8_000_000
"""Bound on the user-item products one sparse block of :func:`item_neighbours` may cost."""


def _factors(train: sp.csr_matrix, alpha: float) -> tuple[sp.csr_matrix, sp.csr_matrix]:
    """``left`` (items x users) and ``right`` (users x items) with ``left @ right`` the
    similarity matrix: both normalisations folded in once, so a block of rows is one sparse
    product whose cost grows with the sum over users of (items per user)^2, far below the
    dense ``n_users * n_items^2`` on sparse logs."""
    freq = np.asarray(train.sum(axis=0), dtype=np.float64).ravel()
    with np.errstate(divide="ignore"):
        row_norm = np.where(freq > 0, 1.0 / freq, 0.0)
        col_norm = np.where(freq > 0, freq ** -alpha, 0.0)
    right = (train @ sp.diags(col_norm.astype(np.float32))).tocsr()
    left = (sp.diags(row_norm.astype(np.float32)) @ train.T).tocsr()
    return left, right


def similarity_blocks(train: sp.csr_matrix, *, alpha: float = ALPHA,
                      rows: np.ndarray | None = None
                      ) -> Iterator[tuple[int, sp.csr_matrix]]:
    """Yield blocks of rows of the conditional-probability similarity matrix.

    Parameters
    ----------
    train : csr_matrix, shape (n_users, n_items)
        Binary interactions.
    alpha : float, optional
        Exponent on the neighbour's frequency.
    rows : ndarray of int, optional
        Compute only these items' rows, in this order (default: every item). Bounds the
        cost when only a sample of items is needed.

    Yields
    ------
    start : int
        Position of the block's first row: an item index, or an index into ``rows``.
    sim : csr_matrix of float32, shape (block, n_items)
        sim[i, j] = Freq(i, j) / (Freq(i) * Freq(j) ** alpha); no entry on the diagonal or
        where no user has both items.

    Notes
    -----
    Freq(i, j) counts users with both items, Freq(i) users with item i (Deshpande & Karypis
    2004, conditional-probability similarity). The measure is asymmetric; row i holds the
    candidates j for a user who has i.

    References
    ----------
    Deshpande, M. & Karypis, G. (2004). Item-based top-N recommendation algorithms.
    ACM TOIS 22(1), 143-177.

    Examples
    --------
    >>> x = sp.csr_matrix(np.array([[1, 1, 0], [1, 0, 1], [1, 1, 0]], dtype=np.float32))
    >>> [round(float(v), 3) for v in next(similarity_blocks(x, alpha=0.0))[1].toarray()[0]]
    [0.0, 0.667, 0.333]
    """
    n_items = train.shape[1]
    left, right = _factors(train, alpha)
    block = max(1, _BLOCK_CELLS // max(n_items, 1))
    order = np.arange(n_items) if rows is None else np.asarray(rows, dtype=np.int64)
    for start in range(0, order.size, block):
        idx = order[start:start + block]
        sim = (left[idx] @ right).tocsr()
        local = np.repeat(np.arange(idx.size), np.diff(sim.indptr))
        sim.data[sim.indices == idx[local]] = 0.0
        sim.eliminate_zeros()
        yield start, sim


def top_neighbours_sparse(sim: sp.csr_matrix, k: int, *, items: np.ndarray | None = None
                          ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The k largest positive entries per row of a sparse block of similarity rows.

    Row ``r`` of ``sim`` is item ``items[r]`` (default ``r``); its own column (the diagonal)
    is skipped. Values are compared in float32 (the precision :func:`similarity_blocks`
    computes in); ties go to the lower column index, so the lists are the same on every run.

    Returns
    -------
    rows, cols, vals : ndarray
        Item, neighbour and similarity (float32) of every kept entry, row by row, best first.

    Examples
    --------
    >>> m = sp.csr_matrix(np.array([[0.9, 0.5, 0.5, 0.2]]))
    >>> r, c, v = top_neighbours_sparse(m, 2)
    >>> c.tolist(), v.tolist()
    ([1, 2], [0.5, 0.5])
    """
    sim = sim.tocsr()
    if not sim.has_sorted_indices:
        sim = sim.sorted_indices()
    items = np.arange(sim.shape[0]) if items is None else np.asarray(items, dtype=np.int64)
    local = np.repeat(np.arange(sim.shape[0], dtype=np.int64), np.diff(sim.indptr))
    vals = sim.data.astype(np.float32, copy=False)
    keep = (vals > 0) & (sim.indices != items[local])
    local, cols, vals = local[keep], sim.indices[keep].astype(np.int64), vals[keep]
    # The bits of a positive float32 order like the value: one integer key (row, then value
    # descending) sorted stably keeps each row's columns ascending among equal values.
    key = (local << 31) | (0x7FFFFFFF - vals.view(np.int32).astype(np.int64))
    order = np.argsort(key, kind="stable")
    local, cols, vals = local[order], cols[order], vals[order]
    counts = np.bincount(local, minlength=sim.shape[0])
    top = np.arange(local.size) - np.repeat(np.cumsum(counts) - counts, counts) < k
    return items[local[top]], cols[top], vals[top]


def item_neighbours(train: sp.csr_matrix, *, neighbours: int = NEIGHBOURS,
                    alpha: float = ALPHA) -> sp.csr_matrix:
    """Sparse item x item model: each item's top neighbours, weights summing to 1 per item.

    Parameters
    ----------
    train : csr_matrix, shape (n_users, n_items)
        Binary interactions.
    neighbours : int, optional
        Neighbours kept per item.
    alpha : float, optional
        Exponent of :func:`similarity_blocks`.

    Returns
    -------
    csr_matrix, shape (n_items, n_items)
        Row i holds the similarities of i's top neighbours, scaled to sum to 1.

    Notes
    -----
    Scaling each item's neighbour weights to sum to 1 is the similarity normalisation of
    Deshpande & Karypis (2004): without it a user's items with dense neighbourhoods outvote
    the others. A user's score for item j is then the sum over the user's items i of the
    normalised sim(i, j).

    Examples
    --------
    >>> x = sp.csr_matrix(np.array([[1, 1, 0], [1, 0, 1], [1, 1, 0]], dtype=np.float32))
    >>> item_neighbours(x, neighbours=1, alpha=0.0).toarray().tolist()[0]
    [0.0, 1.0, 0.0]
    """
    n_items = train.shape[1]
    left, right = _factors(train, alpha)
    # Blocks of consecutive items whose products stay under the bound: an item's row costs
    # at most the summed history lengths of its users.
    history = np.diff(train.indptr).astype(np.float64)
    cost = np.cumsum(np.asarray(train.T @ history).ravel())
    edges = np.unique(np.concatenate([
        [0], np.searchsorted(cost, np.arange(_BLOCK_PRODUCTS, cost[-1] if cost.size else 0,
                                             _BLOCK_PRODUCTS)), [n_items]]))
    rows, cols, vals = [], [], []
    for lo, hi in zip(edges[:-1], edges[1:]):
        r, c, v = top_neighbours_sparse((left[lo:hi] @ right).tocsr(), neighbours,
                                        items=np.arange(lo, hi))
        rows.append(r)
        cols.append(c)
        vals.append(v.astype(np.float64))
    w = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                      shape=(n_items, n_items))
    sums = np.asarray(w.sum(axis=1)).ravel()
    with np.errstate(divide="ignore"):
        scale = np.where(sums > 0, 1.0 / sums, 0.0)
    return (sp.diags(scale) @ w).tocsr()
