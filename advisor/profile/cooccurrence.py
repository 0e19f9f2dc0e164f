"""Item co-occurrence: which items have neighbours the data can vouch for.

For every ordered item pair the conditional probability P(x | y) (Deshpande & Karypis
2004, conditional-probability similarity with alpha = 0) is a binomial proportion over
the users who consumed y. A pair counts as a *significant neighbour* when the lower end of
its Wilson interval lies above x's base rate: co-consumption above chance. The profile
says how many items have enough such neighbours to seed an item-neighbourhood list, and
how much of the traffic falls on them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.stats import norm

from advisor.errors import ConfigError, InsufficientDataError, LogFormatError
from advisor.stats.intervals import wilson_interval

__all__ = ["CooccurrenceProfile", "PairRow", "cooccurrence_profile"]


@dataclass(frozen=True, slots=True)
class PairRow:
    """One ordered item pair: how often x is consumed by the users who consumed y."""

    y: int
    """Index of the conditioning item (the one a user has consumed)."""
    x: int
    """Index of the neighbour item (the one that might be recommended from y)."""
    both: int
    """Users who consumed both x and y."""
    n_y: int
    """Users who consumed y (the trials)."""
    p: float
    """Observed P(x | y) = both / n_y (share)."""
    low: float
    """Lower end of the Wilson interval for P(x | y) (share)."""
    high: float
    """Upper end of the Wilson interval for P(x | y) (share)."""
    base_rate: float
    """Share of all users who consumed x: P(x), the chance level to beat."""

    def to_dict(self) -> dict:
        """JSON-safe plain Python (ints and floats)."""
        return {
            "y": int(self.y),
            "x": int(self.x),
            "both": int(self.both),
            "n_y": int(self.n_y),
            "p": float(self.p),
            "low": float(self.low),
            "high": float(self.high),
            "base_rate": float(self.base_rate),
        }


@dataclass(frozen=True, slots=True)
class CooccurrenceProfile:
    """How many items have co-consumption neighbours above chance, and their traffic.

    Per-item arrays are indexed by the matrix's column (item) index; the caller maps
    indices to labels. ``to_dict`` gives only summary numbers, never the per-item arrays.
    """

    n_users: int
    """Users (rows) in the matrix."""
    n_items: int
    """Items (columns) in the matrix, seen or not."""
    n_interactions: int
    """Non-zero cells: distinct (user, item) pairs after the caller's history cap."""
    active_items: int
    """Items consumed by at least one user (support >= 1)."""
    confidence: float
    """Two-sided confidence level of the Wilson intervals."""
    min_pair_users: int
    """Pairs co-consumed by fewer users were not scored."""
    support: np.ndarray
    """Per item y: users who consumed it, n_y (int64, length ``n_items``)."""
    significant_neighbours: np.ndarray
    """Per item y: items x != y with P(x | y) significantly above P(x) (int64)."""
    k_thresholds: tuple[int, ...]
    """Neighbour counts k at which the shares below are taken (ascending)."""
    item_share: tuple[float, ...]
    """Per k: share of active items with at least k significant neighbours."""
    interaction_share: tuple[float, ...]
    """Per k: share of interactions (support, or the caller's item weights) on those items."""
    weighted: bool
    """True when ``interaction_share`` used the caller's ``item_weights``."""
    pairs_scored: int
    """Ordered pairs (x given y, x != y) co-consumed by at least ``min_pair_users`` users."""
    pairs_significant: int
    """Ordered pairs among those scored whose Wilson lower bound exceeds x's base rate."""
    median_neighbours: float
    """Median significant neighbours per active item (NaN when no item is active)."""
    best_p: np.ndarray
    """Per item y: observed P(x | y) of its strongest scored candidate x (the largest
    Wilson lower bound minus x's base rate, significant or not); NaN with no scored pair."""
    best_base: np.ndarray
    """Per item y: base rate P(x) of that strongest candidate x; NaN with no scored pair."""
    top_pairs: tuple[PairRow, ...]
    """The strongest significant pairs by Wilson lower bound, strongest first."""

    @property
    def nominal_false_rate(self) -> float:
        """One-sided nominal rate at which a pair with no real association passes the test."""
        return (1.0 - self.confidence) / 2.0

    def to_dict(self) -> dict:
        """Summary numbers as JSON-safe plain Python (per-item arrays left out)."""
        med = float(self.median_neighbours)
        return {
            "n_users": int(self.n_users),
            "n_items": int(self.n_items),
            "n_interactions": int(self.n_interactions),
            "active_items": int(self.active_items),
            "confidence": float(self.confidence),
            "min_pair_users": int(self.min_pair_users),
            "pairs_scored": int(self.pairs_scored),
            "pairs_significant": int(self.pairs_significant),
            "nominal_false_rate": float(self.nominal_false_rate),
            "median_neighbours": None if math.isnan(med) else med,
            "weighted": bool(self.weighted),
            "by_k": [
                {"k": int(k), "item_share": _num(a), "interaction_share": _num(b)}
                for k, a, b in zip(self.k_thresholds, self.item_share, self.interaction_share)
            ],
            "top_pairs": [row.to_dict() for row in self.top_pairs],
        }


def _num(v: float) -> float | None:
    v = float(v)
    return None if math.isnan(v) else v


def _binary_csr(matrix) -> sp.csr_matrix:
    if not sp.issparse(matrix):
        raise LogFormatError(
            "cooccurrence_profile: matrix must be a scipy.sparse users x items matrix, got "
            f"{type(matrix).__name__}; build it with scipy.sparse.csr_matrix"
        )
    if matrix.ndim != 2:
        raise LogFormatError(
            f"cooccurrence_profile: matrix must be 2-D (users x items), got {matrix.ndim}-D"
        )
    x = sp.csr_matrix(matrix)  # no copy when it already is CSR; never modified below
    if not x.has_canonical_format or (x.data == 0).any():
        x = x.copy()
        x.sum_duplicates()
        x.eliminate_zeros()
    bad = x.data != 1
    if bad.any():
        raise LogFormatError(
            f"cooccurrence_profile: matrix must be binary (1 = user consumed item), but "
            f"{int(bad.sum())} stored value(s) differ from 1 (e.g. {x.data[bad][0]!r}); "
            "set every consumed cell to 1 before profiling (counts belong elsewhere)"
        )
    # int32: X^T X on int8/bool data would overflow or saturate on popular items; int32
    # counts co-consumers exactly up to 2**31 users. The index arrays are shared with the
    # caller's matrix (not copied: on a large log they are gigabytes).
    return sp.csr_matrix((np.ones(x.nnz, dtype=np.int32), x.indices, x.indptr),
                         shape=x.shape, copy=False)


def _thresholds(k_thresholds) -> tuple[int, ...]:
    try:
        ks = tuple(k_thresholds)
    except TypeError:
        ks = (k_thresholds,)
    ok = bool(ks) and all(
        isinstance(k, (int, np.integer)) and not isinstance(k, bool) and k >= 1 for k in ks
    )
    if not ok:
        raise ConfigError(
            f"cooccurrence_profile: k_thresholds must be a non-empty sequence of integers "
            f">= 1, got {k_thresholds!r}; e.g. (1, 3, 5, 10)"
        )
    return tuple(sorted({int(k) for k in ks}))


def significant_pairs(both, n_y, base, *, confidence: float = 0.95,
                      tests: int | None = None) -> np.ndarray:
    """Which pairs are co-consumed above chance, with the false discovery rate controlled.

    Parameters
    ----------
    both, n_y : array_like of int
        Users with both items, and users with the conditioning item y.
    base : array_like of float
        Base rate of x (in [0, 1)).
    confidence : float
        One-sided level ``(1 - confidence) / 2``, as the Wilson interval's lower end.
    tests : int, optional
        Hypotheses tested in all (pairs never co-consumed count, with p = 1). Default: the
        pairs given.

    Returns
    -------
    ndarray of bool

    Notes
    -----
    Each pair gets the one-sided p-value of the score test of ``P(x | y) = base`` against
    ``> base``, ``z = (both / n_y - base) / sqrt(base (1 - base) / n_y)``: the test the
    Wilson interval inverts, so without correction "p < (1 - confidence) / 2" is exactly
    "Wilson lower bound above the base rate". With many pairs tested that alone passes about
    that share of pairs with no association, so the Benjamini-Hochberg step-up procedure is
    applied at level ``(1 - confidence) / 2`` over ``tests`` hypotheses: among the pairs
    called significant, the expected share of false ones is at most that level (under
    independence or positive dependence).

    References
    ----------
    Wilson (1927) JASA 22:209-212; Benjamini & Hochberg (1995) "Controlling the false
    discovery rate", JRSS B 57(1):289-300.

    Examples
    --------
    >>> significant_pairs([30, 3], [40, 40], [0.1, 0.1], tests=2).tolist()
    [True, False]
    """
    both = np.asarray(both, dtype=float)
    n_y = np.asarray(n_y, dtype=float)
    base = np.asarray(base, dtype=float)
    m = both.size if tests is None else int(tests)
    if both.size == 0:
        return np.zeros(0, dtype=bool)
    pvals = _pvalues(both, n_y, base)
    alpha = (1.0 - confidence) / 2.0
    return pvals <= _bh_cutoff(pvals[pvals <= alpha], alpha=alpha, tests=m)


def _pvalues(both: np.ndarray, n_y: np.ndarray, base: np.ndarray) -> np.ndarray:
    """One-sided score-test p-values of ``P(x | y) = base`` against ``> base`` (see
    :func:`significant_pairs`); 1 where the statistic is undefined."""
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (both / n_y - base) / np.sqrt(base * (1.0 - base) / n_y)
    # base = 0 (x never seen among exposed users) cannot happen for a co-consumed x.
    return np.where(np.isfinite(z), norm.sf(z), 1.0)


def _bh_cutoff(small: np.ndarray, *, alpha: float, tests: int,
               overwrite: bool = False) -> float:
    """Benjamini-Hochberg step-up cutoff: pairs with ``p <= cutoff`` are called.

    ``small`` holds every p-value at or below some bound among ``tests`` hypotheses, where
    no larger p-value can pass (for instance ``alpha``, which the step-up threshold
    ``alpha k / tests`` never exceeds; or ``alpha n / tests`` when at most ``n`` p-values
    are below 1); the larger ones rank after these. -inf when nothing passes. Equal p-values pass or
    fail together: if p_(j) = p_(k) with j > k and p_(k) passes, so does p_(j).
    ``overwrite=True`` sorts a float64 ``small`` in place instead of sorting a copy.

    References
    ----------
    Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate: a practical
    and powerful approach to multiple testing. JRSS B 57(1), 289-300.
    """
    ranked = np.asarray(small, dtype=np.float64) if overwrite else np.array(
        small, dtype=np.float64)
    ranked.sort()
    # The largest passing rank, looked for from the top a chunk at a time, so the ranks and
    # thresholds never exist for every p-value at once (tens of millions at 100M events).
    for hi in range(ranked.size, 0, -_BH_CHUNK):
        lo = max(hi - _BH_CHUNK, 0)
        passing = np.flatnonzero(
            ranked[lo:hi] <= alpha * np.arange(lo + 1, hi + 1) / max(tests, 1))
        if passing.size:
            return float(ranked[lo + passing[-1]])
    return -math.inf


_BH_CHUNK = 1 << 22
"""P-values compared with their step-up thresholds at a time in :func:`_bh_cutoff`."""


_BLOCK_PRODUCTS = 2_000_000
"""Bound on the user-level products (so on the pairs) one block of items may produce; the
per-pair arrays of a block stay under about 300 MB."""

_KEPT_PAIRS = 20_000_000
"""Pairs with ``p <= alpha`` kept between the two steps of the false-discovery control
(28 bytes each); beyond it the blocks are computed a second time instead."""


def _best_per_group(group: np.ndarray, score: np.ndarray, tie: np.ndarray) -> np.ndarray:
    """Position of the largest ``score`` in each run of equal ``group`` values (ties: the
    smallest ``tie``), in group order; ``group`` must be sorted and ``(group, tie)`` distinct.

    Examples
    --------
    >>> _best_per_group(np.array([0, 0, 0, 2, 2]), np.array([.1, .3, .3, .5, .2]),
    ...                 np.array([5, 9, 7, 1, 0])).tolist()
    [2, 3]
    """
    starts = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])
    sizes = np.diff(np.r_[starts, group.size])
    top = score == np.repeat(np.maximum.reduceat(score, starts), sizes)
    # Among each group's best scores, the smallest tie value (larger than any when not best).
    ties = np.where(top, tie, np.iinfo(np.int64).max)
    return np.flatnonzero(top & (ties == np.repeat(np.minimum.reduceat(ties, starts), sizes)))


@dataclass(slots=True)
class _Block:
    """Scored ordered pairs "x given y" of one block of conditioning items y."""

    y: np.ndarray
    x: np.ndarray
    both: np.ndarray
    low: np.ndarray
    estimate: np.ndarray | None
    base: np.ndarray | None
    pval: np.ndarray | None

    def best_into(self, best_p: np.ndarray, best_base: np.ndarray) -> None:
        """Each y's strongest candidate: the largest ``low - base`` (ties: lowest x)."""
        if not self.y.size:
            return
        order = None if np.all(self.y[1:] >= self.y[:-1]) else np.argsort(self.y, kind="stable")
        if order is None:
            pick = _best_per_group(self.y, self.low - self.base, self.x)
        else:  # blocks come row by row; this is only a safeguard
            pick = order[_best_per_group(self.y[order], (self.low - self.base)[order],
                                         self.x[order])]
        best_p[self.y[pick]] = self.estimate[pick]
        best_base[self.y[pick]] = self.base[pick]

    def subset(self, keep: np.ndarray) -> _Block:
        """The pairs in ``keep``, with only what the second step reads (y, x, both, low,
        pval)."""
        return _Block(self.y[keep], self.x[keep], self.both[keep], self.low[keep], None, None,
                      None if self.pval is None else self.pval[keep])


class _BlockScan:
    """``C = X^T X`` a block of rows (conditioning items y) at a time, each row's pairs
    scored: the cost of the whole scan is ``sum over users of h_u^2`` as for one product,
    the memory that of one block."""

    def __init__(self, x: sp.csr_matrix, support: np.ndarray, base_of: np.ndarray, *,
                 confidence: float, min_pair_users: int, pvalues: bool = True):
        self.x = x
        self.xt = x.T.tocsr()
        self.support = support
        self.base_of = base_of
        self.confidence = confidence
        self.min_pair_users = min_pair_users
        self.pvalues = pvalues
        history = np.diff(x.indptr).astype(np.float64)
        cost = np.cumsum(self.xt @ history)
        self.products = float(cost[-1]) if cost.size else 0.0
        """User-level products of the whole scan: an upper bound on the pairs it scores."""
        cuts = np.searchsorted(cost, np.arange(_BLOCK_PRODUCTS, cost[-1], _BLOCK_PRODUCTS)
                               ) if cost.size and cost[-1] > _BLOCK_PRODUCTS else []
        self.edges = np.unique(np.concatenate([[0], cuts, [x.shape[1]]])).astype(np.int64)

    def blocks(self):
        for lo, hi in zip(self.edges[:-1], self.edges[1:]):
            c = (self.xt[lo:hi] @ self.x).tocoo()
            y = c.row.astype(np.int64) + lo
            keep = (y != c.col) & (c.data >= self.min_pair_users)
            y, x, both = y[keep], c.col[keep].astype(np.int64), c.data[keep].astype(np.int64)
            del c, keep
            n_y = self.support[y]
            ci = wilson_interval(both, n_y, confidence=self.confidence)
            base = self.base_of[x]
            yield _Block(y, x, both, np.asarray(ci.low), np.asarray(ci.estimate), base,
                         _pvalues(both.astype(float), n_y.astype(float), base)
                         if self.pvalues else None)


class _TopPairs:
    """The strongest significant pairs seen so far: largest Wilson lower bound first, then
    most co-consumers, then by y and x, so that the table is the same on every run."""

    def __init__(self, n: int):
        self.n = n
        self.cols = [np.zeros(0, np.int64), np.zeros(0, np.int64), np.zeros(0, np.int64),
                     np.zeros(0)]

    def add(self, block: _Block, sig: np.ndarray) -> None:
        if not self.n:
            return
        idx = np.flatnonzero(sig)
        if idx.size > self.n:
            # Only pairs whose bound reaches the block's n-th largest can enter the top n
            # (every pair below it has n pairs ranked before it); ties at it are all kept.
            low = block.low[idx]
            idx = idx[low >= np.partition(low, idx.size - self.n)[idx.size - self.n]]
        y, x, both, low = (np.concatenate([old, new[idx]]) for old, new in
                           zip(self.cols, (block.y, block.x, block.both, block.low)))
        order = np.lexsort((x, y, -both, -low))[:self.n]
        self.cols = [y[order], x[order], both[order], low[order]]

    def rows(self, support: np.ndarray, base_of: np.ndarray, *,
             confidence: float) -> tuple[PairRow, ...]:
        y, x, both, low = self.cols
        n_y = support[y]
        ci = wilson_interval(both, n_y, confidence=confidence)
        return tuple(
            PairRow(y=int(y[i]), x=int(x[i]), both=int(both[i]), n_y=int(n_y[i]),
                    p=float(np.asarray(ci.estimate)[i]), low=float(low[i]),
                    high=float(np.asarray(ci.high)[i]), base_rate=float(base_of[x[i]]))
            for i in range(y.size))


def cooccurrence_profile(
    matrix,
    *,
    confidence: float = 0.95,
    min_pair_users: int = 2,
    k_thresholds=(1, 3, 5, 10),
    item_weights=None,
    exposed_users=None,
    false_discovery_control: bool = False,
    top_n: int = 20,
) -> CooccurrenceProfile:
    """Count, per item, the neighbours whose co-consumption is above chance.

    Parameters
    ----------
    matrix : scipy.sparse matrix
        Users x items, binary (1 = the user consumed the item), already capped by the
        caller to each user's most recent items.
    confidence : float, optional
        Two-sided confidence level of the Wilson intervals. Default 0.95.
    min_pair_users : int, optional
        Ordered pairs co-consumed by fewer users are not scored. Default 2.
    k_thresholds : sequence of int, optional
        Neighbour counts at which shares of items and interactions are reported.
    item_weights : array_like, optional
        Non-negative weight per item (length ``n_items``), e.g. uncapped interaction
        counts, for ``interaction_share``. Default: the support ``n_y``.
    exposed_users : array_like, optional
        Per item x, the users who could have consumed it (e.g. users still active after x
        first appeared), the denominator of x's base rate. Default: every user. In a
        growing catalogue a new item's base rate over all users is understated, which would
        make pairs of new items look significant; see Notes.
    false_discovery_control : bool, optional
        Call a pair significant only after the Benjamini-Hochberg procedure over every
        ordered pair of seen items (see :func:`significant_pairs`), instead of each pair's
        own Wilson test. The audit uses it; default False (per-pair Wilson, as in Notes).
    top_n : int, optional
        Rows in ``top_pairs``. Default 20.

    Returns
    -------
    CooccurrenceProfile

    Raises
    ------
    LogFormatError
        If ``matrix`` is not a 2-D sparse binary matrix, or ``item_weights`` has the wrong
        length or negative / non-finite entries.
    InsufficientDataError
        If the matrix has no users or no interactions.
    ConfigError
        If ``confidence``, ``min_pair_users``, ``k_thresholds`` or ``top_n`` is out of range.

    Notes
    -----
    With ``X`` the binary matrix, ``C = X^T X`` holds co-consumption counts and its
    diagonal the supports ``n_i``. For the ordered pair "x given y"::

        P(x | y) = C[x, y] / n_y        base rate  b_x = n_x / e_x

    where ``e_x`` is ``exposed_users[x]`` (all users when not given).
    ``P(x | y)`` is a binomial proportion over the ``n_y`` users who consumed y; its Wilson
    interval comes from statsmodels. The pair is a significant neighbour of y when
    ``C[x, y] >= min_pair_users`` and the Wilson lower bound exceeds ``b_x``, i.e. x is
    co-consumed with y more often than with a random user. ``significant_neighbours[y]``
    counts the x that pass: neighbours usable for recommending *from* y. For planning,
    ``best_p[y]`` and ``best_base[y]`` describe y's strongest scored candidate, the x with
    the largest margin ``low - b_x`` (ties: lowest x), whether it passes or not. Shares of
    interactions divide by the total weight over all items (items absent from the capped
    matrix have no neighbours and count against the share).

    Assumptions and weak points: users are independent trials with a common probability
    of consuming x; the base rate is treated as known although it is estimated from the
    same users (which makes the test slightly conservative for popular y). Every scored
    pair is tested separately at one-sided level ``(1 - confidence) / 2`` with no
    multiplicity correction, so among pairs with no real association about that share
    still pass: some significant pairs are false positives. For small ``n_y`` the
    Wilson bound's actual error rate departs from the nominal one (Brown, Cai & DasGupta
    2001), and restricting to pairs with ``C >= min_pair_users`` means the rate per
    *scored* pair can exceed the nominal rate for rare items. Read the counts as
    evidence of structure, not as a list of certified pairs.

    Cost: computing ``C`` takes time of order ``sum over users of h_u^2``, ``h_u`` being
    the user's capped history length. ``C`` is computed and scored a block of conditioning
    items at a time (at most two million pairs per block), so memory is that of one block plus
    the per-item results, not of ``C``; with false-discovery control the pairs with
    ``p <= alpha * (products / tests)`` (a bound no passing p-value exceeds) are kept
    (28 bytes each) until the step-up cutoff is known, or, past twenty million of them,
    the blocks are computed twice. No dense items x items array is ever built.

    References
    ----------
    .. [1] Deshpande, M. & Karypis, G. (2004). Item-based top-N recommendation algorithms.
       ACM Transactions on Information Systems 22(1):143-177.
    .. [2] Wilson, E. B. (1927). Probable inference, the law of succession, and
       statistical inference. JASA 22:209-212.
    .. [3] Brown, L. D., Cai, T. T. & DasGupta, A. (2001). Interval estimation for a
       binomial proportion. Statistical Science 16(2):101-133.

    Examples
    --------
    >>> import scipy.sparse as sp
    >>> x = sp.csr_matrix([[1, 1, 0]] * 6 + [[0, 0, 1]] * 6)
    >>> prof = cooccurrence_profile(x, k_thresholds=(1,))
    >>> prof.significant_neighbours.tolist(), prof.item_share
    ([1, 1, 0], (0.6666666666666666,))
    """
    if isinstance(min_pair_users, bool) or not isinstance(min_pair_users, (int, np.integer)) \
            or min_pair_users < 1:
        raise ConfigError(
            f"cooccurrence_profile: min_pair_users must be an integer >= 1, got "
            f"{min_pair_users!r}; 2 means a pair needs at least two users in common"
        )
    if isinstance(top_n, bool) or not isinstance(top_n, (int, np.integer)) or top_n < 0:
        raise ConfigError(f"cooccurrence_profile: top_n must be an integer >= 0, got {top_n!r}")
    if isinstance(confidence, bool) or not isinstance(confidence, (int, float)) \
            or not 0.0 < confidence < 1.0:
        raise ConfigError(
            f"cooccurrence_profile: confidence must be strictly between 0 and 1 (e.g. 0.95), "
            f"got {confidence!r}"
        )
    ks = _thresholds(k_thresholds)
    x = _binary_csr(matrix)
    n_users, n_items = x.shape
    if n_users == 0 or x.nnz == 0:
        raise InsufficientDataError(
            f"cooccurrence_profile: the matrix ({n_users} users x {n_items} items) holds no "
            "interactions; co-occurrence needs users who consumed at least one item; check "
            "the event filters and the history cap"
        )
    support = np.asarray(x.sum(axis=0), dtype=np.int64).ravel()

    if item_weights is None:
        weights = support.astype(float)
    else:
        weights = np.asarray(item_weights, dtype=float)
        if weights.shape != (n_items,) or not np.all(np.isfinite(weights)) \
                or np.any(weights < 0):
            raise LogFormatError(
                f"cooccurrence_profile: item_weights must be {n_items} finite values >= 0 "
                f"(one per item column), got shape {weights.shape}; align the weights with "
                "the matrix's item index"
            )

    if exposed_users is None:
        exposed = np.full(n_items, float(n_users))
    else:
        exposed = np.asarray(exposed_users, dtype=float)
        if exposed.shape != (n_items,) or np.any(exposed < support):
            raise LogFormatError(
                f"cooccurrence_profile: exposed_users must hold {n_items} counts, each at "
                "least the item's support (an item's users were all exposed to it); got "
                f"shape {exposed.shape}"
            )
    base_of = support / np.maximum(exposed, 1.0)
    alpha = (1.0 - confidence) / 2.0
    n_active = int((support >= 1).sum())
    tests = max(n_active * (n_active - 1), 1)
    scan = _BlockScan(x, support, base_of, confidence=confidence,
                      min_pair_users=min_pair_users, pvalues=false_discovery_control)
    best_p = np.full(n_items, np.nan)
    best_base = np.full(n_items, np.nan)
    neighbours = np.zeros(n_items, dtype=np.int64)
    top = _TopPairs(top_n)
    pairs_scored = 0

    if not false_discovery_control:
        for b in scan.blocks():
            pairs_scored += b.y.size
            b.best_into(best_p, best_base)
            sig = b.low > b.base
            neighbours += np.bincount(b.y[sig], minlength=n_items)
            top.add(b, sig)
    else:
        # Benjamini-Hochberg needs every p-value before any pair is called. Only the small
        # p-values can pass, so those pairs are kept while they fit the budget and the
        # step-up is run on them; beyond the budget only their p-values are kept and the
        # blocks are scanned a second time.
        # A p-value can pass only if p <= alpha k / tests for some rank k no larger than the
        # pairs scored, which the products bound from above: larger ones need not be kept.
        limit = alpha * min(1.0, scan.products / tests)
        kept: list[_Block] = []
        small_p: list[np.ndarray] = []
        n_kept = 0
        for b in scan.blocks():
            pairs_scored += b.y.size
            b.best_into(best_p, best_base)
            cand = b.pval <= limit
            small_p.append(b.pval[cand])
            n_kept += int(cand.sum())
            if n_kept <= _KEPT_PAIRS:
                kept.append(b.subset(cand))
            else:
                kept = []
        # One array of them, each block's part freed as soon as it is copied (concatenating
        # would hold both; at 100M events they are half a gigabyte).
        pvals = np.empty(sum(part.size for part in small_p))
        end = pvals.size
        while small_p:
            part = small_p.pop()
            pvals[end - part.size:end] = part
            end -= part.size
            del part
        cutoff = _bh_cutoff(pvals, alpha=alpha, tests=tests, overwrite=True)
        del pvals
        again = scan.blocks() if n_kept > _KEPT_PAIRS else iter(kept)
        for b in again:
            sig = b.pval <= cutoff
            neighbours += np.bincount(b.y[sig], minlength=n_items)
            top.add(b, sig)
        del kept

    active = support >= 1
    total_weight = float(weights.sum())
    item_share, interaction_share = [], []
    for k in ks:
        has_k = neighbours >= k  # implies active: an unseen item has no pairs
        item_share.append(float(has_k[active].mean()))
        interaction_share.append(
            float(weights[has_k].sum() / total_weight) if total_weight > 0 else math.nan
        )
    top_rows = top.rows(support, base_of, confidence=confidence)
    pairs_significant = int(neighbours.sum())
    ci_level = wilson_interval(1, 2, confidence=confidence).confidence

    return CooccurrenceProfile(
        n_users=int(n_users),
        n_items=int(n_items),
        n_interactions=int(x.nnz),
        active_items=n_active,
        confidence=float(ci_level),
        min_pair_users=int(min_pair_users),
        support=support,
        significant_neighbours=neighbours,
        k_thresholds=ks,
        item_share=tuple(item_share),
        interaction_share=tuple(interaction_share),
        weighted=item_weights is not None,
        pairs_scored=int(pairs_scored),
        pairs_significant=pairs_significant,
        median_neighbours=float(np.median(neighbours[active])) if n_active else math.nan,
        best_p=best_p,
        best_base=best_base,
        top_pairs=top_rows,
    )
