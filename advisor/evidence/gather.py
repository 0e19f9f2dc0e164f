"""The evidence stage: split, fit candidates, compare them, learning curve, reliability."""

from __future__ import annotations

import os
from collections.abc import Callable

import numpy as np
import pandas as pd
import scipy.sparse as sp

from advisor.errors import ConfigError, LogFormatError
from advisor.evidence.candidates import (
    Candidate,
    fit_category_popularity,
    fit_item_knn,
    fit_popularity,
    fit_recent_popularity,
    latent_fitter,
)
from advisor.evidence.compare import activity_bands as band_table
from advisor.evidence.compare import bootstrap_mean_interval, paired_comparison
from advisor.evidence.learning_curve import fit_learning_curve, measure_points
from advisor.evidence.metrics import UserMetrics, evaluate_candidate, long_tail_items
from advisor.evidence.model import CandidateResult, Evidence
from advisor.evidence.reliability import neighbour_reliability
from advisor.evidence.split import Split, choose_split

__all__ = ["CURVE_CELLS", "MIN_CURVE_USERS", "MIN_TEST_USERS", "RELIABILITY_TARGET",
           "gather_evidence", "sample_users"]

MIN_TEST_USERS = 10
"""Fewest evaluated users for which candidates are compared at all (common practice, no
published source: below it every interval spans most of the scale)."""

RELIABILITY_TARGET = 0.8
"""Target neighbour reliability (0.8 is the conventional 'good' reliability in
psychometrics; common practice, no published source for neighbour lists)."""

CURVE_CELLS = 100_000_000
"""Bound on (test users x items) per refit of the learning curve: above it the curve is
measured on a seeded subset of the test users, at least ``MIN_CURVE_USERS`` (a cost bound:
each point ranks the whole catalogue for every user it measures)."""

MIN_CURVE_USERS = 1000
"""Fewest test users the learning curve is measured on when it is subsampled."""

# Independent random streams per step, so adding a step never shifts another's draws.
_SPLIT, _BOOT, _CURVE, _HALVES, _SAMPLE, _CURVE_USERS = range(6)


def _rng(seed: int, step: int) -> np.random.Generator:
    return np.random.default_rng([seed, step])


def _check(pairs: pd.DataFrame, n_users: int, n_items: int, item_category, k: int,
           max_test_users: int, confidence: float, activity_bands_, learning_fractions,
           seed: int) -> None:
    missing = [c for c in ("user_idx", "item_idx", "ts") if c not in pairs.columns]
    if missing:
        raise LogFormatError(
            f"gather_evidence: the pairs table lacks column(s) {missing}; expected user_idx, "
            f"item_idx, ts, got {list(pairs.columns)}; build it with the aggregate stage.")
    for col, n in (("user_idx", n_users), ("item_idx", n_items)):
        v = pairs[col].to_numpy()
        if len(v) and (v.min() < 0 or v.max() >= n):
            raise LogFormatError(
                f"gather_evidence: pairs.{col} holds values outside 0..{n - 1} (min {v.min()}, "
                f"max {v.max()}); pass the n_users / n_items the indices were built with.")
    if item_category is not None and len(item_category) != n_items:
        raise LogFormatError(
            f"gather_evidence: item_category has {len(item_category)} entries, expected one "
            f"per item ({n_items}); pass -1 for items without a category.")
    problems = []
    if not (isinstance(seed, (int, np.integer)) and seed >= 0):
        problems.append(f"seed must be a non-negative integer, got {seed!r}")
    if k < 1:
        problems.append(f"k must be at least 1, got {k}")
    if max_test_users < 2:
        problems.append(f"max_test_users must be at least 2, got {max_test_users}")
    if not 0 < confidence < 1:
        problems.append(f"confidence must be between 0 and 1, got {confidence}")
    if not learning_fractions or any(not 0 < f <= 1 for f in learning_fractions):
        problems.append(f"learning_fractions must lie in (0, 1], got {learning_fractions}")
    for low, high in activity_bands_:
        if low < 1 or (high is not None and high < low):
            problems.append(f"activity band ({low}, {high}) is empty or starts below 1")
    if problems:
        raise ConfigError("gather_evidence: " + "; ".join(problems) + "; fix the option(s).")


def _result(cand: Candidate, m: UserMetrics, tail: np.ndarray, *, n_items: int,
            confidence: float, rng: np.random.Generator) -> CandidateResult:
    nd = bootstrap_mean_interval(m.ndcg, confidence=confidence, rng=rng)
    rc = bootstrap_mean_interval(m.recall, confidence=confidence, rng=rng)
    slots = m.recommended.sum()
    return CandidateResult(
        name=cand.name, method=cand.method, personalised=cand.personalised,
        users=len(m.ndcg), ndcg=float(m.ndcg.mean()), ndcg_low=nd[0] if nd else None,
        ndcg_high=nd[1] if nd else None, recall=float(m.recall.mean()),
        recall_low=rc[0] if rc else None, recall_high=rc[1] if rc else None,
        coverage=float((m.recommended > 0).sum() / n_items),
        long_tail_share=float(m.recommended[tail].sum() / slots) if slots else 0.0)


def sample_users(pairs: pd.DataFrame, max_users: int | None, *,
                 rng: np.random.Generator) -> tuple[pd.DataFrame, int, int]:
    """A seeded sample of ``max_users`` users with every pair of theirs, users renumbered.

    Returns ``(pairs, n_users_kept, n_users_in_log)``; the pairs are returned unchanged (and
    ``n_users_kept == n_users_in_log``) when the log has at most ``max_users`` users. The
    sample is simple random sampling of users without replacement, so the evaluated users
    stay a random sample of the log's users; only the training set shrinks.

    Examples
    --------
    >>> p = pd.DataFrame({"user_idx": [0, 0, 3, 5], "item_idx": [1, 2, 1, 0], "ts": [1, 2, 3, 4]})
    >>> kept, n, total = sample_users(p, 2, rng=np.random.default_rng(0))
    >>> n, total, sorted(kept["user_idx"].unique().tolist())
    (2, 3, [0, 1])
    """
    u = pairs["user_idx"].to_numpy()
    # Distinct users from a count per user: no sorted copy of a pairs-long column.
    users = np.flatnonzero(np.bincount(u)) if u.size else np.zeros(0, dtype=np.int64)
    if max_users is None or users.size <= max_users:
        return pairs, int(users.size), int(users.size)
    chosen = np.sort(rng.choice(users, int(max_users), replace=False))
    picked = np.zeros(int(users[-1]) + 1, dtype=bool)
    picked[chosen] = True
    keep = picked[u]
    out = pairs.loc[keep].copy()
    out["user_idx"] = np.searchsorted(chosen, u[keep])
    return out.reset_index(drop=True), int(chosen.size), int(users.size)


def _empty(seed: int, k: int, confidence: float, lift_target: float, split, notes):
    return Evidence(seed=seed, k=k, confidence=confidence, split=split, candidates=(),
                    comparisons=(), best_candidate=None, latent_vs_itemknn=None, bands=(),
                    min_history_for_lift=None, learning_curve=None, reliability=None,
                    lift_target=lift_target, notes=tuple(notes))


def gather_evidence(
    pairs: pd.DataFrame,
    n_users: int,
    n_items: int,
    *,
    item_category: np.ndarray | None = None,
    seed: int,
    k: int = 10,
    max_test_users: int = 5000,
    max_users: int | None = None,
    confidence: float = 0.95,
    activity_bands: tuple[tuple[int, int | None], ...] = ((1, 2), (3, 5), (6, 20), (21, None)),
    learning_fractions: tuple[float, ...] = (0.125, 0.25, 0.5, 1.0),
    lift_target: float = 0.10,
    threads: int | None = None,
    progress: Callable[[str], None] | None = None,
) -> Evidence:
    """Offline backtest of candidate recommenders on the log, with everything needed to judge it.

    Parameters
    ----------
    pairs : DataFrame
        One row per distinct counted (user, item): ``user_idx`` (0..n_users-1), ``item_idx``
        (0..n_items-1), ``ts`` (epoch seconds of the user's first interaction with the item).
    n_users, n_items : int
        Sizes of the index spaces (the catalogue includes items nobody touched).
    item_category : ndarray of int, optional
        Category code per item (-1 = none); enables per-category popularity.
    seed : int
        Seed of every random step.
    k : int, optional
        List length of every @k metric.
    max_test_users : int, optional
        Cap on evaluated users (seeded sample above it).
    max_users : int, optional
        Cap on the users the whole backtest runs on (training and test); above it a seeded
        sample of users is drawn (:func:`sample_users`) and the learning curve projects to
        the log's full user count. None: every user.
    confidence : float, optional
        Level of every interval.
    activity_bands : tuple of (low, high), optional
        Bands of training items per user for the band table.
    learning_fractions : tuple of float, optional
        Shares of training users for the learning curve.
    lift_target : float, optional
        Relative NDCG@k lift over popularity worth having.
    threads : int, optional
        Threads for ranking test users (default: the machine's cores); the results do not
        depend on it.
    progress : callable, optional
        Called with a short step name before each step.

    Returns
    -------
    Evidence
        Split, candidates, comparisons, bands, learning curve and neighbour reliability.

    Raises
    ------
    LogFormatError
        When ``pairs`` lacks a column or holds indices outside the stated sizes.
    ConfigError
        When an option is out of range.

    Notes
    -----
    See :func:`advisor.evidence.split.choose_split` for the protocol, the candidate fits in
    :mod:`advisor.evidence.candidates`, :func:`~advisor.evidence.compare.paired_comparison`
    for the tests, :func:`~advisor.evidence.learning_curve.fit_learning_curve` and
    :func:`~advisor.evidence.reliability.neighbour_reliability`. All candidates rank the full
    catalogue (Krichene & Rendle 2020) and never recommend a user's training items.

    References
    ----------
    Krichene, W. & Rendle, S. (2020). On sampled metrics for item recommendation. KDD 2020.
    Cremonesi, P., Koren, Y. & Turrin, R. (2010). Performance of recommender algorithms on
    top-N recommendation tasks. RecSys 2010 (why popularity is the baseline to beat).
    """
    _check(pairs, n_users, n_items, item_category, k, max_test_users, confidence,
           activity_bands, learning_fractions, seed)
    step = progress or (lambda _name: None)
    seed = int(seed)
    if len(pairs) == 0 or n_users == 0 or n_items == 0:
        return _empty(seed, k, confidence, lift_target, None,
                      ["the log has no interactions to backtest"])
    step("split")
    pairs, n_kept, n_population = sample_users(pairs, max_users, rng=_rng(seed, _SAMPLE))
    sampled_users = n_kept < n_population
    if sampled_users:
        n_users = n_kept
    split: Split = choose_split(
        pairs["user_idx"].to_numpy(np.int64), pairs["item_idx"].to_numpy(np.int64),
        pairs["ts"].to_numpy(np.int64), n_users, n_items, rng=_rng(seed, _SPLIT),
        max_test_users=max_test_users,
        population_users=n_population if sampled_users else None)
    s = split.summary
    notes = []
    if sampled_users:
        notes.append(
            f"backtest on a seeded sample of {n_kept:,} of the log's {n_population:,} users "
            "(a cost bound): models trained on fewer users usually score lower, so the "
            "lifts understate what the whole log supports; the learning curve projects to "
            "the full user count")
    if not s.is_temporal:
        notes.append("per-user hold-out: other users' later behaviour is in training, so "
                     "accuracy is optimistic (Ji et al. 2023)")
    if s.sampled:
        notes.append(f"{s.test_users} of {s.eligible_test_users} eligible users evaluated "
                     f"(seeded sample)")
    if s.test_users < MIN_TEST_USERS:
        notes.append(f"only {s.test_users} user(s) could be evaluated (at least "
                     f"{MIN_TEST_USERS} needed); no candidate was compared")
        return _empty(seed, k, confidence, lift_target, s, notes)

    train, test, users = split.train, split.test, split.users
    workers = int(threads or os.cpu_count() or 1)
    boot = _rng(seed, _BOOT)
    tail = long_tail_items(np.asarray(train.sum(axis=0)).ravel())
    fit_latent = latent_fitter(train, seed=seed)
    fits: list[tuple[str, Callable[[], Candidate]]] = [
        ("popularity", lambda: fit_popularity(train)),
        ("recent_popularity", lambda: fit_recent_popularity(
            train, split.train_item, split.train_ts, s.reference_ts)),
    ]
    if item_category is not None and (np.asarray(item_category) >= 0).any():
        fits.append(("category_popularity",
                     lambda: fit_category_popularity(train, np.asarray(item_category))))
    fits += [("itemknn", lambda: fit_item_knn(train)), ("latent", lambda: fit_latent(train))]

    results: dict[str, CandidateResult] = {}
    per_user: dict[str, UserMetrics] = {}
    for name, fit in fits:
        step(f"fit {name}")
        cand = fit()
        m = evaluate_candidate(cand, train, test, users, k=k, workers=workers)
        per_user[name] = m
        results[name] = _result(cand, m, tail, n_items=n_items, confidence=confidence,
                                rng=boot)

    step("compare")
    base = per_user["popularity"].ndcg
    comparisons = tuple(
        paired_comparison(per_user[n].ndcg, base, candidate_name=n, baseline_name="popularity",
                          confidence=confidence, rng=boot)
        for n in results if n != "popularity")
    personal = [n for n, r in results.items() if r.personalised]
    best = max(personal, key=lambda n: results[n].ndcg)
    lvi = paired_comparison(per_user["latent"].ndcg, per_user["itemknn"].ndcg,
                            candidate_name="latent", baseline_name="itemknn",
                            confidence=confidence, rng=boot)
    history = np.diff(train.indptr)[users]
    bands, min_hist = band_table(history, per_user[best].ndcg, base, activity_bands,
                                     candidate_name=best, baseline_name="popularity",
                                     confidence=confidence, rng=boot)

    step("learning curve")
    fit_best = fit_item_knn if best == "itemknn" else fit_latent
    at = np.arange(len(users))
    limit = max(MIN_CURVE_USERS, CURVE_CELLS // max(n_items, 1))
    if len(users) > limit:
        at = np.sort(_rng(seed, _CURVE_USERS).choice(len(users), limit, replace=False))
        notes.append(f"learning curve measured on a seeded subset of {limit:,} of the "
                     f"{len(users):,} test users (a cost bound on a {n_items:,}-item "
                     "catalogue)")
    curve_users = users[at]

    def evaluate(sub: sp.csr_matrix) -> tuple[np.ndarray, np.ndarray]:
        cand = evaluate_candidate(fit_best(sub), train, test, curve_users, k=k,
                                  workers=workers).ndcg
        pop = evaluate_candidate(fit_popularity(sub), train, test, curve_users, k=k,
                                 workers=workers).ndcg
        return cand, pop

    points = measure_points(learning_fractions, train, evaluate, rng=_rng(seed, _CURVE),
                            full=(per_user[best].ndcg[at], base[at]))
    full_train = (int(round(s.train_users * n_population / n_kept)) if sampled_users
                  else None)
    curve = fit_learning_curve(points, candidate=best, lift_target=lift_target,
                               confidence=confidence, rng=boot, population_train_users=full_train)

    step("neighbour reliability")
    reliability = neighbour_reliability(train, rng=_rng(seed, _HALVES),
                                        target=RELIABILITY_TARGET)
    return Evidence(
        seed=seed, k=k, confidence=confidence, split=s, candidates=tuple(results.values()),
        comparisons=comparisons, best_candidate=best, latent_vs_itemknn=lvi, bands=bands,
        min_history_for_lift=min_hist, learning_curve=curve, reliability=reliability,
        lift_target=lift_target, notes=tuple(notes))
