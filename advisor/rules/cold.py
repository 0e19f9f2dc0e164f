"""Who and what stays cold: users too new to personalise for, items no algorithm can reach.

Cold items get an editorial placement list with, for each item, an estimate of how many more
distinct users it needs before its neighbour scores are usable.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from advisor.stats.intervals import users_needed

DAY = 86400
#: Activity bands (distinct items) for the cold-user summary.
USER_BANDS = ((1, 1), (2, 2), (3, 5), (6, 10), (11, 20), (21, None))


@dataclass(frozen=True, slots=True)
class ColdUsers:
    """Active users below the personalisation threshold."""

    threshold: int
    """Distinct items a user needs before personalised rows are shown to them."""
    threshold_source: str
    """``backtest`` (smallest activity band where personalisation beat popularity) or
    ``default`` (common practice, no published source)."""
    active_days: int
    """A user is active with a counted interaction in this many days up to the as-of date."""
    active_users: int
    """Active users."""
    cold_active_users: int
    """Active users below the threshold."""
    cold_share: float | None
    """``cold_active_users / active_users`` (None with no active user)."""
    bands: pd.DataFrame
    """Per activity band: ``band``, ``min_items``, ``max_items`` (NaN: no upper end), ``users``,
    ``active_users``, ``cold_active_users`` (active users of the band below the threshold) and
    ``cold`` (bool: the whole band is below the threshold)."""

    def to_dict(self) -> dict:
        return {
            "threshold": self.threshold,
            "threshold_source": self.threshold_source,
            "active_days": self.active_days,
            "active_users": self.active_users,
            "cold_active_users": self.cold_active_users,
            "cold_share": self.cold_share,
            "bands": [
                {**row, "max_items": None if pd.isna(row["max_items"]) else int(row["max_items"])}
                for row in self.bands.to_dict(orient="records")
            ],
        }


@dataclass(frozen=True, slots=True)
class ColdItems:
    """Catalogue items that no collaborative method can place yet."""

    min_users: int
    """Distinct users an item needs before it is considered for neighbours."""
    min_neighbours: int
    """Significant neighbours an item needs to be recommendable from and to."""
    catalogue_items: int
    """Items in the catalogue (plus seen items missing from it)."""
    cold: int
    """Cold items."""
    never_seen: int
    """Cold items with no counted interaction at all."""
    low_support: int
    """Cold items seen, but by fewer than ``min_users`` distinct users."""
    no_neighbours: int
    """Cold items with enough users but fewer than ``min_neighbours`` significant neighbours."""
    placement: pd.DataFrame
    """The editorial placement list, in order: ``rank``, ``item``, ``title``, ``added``,
    ``first_seen``, ``users``, ``neighbours``, ``reason``, ``more_users_needed`` (NaN when
    no estimate can be made), ``estimate_basis``."""

    @property
    def share(self) -> float:
        return self.cold / self.catalogue_items if self.catalogue_items else float("nan")

    def to_dict(self, *, limit: int | None = 50) -> dict:
        rows = self.placement if limit is None else self.placement.head(limit)
        return {
            "min_users": self.min_users,
            "min_neighbours": self.min_neighbours,
            "catalogue_items": self.catalogue_items,
            "cold": self.cold,
            "share": self.share,
            "never_seen": self.never_seen,
            "low_support": self.low_support,
            "no_neighbours": self.no_neighbours,
            "placement_head": [_jsonable(r) for r in rows.to_dict(orient="records")],
        }


def _jsonable(row: dict) -> dict:
    out = {}
    for k, v in row.items():
        if v is None or (isinstance(v, float) and np.isnan(v)) or v is pd.NaT:
            out[k] = None
        elif isinstance(v, (np.integer,)):
            out[k] = int(v)
        elif isinstance(v, (np.floating,)):
            out[k] = float(v)
        elif isinstance(v, pd.Timestamp):
            out[k] = v.isoformat()
        else:
            out[k] = v
    return out


def cold_users(user_items: np.ndarray, user_last_ts: np.ndarray, as_of_ts: int, *,
               threshold: int, threshold_source: str, active_days: int = 28,
               bands=USER_BANDS) -> ColdUsers:
    """Count active users below ``threshold`` distinct items, with a summary by band."""
    active = user_last_ts > as_of_ts - active_days * DAY
    rows = []
    below = user_items < threshold
    for lo, hi in bands:
        in_band = (user_items >= lo) & (user_items <= (hi if hi is not None else np.inf))
        label = f"{lo}" if hi == lo else (f"{lo}-{hi}" if hi is not None else f"{lo}+")
        rows.append({"band": label, "min_items": lo,
                     "max_items": float("nan") if hi is None else hi,
                     "users": int(in_band.sum()), "active_users": int((in_band & active).sum()),
                     "cold_active_users": int((in_band & active & below).sum()),
                     "cold": bool(hi is not None and hi < threshold)})
    n_active = int(active.sum())
    cold_active = int((active & (user_items < threshold)).sum())
    return ColdUsers(
        threshold=int(threshold),
        threshold_source=threshold_source,
        active_days=active_days,
        active_users=n_active,
        cold_active_users=cold_active,
        cold_share=cold_active / n_active if n_active else None,
        bands=pd.DataFrame(rows),
    )


def more_users_needed(support: np.ndarray, best_p: np.ndarray, best_base: np.ndarray, *,
                      min_users: int, confidence: float = 0.95,
                      pooled_p: float | None = None,
                      pooled_base: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Extra distinct users each item needs before its best neighbour score is usable.

    Parameters
    ----------
    support : ndarray
        Distinct users per item now.
    best_p, best_base : ndarray
        For each item y, the observed P(x | y) of its strongest candidate neighbour x and x's
        base rate; NaN when the item has no scored pair.
    min_users : int
        Floor: an item needs at least this many users in any case.
    pooled_p, pooled_base : float, optional
        Typical values over items that do have neighbours, used for items with no pair yet.

    Returns
    -------
    needed : ndarray of float
        Extra users (0 when enough already; NaN when no estimate is possible).
    basis : ndarray of str
        ``own pair``, ``typical pair`` or ``no estimate``.

    Notes
    -----
    A neighbour x of y is usable when the Wilson lower bound of P(x | y) clears x's base rate,
    which needs an interval half-width below ``p - base``. The number of users of y for that
    half-width is the normal-approximation sample size ``n = z^2 p (1 - p) / (p - base)^2``
    (statsmodels ``samplesize_confint_proportion``). It assumes the observed ``p`` holds as
    data grows: an estimate to plan with, not a promise. When ``p <= base`` (the item's
    audience looks like everyone's) no amount of data makes a neighbour, and no estimate is
    given.
    """
    support = np.asarray(support, dtype=float)
    p = np.asarray(best_p, dtype=float).copy()
    b = np.asarray(best_base, dtype=float).copy()
    basis = np.where(np.isnan(p), "no estimate", "own pair").astype(object)
    if pooled_p is not None and pooled_base is not None and pooled_p > pooled_base:
        fill = np.isnan(p)
        p[fill], b[fill] = pooled_p, pooled_base
        basis[fill] = "typical pair"
    needed = np.full(support.shape, np.nan)
    ok = ~np.isnan(p) & (p > b)
    if ok.any():
        n = users_needed(p[ok], p[ok] - b[ok], confidence=confidence)
        needed[ok] = np.maximum(np.maximum(n, min_users) - support[ok], 0)
    basis[~np.isnan(p) & ~ok] = "no estimate"
    return needed, basis


def _reached_but_cold(needed: np.ndarray, basis: np.ndarray, neighbours: np.ndarray,
                      min_neighbours: int) -> None:
    """An item past its estimate that still lacks neighbours gets no number, not a zero:
    the estimate (a normal approximation) was too optimistic for it. Edits in place."""
    stuck = (needed == 0) & (neighbours < min_neighbours)
    needed[stuck] = np.nan
    basis[stuck] = "estimate reached, still no neighbour above chance"


def cold_items(item_labels: np.ndarray, item_users: np.ndarray, neighbours: np.ndarray,
               best_p: np.ndarray, best_base: np.ndarray, *, min_users: int,
               min_neighbours: int, confidence: float, item_first_ts: np.ndarray,
               catalog: pd.DataFrame | None) -> ColdItems:
    """Cold items and the editorial placement list.

    An item is cold when it has fewer than ``min_users`` distinct users or fewer than
    ``min_neighbours`` significant neighbours; catalogue items never seen are cold.
    The list puts recently added items first (date added from the catalogue, else the
    first interaction), then within the same week those closest to warm (most users).
    """
    users = np.asarray(item_users)
    neigh = np.asarray(neighbours)
    cold = (users < min_users) | (neigh < min_neighbours)
    warm_pairs = ~np.isnan(best_p) & (neigh >= min_neighbours)
    pooled_p = float(np.nanmedian(best_p[warm_pairs])) if warm_pairs.any() else None
    pooled_b = float(np.nanmedian(best_base[warm_pairs])) if warm_pairs.any() else None
    needed, basis = more_users_needed(users, best_p, best_base, min_users=min_users,
                                      confidence=confidence, pooled_p=pooled_p,
                                      pooled_base=pooled_b)
    _reached_but_cold(needed, basis, neigh, min_neighbours)
    idx = np.flatnonzero(cold)
    df = pd.DataFrame({
        "item": item_labels[idx].astype(str),
        "users": users[idx].astype(np.int64),
        "neighbours": neigh[idx].astype(np.int64),
        "more_users_needed": needed[idx],
        "estimate_basis": basis[idx].astype(str),
    })
    fts = np.asarray(item_first_ts)[idx]
    seen_at = pd.to_datetime(np.where(fts >= 0, fts, 0), unit="s", utc=True)
    df["first_seen"] = seen_at.where(fts >= 0)
    df["title"] = None
    # A typed, tz-aware column even without a catalogue: a bare NaT column is naive, and the
    # recency sort below needs ``.dt`` on a tz-aware series.
    df["added"] = pd.Series(pd.NaT, index=df.index, dtype="datetime64[ns, UTC]")
    if catalog is not None:
        meta = catalog.set_index("item")[["title", "added"]]
        df["title"] = df["item"].map(meta["title"])
        df["added"] = pd.to_datetime(df["item"].map(meta["added"]), utc=True)
    df["reason"] = np.select(
        [df["users"] == 0, df["users"] < min_users],
        ["never consumed", "fewer than %d distinct users" % min_users],
        default="no neighbour above chance yet" if min_neighbours <= 1 else
        "fewer than %d neighbours above chance" % min_neighbours,
    )
    recency = df["added"].where(df["added"].notna(), df["first_seen"])
    df["_week"] = recency.dt.tz_convert("UTC").dt.tz_localize(None).dt.to_period("W").dt.start_time
    df = df.sort_values(["_week", "users", "item"], ascending=[False, False, True],
                        na_position="last", kind="stable").drop(columns="_week")
    df.insert(0, "rank", np.arange(1, len(df) + 1))
    df = df[["rank", "item", "title", "added", "first_seen", "users", "neighbours", "reason",
             "more_users_needed", "estimate_basis"]].reset_index(drop=True)
    return ColdItems(
        min_users=min_users,
        min_neighbours=min_neighbours,
        catalogue_items=int(len(item_labels)),
        cold=int(cold.sum()),
        never_seen=int((users == 0).sum()),
        low_support=int(((users > 0) & (users < min_users)).sum()),
        no_neighbours=int(((users >= min_users) & (neigh < min_neighbours)).sum()),
        placement=df,
    )
