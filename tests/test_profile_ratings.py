"""Tests for advisor.profile.ratings: latest rating per pair, positive cut, Wilson lower bound.

The lower bound is checked against ``statsmodels.stats.proportion.proportion_confint(...,
method="wilson")``; the positive cut (top quarter of the observed scale) is a rule of thumb,
common practice, no published source, so its expected values are worked by hand from that rule.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from statsmodels.stats.proportion import proportion_confint

from advisor.profile.ratings import RATED_LEVELS, rating_profile


def _profile(rows, **kw):
    """rows: (item, user, ts, value) tuples."""
    i, u, t, v = (np.array(c) for c in zip(*rows))
    return rating_profile(i, u, t, v.astype(float), **kw)


def test_latest_rating_per_user_and_item_wins():
    """A user who re-rates an item counts once, with the later rating, whatever the row order."""
    rows = [
        (0, 0, 200, 1.0),  # later, listed first
        (0, 0, 100, 5.0),  # earlier
        (0, 1, 150, 5.0),
        (1, 0, 120, 3.0),
    ]
    p = _profile(rows)
    assert p.ratings == 3 and p.rated_items == 2
    row = p.table.set_index("item_idx").loc[0]
    assert row["ratings"] == 2 and row["mean"] == pytest.approx(3.0)  # (1 + 5) / 2
    assert row["positive"] == 1  # only user 1's 5; user 0's latest is 1


@pytest.mark.parametrize(("scale", "cut"), [
    ((1.0, 2.0, 3.0, 4.0, 5.0), 4.0),  # 5 - (5 - 1) / 4: ratings 4 and 5 are positive
    ((0.5, 2.5, 5.0), 3.875),  # 5 - (5 - 0.5) / 4: 4, 4.5 and 5 on a half-star scale
    ((0.0, 10.0), 7.5),  # 10 - 10 / 4
])
def test_positive_threshold_is_the_top_quarter_of_the_observed_scale(scale, cut):
    """The positive cut lies a quarter of the observed range below the top."""
    rows = [(0, k, k, v) for k, v in enumerate(scale)]
    p = _profile(rows)
    assert (p.scale_min, p.scale_max) == (min(scale), max(scale))
    assert p.positive_from == pytest.approx(cut)
    assert int(p.table["positive"].iloc[0]) == sum(v >= cut for v in scale)


def test_single_rating_value_counts_every_rating_as_positive():
    """With only one value seen there is no scale; every rating is at the top of it."""
    p = _profile([(0, 0, 1, 4.0), (1, 1, 2, 4.0)])
    assert p.positive_from == 4.0 and p.table["positive"].tolist() == [1, 1]


def test_lower_bound_equals_statsmodels_wilson_lower_end():
    """Each item's score is statsmodels' Wilson interval lower end of its positive share."""
    rng = np.random.default_rng(7)
    rows, t = [], 0
    for item in range(12):
        for user in range(int(rng.integers(1, 40))):
            t += 1
            rows.append((item, user, t, float(rng.integers(1, 6))))
    rows.append((99, 0, t + 1, 1.0))  # make sure 1 and 5 are both seen
    rows.append((99, 1, t + 2, 5.0))
    for conf in (0.95, 0.9):
        p = _profile(rows, confidence=conf)
        tab = p.table
        lo, _ = proportion_confint(tab["positive"].to_numpy(), tab["ratings"].to_numpy(),
                                   alpha=1 - conf, method="wilson")  # statsmodels
        np.testing.assert_allclose(tab["lower_bound"].to_numpy(), lo, rtol=0, atol=1e-12)


def test_table_is_ordered_best_lower_bound_first():
    """An item with 90 of 100 positive ranks above one with 3 of 3 positive."""
    rows, t = [], 0
    for user in range(100):
        t += 1
        rows.append((0, user, t, 5.0 if user < 90 else 1.0))
    for user in range(3):
        t += 1
        rows.append((1, user, t, 5.0))
    p = _profile(rows)
    assert p.table["item_idx"].tolist() == [0, 1]
    # statsmodels proportion_confint(90, 100) vs (3, 3), method="wilson": 0.826 > 0.439
    assert p.table["lower_bound"].iloc[0] == pytest.approx(
        proportion_confint(90, 100, method="wilson")[0])
    assert p.table["lower_bound"].iloc[1] == pytest.approx(
        proportion_confint(3, 3, method="wilson")[0])
    assert list(p.table["lower_bound"]) == sorted(p.table["lower_bound"], reverse=True)


def test_items_at_least_counts_items_by_ratings():
    """Items with 1, 5, 12 and 25 ratings reach levels 1, 5, 10, 20, 50 as counted by hand."""
    rows, t = [], 0
    for item, n in enumerate((1, 5, 12, 25)):
        for user in range(n):
            t += 1
            rows.append((item, user, t, 3.0 + (user % 2)))
    p = _profile(rows)
    assert p.levels == RATED_LEVELS == (1, 5, 10, 20, 50)
    assert p.items_at_least == (4, 3, 2, 1, 0)


def test_no_ratings_gives_none():
    """Without rating events there is no rating profile."""
    empty = np.array([], dtype=np.int64)
    assert rating_profile(empty, empty, empty, np.array([], dtype=float)) is None


def test_rating_profile_to_dict_is_json_safe():
    """``to_dict`` survives strict JSON and names the score used."""
    d = json.loads(json.dumps(_profile([(0, 0, 1, 1.0), (0, 1, 2, 5.0)]).to_dict(),
                              allow_nan=False))
    assert d["scale"] == [1.0, 5.0] and d["positive_from"] == 4.0
    assert "Wilson" in d["score"]
