"""What the profilers read from the events besides the :class:`Aggregates` (small).

The ratings and signals profiles need a few facts about all usable events (every event type,
not only the counted ones): how many carry a progress value, a rating or a price, whether
sessions are logged, how many events of each type, and the rating events themselves. Every
engine hands them over in an :class:`EventSummary`, so no later stage needs the raw events.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from advisor.aggregate.model import Aggregates
from advisor.aggregate.pandas_engine import epoch_seconds

__all__ = ["EventSummary", "summarize_events"]


@dataclass(frozen=True, slots=True)
class EventSummary:
    """Facts about the usable events that the aggregates do not hold."""

    progress_events: int
    """Events whose type reads the value as a progress fraction, with a value."""
    rating_events: int
    """Events whose type reads the value as a rating, with a value."""
    price_events: int
    """Events whose type reads the value as a price, with a value."""
    sessions: bool
    """At least one event has a session id."""
    event_types: dict
    """Usable events per event type (str -> int), most frequent first; ties in order of
    first appearance in the log."""
    ratings: pd.DataFrame | None
    """Rating events with a value whose user and item have numbers in the aggregates, in
    log order. Columns ``item_idx``, ``user_idx``, ``ts`` (int64 epoch seconds), ``value``
    (float64). ``None`` when the log has no rating event with a value."""

    def to_dict(self) -> dict:
        return {
            "progress_events": int(self.progress_events),
            "rating_events": int(self.rating_events),
            "price_events": int(self.price_events),
            "sessions": bool(self.sessions),
            "event_types": {str(k): int(v) for k, v in self.event_types.items()},
            "ratings": None if self.ratings is None else int(len(self.ratings)),
        }


def summarize_events(events: pd.DataFrame, agg: Aggregates | None = None) -> EventSummary:
    """The :class:`EventSummary` of a validated events frame (the in-memory engine).

    Parameters
    ----------
    events : pandas.DataFrame
        ``ValidatedLog.events``.
    agg : Aggregates, optional
        Its aggregates; user and item numbers of the rating events come from them. Without
        them ``ratings`` is left ``None`` (only the counts are wanted).

    Returns
    -------
    EventSummary
    """
    kinds = events["value_kind"].to_numpy()
    has_value = events["value"].notna().to_numpy()
    rated = (kinds == "rating") & has_value
    ratings = None
    if rated.any() and agg is not None:
        r = events[rated]
        u = pd.Index(agg.user_labels).get_indexer(r["user"].to_numpy(dtype=object))
        i = pd.Index(agg.item_labels).get_indexer(r["item"].to_numpy(dtype=object))
        ok = (u >= 0) & (i >= 0)
        ratings = pd.DataFrame({
            "item_idx": i[ok].astype(np.int64),
            "user_idx": u[ok].astype(np.int64),
            "ts": epoch_seconds(r["ts"]).to_numpy(dtype=np.int64)[ok],
            "value": r["value"].to_numpy(dtype=np.float64)[ok],
        })
    return EventSummary(
        progress_events=int(((kinds == "progress") & has_value).sum()),
        rating_events=int(rated.sum()),
        price_events=int(((kinds == "price") & has_value).sum()),
        sessions=bool("session" in events and events["session"].notna().any()),
        event_types={str(k): int(v) for k, v in events["event"].value_counts().items()},
        ratings=ratings,
    )
