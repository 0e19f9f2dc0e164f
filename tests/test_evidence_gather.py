"""Tests for advisor.evidence.gather_evidence: planted structure, contract, reproducibility."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from advisor.errors import ConfigError, LogFormatError
from advisor.evidence import Evidence, gather_evidence

REQUIRED_KEYS = [
    "evidence.test_users", "evidence.protocol_is_temporal", "evidence.popularity_ndcg",
    "evidence.itemknn_ndcg", "evidence.latent_ndcg", "evidence.itemknn_lift",
    "evidence.itemknn_lift_low", "evidence.itemknn_lift_high", "evidence.itemknn_lift_p",
    "evidence.itemknn_relative_lift", "evidence.itemknn_effect_size", "evidence.best_lift",
    "evidence.best_lift_low", "evidence.best_lift_p", "evidence.best_relative_lift",
    "evidence.latent_vs_itemknn_low", "evidence.latent_vs_itemknn_p",
    "evidence.min_history_for_lift", "evidence.curve_slope_per_doubling",
    "evidence.curve_still_climbing", "evidence.users_needed_for_target",
    "evidence.neighbour_reliability", "evidence.users_needed_for_reliability_0_8",
]


def planted_log(seed: int, *, taste: float, n_users: int = 1500, n_items: int = 300,
                clusters: int = 5, mean_items: int = 12, days: int = 120):
    """Invented log: each user has a home cluster of items (share ``taste`` of picks), the
    rest drawn from a skewed global popularity; users return over ``days`` days."""
    rng = np.random.default_rng(seed)
    per = n_items // clusters
    pop = rng.permutation(1.0 / np.arange(1, n_items + 1) ** 0.8)
    pop /= pop.sum()
    n = 1 + rng.geometric(1 / mean_items, size=n_users)
    user = np.repeat(np.arange(n_users), n)
    home = rng.integers(0, clusters, size=n_users)[user]
    within = (rng.zipf(1.6, size=len(user)) - 1) % per
    item = np.where(rng.random(len(user)) < taste, home * per + within,
                    rng.choice(n_items, size=len(user), p=pop))
    ts = 1_600_000_000 + rng.integers(0, days * 86400, size=len(user))
    pairs = pd.DataFrame({"user_idx": user.astype(np.int32), "item_idx": item.astype(np.int32),
                          "ts": ts.astype(np.int64)})
    pairs = pairs.sort_values("ts").drop_duplicates(["user_idx", "item_idx"])
    return pairs, n_users, n_items


@pytest.fixture(scope="module")
def planted() -> Evidence:
    pairs, nu, ni = planted_log(0, taste=0.85)
    return gather_evidence(pairs, nu, ni, seed=0)


def _is_go(m: dict, lift_target: float = 0.10) -> bool:
    """Significant and practically meaningful: interval above zero and relative lift >= target."""
    return (m["evidence.best_lift_low"] is not None and m["evidence.best_lift_low"] > 0
            and m["evidence.best_relative_lift"] >= lift_target)


def test_taste_clusters_give_a_significant_meaningful_lift(planted):
    """Strong planted tastes: the best personalised candidate beats popularity clearly."""
    m = planted.metrics()
    assert planted.split.protocol == "global_time"
    assert m["evidence.itemknn_lift_low"] > 0 and m["evidence.itemknn_lift_p"] < 0.001
    assert _is_go(m)
    assert planted.best_candidate in ("itemknn", "latent")
    assert m["evidence.min_history_for_lift"] is not None


@pytest.mark.parametrize("seed", range(5))
def test_popularity_only_log_never_gives_a_go(seed):
    """Picks drawn from item popularity alone never show a significant, meaningful lift."""
    pairs, nu, ni = planted_log(100 + seed, taste=0.0)
    ev = gather_evidence(pairs, nu, ni, seed=seed)
    assert not _is_go(ev.metrics())
    assert ev.learning_curve.status != "estimated"


def test_metrics_have_every_key_the_rules_read(planted):
    """All documented metric keys are present and are floats or None."""
    m = planted.metrics()
    assert set(REQUIRED_KEYS) <= set(m)
    assert all(v is None or isinstance(v, float) for v in m.values())


def test_to_dict_is_json_safe(planted):
    """The result serialises with the standard json module and keeps the seed."""
    d = json.loads(json.dumps(planted.to_dict(), allow_nan=False))
    assert d["seed"] == 0 and d["split"]["protocol"] == "global_time"
    assert {c["name"] for c in d["candidates"]} >= {"popularity", "itemknn", "latent"}


def test_same_seed_gives_the_same_evidence():
    """Every random step is seeded: two runs agree exactly."""
    pairs, nu, ni = planted_log(1, taste=0.5, n_users=400, n_items=100)
    a = gather_evidence(pairs, nu, ni, seed=7, max_test_users=150)
    b = gather_evidence(pairs, nu, ni, seed=7, max_test_users=150)
    assert a.to_dict() == b.to_dict()


def test_relabelling_users_leaves_candidate_accuracy_unchanged():
    """Renumbering users changes no candidate's mean NDCG (no sampling, global split)."""
    pairs, nu, ni = planted_log(2, taste=0.7, n_users=400, n_items=100)
    perm = np.random.default_rng(0).permutation(nu).astype(np.int32)
    moved = pairs.assign(user_idx=perm[pairs["user_idx"].to_numpy()])
    a = gather_evidence(pairs, nu, ni, seed=3)
    b = gather_evidence(moved, nu, ni, seed=3)
    assert [c.ndcg for c in a.candidates] == pytest.approx([c.ndcg for c in b.candidates])


def test_category_popularity_is_added_when_categories_exist():
    """Item categories add a per-category popularity candidate."""
    pairs, nu, ni = planted_log(3, taste=0.85, n_users=400, n_items=100)
    cats = np.arange(ni) // 20  # the planted clusters are the categories
    ev = gather_evidence(pairs, nu, ni, seed=0, item_category=cats)
    cat = ev.comparison("category_popularity")
    assert cat is not None and cat.lift_low > 0


def test_sampled_test_users_are_stated():
    """The cap on evaluated users is applied and reported."""
    pairs, nu, ni = planted_log(4, taste=0.5, n_users=400, n_items=100)
    ev = gather_evidence(pairs, nu, ni, seed=0, max_test_users=50)
    assert ev.split.sampled and ev.metrics()["evidence.test_users"] == 50.0


def test_progress_callback_names_each_step():
    """The progress callback hears the split, each fit and the later steps."""
    pairs, nu, ni = planted_log(5, taste=0.5, n_users=300, n_items=60)
    steps: list[str] = []
    gather_evidence(pairs, nu, ni, seed=0, progress=steps.append)
    assert steps[0] == "split" and "fit itemknn" in steps and steps[-1] == "neighbour reliability"


def test_too_few_users_give_none_metrics_not_an_error():
    """A tiny log yields an Evidence whose comparison metrics are None, with a note."""
    pairs = pd.DataFrame({"user_idx": [0, 0, 1], "item_idx": [0, 1, 1], "ts": [1, 2, 3]})
    ev = gather_evidence(pairs, 2, 2, seed=0)
    m = ev.metrics()
    assert m["evidence.best_lift"] is None and m["evidence.itemknn_ndcg"] is None
    assert any("could be evaluated" in n for n in ev.notes)


def test_empty_log_gives_empty_evidence():
    """No pairs: no split, zero test users."""
    pairs = pd.DataFrame({"user_idx": pd.Series([], dtype="int32"),
                          "item_idx": pd.Series([], dtype="int32"),
                          "ts": pd.Series([], dtype="int64")})
    ev = gather_evidence(pairs, 0, 0, seed=0)
    assert ev.split is None and ev.metrics()["evidence.test_users"] == 0.0


def test_out_of_range_indices_are_rejected_with_a_clear_message():
    """An item index beyond n_items is a LogFormatError naming the column."""
    pairs = pd.DataFrame({"user_idx": [0], "item_idx": [5], "ts": [1]})
    with pytest.raises(LogFormatError, match="item_idx"):
        gather_evidence(pairs, 1, 2, seed=0)


def test_missing_column_is_rejected():
    """A pairs table without ts is a LogFormatError."""
    with pytest.raises(LogFormatError, match="ts"):
        gather_evidence(pd.DataFrame({"user_idx": [0], "item_idx": [0]}), 1, 1, seed=0)


@pytest.mark.parametrize("option", [{"k": 0}, {"confidence": 1.5}, {"seed": -1},
                                    {"learning_fractions": (0.0, 1.0)},
                                    {"activity_bands": ((0, 2),)}])
def test_bad_options_are_config_errors(option):
    """Out-of-range options raise ConfigError."""
    pairs = pd.DataFrame({"user_idx": [0], "item_idx": [0], "ts": [1]})
    kwargs = {"seed": 0, **option}
    with pytest.raises(ConfigError):
        gather_evidence(pairs, 1, 1, **kwargs)


def test_sample_users_keeps_every_pair_of_the_chosen_users():
    """A user sample keeps all of each chosen user's pairs, renumbers users 0..n-1 in their
    original order, and is reproducible for a seed."""
    from advisor.evidence.gather import sample_users

    pairs, nu, _ = planted_log(3, taste=0.5, n_users=500)
    kept, n, total = sample_users(pairs, 120, rng=np.random.default_rng(7))
    again, _, _ = sample_users(pairs, 120, rng=np.random.default_rng(7))
    assert (n, total) == (120, nu)
    pd.testing.assert_frame_equal(kept, again)
    assert sorted(kept["user_idx"].unique()) == list(range(120))
    def signatures(frame):
        """Each user's sorted (item, time) pairs, users in index order."""
        return [tuple(sorted(zip(g["item_idx"], g["ts"])))
                for _, g in frame.groupby("user_idx", sort=True)]

    original, sampled = signatures(pairs), signatures(kept)
    # Every kept user is one original user with all of their pairs, in the original order.
    at = iter(original)
    assert all(any(sig == o for o in at) for sig in sampled)
    same, _, _ = sample_users(pairs, nu, rng=np.random.default_rng(7))
    assert same is pairs  # at or under the cap: untouched


def test_backtest_on_a_user_sample_says_so_and_projects_to_the_whole_log():
    """Above the cap the backtest runs on a seeded user sample, says so (summary and note),
    still finds the planted taste, and the learning curve projects to the whole log."""
    pairs, nu, ni = planted_log(11, taste=0.85, n_users=4000)
    ev = gather_evidence(pairs, nu, ni, seed=0, max_users=1500)
    s = ev.split
    assert s.users_sampled and s.population_users == nu
    assert s.train_users <= 1500
    assert any("seeded sample of 1,500 of the log's 4,000 users" in n for n in ev.notes)
    assert _is_go(ev.metrics())
    whole = round(s.train_users * nu / 1500)
    assert whole in {p.train_users for p in ev.learning_curve.projections}
    full = gather_evidence(pairs, nu, ni, seed=0)
    assert not full.split.users_sampled and full.split.population_users == nu


def test_learning_curve_on_a_large_catalogue_uses_a_stated_subset_of_test_users(monkeypatch):
    """Above the cell bound the curve is measured on a seeded subset of the test users, the
    report says so, and the full-size point is the subset's share of the main comparison."""
    import advisor.evidence.gather as gather

    monkeypatch.setattr(gather, "CURVE_CELLS", 1)
    monkeypatch.setattr(gather, "MIN_CURVE_USERS", 200)
    pairs, nu, ni = planted_log(5, taste=0.85)
    ev = gather_evidence(pairs, nu, ni, seed=0)
    assert ev.split.test_users > 200
    assert any("seeded subset of 200 of the" in n for n in ev.notes)
    assert len(ev.learning_curve.points) == 4
    full = ev.learning_curve.points[-1]
    best = ev.candidate(ev.best_candidate)
    assert full.candidate_ndcg != best.ndcg  # a subset's mean, not the whole comparison's
