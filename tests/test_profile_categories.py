"""Tests for advisor.profile.categories: per-category support and users' concentration.

Expected numbers: the Herfindahl-Hirschman index of shares 30/30/20/20 is 2,600 on the
0-10,000 scale, the worked example in the US merger guidelines (REFERENCES.md [P]); every
other number is worked by hand from the small planted case below.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from advisor.profile.categories import category_profile, herfindahl

# Planted case. Item categories (item 4 has none; item 6 is never consumed):
CATS = [("x",), ("x", "y"), ("y",), ("z",), (), ("x",), ("z",)]
# Distinct user-item pairs:
PAIRS = {
    0: [0, 1, 2],  # x 1 + 1/2, y 1/2 + 1 -> shares 1/2, 1/2; HHI 0.5; top 0.5 (focused)
    1: [0, 5, 1, 3],  # x 2.5, y 0.5, z 1 of 4 -> HHI 0.46875; top 0.625 (focused)
    2: [0, 2, 3],  # x, y, z one each -> HHI 1/3; top 1/3 (not focused)
    3: [0, 4],  # two items only: not profiled
    4: [4, 0, 2],  # three items, one without category -> x 1, y 1: HHI 0.5 (focused)
}


def _pairs() -> pd.DataFrame:
    rows = [(u, i) for u, items in PAIRS.items() for i in items]
    return pd.DataFrame(rows, columns=["user_idx", "item_idx"]).astype(np.int32)


def _item_users() -> np.ndarray:
    return np.bincount(_pairs()["item_idx"], minlength=len(CATS))


def test_herfindahl_matches_the_merger_guidelines_example():
    """Shares 30, 30, 20, 20 per cent give an HHI of 2,600 (0.26 on the unit scale)."""
    # US merger guidelines worked example: 30^2 + 30^2 + 20^2 + 20^2 = 2,600 (REFERENCES.md [P]).
    assert herfindahl(np.array([0.3, 0.3, 0.2, 0.2])) * 10_000 == pytest.approx(2_600)


def test_herfindahl_bounds_one_category_and_even_spread():
    """All in one category gives 1; an even spread over C categories gives 1/C."""
    assert herfindahl(np.array([1.0])) == 1.0
    assert herfindahl(np.full(8, 1 / 8)) == pytest.approx(1 / 8)


def test_category_table_counts_items_support_and_pairs_per_category():
    """Items, seen items, supported items and pairs per category, most pairs first."""
    assert _item_users().tolist() == [5, 2, 3, 2, 2, 1, 0]  # users per item, by hand
    p = category_profile(_pairs(), CATS, _item_users(), min_item_users=2, row_length=2)
    assert p.categories == 3
    tab = p.table.set_index("category")
    assert list(p.table["category"]) == ["x", "y", "z"]  # pairs 8, 5, 2
    # An item with several categories counts in each: item 1 is in x and in y.
    assert tab.loc["x"].tolist() == [3, 3, 2, 8]  # items 0 1 5; users 5 + 2 + 1
    assert tab.loc["y"].tolist() == [2, 2, 2, 5]  # items 1 2; users 2 + 3
    assert tab.loc["z"].tolist() == [2, 1, 1, 2]  # items 3 6 (6 never seen); users 2 + 0


def test_rows_supportable_counts_categories_with_enough_supported_items():
    """A category can fill a row when it has ``row_length`` items with enough users."""
    pairs, users = _pairs(), _item_users()

    def rows(min_item_users, row_length):
        return category_profile(pairs, CATS, users, min_item_users=min_item_users,
                                row_length=row_length).rows_supportable

    # Supported items per category with >= 2 users: x 2, y 2, z 1; with >= 3: x 1, y 1, z 0.
    assert rows(2, 2) == 2
    assert rows(2, 1) == 3
    assert rows(3, 1) == 2
    assert rows(2, 3) == 0


def test_concentration_splits_multi_category_items_evenly():
    """Users' HHI uses each item split evenly over its categories (hand-worked above)."""
    p = category_profile(_pairs(), CATS, _item_users(), min_item_users=2, row_length=2)
    assert p.users_profiled == 4  # user 3 has only two items
    # HHIs 0.5, 0.46875, 1/3, 0.5 -> median (0.46875 + 0.5) / 2
    assert p.median_concentration == pytest.approx((0.46875 + 0.5) / 2)
    assert p.share_focused == pytest.approx(3 / 4)


def test_concentration_of_a_single_user_matches_herfindahl_of_hand_shares():
    """User 1's shares 2.5/4, 0.5/4, 1/4 give the HHI the function computes directly."""
    pairs = _pairs()
    only = pairs[pairs["user_idx"] == 1]
    p = category_profile(only, CATS, _item_users())
    assert p.users_profiled == 1
    assert p.median_concentration == pytest.approx(herfindahl(np.array([2.5, 0.5, 1.0]) / 4))
    assert p.median_concentration == pytest.approx(0.46875)


def test_no_categories_gives_none():
    """Without any item category there is no category profile."""
    assert category_profile(_pairs(), [()] * len(CATS), _item_users()) is None


def test_no_user_with_three_items_leaves_concentration_unmeasured():
    """With every user below three items, concentration is None, not a made-up number."""
    pairs = _pairs()
    p = category_profile(pairs[pairs["user_idx"] == 3], CATS, _item_users())
    assert p.users_profiled == 0
    assert p.median_concentration is None and p.share_focused is None


def test_category_profile_to_dict_is_json_safe():
    """``to_dict`` survives strict JSON with one record per category."""
    p = category_profile(_pairs(), CATS, _item_users(), min_item_users=2, row_length=2)
    d = json.loads(json.dumps(p.to_dict(), allow_nan=False))
    assert [r["category"] for r in d["per_category"]] == ["x", "y", "z"]
    assert d["rows_supportable"] == 2 and d["users_profiled"] == 4
