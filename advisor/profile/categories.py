"""Categories: how the catalogue and the interactions spread over them."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd


@dataclass(frozen=True, slots=True)
class CategoryProfile:
    """Items and interactions per category, and how focused users' tastes are."""

    categories: int
    """Distinct categories in the catalogue."""
    table: pd.DataFrame
    """Per category: ``category``, ``items``, ``items_seen``, ``supported_items`` (items with at
    least ``min_item_users`` distinct users), ``pairs`` (distinct user-item pairs), most pairs
    first. An item with several categories counts in each."""
    min_item_users: int
    """Support threshold used for ``supported_items``."""
    rows_supportable: int
    """Categories with at least ``row_length`` supported items: enough for a category row."""
    row_length: int
    """Items a category row shows."""
    users_profiled: int
    """Users with at least 3 distinct items, over whom concentration is measured."""
    median_concentration: float | None
    """Median over those users of the Herfindahl-Hirschman index of their category shares
    (1 = all in one category; 1/C = spread evenly over C)."""
    share_focused: float | None
    """Share of those users whose top category holds at least half of their items."""

    def to_dict(self) -> dict:
        return {
            "categories": self.categories,
            "min_item_users": self.min_item_users,
            "row_length": self.row_length,
            "rows_supportable": self.rows_supportable,
            "users_profiled": self.users_profiled,
            "median_concentration": self.median_concentration,
            "share_focused": self.share_focused,
            "per_category": self.table.to_dict(orient="records"),
        }


def herfindahl(shares: np.ndarray) -> float:
    """Herfindahl-Hirschman index of shares that sum to one.

    Notes
    -----
    ``HHI = sum_c s_c^2`` (Hirschman 1964, "The paternity of an index", AER 54(5):761).

    Examples
    --------
    >>> round(herfindahl(np.array([0.3, 0.3, 0.2, 0.2])), 4)  # US merger guidelines: 2,600 / 10^4
    0.26
    """
    s = np.asarray(shares, dtype=float)
    return float(np.sum(s * s))


def category_profile(pairs: pd.DataFrame, item_categories: list[tuple[str, ...]],
                     item_users: np.ndarray, *, min_item_users: int = 5,
                     row_length: int = 10) -> CategoryProfile | None:
    """Per-category support and per-user concentration.

    Parameters
    ----------
    pairs : DataFrame
        Distinct user-item pairs (``user_idx``, ``item_idx``).
    item_categories : list of tuple of str
        Categories of each item number (empty tuple when unknown).
    item_users : ndarray
        Distinct users per item number.

    Returns
    -------
    CategoryProfile or None
        None when no item has a category.
    """
    expl = pd.DataFrame({"item_idx": np.arange(len(item_categories)),
                         "category": item_categories}).explode("category").dropna()
    if expl.empty:
        return None
    expl["item_idx"] = expl["item_idx"].astype(np.int64)
    expl["category"] = expl["category"].astype(str)
    expl["users"] = item_users[expl["item_idx"].to_numpy()]
    n_cat = expl.groupby("item_idx")["category"].transform("size").to_numpy()
    expl["frac"] = 1.0 / n_cat
    table = expl.groupby("category").agg(
        items=("item_idx", "size"),
        items_seen=("users", lambda s: int((s > 0).sum())),
        supported_items=("users", lambda s: int((s >= min_item_users).sum())),
        pairs=("users", "sum"),
    ).reset_index().sort_values(["pairs", "category"], ascending=[False, True])

    # Concentration: each item's unit split evenly over its categories.
    user_counts = np.bincount(pairs["user_idx"].to_numpy())
    keep = pairs[user_counts[pairs["user_idx"].to_numpy()] >= 3]
    joined = keep[["user_idx", "item_idx"]].merge(expl[["item_idx", "category", "frac"]],
                                                  on="item_idx")
    med = focused = None
    users_profiled = 0
    if not joined.empty:
        per = joined.groupby(["user_idx", "category"])["frac"].sum()
        tot = per.groupby(level=0).transform("sum")
        share = per / tot
        hhi = (share * share).groupby(level=0).sum()
        top = share.groupby(level=0).max()
        users_profiled = int(hhi.size)
        med = float(hhi.median())
        focused = float((top >= 0.5).mean())
    return CategoryProfile(
        categories=int(table.shape[0]),
        table=table.reset_index(drop=True),
        min_item_users=min_item_users,
        rows_supportable=int((table["supported_items"] >= row_length).sum()),
        row_length=row_length,
        users_profiled=users_profiled,
        median_concentration=med,
        share_focused=focused,
    )
