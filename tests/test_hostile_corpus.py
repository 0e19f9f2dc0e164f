"""The hostile-input corpus: one tiny file per case in ``tests/corpus/``, each with its outcome.

Every file either gives a correct audit (the key numbers are checked against a hand count of
the file or a standard-library reading of it) or a clear refusal: the documented exit code,
one line naming the file and the line or key at fault and the fix, and no traceback. The
files are described in ``tests/corpus/README.md``. Cases that need thousands of rows are
generated here instead of committed.
"""

from __future__ import annotations

import csv
import gzip
import json
import re
import zlib
from datetime import datetime, timezone
from pathlib import Path

import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import advisor
from advisor.cli import main
from advisor.config import AuditConfig
from advisor.errors import AdvisorError
from advisor.load import read_logs
from advisor.validate import validate

CORPUS = Path(__file__).resolve().parent / "corpus"
QUICK = AuditConfig(backtest=False)
PLAIN = {"NO_COLOR": "1", "FORCE_COLOR": None, "COLUMNS": None, "TERM": "dumb"}
#: A readable log, for the cases whose fault is in the catalogue or the rules file.
GOOD_LOG = CORPUS / "one_item.csv"


def _audit(name: str) -> advisor.AuditResult:
    return advisor.audit(CORPUS / name, config=QUICK)


def _utc(text: str) -> datetime:
    """Python's own reading of an ISO-8601 time, in UTC (the reference for the parser)."""
    return datetime.fromisoformat(text.replace("Z", "+00:00")).astimezone(timezone.utc)


# ----------------------------------------------------------------- refusals, through the CLI


def _offset(name: str, byte: bytes) -> int:
    return (CORPUS / name).read_bytes().index(byte)


REFUSALS = [
    # (file, role, exit code, fragments the one-line message must hold)
    pytest.param("empty.csv", "log", 3,
                 ["empty.csv: the file is empty (no header, no rows)",
                  "remove it or export it again"], id="empty-file"),
    pytest.param("header_only.csv", "log", 3,
                 ["header_only.csv: has a header (user_id, item_id, timestamp) but no data rows",
                  "export it again"], id="header-only"),
    pytest.param("invalid_utf8.csv", "log", 3,
                 ["invalid_utf8.csv line 3: byte 0xe9 at byte offset "
                  f"{_offset('invalid_utf8.csv', bytes([0xE9]))} is not valid UTF-8",
                  "re-save the file as UTF-8"], id="invalid-utf8"),
    # Arrow does not check the text it reads from Parquet: the reader does, row by row.
    pytest.param("invalid_utf8.parquet", "log", 3,
                 ["invalid_utf8.parquet row 2: column 'item_id' holds byte 0xe9 at byte "
                  "offset 3 of its value, which is not valid UTF-8",
                  "export the file again with that column as UTF-8 text"],
                 id="invalid-utf8-in-parquet"),
    pytest.param("truncated.csv.gz", "log", 3,
                 ["truncated.csv.gz: the gzip data is corrupt or truncated",
                  "copy or export the file again, or check it with 'gzip -t'"],
                 id="truncated-gzip"),
    pytest.param("truncated.parquet", "log", 3,
                 ["truncated.parquet: not a valid Parquet file", "export it again"],
                 id="truncated-parquet"),
    pytest.param("corrupt.parquet", "log", 3,
                 ["corrupt.parquet: the Parquet data is corrupt", "export the file again"],
                 id="corrupt-parquet"),
    pytest.param("bad_line.jsonl", "log", 3,
                 ["bad_line.jsonl line 2: not valid JSON",
                  "JSON Lines needs one complete JSON object per line. Fix or remove that line"],
                 id="jsonl-one-bad-line"),
    pytest.param("ragged_long.csv", "log", 3,
                 ["ragged_long.csv line 3: 4 fields but the header has 3",
                  "Quote that value or remove the extra delimiter"], id="ragged-row"),
    pytest.param("catalog_no_id.csv", "catalog", 3,
                 ["catalog_no_id.csv: no column found for item",
                  "columns found: 'title', 'category', 'added'",
                  'item = "..." under [catalog.columns] in the config file'],
                 id="catalogue-without-id-column"),
    pytest.param("rules_key_typo.toml", "rules", 2,
                 ["rules_key_typo.toml: rule 'cf.users_with_history': unknown key 'severty'",
                  "severity", "Fix the spelling or remove it"], id="rules-key-typo"),
    pytest.param("rules_wrong_type.toml", "rules", 2,
                 ["rules_wrong_type.toml: rule 'np.interactions': 'threshold' must be a number",
                  "got bool True"], id="rules-wrong-type"),
]


@pytest.mark.parametrize(("name", "role", "code", "fragments"), REFUSALS)
def test_corpus_file_is_refused_with_its_exit_code_and_message(name, role, code, fragments,
                                                               tmp_path):
    """Each unreadable corpus file stops the CLI with its exit code and a one-line message
    naming the file, the line or key, and the fix; no traceback, no report written."""
    path = CORPUS / name
    args = {"log": [path], "catalog": [GOOD_LOG, "--catalog", path],
            "rules": [GOOD_LOG, "--rules", path]}[role]
    out = tmp_path / "out"
    result = CliRunner().invoke(
        main, ["audit", *map(str, args), "--no-backtest", "--out", str(out)], env=PLAIN)
    assert result.exit_code == code, (result.exit_code, result.output)
    assert isinstance(result.exception, SystemExit), result.exception
    assert "Traceback" not in result.output and result.stdout == ""
    message = result.stderr.strip()
    assert message.startswith("error: ") and "\n" not in message, message
    for fragment in fragments:
        assert fragment in message, (fragment, message)
    assert not out.exists()  # nothing written, not even the history


# ------------------------------------------------------------------ audits, with key numbers

AUDITS = [
    # (file, rows read, used, quarantined, duplicates, users, items), counted by hand.
    # Users 00123, 123, 2**64 + 1, 2**64, 'jane doe', 'jane  doe'; items 00123, 123, '12 34',
    # '1234': leading zeros, inner spaces and 20-digit ids keep ids apart.
    pytest.param("ids_opaque.csv", 7, 7, 0, 0, 6, 4, id="opaque-ids"),
    # Users 7 (written 7 and "7": the same text), 2**64 + 1, 2**64, 'u 9'; items 00123, 123,
    # true.
    pytest.param("ids_mixed_types.jsonl", 5, 5, 0, 0, 4, 3, id="mixed-type-ids"),
    pytest.param("bom.csv", 3, 3, 0, 0, 2, 2, id="utf8-bom"),
    pytest.param("crlf.csv", 3, 3, 0, 0, 2, 2, id="crlf"),
    # Row 4 ('not a time') is set aside; 'tea, green', the two-line id and 'say "hi"' stay.
    pytest.param("quoted_fields.csv", 4, 3, 1, 0, 3, 3, id="quoted-newline-and-delimiter"),
    pytest.param("one_user.csv", 8, 8, 0, 0, 1, 8, id="one-user"),
    pytest.param("one_item.csv", 8, 8, 0, 0, 8, 1, id="one-item"),
    # 12 rows, u{k % 4} x i{k % 5}: all 12 (user, item) pairs differ (k < lcm(4, 5) = 20).
    pytest.param("same_instant.csv", 12, 12, 0, 0, 4, 5, id="same-instant"),
    pytest.param("before_1970.csv", 3, 3, 0, 0, 2, 2, id="before-1970"),
    pytest.param("dst_berlin.csv", 3, 3, 0, 0, 2, 3, id="daylight-saving-change"),
    # u{k % 6}, i{5k % 9} for k < 40, shuffled: 6 users, 9 items.
    pytest.param("unsorted.csv", 40, 40, 0, 0, 6, 9, id="unsorted"),
    # The short row 'u3,i3' has no time: set aside; the row without a session is used.
    pytest.param("ragged_short.csv", 3, 2, 1, 0, 2, 2, id="short-row"),
]


@pytest.mark.parametrize(("name", "read", "used", "quarantined", "dups", "users", "items"),
                         AUDITS)
def test_corpus_file_gives_an_audit_with_the_hand_counted_numbers(name, read, used,
                                                                  quarantined, dups, users,
                                                                  items):
    """Each readable corpus file gives an audit whose row accounting and counts match a hand
    count of the file."""
    r = _audit(name)
    q, v = r.quality, r.profile.volume
    assert (q.rows_read, q.rows_used, q.rows_quarantined, q.duplicates_dropped) == (
        read, used, quarantined, dups)
    assert (v.users, v.items_seen) == (users, items)
    json.loads(advisor.to_json(r))  # the JSON report is strict JSON for every case


def _events(name: str):
    return validate(read_logs(CORPUS / name), None, QUICK).events


def test_opaque_ids_keep_their_text():
    """Leading zeros, inner spaces and ids beyond 64 bits come through as written."""
    ev = _events("ids_opaque.csv")
    assert sorted(set(ev["user"])) == sorted(
        ["00123", "123", str(2**64 + 1), str(2**64), "jane doe", "jane  doe"])
    assert sorted(set(ev["item"])) == ["00123", "12 34", "123", "1234"]


def test_json_ids_beyond_64_bits_are_not_rounded_into_one():
    """JSON numbers 2**64 + 1 and 2**64 stay two users (Arrow would read both as one
    float64); 7 and "7" are the same text, so the same user."""
    ev = _events("ids_mixed_types.jsonl")
    # Python's json module reads integers exactly: the reference for the expected ids.
    raw = [json.loads(line) for line in (CORPUS / "ids_mixed_types.jsonl").read_text().split("\n")
           if line]
    assert str(raw[2]["user_id"]) == str(2**64 + 1) and str(raw[3]["user_id"]) == str(2**64)
    assert sorted(set(ev["user"])) == sorted(["7", str(2**64 + 1), str(2**64), "u 9"])
    assert sorted(set(ev["item"])) == ["00123", "123", "true"]


def test_byte_order_mark_is_not_part_of_the_first_column_name():
    """A UTF-8 BOM is dropped, so the first column is still detected as the user."""
    r = _audit("bom.csv")
    assert r.columns.mapping["user"] == "user_id"


def test_crlf_line_ends_leave_no_carriage_return_in_values():
    """CRLF files read like LF files: no value ends in a carriage return."""
    ev = _events("crlf.csv")
    assert not ev["event"].str.contains("\r").any()
    assert list(ev["event"]) == ["play"] * 3


def test_quoted_fields_keep_delimiters_newlines_and_physical_lines():
    """Quoted ids keep their comma, line break and quotes; the bad row after the two-line
    value is named by its physical line (6), as the csv module counts it."""
    ev = _events("quoted_fields.csv")
    assert list(ev["item"]) == ["tea, green", "note\nwith a line break", 'say "hi"']
    with (CORPUS / "quoted_fields.csv").open(newline="", encoding="utf-8") as fh:
        reader = csv.reader(fh)
        line_of_bad = None
        for rec in reader:
            if rec[2] == "not a time":
                line_of_bad = reader.line_num
    r = _audit("quoted_fields.csv")
    bad = [i for i in r.quality.issues if i.code == "bad_timestamp"]
    assert line_of_bad == 6 and bad[0].first_line == line_of_bad


def test_every_event_at_one_instant_has_zero_span_and_one_week():
    """All events at the same second: a span of 0 days, one week, no division by zero."""
    r = _audit("same_instant.csv")
    assert r.profile.volume.span_days == 0.0 and r.profile.volume.weeks == 1
    json.loads(advisor.to_json(r))  # strict JSON: no NaN or infinity slipped in


def test_events_before_1970_are_read_and_span_the_right_days():
    """Negative epoch instants (1955, 1969) parse; the span matches Python's datetime."""
    r = _audit("before_1970.csv")
    with (CORPUS / "before_1970.csv").open(newline="") as fh:
        times = [_utc(row["timestamp"]) for row in csv.DictReader(fh)]
    assert r.profile.volume.span_days == pytest.approx(
        (max(times) - min(times)).total_seconds() / 86400, abs=1e-9)


def test_daylight_saving_change_orders_events_in_utc():
    """On 2026-10-25 Berlin goes from +02:00 to +01:00: 02:01+01:00 comes after 02:59+02:00.
    The events order as Python's datetime puts them in UTC, not by wall clock."""
    ev = _events("dst_berlin.csv")
    with (CORPUS / "dst_berlin.csv").open(newline="") as fh:
        rows = list(csv.DictReader(fh))
    expected = [row["item_id"] for row in sorted(rows, key=lambda row: _utc(row["timestamp"]))]
    wall_clock = [row["item_id"] for row in sorted(rows, key=lambda row: row["timestamp"][11:16])]
    assert expected == ["i1", "i2", "i3"] and wall_clock != expected
    assert list(ev.sort_values("ts", kind="stable")["item"]) == expected
    for row in rows:
        got = ev.loc[ev["item"] == row["item_id"], "ts"].iloc[0]
        assert got.to_pydatetime() == _utc(row["timestamp"])
    # Span 23:30Z -> 01:01Z is 91 minutes (by wall clock it would look like 89).
    assert _audit("dst_berlin.csv").profile.volume.span_days == pytest.approx(91 / 1440)


def test_unsorted_rows_give_the_same_audit_as_sorted_rows(tmp_path):
    """The shuffled corpus file and the same rows sorted by time give identical metrics."""
    lines = (CORPUS / "unsorted.csv").read_text().splitlines()
    head, body = lines[0], sorted(lines[1:], key=lambda line: line.split(",")[2])
    (tmp_path / "sorted.csv").write_text("\n".join([head, *body]) + "\n")
    shuffled = _audit("unsorted.csv")
    ordered = advisor.audit(tmp_path / "sorted.csv", config=QUICK)
    assert shuffled.metrics == ordered.metrics


def test_short_row_is_padded_and_its_missing_time_sets_it_aside_with_its_line():
    """A row with fewer fields than the header reads its missing fields as empty: without a
    session it is used; without a time it is set aside, named by file and line."""
    r = _audit("ragged_short.csv")
    issue = next(i for i in r.quality.issues if i.code == "empty_timestamp")
    assert (issue.first_file, issue.first_line) == ("ragged_short.csv", 4)
    assert "ragged_short.csv line 4" in issue.message


def test_the_same_event_repeated_thousands_of_times_is_one_event(tmp_path):
    """5,000 copies of one event plus two others: 4,999 duplicates dropped, 3 events used."""
    path = tmp_path / "repeated.csv.gz"
    copies = 5000
    text = ("user_id,item_id,timestamp\n" + "u1,i1,2026-03-02T10:00:00Z\n" * copies
            + "u2,i1,2026-03-02T11:00:00Z\nu2,i2,2026-03-02T12:00:00Z\n")
    path.write_bytes(gzip.compress(text.encode()))
    r = advisor.audit(path, config=QUICK)
    q = r.quality
    assert (q.rows_read, q.rows_used, q.duplicates_dropped) == (copies + 2, 3, copies - 1)
    assert r.profile.volume.interactions == 3 and r.profile.volume.users == 2
    dup = next(i for i in q.issues if i.code == "duplicate_event")
    assert dup.count == copies - 1 and dup.first_line == 3  # line 2 is the copy kept


# ------------------------------------------------------------ random corruption, hypothesis

_CLEAN = ("user_id,item_id,timestamp,event\n" + "".join(
    f"u{k % 7},i{(3 * k) % 11},2026-03-{1 + k % 28:02d}T{k % 24:02d}:15:00Z,play\n"
    for k in range(60))).encode()


@st.composite
def _damaged(draw):
    data = bytearray(_CLEAN)
    for _ in range(draw(st.integers(1, 6))):
        kind = draw(st.sampled_from(["flip", "insert", "delete", "truncate"]))
        at = draw(st.integers(0, max(0, len(data) - 1)))
        byte = draw(st.sampled_from(list(b',"\n\r\t\x00 :Z-0') + [0xE9, 0xFF, 0xC3]))
        if kind == "flip" and data:
            data[at] = byte
        elif kind == "insert":
            data.insert(at, byte)
        elif kind == "delete" and data:
            del data[at]
        elif kind == "truncate":
            del data[at:]
    gz = draw(st.booleans())
    return bytes(data), gz


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_damaged())
def test_random_byte_damage_gives_an_advisor_error_or_rows_that_add_up(tmp_path_factory, case):
    """Bytes flipped, inserted, deleted or cut off: either a one-line AdvisorError, or every
    row read is used, set aside with a reason and a line inside the file, or a duplicate."""
    data, gz = case
    path = tmp_path_factory.mktemp("damaged") / ("log.csv.gz" if gz else "log.csv")
    path.write_bytes(gzip.compress(data, mtime=0) if gz else data)
    try:
        raw = read_logs(path)
        v = validate(raw, None, QUICK)
    except AdvisorError as exc:
        assert str(exc).strip() and "\n" not in str(exc)
        return
    q = v.quality
    assert q.rows_read == q.rows_used + q.rows_quarantined + q.duplicates_dropped
    assert q.rows_read == len(raw.rows)
    assert v.quarantine["reason"].notna().all()
    # Lines as universal newlines count them (CRLF, LF or a lone CR ends a line), as the
    # csv module does; a lone CR is a line end in old Mac exports.
    physical = len(re.findall(rb"\r\n|\r|\n", data)) + 1
    assert v.quarantine["_line"].between(2, physical).all()
    assert v.events["_line"].between(2, physical).all()


def test_truncated_gzip_corpus_file_really_is_truncated():
    """The corpus gzip fails zlib's own check (the control for the refusal case)."""
    with pytest.raises((EOFError, OSError, zlib.error)):
        gzip.decompress((CORPUS / "truncated.csv.gz").read_bytes())


def test_corpus_has_a_case_for_every_file():
    """Every file in tests/corpus is exercised by a case above (and none is large)."""
    used = {p.values[0] for p in REFUSALS + AUDITS}
    files = {p.name for p in CORPUS.iterdir() if p.name != "README.md"}
    assert files == used
    assert all((CORPUS / f).stat().st_size < 4096 for f in files)

