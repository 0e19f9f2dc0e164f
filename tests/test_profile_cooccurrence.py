"""Tests for advisor.profile.cooccurrence: conditional-probability neighbours with intervals."""

from __future__ import annotations

import json

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from statsmodels.stats.proportion import proportion_confint

from advisor.errors import ConfigError, InsufficientDataError, LogFormatError
from advisor.profile.cooccurrence import CooccurrenceProfile, cooccurrence_profile

# Hand-worked log: 5 users x 4 items.
#   u0: 0 1      u1: 0 1      u2: 0 1 2      u3: 2 3      u4: 3
# Supports n = (3, 3, 2, 2); base rates n/5 = (0.6, 0.6, 0.4, 0.4).
# Co-consumption: C[0,1] = 3, C[0,2] = C[1,2] = C[2,3] = 1, all other off-diagonal 0.
TINY = sp.csr_matrix(np.array([
    [1, 1, 0, 0],
    [1, 1, 0, 0],
    [1, 1, 1, 0],
    [0, 0, 1, 1],
    [0, 0, 0, 1],
]))


def _brute_force(dense, confidence, min_pair_users):
    """Per-pair loop with statsmodels, independent of the sparse implementation."""
    n_users, n_items = dense.shape
    support = dense.sum(axis=0)
    neighbours = np.zeros(n_items, dtype=int)
    margin = np.full(n_items, -np.inf)
    scored = significant = 0
    for y in range(n_items):
        for x in range(n_items):
            if x == y:
                continue
            both = int((dense[:, x] & dense[:, y]).sum())
            if both < min_pair_users:
                continue
            scored += 1
            low, _ = proportion_confint(both, support[y], alpha=1 - confidence, method="wilson")
            margin[y] = max(margin[y], low - support[x] / n_users)
            if low > support[x] / n_users:
                neighbours[y] += 1
                significant += 1
    return neighbours, scored, significant, np.where(np.isinf(margin), np.nan, margin)


def test_tiny_log_scores_only_pairs_with_two_co_consumers():
    """Only (0|1) and (1|0) have C >= 2; with 3 of 3 they pass at 80% but not at 95%."""
    # statsmodels proportion_confint(3, 3, alpha=0.2, method="wilson") -> low 0.6462 > 0.6
    # statsmodels proportion_confint(3, 3, alpha=0.05, method="wilson") -> low 0.4385 < 0.6
    lo80, _ = proportion_confint(3, 3, alpha=0.2, method="wilson")
    lo95, _ = proportion_confint(3, 3, alpha=0.05, method="wilson")
    assert lo80 > 0.6 > lo95

    p80 = cooccurrence_profile(TINY, confidence=0.8, k_thresholds=(1, 2))
    assert p80.support.tolist() == [3, 3, 2, 2]
    assert p80.pairs_scored == 2
    assert p80.pairs_significant == 2
    assert p80.significant_neighbours.tolist() == [1, 1, 0, 0]
    # 2 of 4 active items have a neighbour; they carry (3 + 3) / 10 interactions.
    assert p80.item_share == (0.5, 0.0)
    assert p80.interaction_share == pytest.approx((0.6, 0.0))
    assert p80.median_neighbours == 0.5

    p95 = cooccurrence_profile(TINY, confidence=0.95)
    assert p95.pairs_scored == 2 and p95.pairs_significant == 0
    assert p95.significant_neighbours.tolist() == [0, 0, 0, 0]


def test_tiny_log_top_pairs_carry_statsmodels_bounds():
    """The pair table reports P(x|y), its statsmodels Wilson bounds and x's base rate."""
    prof = cooccurrence_profile(TINY, confidence=0.8)
    lo, hi = proportion_confint(3, 3, alpha=0.2, method="wilson")  # statsmodels
    assert [(r.y, r.x) for r in prof.top_pairs] == [(0, 1), (1, 0)]
    row = prof.top_pairs[0]
    assert (row.both, row.n_y, row.p, row.base_rate) == (3, 3, 1.0, 0.6)
    assert row.low == pytest.approx(lo, abs=1e-12) and row.high == pytest.approx(hi, abs=1e-12)


def test_tiny_log_scores_single_co_consumer_pairs_when_allowed():
    """min_pair_users=1 scores the eight ordered pairs with C >= 1; 1 of 2 never beats 0.4."""
    # statsmodels proportion_confint(1, 2, alpha=0.2, method="wilson") low 0.1643 < 0.4 (and
    # 1 of 3 against base 0.4 or 0.6 is lower still), so only (0|1), (1|0) pass.
    prof = cooccurrence_profile(TINY, confidence=0.8, min_pair_users=1)
    assert prof.pairs_scored == 8
    assert prof.significant_neighbours.tolist() == [1, 1, 0, 0]


def test_best_candidate_is_the_pair_with_the_largest_bound_margin():
    """best_p/best_base give each item's scored pair with the largest low - base; NaN if none."""
    prof = cooccurrence_profile(TINY, confidence=0.8)
    np.testing.assert_array_equal(prof.best_p, [1.0, 1.0, np.nan, np.nan])
    np.testing.assert_array_equal(prof.best_base, [0.6, 0.6, np.nan, np.nan])
    # min_pair_users=1: item 2 (n=2) has candidates 0, 1 (1 of 2 vs base 0.6) and 3 (1 of 2
    # vs base 0.4); same Wilson low (statsmodels: 0.1643), so x=3 has the larger margin.
    loose = cooccurrence_profile(TINY, confidence=0.8, min_pair_users=1)
    np.testing.assert_array_equal(loose.best_p, [1.0, 1.0, 0.5, 0.5])
    np.testing.assert_array_equal(loose.best_base, [0.6, 0.6, 0.4, 0.4])


def test_item_weights_replace_support_in_interaction_share():
    """Caller weights (e.g. uncapped counts) are the interaction share's numerator and total."""
    prof = cooccurrence_profile(TINY, confidence=0.8, k_thresholds=(1,),
                                item_weights=[10, 0, 5, 5])
    assert prof.weighted
    assert prof.interaction_share == pytest.approx((0.5,))  # (10 + 0) / 20


dense_logs = arrays(np.int8, st.tuples(st.integers(2, 14), st.integers(2, 8)),
                    elements=st.integers(0, 1))


@settings(max_examples=60, deadline=None)
@given(dense_logs, st.sampled_from([0.5, 0.8, 0.95]), st.integers(1, 3))
def test_neighbour_counts_match_pairwise_statsmodels_loop(dense, confidence, min_pair_users):
    """Vectorised counts and best margins equal a plain loop over pairs calling statsmodels."""
    if dense.sum() == 0:
        dense[0, 0] = 1
    prof = cooccurrence_profile(sp.csr_matrix(dense), confidence=confidence,
                                min_pair_users=min_pair_users)
    neighbours, scored, significant, margin = _brute_force(dense.astype(bool), confidence,
                                                           min_pair_users)
    assert prof.significant_neighbours.tolist() == neighbours.tolist()
    assert (prof.pairs_scored, prof.pairs_significant) == (scored, significant)
    # the best candidate's margin is the largest margin over y's scored pairs
    n_y = prof.support
    seen = ~np.isnan(prof.best_p)
    np.testing.assert_array_equal(seen, ~np.isnan(margin))
    low, _ = proportion_confint(np.round(prof.best_p[seen] * n_y[seen]), n_y[seen],
                                alpha=1 - confidence, method="wilson")
    np.testing.assert_allclose(low - prof.best_base[seen], margin[seen], atol=1e-9)


@settings(max_examples=60, deadline=None)
@given(dense_logs, st.randoms(use_true_random=False))
def test_relabelling_users_and_items_permutes_counts_and_keeps_shares(dense, rnd):
    """Shuffling rows and columns permutes per-item counts and leaves every summary alone."""
    if dense.sum() == 0:
        dense[0, 0] = 1
    n_users, n_items = dense.shape
    rows, cols = list(range(n_users)), list(range(n_items))
    rnd.shuffle(rows)
    rnd.shuffle(cols)
    a = cooccurrence_profile(sp.csr_matrix(dense), confidence=0.8, min_pair_users=1)
    b = cooccurrence_profile(sp.csr_matrix(dense[rows][:, cols]), confidence=0.8,
                             min_pair_users=1)
    assert b.significant_neighbours.tolist() == a.significant_neighbours[cols].tolist()
    assert b.support.tolist() == a.support[cols].tolist()
    assert b.item_share == a.item_share
    assert b.interaction_share == pytest.approx(a.interaction_share)
    assert (b.pairs_scored, b.pairs_significant) == (a.pairs_scored, a.pairs_significant)
    assert b.median_neighbours == a.median_neighbours


def test_independent_users_give_significant_pair_rate_at_most_nominal():
    """Users drawn from item popularity alone: about (1 - confidence)/2 of pairs pass, or fewer."""
    rng = np.random.default_rng(20261201)  # planted null, seeded
    n_users, n_items = 4000, 40
    popularity = 0.02 + 0.3 * rng.random(n_items)
    dense = (rng.random((n_users, n_items)) < popularity).astype(np.int8)
    prof = cooccurrence_profile(sp.csr_matrix(dense), confidence=0.95)
    assert prof.pairs_scored > 1000
    rate = prof.pairs_significant / prof.pairs_scored
    # nominal one-sided rate 0.025; pairs share users so allow sampling slack of ~3 s.e.
    assert rate <= 0.025 + 3 * np.sqrt(0.025 * 0.975 / prof.pairs_scored)
    assert prof.nominal_false_rate == pytest.approx(0.025)


def test_two_taste_clusters_give_within_cluster_neighbours_only():
    """A planted two-cluster log yields most within-cluster pairs and almost no cross pairs."""
    rng = np.random.default_rng(7)  # planted structure, seeded
    n_users, n_items = 600, 20
    user_cluster = rng.integers(0, 2, n_users)
    item_cluster = np.repeat([0, 1], n_items // 2)
    prob = np.where(user_cluster[:, None] == item_cluster[None, :], 0.4, 0.02)
    dense = (rng.random((n_users, n_items)) < prob).astype(np.int8)
    prof = cooccurrence_profile(sp.csr_matrix(dense), confidence=0.95, top_n=1000)

    same = [r for r in prof.top_pairs if item_cluster[r.x] == item_cluster[r.y]]
    cross = [r for r in prof.top_pairs if item_cluster[r.x] != item_cluster[r.y]]
    within_total = 2 * 10 * 9  # ordered within-cluster pairs
    cross_total = 2 * 10 * 10
    assert len(same) >= 0.9 * within_total
    assert len(cross) <= 0.025 * cross_total + 5
    assert len(same) + len(cross) == prof.pairs_significant
    assert prof.item_share[0] == 1.0  # every item has at least one neighbour (k = 1)
    assert prof.item_share[-1] == 0.0  # nobody has 10: only 9 same-cluster items exist


def test_top_pairs_are_sorted_by_lower_bound_and_significant():
    """The pair table lists significant pairs only, strongest lower bound first."""
    rng = np.random.default_rng(5)  # planted structure, seeded
    prob = np.where(rng.integers(0, 2, (300, 1)) == np.repeat([0, 1], 6)[None, :], 0.5, 0.05)
    dense = (rng.random(prob.shape) < prob).astype(np.int8)
    prof = cooccurrence_profile(sp.csr_matrix(dense), top_n=7)
    lows = [r.low for r in prof.top_pairs]
    assert len(lows) == 7 and lows == sorted(lows, reverse=True)
    assert all(r.low > r.base_rate and r.both >= 2 for r in prof.top_pairs)


def test_to_dict_is_json_safe_and_omits_per_item_arrays():
    """The summary serialises to JSON and never includes the per-item arrays."""
    prof = cooccurrence_profile(TINY, confidence=0.8)
    assert isinstance(prof, CooccurrenceProfile)
    d = json.loads(json.dumps(prof.to_dict(), allow_nan=False))
    assert "support" not in d and "significant_neighbours" not in d
    assert d["pairs_significant"] == 2
    assert [row["k"] for row in d["by_k"]] == [1, 3, 5, 10]
    assert d["top_pairs"][0]["low"] == pytest.approx(prof.top_pairs[0].low)


def test_wide_sparse_catalogue_runs_without_dense_item_square():
    """300k items with few users finishes quickly: nothing items x items is dense."""
    rng = np.random.default_rng(1)  # invented data, seeded
    n_users, n_items = 200, 300_000
    rows = np.repeat(np.arange(n_users), 30)
    cols = rng.integers(0, 300, rows.size)  # activity on a few hundred items only
    x = sp.csr_matrix((np.ones(rows.size), (rows, cols)), shape=(n_users, n_items))
    x.data[:] = 1  # duplicates summed above; back to binary
    prof = cooccurrence_profile(x)
    assert prof.n_items == n_items and prof.active_items <= 300
    assert prof.significant_neighbours.shape == (n_items,)


def test_non_binary_matrix_is_refused():
    """Counts instead of 0/1 raise LogFormatError saying to binarise."""
    with pytest.raises(LogFormatError, match="binary"):
        cooccurrence_profile(sp.csr_matrix(np.array([[2, 1], [1, 0]])))


def test_dense_array_is_refused():
    """A numpy array instead of a sparse matrix raises LogFormatError."""
    with pytest.raises(LogFormatError, match="scipy.sparse"):
        cooccurrence_profile(np.eye(3))


def test_matrix_without_interactions_is_insufficient():
    """An all-zero or userless matrix raises InsufficientDataError."""
    with pytest.raises(InsufficientDataError):
        cooccurrence_profile(sp.csr_matrix((4, 3)))
    with pytest.raises(InsufficientDataError):
        cooccurrence_profile(sp.csr_matrix((0, 3)))


@pytest.mark.parametrize("kwargs", [
    {"confidence": 1.0}, {"confidence": 95}, {"min_pair_users": 0}, {"k_thresholds": ()},
    {"k_thresholds": (0, 3)}, {"k_thresholds": (1.5,)}, {"top_n": -1},
])
def test_out_of_range_options_are_config_errors(kwargs):
    """Bad confidence, min_pair_users, k_thresholds or top_n raise ConfigError."""
    with pytest.raises(ConfigError):
        cooccurrence_profile(TINY, **kwargs)


def test_misaligned_item_weights_are_refused():
    """item_weights of the wrong length or with negatives raise LogFormatError."""
    with pytest.raises(LogFormatError, match="item_weights"):
        cooccurrence_profile(TINY, item_weights=[1, 2, 3])
    with pytest.raises(LogFormatError, match="item_weights"):
        cooccurrence_profile(TINY, item_weights=[1, -2, 3, 4])


def _growing_independent_log(seed: int):
    """Planted: users and items arrive over time; a user takes each item available while
    they are active with the same probability, independent of any taste."""
    rng = np.random.default_rng(seed)
    n_users, n_items, p = 3000, 120, 0.08
    joined = rng.uniform(0, 1, n_users)
    left = joined + 0.25
    added = rng.uniform(0, 1, n_items)
    exposed = left[:, None] >= added[None, :]
    taken = exposed & (rng.uniform(size=exposed.shape) < p)
    matrix = sp.csr_matrix(taken.astype(np.float32))
    return matrix, exposed.sum(axis=0)


def test_exposure_adjusted_base_rates_keep_false_pairs_near_the_nominal_rate():
    """In a growing catalogue with no taste at all, base rates over every user make pairs of
    new items look significant; counting only users exposed to x brings the share of
    significant pairs back to about the nominal one-sided rate (planted structure)."""
    for seed in (1, 2):
        matrix, exposed = _growing_independent_log(seed)
        naive = cooccurrence_profile(matrix, confidence=0.95)
        fair = cooccurrence_profile(matrix, confidence=0.95, exposed_users=exposed)
        naive_rate = naive.pairs_significant / naive.pairs_scored
        fair_rate = fair.pairs_significant / fair.pairs_scored
        assert naive_rate > 0.08  # the confound: over 3x the nominal rate (0.13-0.16 here)
        assert fair_rate < 0.05  # nominal one-sided rate 0.025, with slack for small n_y


def test_exposed_users_smaller_than_support_is_rejected():
    """An item cannot have more users than users exposed to it: a clear error, not a rate
    above one."""
    x = sp.csr_matrix([[1, 1], [1, 0], [0, 1]])
    with pytest.raises(LogFormatError, match="exposed_users"):
        cooccurrence_profile(x, exposed_users=np.array([1, 2]))


def test_false_discovery_control_keeps_noise_items_without_neighbours():
    """On a log with no structure (users take items by popularity alone), per-pair Wilson
    tests give most items three or more 'significant' neighbours; with Benjamini-Hochberg
    control (Benjamini & Hochberg 1995) the share stays far below the shipped rule's 0.5
    (planted structure, three seeds)."""
    for seed in (1, 2, 3):
        rng = np.random.default_rng(seed)
        pop = 1.0 / np.arange(1, 201)  # Zipf-like popularity over 200 items
        taken = rng.uniform(size=(2000, 200)) < 0.02 * pop / pop.mean()
        x = sp.csr_matrix(taken.astype(np.float32))
        naive = cooccurrence_profile(x, k_thresholds=(3,))
        fdr = cooccurrence_profile(x, k_thresholds=(3,), false_discovery_control=True)
        assert fdr.pairs_significant <= naive.pairs_significant
        assert fdr.interaction_share[0] < 0.2


def test_false_discovery_control_keeps_planted_clusters():
    """Two planted taste clusters keep most within-cluster pairs significant under the
    Benjamini-Hochberg procedure (planted structure)."""
    rng = np.random.default_rng(5)
    users, items = 600, 40
    cluster = rng.integers(0, 2, users)
    item_cluster = np.arange(items) % 2
    prob = np.where(cluster[:, None] == item_cluster[None, :], 0.4, 0.02)
    x = sp.csr_matrix((rng.uniform(size=(users, items)) < prob).astype(np.float32))
    fdr = cooccurrence_profile(x, k_thresholds=(10,), false_discovery_control=True)
    assert np.median(fdr.significant_neighbours) >= 15  # of 19 same-cluster items


def test_significant_pairs_matches_the_wilson_rule_for_a_single_test():
    """With one test, the score-test p-value below (1 - confidence) / 2 is the same call as
    the Wilson lower bound above the base rate (statsmodels proportion_confint, wilson)."""
    from advisor.profile.cooccurrence import significant_pairs

    for both, n_y, base in [(12, 40, 0.15), (9, 40, 0.15), (5, 10, 0.2), (30, 300, 0.08)]:
        low, _ = proportion_confint(both, n_y, alpha=0.05, method="wilson")
        assert significant_pairs([both], [n_y], [base], tests=1)[0] == (low > base)


@pytest.mark.parametrize("fdr", [False, True])
def test_block_by_block_scan_gives_the_single_product_result(fdr, monkeypatch):
    """Computing X^T X a few items at a time (and, under false-discovery control, scanning
    twice when the kept pairs overflow) gives exactly the one-product profile."""
    import advisor.profile.cooccurrence as cooc

    rng = np.random.default_rng(4)
    taste = rng.integers(0, 4, size=400)
    dense = (rng.random((400, 60)) < np.where(np.arange(60)[None, :] % 4 == taste[:, None],
                                              0.3, 0.04)).astype(np.int8)
    x = sp.csr_matrix(dense)
    kw = dict(false_discovery_control=fdr, exposed_users=np.full(60, 400.0), top_n=15)
    whole = cooccurrence_profile(x, **kw)
    monkeypatch.setattr(cooc, "_BLOCK_PRODUCTS", 200)
    monkeypatch.setattr(cooc, "_KEPT_PAIRS", 3)  # forces the second scan
    blocked = cooccurrence_profile(x, **kw)
    assert len(cooc._BlockScan(x.astype(np.int32), whole.support, np.zeros(60),
                               confidence=0.95, min_pair_users=2).edges) > 10
    np.testing.assert_array_equal(blocked.significant_neighbours, whole.significant_neighbours)
    np.testing.assert_array_equal(blocked.best_p, whole.best_p)
    np.testing.assert_array_equal(blocked.best_base, whole.best_base)
    assert blocked.top_pairs == whole.top_pairs and len(whole.top_pairs) == 15
    assert blocked.to_dict() == whole.to_dict()
    assert whole.pairs_significant > 0
    if fdr:  # the reference: significant_pairs over every scored pair at once
        from advisor.profile.cooccurrence import significant_pairs

        c = dense.astype(np.int64).T @ dense.astype(np.int64)
        support = np.diag(c)
        y, xs = np.nonzero((c >= 2) & ~np.eye(60, dtype=bool))
        active = int((support > 0).sum())
        sig = significant_pairs(c[y, xs], support[y], support[xs] / 400.0,
                                tests=active * (active - 1))
        np.testing.assert_array_equal(whole.significant_neighbours,
                                      np.bincount(y[sig], minlength=60))


@pytest.mark.parametrize("chunk", [1 << 22, 7])
def test_bh_cutoff_calls_what_statsmodels_fdr_bh_rejects(chunk, monkeypatch):
    """The step-up cutoff rejects exactly what statsmodels ``multipletests(method="fdr_bh")``
    rejects, with ties and with hypotheses beyond the p-values given (they enter as p = 1),
    whether the ranks are scanned in one piece or seven at a time."""
    from statsmodels.stats.multitest import multipletests

    import advisor.profile.cooccurrence as cooc

    monkeypatch.setattr(cooc, "_BH_CHUNK", chunk)
    rng = np.random.default_rng(11)
    p = np.concatenate([rng.uniform(0, 1e-3, 40), rng.uniform(0, 1, 200),
                        np.full(5, 2e-4)])  # a block of ties near the cut
    for tests in (p.size, 4 * p.size):
        full = np.concatenate([p, np.ones(tests - p.size)])
        expected = multipletests(full, alpha=0.05, method="fdr_bh")[0][:p.size]
        own = p.copy()
        called = p <= cooc._bh_cutoff(own, alpha=0.05, tests=tests)
        np.testing.assert_array_equal(called, expected)
        np.testing.assert_array_equal(own, p)  # the caller's p-values are left as they were
        assert 0 < called.sum() < p.size
    assert cooc._bh_cutoff(np.array([0.5, 0.9]), alpha=0.05, tests=2) == -np.inf


def test_best_per_item_and_top_pairs_match_a_full_sort_with_many_ties():
    """Each item's best candidate and the top-n table equal what one full lexsort of the
    pairs gives (the definition), on blocks with many tied bounds and tied counts, whether
    the pairs arrive ordered by item or shuffled (planted ties, no outside reference)."""
    from advisor.profile.cooccurrence import _Block, _TopPairs

    rng = np.random.default_rng(5)
    y = np.repeat(np.arange(300), rng.integers(1, 30, 300))
    x = np.concatenate([rng.choice(400, size=k, replace=False)
                        for k in np.bincount(y)]).astype(np.int64)
    low = rng.integers(0, 6, y.size) / 10.0  # few distinct values: many ties
    base = rng.integers(0, 3, y.size) / 10.0
    both = rng.integers(2, 5, y.size).astype(np.int64)
    est = rng.random(y.size)
    sig = rng.random(y.size) < 0.7
    for order in (np.arange(y.size), rng.permutation(y.size)):
        b = _Block(y[order], x[order], both[order], low[order], est[order], base[order], None)
        best_p, best_base = np.full(400, np.nan), np.full(400, np.nan)
        b.best_into(best_p, best_base)
        by = np.lexsort((x, -(low - base), y))
        first = by[np.unique(y[by], return_index=True)[1]]
        want = np.full(400, np.nan)
        want[y[first]] = est[first]
        np.testing.assert_array_equal(best_p, want)
        top = _TopPairs(25)
        top.add(b, sig[order])
        ref = np.flatnonzero(sig)
        ref = ref[np.lexsort((x[ref], y[ref], -both[ref], -low[ref]))[:25]]
        for got, col in zip(top.cols, (y, x, both, low)):
            np.testing.assert_array_equal(got, col[ref])
