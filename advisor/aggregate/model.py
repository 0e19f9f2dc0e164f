"""The aggregates every later stage reads."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
import scipy.sparse as sp


@dataclass(frozen=True, slots=True)
class Aggregates:
    """Compact statistics of the counted interactions (events that count as interactions).

    Users and items are numbered ``0..n-1``; ``user_labels`` / ``item_labels`` map the numbers
    back to the original string ids. Items from the catalogue that no one touched are
    numbered too (after the seen items), so they take part in coverage and the cold list.
    """

    user_labels: np.ndarray
    """Original user id of each user number (object array of str)."""
    item_labels: np.ndarray
    """Original item id of each item number (object array of str); seen items first."""
    n_seen_items: int
    """Items with at least one counted interaction (numbers ``0..n_seen_items-1``)."""
    pairs: pd.DataFrame
    """One row per distinct (user, item) pair with a counted interaction, sorted by
    ``user_idx`` then ``item_idx`` (both engines deliver that order). Columns:
    ``user_idx`` (int32), ``item_idx`` (int32), ``first_ts`` and ``last_ts`` (int64 epoch
    seconds of the first and latest counted interaction)."""
    user_items: np.ndarray
    """Distinct items per user (int64, length n_users)."""
    user_events: np.ndarray
    """Counted events per user (int64)."""
    user_first_ts: np.ndarray
    """Epoch seconds of each user's first counted interaction (int64)."""
    user_last_ts: np.ndarray
    """Epoch seconds of each user's latest counted interaction (int64)."""
    item_users: np.ndarray
    """Distinct users per item (int64, length n_items; zero for unseen catalogue items)."""
    item_events: np.ndarray
    """Counted events per item (int64)."""
    item_first_ts: np.ndarray
    """Epoch seconds of each item's first counted interaction (int64; -1 when unseen)."""
    weekly: pd.DataFrame
    """One row per week (weeks start Monday 00:00 UTC) inside the covered span, gaps included.
    Columns: ``week`` (date of the Monday), ``events`` (all usable events), ``interactions``
    (counted events), ``active_users``, ``returning_users`` (active in this week and the one
    before), ``new_users``, ``new_items``."""
    implausible: np.ndarray
    """Boolean per user: flagged as implausible by validation."""
    counted_events: int
    """Counted events in the audit."""
    all_events: int
    """Usable events of every type (impressions included)."""
    first_ts: int
    """Epoch seconds of the first counted interaction."""
    last_ts: int
    """Epoch seconds of the last counted interaction."""

    @property
    def n_users(self) -> int:
        return int(self.user_labels.size)

    @property
    def n_items(self) -> int:
        return int(self.item_labels.size)

    def matrix(self, *, cap: int | None = None, exclude_implausible: bool = True) -> sp.csr_matrix:
        """Binary user x item matrix of counted interactions.

        Parameters
        ----------
        cap : int, optional
            Keep only each user's ``cap`` most recent distinct items (by latest interaction),
            which bounds co-occurrence cost at ``O(sum_u min(len_u, cap)^2)``.
        exclude_implausible : bool
            Leave the rows of implausible accounts empty.
        """
        u = self.pairs["user_idx"].to_numpy()
        i = self.pairs["item_idx"].to_numpy()
        keep = None
        if exclude_implausible and self.implausible.any():
            keep = ~self.implausible[u]
        if cap is not None and self.user_items.size and self.user_items.max() > cap:
            # Only users with more than ``cap`` items lose any; rank just their pairs.
            heavy = np.flatnonzero((self.user_items > cap)[u])
            drop = heavy[_beyond_cap(u[heavy], i[heavy],
                                     self.pairs["last_ts"].to_numpy()[heavy], cap)]
            keep = np.ones(u.size, dtype=bool) if keep is None else keep
            keep[drop] = False
        # The matrix's arrays are fresh (it must not share memory with ``pairs``) and each is
        # made once: on 100M events a copy of a column is 400 MB.
        if keep is not None:
            u, i = u[keep], i[keep].astype(np.int32, copy=False)
            del keep
        else:
            i = i.astype(np.int32, copy=True)
        if u.size and not (np.all(np.diff(u) >= 0)):
            order = np.lexsort((i, u))
            u, i = u[order], i[order]
        indptr = np.zeros(self.n_users + 1, dtype=np.int64)
        np.cumsum(np.bincount(u, minlength=self.n_users), out=indptr[1:])
        del u
        return sp.csr_matrix((np.ones(i.size, dtype=np.float32), i, indptr),
                             shape=(self.n_users, self.n_items), copy=False)


def _beyond_cap(user: np.ndarray, item: np.ndarray, last_ts: np.ndarray,
                cap: int) -> np.ndarray:
    """Positions of the pairs beyond each user's ``cap`` most recent (latest interaction
    first, ties by item number, so it is stable)."""
    order = np.lexsort((item, -last_ts, user))
    users = user[order]
    starts = np.r_[0, np.flatnonzero(np.diff(users)) + 1]
    rank = np.arange(users.size) - np.repeat(starts, np.diff(np.r_[starts, users.size]))
    return order[rank >= cap]


def labels_in(labels: np.ndarray, wanted) -> np.ndarray:
    """Boolean mask of the ``labels`` that are in ``wanted``.

    ``labels`` must be sorted and distinct (as both engines number users and items); each
    wanted id is looked up by binary search, so no copy of the labels is made (on a log with
    ten million users a text copy costs hundreds of megabytes).

    Examples
    --------
    >>> labels_in(np.array(["a", "b", "d"], dtype=object), ["d", "c"]).tolist()
    [False, False, True]
    """
    out = np.zeros(labels.size, dtype=bool)
    want = np.asarray(sorted({str(w) for w in wanted}), dtype=object)
    if not want.size or not labels.size:
        return out
    pos = np.searchsorted(labels, want)
    inside = pos < labels.size
    pos, want = pos[inside], want[inside]
    out[pos[labels[pos] == want]] = True
    return out
