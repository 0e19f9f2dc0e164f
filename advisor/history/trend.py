"""The trend over stored audits: one row per as-of date, change since the previous audit,
direction glyphs and sparklines."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from advisor.history.entry import HistoryEntry

__all__ = ["ASCII_GLYPHS", "ASCII_SPARKS", "GLYPHS", "SPARKS", "TREND_METRICS", "Trend",
           "TrendRow", "direction", "relative_change", "sparkline", "trend_table"]

#: Entry fields shown in the trend, in display order.
TREND_METRICS = ("users", "users_ge_5", "interactions", "items_seen", "density", "cooc_share",
                 "itemknn_lift")

#: Direction glyphs: up, down, unchanged, no previous value.
GLYPHS = {"up": "▲", "down": "▼", "same": "·", "none": " "}
ASCII_GLYPHS = {"up": "^", "down": "v", "same": "=", "none": " "}

#: Sparkline levels, lowest first (Unicode block elements, and a plain-ASCII ramp).
SPARKS = "▁▂▃▄▅▆▇█"
ASCII_SPARKS = "_.-:=+*#"

#: Relative changes smaller than this count as unchanged (common practice, no published
#: source: half a percent is below what a weekly reader would act on).
SAME_TOLERANCE = 0.005

_TIER_ORDER_UNKNOWN = -1


def relative_change(new: float | None, old: float | None) -> float | None:
    """``(new - old) / |old|``; None when either is missing or ``old`` is zero.

    Examples
    --------
    >>> relative_change(110, 100), relative_change(5, 0), relative_change(None, 3)
    (0.1, None, None)
    """
    if new is None or old is None or old == 0:
        return None
    return (float(new) - float(old)) / abs(float(old))


def direction(new: float | None, old: float | None, *,
              tolerance: float = SAME_TOLERANCE) -> str:
    """``up``, ``down``, ``same`` or ``none`` (nothing to compare).

    A change smaller than ``tolerance`` relative to ``|old|`` is ``same``; from zero, any
    rise is ``up``.

    Examples
    --------
    >>> direction(120, 100), direction(100.1, 100), direction(0, 3), direction(1, None)
    ('up', 'same', 'down', 'none')
    """
    if new is None or old is None:
        return "none"
    diff = float(new) - float(old)
    scale = abs(float(old))
    if diff == 0 or (scale > 0 and abs(diff) < tolerance * scale):
        return "same"
    return "up" if diff > 0 else "down"


def sparkline(values: Sequence[float | None], *, ascii_only: bool = False) -> str:
    """One character per value, scaled between the series' minimum and maximum.

    Missing values are blanks; a constant series sits on the lowest level.

    Examples
    --------
    >>> sparkline([1, 2, 4, 8]), sparkline([1, None, 3], ascii_only=True)
    ('▁▂▄█', '_ #')
    """
    ramp = ASCII_SPARKS if ascii_only else SPARKS
    present = [float(v) for v in values if v is not None and math.isfinite(float(v))]
    if not present:
        return " " * len(values)
    lo, hi = min(present), max(present)
    out = []
    for v in values:
        if v is None or not math.isfinite(float(v)):
            out.append(" ")
        elif hi == lo:
            out.append(ramp[0])
        else:
            out.append(ramp[round((float(v) - lo) / (hi - lo) * (len(ramp) - 1))])
    return "".join(out)


@dataclass(frozen=True, slots=True)
class TrendRow:
    """One audit in the trend."""

    as_of_date: str
    """As-of date (``YYYY-MM-DD``, UTC)."""
    days_since_previous: int | None
    """Days since the previous audit's as-of date (7 for weekly audits; None for the first)."""
    values: dict[str, float | None]
    """Key metrics (see :data:`TREND_METRICS`), in their own units."""
    change: dict[str, float | None]
    """Relative change of each key metric since the previous audit (0.1 = +10%)."""
    glyphs: dict[str, str]
    """Direction glyph of each key metric since the previous audit."""
    headline_tier: str | None
    """Id of the highest ready tier."""
    headline_change: str
    """``up``, ``down``, ``same`` or ``none`` (first audit): the headline tier's move."""
    personalised_go: bool
    """Go for personalised rows."""
    go_change: str | None
    """``to_go`` or ``to_no_go`` when the go / no-go flipped since the previous audit."""
    fingerprint: str
    """Input fingerprint of the audit."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        d = {k: getattr(self, k) for k in self.__slots__}
        return {k: (dict(v) if isinstance(v, dict) else v) for k, v in d.items()}


@dataclass(frozen=True, slots=True)
class Trend:
    """The trend table over all stored audits, oldest first."""

    rows: tuple[TrendRow, ...]
    """One row per audit."""
    sparklines: dict[str, str]
    """Sparkline of users and interactions over all audits (one character per audit)."""
    ascii_only: bool
    """True when glyphs and sparklines use plain ASCII."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return {"rows": [r.to_dict() for r in self.rows], "sparklines": dict(self.sparklines),
                "ascii_only": self.ascii_only}


def _days(a: str, b: str) -> int:
    from datetime import date

    return (date.fromisoformat(b) - date.fromisoformat(a)).days


def trend_table(entries: Sequence[HistoryEntry], *, tier_order: Sequence[str] | None = None,
                ascii_only: bool = False) -> Trend:
    """Trend rows with the change since the previous audit.

    Parameters
    ----------
    entries : sequence of HistoryEntry
        Stored audits, any order (sorted by as-of date here).
    tier_order : sequence of str, optional
        Tier ids lowest first, to tell a headline move up from down; by default the order
        of each entry's ``tier_statuses`` (the rules' tier order).
    ascii_only : bool
        Plain-ASCII glyphs and sparklines (for terminals without Unicode).

    Returns
    -------
    Trend

    Notes
    -----
    The change is measured against the previous stored audit, whatever the gap: with weekly
    audits it is the week-over-week change; ``days_since_previous`` says when it is not.
    """
    glyph = ASCII_GLYPHS if ascii_only else GLYPHS
    ordered = sorted(entries, key=lambda e: e.as_of_date)
    rows = []
    prev: HistoryEntry | None = None
    for e in ordered:
        values = {k: getattr(e, k) for k in TREND_METRICS}
        old = {k: (getattr(prev, k) if prev is not None else None) for k in TREND_METRICS}
        order = list(tier_order) if tier_order else list(e.tier_statuses)
        rows.append(TrendRow(
            as_of_date=e.as_of_date,
            days_since_previous=None if prev is None else _days(prev.as_of_date, e.as_of_date),
            values=values,
            change={k: relative_change(values[k], old[k]) for k in TREND_METRICS},
            glyphs={k: glyph[direction(values[k], old[k])] for k in TREND_METRICS},
            headline_tier=e.headline_tier,
            headline_change="none" if prev is None else _tier_move(
                e.headline_tier, prev.headline_tier, order),
            personalised_go=e.personalised_go,
            go_change=None if prev is None or prev.personalised_go == e.personalised_go
            else ("to_go" if e.personalised_go else "to_no_go"),
            fingerprint=e.fingerprint,
        ))
        prev = e
    spark = {k: sparkline([getattr(e, k) for e in ordered], ascii_only=ascii_only)
             for k in ("users", "interactions")}
    return Trend(tuple(rows), spark, ascii_only)


def _tier_move(new: str | None, old: str | None, order: list[str]) -> str:
    def rank(t: str | None) -> int:
        if t is None:
            return _TIER_ORDER_UNKNOWN
        return order.index(t) if t in order else _TIER_ORDER_UNKNOWN

    a, b = rank(new), rank(old)
    return "same" if a == b else ("up" if a > b else "down")
