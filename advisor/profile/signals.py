"""Which kinds of signal the log and catalogue carry (surfaces depend on them)."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from advisor.aggregate.summary import EventSummary, summarize_events
from advisor.validate.model import ValidatedLog

DAY_NS = 86400 * 10**9


@dataclass(frozen=True, slots=True)
class Signals:
    """Presence of the data each surface needs."""

    progress_events: int
    """Events carrying a progress value (watched or read fraction)."""
    rating_events: int
    """Events carrying a rating."""
    price_events: int
    """Events carrying a price."""
    sessions: bool
    """The log has a session column with values."""
    catalogue: bool
    """A catalogue was given."""
    added_dates: bool
    """The catalogue has dates added for at least one item."""
    categories: bool
    """The catalogue has categories for at least one item."""
    titles: bool
    """The catalogue has titles."""
    catalogue_ratings: bool
    """The catalogue has rating columns."""
    items_added_28d: int | None
    """Catalogue items added in the 28 days up to the as-of date (None without dates)."""
    event_types: dict
    """Usable events per event type."""

    def to_dict(self) -> dict:
        return {k: getattr(self, k) for k in self.__slots__}


def signals(log: ValidatedLog, events: EventSummary | None = None) -> Signals:
    """Which signals are present, from the validated log.

    ``events`` is the engine's summary of the events; when ``None`` it is taken from
    ``log.events`` (the in-memory engine).
    """
    if events is None:
        events = summarize_events(log.events)
    cat = log.catalog
    added = cat is not None and cat.has_added_dates
    recent = None
    if added:
        lo = log.as_of - pd.Timedelta(days=28)
        a = cat.items["added"]
        recent = int(((a > lo) & (a <= log.as_of)).sum())
    return Signals(
        progress_events=int(events.progress_events),
        rating_events=int(events.rating_events),
        price_events=int(events.price_events),
        sessions=bool(events.sessions),
        catalogue=cat is not None,
        added_dates=bool(added),
        categories=bool(cat is not None and cat.has_categories),
        titles=bool(cat is not None and cat.items["title"].notna().any()),
        catalogue_ratings=bool(cat is not None and cat.items["rating"].notna().any()),
        items_added_28d=recent,
        event_types=dict(events.event_types),
    )

