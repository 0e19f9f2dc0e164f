"""The terminal report, rendered as plain text at 100 columns and read back."""

from __future__ import annotations

import io
import re

import pandas as pd
import pytest
from rich.cells import cell_len
from rich.console import Console

import advisor
from advisor.config import DEFAULT_EVENT_RULES, AuditConfig, EventRule
from advisor.report.terminal import fmt, render
from conftest import HOSTILE_TITLES, SAMPLE_CATALOG, SAMPLE_EVENTS

WIDTH = 100


def _text(result, **kw) -> str:
    buf = io.StringIO()
    render(result, Console(file=buf, width=WIDTH, color_system=None), **kw)
    return buf.getvalue()


def _flat(text: str) -> str:
    """The report with every run of whitespace (line breaks, table padding) made one space."""
    return " ".join(text.replace("│", " ").split())


@pytest.fixture(scope="module")
def week_two_audit() -> advisor.AuditResult:
    """The sample as it stood on 2026-09-20 (two weeks logged): the scenario's no-go."""
    return advisor.audit(SAMPLE_EVENTS, catalog=SAMPLE_CATALOG,
                         config=AuditConfig(as_of="2026-09-20"))


@pytest.fixture(scope="module")
def full_text(sample_audit) -> str:
    return _text(sample_audit)


def test_no_line_is_wider_than_100_columns(full_text, week_two_audit, sample_audit_quick):
    """Every line fits 100 terminal columns, with and without the backtest."""
    for text in (full_text, _text(week_two_audit), _text(sample_audit_quick)):
        widths = [cell_len(line) for line in text.splitlines()]
        assert max(widths) <= WIDTH


def test_no_cell_is_cut_short_at_100_columns(full_text, week_two_audit):
    """Nothing is truncated with an ellipsis: every number in the tables is shown whole."""
    assert "…" not in full_text
    assert "…" not in _text(week_two_audit)
    assert "Recall@10" in full_text and "Lift vs popularity" in full_text


@pytest.mark.parametrize("which", ["full", "week_two"])
def test_headline_names_the_headline_tier_and_the_go(which, sample_audit, week_two_audit):
    """The headline names the highest ready tier and says GO or NO-GO as the decision does."""
    result = sample_audit if which == "full" else week_two_audit
    d = result.decision
    flat = _flat(_text(result))
    name = d.tier(d.headline_tier).name if d.headline_tier else "no tier"
    assert f"Supported now: {name}" in flat
    expected = "GO" if d.personalised_go else "NO-GO"
    assert re.search(r"Personalised rows: (GO|NO-GO)\b", flat).group(1) == expected


def test_full_sample_is_a_go_and_week_two_a_no_go(sample_audit, week_two_audit):
    """The scenario's story: two weeks of logs do not support personalised rows, twelve do."""
    # sample_logs/README.md: "auditing the early weeks says no-go and the later weeks say go"
    assert sample_audit.decision.personalised_go is True
    assert week_two_audit.decision.personalised_go is False


def test_every_tier_and_surface_is_named(full_text, sample_audit):
    """The ladder lists every tier and the surface table every surface, each with a verdict."""
    flat = _flat(full_text)
    for v in sample_audit.decision.tiers + sample_audit.decision.surfaces:
        status = {"ready": "READY", "borderline": "BORDERLINE", "not_ready": "NOT READY"}
        assert f"{v.name} {status[v.status]}" in flat, v.name


def test_data_line_matches_the_volume_profile(full_text, sample_audit):
    """The headline's data line gives the profile's interactions, users and items."""
    v = sample_audit.profile.volume
    assert (f"Data: {v.interactions:,} interactions from {v.users:,} users on "
            f"{v.items_seen:,} of {v.catalogue_items:,} items") in _flat(full_text)


def test_data_quality_counts_equal_the_quality_report(full_text, sample_audit):
    """Rows read, used, set aside and duplicates dropped are the QualityReport's numbers."""
    q = sample_audit.quality
    m = re.search(r"Data quality: ([\d,]+) rows read, ([\d,]+) used, ([\d,]+) set aside "
                  r"\(quarantine\.csv\), ([\d,]+) exact duplicates dropped", _flat(full_text))
    assert m is not None
    got = [int(g.replace(",", "")) for g in m.groups()]
    assert got == [q.rows_read, q.rows_used, q.rows_quarantined, q.duplicates_dropped]
    # Row accounting promised by ValidatedLog: read = used + set aside + duplicates.
    assert got[0] == got[1] + got[2] + got[3]


def test_each_quality_issue_is_listed_with_its_count(full_text, sample_audit):
    """Each issue shows its code and count; one account is 'user', not 'users'."""
    flat = _flat(full_text)
    for issue in sample_audit.quality.issues[:8]:
        unit = issue.unit[:-1] if issue.count == 1 else issue.unit
        assert f"{issue.code} ({issue.count:,} {unit}, {issue.severity})" in flat


def test_cold_counts_equal_the_cold_results(full_text, sample_audit):
    """Cold users and cold items are reported with the numbers the rules stage computed."""
    u, it = sample_audit.cold_users, sample_audit.cold_items
    flat = _flat(full_text)
    assert f"Cold users: {u.cold_active_users:,} of {u.active_users:,} users" in flat
    assert f"Cold items: {it.cold:,} of {it.catalogue_items:,}" in flat
    assert f"{it.never_seen:,} never consumed" in flat


def test_editorial_table_shows_the_first_rows_in_rank_order(sample_audit):
    """The editorial table prints the first N items of the placement list, in order."""
    text = _text(sample_audit, editorial_rows=5)
    table = text[text.index("Editorial placement"):]
    items = list(sample_audit.cold_items.placement["item"].head(6))
    positions = [table.find(f" {i} ") for i in items[:5]]
    assert all(p > 0 for p in positions) and positions == sorted(positions)
    assert f" {items[5]} " not in table
    assert f"(first 5 of {len(sample_audit.cold_items.placement)};" in _flat(text)


def test_written_files_are_listed_at_the_end(sample_audit):
    """With ``written``, the report ends with the files it wrote."""
    text = _text(sample_audit, written=["out/audit.json", "out/quarantine.csv"])
    assert _flat(text).endswith("Written: out/audit.json, out/quarantine.csv")


def test_backtest_off_marks_its_rules_as_not_measured(sample_audit_quick):
    """Without the backtest, evidence.* rules show [?] and n/a, and the report says so."""
    flat = _flat(_text(sample_audit_quick))
    assert "[?] evidence.itemknn_lift_low n/a" in flat
    assert "The backtest was switched off" in flat
    assert "Backtest:" not in flat


def test_markup_in_catalogue_titles_is_printed_literally(hostile_audit):
    """A title '[bold]x[/bold]' is shown as written, not swallowed as rich markup."""
    placement = list(hostile_audit.cold_items.placement["item"].head(10))
    assert set(HOSTILE_TITLES) <= set(placement)  # both planted titles are in the table
    flat = _flat(_text(hostile_audit))
    assert HOSTILE_TITLES["c0405"] in flat
    assert "=HYPERLINK" in flat  # the terminal shows the title as it is


def test_square_brackets_in_quality_messages_are_printed_literally(full_text, sample_audit):
    """Config sections such as '[audit]' in a data-quality message survive rendering."""
    msg = next(i.message for i in sample_audit.quality.issues if i.code == "implausible_user")
    assert "under [audit]" in msg
    assert "under [audit]" in _flat(full_text)


def test_square_brackets_in_assumption_notes_are_printed_literally(tmp_path):
    """A note naming '[events.interaction]' keeps its brackets in the Assumptions panel."""
    week = pd.read_csv(SAMPLE_EVENTS / "2026-w40.csv.gz", dtype=str, keep_default_na=False)
    week = week.loc[week["event_type"] == "play", ["user_id", "item_id", "timestamp"]]
    week.to_csv(tmp_path / "plays.csv", index=False)
    cfg = AuditConfig(events=DEFAULT_EVENT_RULES + (EventRule("interaction"),), backtest=False)
    result = advisor.audit(tmp_path / "plays.csv", config=cfg)
    note = next(n for n in result.quality.notes if "[events.interaction]" in n)
    assert _flat(note) in _flat(_text(result))


@pytest.mark.parametrize("value, shown", [
    (None, "n/a"), (float("nan"), "n/a"), (True, "yes"), (74622, "74,622"), (0.0587, "0.0587"),
    (1234.5, "1,234"), (0.0, "0"),
])
def test_fmt_gives_people_numbers(value, shown):
    """Counts get thousands separators, fractions three significant digits, None 'n/a'."""
    # 1234.5 -> '1,234': Python's format(1234.5, ',.0f') rounds half to even.
    assert fmt(value) == shown
