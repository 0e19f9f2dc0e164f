"""Explicit ratings: are there enough to rank a "well rated" row honestly?"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from advisor.stats.intervals import wilson_lower_bound

RATED_LEVELS = (1, 5, 10, 20, 50)


@dataclass(frozen=True, slots=True)
class RatingProfile:
    """Per-item rating counts and a lower-bound score."""

    ratings: int
    """Rating events used (latest rating per user and item)."""
    rated_items: int
    """Items with at least one rating."""
    scale_min: float
    """Smallest rating seen."""
    scale_max: float
    """Largest rating seen."""
    positive_from: float
    """A rating at or above this counts as positive (top quarter of the observed scale)."""
    levels: tuple[int, ...]
    """Thresholds m for ``items_at_least``."""
    items_at_least: tuple[int, ...]
    """Items with at least m ratings."""
    table: pd.DataFrame
    """Per rated item: ``item_idx``, ``ratings``, ``mean``, ``positive``, ``lower_bound``
    (Wilson lower bound of the share of positive ratings), best first."""

    def to_dict(self) -> dict:
        return {
            "ratings": self.ratings,
            "rated_items": self.rated_items,
            "scale": [self.scale_min, self.scale_max],
            "positive_from": self.positive_from,
            "levels": list(self.levels),
            "items_at_least": list(self.items_at_least),
            "score": "Wilson lower bound of the share of positive ratings",
        }


def rating_profile(item_idx: np.ndarray, user_idx: np.ndarray, ts: np.ndarray,
                   values: np.ndarray, *, confidence: float = 0.95,
                   levels=RATED_LEVELS) -> RatingProfile | None:
    """Per-item rating support and Wilson lower-bound scores.

    Parameters
    ----------
    item_idx, user_idx, ts, values : array_like
        One entry per rating event: item number, user number, epoch seconds, rating.
    confidence : float
        Confidence level of the lower bound.

    Returns
    -------
    RatingProfile or None
        None when there are no ratings.

    Notes
    -----
    A user who rated an item several times counts once, with the latest rating. A rating is
    "positive" when it lies in the top quarter of the observed scale (4 and 5 on a 1-5 scale);
    common practice, no published source. Items are scored by the Wilson (1927) lower bound
    of their share of positive ratings, which ranks an item with 3 of 3 positive below one
    with 90 of 100; ranking by this bound is common practice with no single published source.
    """
    if len(values) == 0:
        return None
    df = pd.DataFrame({"i": item_idx, "u": user_idx, "t": ts, "v": values})
    df = df.sort_values("t", kind="stable").drop_duplicates(["u", "i"], keep="last")
    lo, hi = float(df["v"].min()), float(df["v"].max())
    cut = hi - 0.25 * (hi - lo) if hi > lo else hi
    df["pos"] = df["v"] >= cut
    per = df.groupby("i").agg(ratings=("v", "size"), mean=("v", "mean"), positive=("pos", "sum"))
    per["lower_bound"] = wilson_lower_bound(per["positive"].to_numpy(),
                                            per["ratings"].to_numpy(), confidence=confidence)
    per = per.reset_index().rename(columns={"i": "item_idx"})
    per = per.sort_values(["lower_bound", "ratings"], ascending=False, kind="stable")
    counts = np.sort(per["ratings"].to_numpy())
    at_least = counts.size - np.searchsorted(counts, np.asarray(levels), side="left")
    return RatingProfile(
        ratings=int(len(df)),
        rated_items=int(len(per)),
        scale_min=lo,
        scale_max=hi,
        positive_from=float(cut),
        levels=tuple(int(x) for x in levels),
        items_at_least=tuple(int(x) for x in at_least),
        table=per.reset_index(drop=True),
    )
