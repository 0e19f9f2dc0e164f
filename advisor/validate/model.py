"""What validation hands on: clean, typed events, a catalogue, and an account of every
row set aside.

Nothing after this stage sees a bad row. Every row read is either in ``events`` or in
``quarantine`` (with its reason); exact duplicates are counted and dropped, and the count is
reported, so ``rows_read == len(events) + len(quarantine) + duplicates_dropped``.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd


@dataclass(frozen=True, slots=True)
class QualityIssue:
    """One kind of data problem, counted over the whole input."""

    code: str
    """Stable identifier, e.g. ``empty_user``, ``bad_timestamp``, ``after_as_of``,
    ``duplicate_event``, ``unknown_item``, ``value_out_of_range``, ``unmapped_event_type``,
    ``implausible_user``, ``logging_gap``, ``volume_drop``."""
    count: int
    """Rows (or users / days, as ``unit`` says) affected."""
    unit: str
    """What ``count`` counts: ``rows``, ``users`` or ``days``."""
    severity: str
    """``quarantined`` (rows set aside), ``dropped`` (exact duplicates removed), ``flagged`` (kept,
    but the report warns), or ``excluded`` (kept in counts, left out of co-occurrence)."""
    first_file: str | None
    """File of the first offending row, when the issue is about rows."""
    first_line: int | None
    """Line of the first offending row in ``first_file``."""
    message: str
    """What was found, what was expected, and what to do."""

    def to_dict(self) -> dict:
        return {
            "code": self.code,
            "count": int(self.count),
            "unit": self.unit,
            "severity": self.severity,
            "first_file": self.first_file,
            "first_line": None if self.first_line is None else int(self.first_line),
            "message": self.message,
        }


@dataclass(frozen=True, slots=True)
class QualityReport:
    """Row accounting and the list of problems found."""

    rows_read: int
    """Data rows read from all log files."""
    rows_used: int
    """Rows kept as events (all event types, after de-duplication)."""
    rows_quarantined: int
    """Rows set aside into the quarantine file, each with a reason."""
    duplicates_dropped: int
    """Exact duplicate events removed (the first copy is kept)."""
    issues: tuple[QualityIssue, ...]
    """Every problem found, most rows first."""
    timestamp_format: str
    """How timestamps were read: ``iso8601``, ``epoch_seconds`` or ``epoch_milliseconds``."""
    notes: tuple[str, ...] = ()
    """Plain statements about what was detected or assumed (said in the report)."""

    def to_dict(self) -> dict:
        return {
            "rows_read": int(self.rows_read),
            "rows_used": int(self.rows_used),
            "rows_quarantined": int(self.rows_quarantined),
            "duplicates_dropped": int(self.duplicates_dropped),
            "timestamp_format": self.timestamp_format,
            "issues": [i.to_dict() for i in self.issues],
            "notes": list(self.notes),
        }


@dataclass(frozen=True, slots=True)
class Catalog:
    """The typed catalogue."""

    items: pd.DataFrame
    """One row per item. Columns: ``item`` (str, unique), ``title`` (str or NA),
    ``categories`` (tuple of str, possibly empty), ``added`` (datetime64[ns, UTC] or NaT),
    ``rating`` (float or NaN), ``rating_count`` (float or NaN)."""

    @property
    def has_categories(self) -> bool:
        return bool(self.items["categories"].map(len).gt(0).any())

    @property
    def has_added_dates(self) -> bool:
        return bool(self.items["added"].notna().any())


@dataclass(frozen=True, slots=True)
class ValidatedLog:
    """Clean events plus everything needed to account for the rows that are not among them."""

    events: pd.DataFrame
    """Usable events, every event type. Columns: ``user`` (str), ``item`` (str),
    ``ts`` (datetime64[ns, UTC]), ``event`` (str; ``interaction`` when the log has no event
    column), ``value`` (float64, NaN when absent), ``value_kind`` (str: ``rating``,
    ``progress``, ``price`` or ``none``), ``session`` (str or NA),
    ``counts`` (bool: counts as an interaction), ``_source``, ``_line``."""
    quarantine: pd.DataFrame
    """Rows set aside: the raw canonical columns, ``reason`` (str), ``_source``, ``_line``."""
    quality: QualityReport
    """Row accounting and problems found."""
    implausible_users: tuple[str, ...]
    """Accounts flagged as implausible (bots, shared devices, test accounts)."""
    as_of: pd.Timestamp
    """The audit date (UTC): events after it were set aside."""
    catalog: Catalog | None
    """The typed catalogue, if one was given."""
