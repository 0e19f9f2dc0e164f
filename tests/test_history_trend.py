"""Trend table, glyphs and sparklines, and the terminal / JSON history views."""

from __future__ import annotations

import io
import json
from datetime import date, timedelta

import pytest
from rich.console import Console

from advisor.history import HistoryEntry, trend_table
from advisor.history.trend import (
    ASCII_SPARKS,
    GLYPHS,
    SPARKS,
    direction,
    relative_change,
    sparkline,
)
from advisor.report.history_view import history_to_dict, render_history

TIERS = ("non_personalised", "segment_lists", "item_neighbourhood", "latent_factor",
         "deep_retrieval")


def entry(day: str, users: float, *, interactions: float | None = None,
          headline: str | None = "non_personalised", go: bool = False,
          cooc_share: float = 0.5) -> HistoryEntry:
    """A hand-made entry for the given as-of date."""
    return HistoryEntry(
        as_of=f"{day}T23:59:59+00:00", recorded_utc="2026-12-01T00:00:00+00:00",
        fingerprint="a" * 64, tool_version="0.1.0",
        interactions=users * 10 if interactions is None else interactions, users=users,
        items_seen=200.0, users_ge_5=users / 4, density=0.01, cooc_share=cooc_share,
        itemknn_lift=None, itemknn_lift_low=None, itemknn_lift_high=None,
        headline_tier=headline, next_tier=None, personalised_go=go,
        tier_statuses={t: "ready" for t in TIERS},
        metrics={"volume.users": users})


def weekly(users: list[float], start: str = "2026-10-04", **kw) -> list[HistoryEntry]:
    d0 = date.fromisoformat(start)
    return [entry((d0 + timedelta(days=7 * i)).isoformat(), u, **kw)
            for i, u in enumerate(users)]


def test_relative_change_is_difference_over_previous():
    """Change is (new - old) / |old|; undefined from zero or missing values."""
    assert relative_change(130, 100) == pytest.approx(0.3)  # (130 - 100) / 100 by hand
    assert relative_change(50, 100) == pytest.approx(-0.5)
    assert relative_change(1, 0) is None and relative_change(None, 1) is None


def test_direction_ignores_changes_below_tolerance():
    """Changes under half a percent are 'same'; others point up or down."""
    assert direction(100.4, 100) == "same"
    assert direction(101, 100) == "up" and direction(99, 100) == "down"
    assert direction(1, 0) == "up" and direction(5, None) == "none"


def test_sparkline_scales_between_min_and_max():
    """Levels are round((v - min) / (max - min) * 7): 1, 2, 4, 8 -> 0, 1, 3, 7 (by hand)."""
    assert sparkline([1, 2, 4, 8]) == SPARKS[0] + SPARKS[1] + SPARKS[3] + SPARKS[7]
    assert sparkline([1, 2, 4, 8], ascii_only=True) == (ASCII_SPARKS[0] + ASCII_SPARKS[1]
                                                   + ASCII_SPARKS[3] + ASCII_SPARKS[7])


def test_sparkline_handles_gaps_and_constant_series():
    """Missing values are blanks; a constant series sits on the lowest level."""
    assert sparkline([3, None, 3]) == SPARKS[0] + " " + SPARKS[0]
    assert sparkline([None, None]) == "  "
    assert sparkline([]) == ""


def test_ascii_sparkline_is_plain_ascii():
    """The ASCII fallback uses only ASCII characters."""
    sparkline(list(range(20)), ascii_only=True).encode("ascii")


def test_trend_rows_are_ordered_with_change_since_previous():
    """Rows follow the as-of date; each change and glyph compares with the row before."""
    es = weekly([100, 150, 150, 120])
    tr = trend_table(list(reversed(es)))
    assert [r.as_of_date for r in tr.rows] == [e.as_of_date for e in es]
    first, *rest = tr.rows
    assert first.days_since_previous is None and first.change["users"] is None
    assert first.glyphs["users"] == GLYPHS["none"]
    assert [r.days_since_previous for r in rest] == [7, 7, 7]
    # (150 - 100) / 100, (150 - 150) / 150, (120 - 150) / 150, by hand
    assert [r.change["users"] for r in rest] == pytest.approx([0.5, 0.0, -0.2])
    assert [r.glyphs["users"] for r in rest] == [GLYPHS["up"], GLYPHS["same"], GLYPHS["down"]]
    assert tr.sparklines["users"] == sparkline([100, 150, 150, 120])


def test_uneven_gaps_are_reported_in_days():
    """A missed week shows as 14 days since the previous audit."""
    tr = trend_table([entry("2026-10-04", 10), entry("2026-10-18", 20)])
    assert tr.rows[1].days_since_previous == 14


def test_headline_moves_and_go_flips_are_marked():
    """A headline moving up or down the ladder and a go / no-go flip are flagged."""
    es = [entry("2026-10-04", 10, headline="non_personalised"),
          entry("2026-10-11", 20, headline="item_neighbourhood", go=True),
          entry("2026-10-18", 30, headline="segment_lists", go=False),
          entry("2026-10-25", 40, headline="segment_lists", go=False)]
    rows = trend_table(es).rows
    assert [r.headline_change for r in rows] == ["none", "up", "down", "same"]
    assert [r.go_change for r in rows] == [None, "to_go", "to_no_go", None]


def test_trend_dict_is_plain_json():
    """The trend's dict survives a JSON round trip."""
    d = json.loads(json.dumps(trend_table(weekly([1, 2, 3])).to_dict(), allow_nan=False))
    assert len(d["rows"]) == 3 and d["rows"][1]["change"]["users"] == pytest.approx(1.0)


def _render(entries, *, ascii_only=None, width=100) -> str:
    buf = io.StringIO()
    render_history(entries, Console(file=buf, width=width, color_system=None),
                   ascii_only=ascii_only)
    return buf.getvalue()


def test_history_view_shows_trend_sparklines_and_forecast():
    """The terminal view lists every audit, the sparklines and a dated forecast."""
    users = [100 * 1.3 ** i for i in range(6)]
    es = weekly(users)
    text = _render(es, ascii_only=False)
    for e in es:
        assert e.as_of_date in text
    assert sparkline(users) in text
    assert "Readiness forecast: 6 audits" in text
    assert "Users: exponential growth" in text or "Users: linear growth" in text
    assert "Assumption: Growth continues" in text


def test_history_view_with_two_audits_says_too_short():
    """With two audits the view gives the reason instead of a forecast."""
    text = _render(weekly([100, 120]))
    assert "Only 2 audit(s) in the history" in text


def test_ascii_history_view_is_plain_ascii():
    """ascii_only=True renders tables, glyphs and sparklines in plain ASCII."""
    text = _render(weekly([100, 130, 170, 220, 290]), ascii_only=True)
    text.encode("ascii")


def test_history_dict_holds_entries_trend_and_forecast():
    """The JSON view holds every entry, the trend rows and the forecast."""
    es = weekly([100 * 1.2 ** i for i in range(5)])
    d = json.loads(json.dumps(history_to_dict(es), allow_nan=False))
    assert [e["as_of_date"] for e in d["entries"]] == [e.as_of_date for e in es]
    assert len(d["trend"]["rows"]) == 5
    assert d["forecast"]["points"] == 5 and d["forecast"]["reason"] is None
    assert d["history_schema"] == 1
