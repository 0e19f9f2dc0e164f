"""History store: round trip, replacement, schema versions, damaged and foreign files,
concurrent writers, and three weekly audits of the sample logs."""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import multiprocessing as mp
import random
import sqlite3
from pathlib import Path

import pytest

import advisor.history.store as store_mod
from advisor.config import AuditConfig
from advisor.errors import AdvisorError, HistoryError
from advisor.history import (
    HistoryEntry,
    HistoryStore,
    RuleGap,
    entry_from_result,
    input_fingerprint,
    load_history,
    record_audit,
)
from advisor.history.store import APP_ID, schema_version

ROOT = Path(__file__).resolve().parents[1]


def make_entry(as_of: str = "2026-10-04T23:59:59.999999+00:00", *, users: float = 100.0,
               **kw) -> HistoryEntry:
    """A hand-made entry (no audit run)."""
    base = dict(
        as_of=as_of, recorded_utc="2026-10-05T08:00:00+00:00", fingerprint="f" * 64,
        tool_version="0.1.0", interactions=users * 9, users=users, items_seen=50.0,
        users_ge_5=users / 3, density=0.02, cooc_share=0.4, itemknn_lift=None,
        itemknn_lift_low=None, itemknn_lift_high=None, headline_tier="non_personalised",
        next_tier="segment_lists", personalised_go=False,
        tier_statuses={"non_personalised": "ready", "segment_lists": "not_ready"},
        gaps=(RuleGap("item_neighbourhood", "cf.users_with_history", "activity.users_ge_5",
                      ">=", 300.0, users / 3, "fail", 300.0 - users / 3),),
        users_needed=None, curve_train_users=None,
        metrics={"volume.users": users, "volume.interactions": users * 9,
                 "activity.users_ge_5": users / 3, "evidence.itemknn_lift": None})
    base.update(kw)
    return HistoryEntry(**base)


def _sidecars(p: Path) -> list[Path]:
    return [q for q in (Path(f"{p}-wal"), Path(f"{p}-shm"), Path(f"{p}-journal")) if q.exists()]


def test_history_error_is_an_advisor_error_with_its_own_exit_code():
    """HistoryError belongs to the AdvisorError family and exits with code 6."""
    assert issubclass(HistoryError, AdvisorError)
    assert HistoryError.exit_code == 6


def test_recorded_entries_read_back_equal(tmp_path):
    """An entry written and read back is equal field by field, and its dict is JSON."""
    e = make_entry(users=120.0, itemknn_lift=0.05, itemknn_lift_low=0.01,
                   itemknn_lift_high=0.09, users_needed=400.0, curve_train_users=90.0)
    with HistoryStore(tmp_path / "h.sqlite") as s:
        assert s.record(e) is False
        (back,) = s.entries()
    assert back == e
    assert json.loads(json.dumps(back.to_dict()))["as_of_date"] == "2026-10-04"


def test_entries_come_back_oldest_first(tmp_path):
    """Entries are ordered by as-of date whatever the order they were written in."""
    dates = ["2026-10-18", "2026-10-04", "2026-10-11"]
    with HistoryStore(tmp_path / "h.sqlite") as s:
        for d in dates:
            s.record(make_entry(f"{d}T23:59:59+00:00"))
        assert [e.as_of_date for e in s.entries()] == sorted(dates)


def test_reaudit_of_same_as_of_date_replaces_the_entry(tmp_path):
    """A second audit with the same as-of date (any time that day) replaces the first."""
    p = tmp_path / "h.sqlite"
    with HistoryStore(p) as s:
        s.record(make_entry("2026-10-04T23:59:59+00:00", users=100.0))
        s.record(make_entry("2026-10-11T23:59:59+00:00", users=150.0))
        assert s.record(make_entry("2026-10-04T12:00:00+00:00", users=111.0)) is True
    entries = load_history(p)
    assert [(e.as_of_date, e.users) for e in entries] == [("2026-10-04", 111.0),
                                                          ("2026-10-11", 150.0)]


def test_new_file_has_current_schema_wal_and_meta(tmp_path):
    """A new history is at the current schema version, in WAL mode, and names its app."""
    p = tmp_path / "sub" / "h.sqlite"
    with HistoryStore(p) as s:
        assert s.schema_version() == schema_version() == len(store_mod.MIGRATIONS)
    conn = sqlite3.connect(p)
    try:
        assert conn.execute("PRAGMA user_version").fetchone()[0] == schema_version()
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        app = conn.execute("SELECT value FROM advisor_meta WHERE key='app'").fetchone()[0]
        assert app == APP_ID
    finally:
        conn.close()


def test_empty_v0_database_is_migrated_to_current_schema(tmp_path):
    """An empty SQLite file (version 0, no tables) is upgraded and then takes entries."""
    p = tmp_path / "h.sqlite"
    conn = sqlite3.connect(p)
    conn.execute("CREATE TABLE scratch (x)")
    conn.execute("DROP TABLE scratch")
    conn.commit()
    conn.close()
    assert p.stat().st_size > 0
    with HistoryStore(p) as s:
        assert s.schema_version() == schema_version()
        s.record(make_entry())
    assert len(load_history(p)) == 1


def test_zero_byte_file_becomes_a_history(tmp_path):
    """A zero-byte file is treated as a new, empty history."""
    p = tmp_path / "h.sqlite"
    p.touch()
    record_entry = make_entry()
    with HistoryStore(p) as s:
        s.record(record_entry)
    assert load_history(p) == (record_entry,)


def test_next_schema_version_is_one_more_migration(tmp_path, monkeypatch):
    """Appending one function to MIGRATIONS upgrades an existing file and keeps its rows."""
    p = tmp_path / "h.sqlite"
    e = make_entry()
    with HistoryStore(p) as s:
        s.record(e)

    def to_v2(conn):
        conn.execute("ALTER TABLE audits ADD COLUMN note TEXT")

    monkeypatch.setattr(store_mod, "MIGRATIONS", store_mod.MIGRATIONS + (to_v2,))
    with HistoryStore(p) as s:
        assert s.schema_version() == 2
        assert s.entries() == (e,)
    conn = sqlite3.connect(p)
    cols = [r[1] for r in conn.execute("PRAGMA table_info(audits)")]
    conn.close()
    assert "note" in cols


def test_newer_schema_is_refused_and_left_untouched(tmp_path):
    """A history written by a newer schema raises HistoryError and is not modified."""
    p = tmp_path / "h.sqlite"
    with HistoryStore(p) as s:
        s.record(make_entry())
    conn = sqlite3.connect(p)
    conn.execute("PRAGMA user_version = 99")
    conn.commit()
    conn.close()
    before = p.read_bytes()
    with pytest.raises(HistoryError, match="newer"):
        HistoryStore(p)
    assert p.read_bytes() == before


def test_random_bytes_give_history_error_and_stay_unchanged(tmp_path):
    """A file of random bytes raises HistoryError naming it, and is never written."""
    p = tmp_path / "history.sqlite"
    data = random.Random(20261201).randbytes(8192)
    p.write_bytes(data)
    with pytest.raises(HistoryError) as info:
        HistoryStore(p)
    msg = str(info.value)
    assert str(p) in msg and "left untouched" in msg and "move it aside" in msg
    assert p.read_bytes() == data
    assert _sidecars(p) == []
    with pytest.raises(HistoryError):
        load_history(p)
    assert p.read_bytes() == data


def test_foreign_sqlite_file_gives_history_error_and_stays_unchanged(tmp_path):
    """Another application's SQLite database raises HistoryError and is never modified."""
    p = tmp_path / "history.sqlite"
    conn = sqlite3.connect(p)
    conn.execute("CREATE TABLE customers (id INTEGER PRIMARY KEY, name TEXT)")
    conn.execute("INSERT INTO customers (name) VALUES ('Ada')")
    conn.commit()
    conn.close()
    data = p.read_bytes()
    with pytest.raises(HistoryError, match="another application") as info:
        HistoryStore(p)
    assert "customers" in str(info.value)
    assert p.read_bytes() == data
    assert _sidecars(p) == []


def test_damaged_history_page_gives_history_error_and_stays_unchanged(tmp_path):
    """Overwriting one page of a real history with noise raises HistoryError; no write."""
    p = tmp_path / "h.sqlite"
    with HistoryStore(p) as s:
        for i in range(30):
            s.record(make_entry(f"2026-{1 + i // 28:02d}-{1 + i % 28:02d}T23:59:59+00:00"))
    data = bytearray(p.read_bytes())
    page = int.from_bytes(data[16:18], "big")  # SQLite file format: page size at offset 16
    data[page:2 * page] = random.Random(7).randbytes(page)  # page 2
    p.write_bytes(bytes(data))
    with pytest.raises(HistoryError, match=str(p).replace("\\", "\\\\")):
        load_history(p)
    assert p.read_bytes() == bytes(data)


def test_missing_history_without_create_says_what_to_do(tmp_path):
    """Reading a history that does not exist raises HistoryError and creates nothing."""
    p = tmp_path / "none" / "history.sqlite"
    with pytest.raises(HistoryError, match="no audit history"):
        load_history(p)
    assert not p.parent.exists()


def test_directory_in_place_of_the_file_is_refused(tmp_path):
    """A folder at the history path raises HistoryError."""
    with pytest.raises(HistoryError, match="not a file"):
        HistoryStore(tmp_path)


def test_writer_gives_up_with_history_error_when_locked_too_long(tmp_path):
    """A writer blocked past its timeout raises HistoryError (no traceback, no damage)."""
    p = tmp_path / "h.sqlite"
    with HistoryStore(p) as s:
        s.record(make_entry())
    holder = sqlite3.connect(p, isolation_level=None)
    holder.execute("BEGIN IMMEDIATE")
    try:
        with HistoryStore(p, timeout=0.2) as s:
            with pytest.raises(HistoryError, match="locked"):
                s.record(make_entry("2026-10-11T23:59:59+00:00"))
    finally:
        holder.execute("ROLLBACK")
        holder.close()
    assert len(load_history(p)) == 1


def _writer(path: str, worker: int, n: int, start) -> None:
    """Child process: wait at the start line, then record ``n`` entries, one store each."""
    start.wait(timeout=60)
    day0 = dt.date(2026, 1, 1)
    for i in range(n):
        d = day0 + dt.timedelta(days=worker * n + i)
        # Like a real audit: open, write one transaction, close.
        with HistoryStore(path, timeout=60) as s:
            s.record(make_entry(d.isoformat() + "T23:59:59+00:00", users=float(worker * n + i)))


@pytest.mark.skipif("fork" not in mp.get_all_start_methods(), reason="needs fork")
def test_concurrent_writer_processes_keep_every_entry(tmp_path):
    """Four processes writing 20 entries each into one new file leave 80 sound rows."""
    p = tmp_path / "history.sqlite"
    # fork: the children inherit the imported package, so they start at once.
    ctx = mp.get_context("fork")
    workers, n = 4, 20
    start = ctx.Barrier(workers)
    procs = [ctx.Process(target=_writer, args=(str(p), w, n, start)) for w in range(workers)]
    for proc in procs:
        proc.start()
    for proc in procs:
        proc.join(timeout=120)
    assert [proc.exitcode for proc in procs] == [0] * workers
    entries = load_history(p)
    assert len(entries) == workers * n
    assert sorted(e.users for e in entries) == [float(i) for i in range(workers * n)]
    conn = sqlite3.connect(p)
    try:
        assert conn.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
    finally:
        conn.close()


@pytest.fixture(scope="module")
def three_weeks(tmp_path_factory):
    """Three weekly audits of the sample logs (backtest off), recorded in one history."""
    import advisor

    p = tmp_path_factory.mktemp("hist") / "history.sqlite"
    results = []
    for d in ("2026-10-18", "2026-10-25", "2026-11-01"):
        r = advisor.audit(ROOT / "sample_logs" / "events",
                          config=AuditConfig(backtest=False, as_of=d))
        record_audit(r, p)
        results.append(r)
    return p, results


def test_three_weekly_sample_audits_leave_three_rows(three_weeks):
    """Auditing sample_logs at three as-of weeks leaves three rows with the scenario's users."""
    p, results = three_weeks
    entries = load_history(p)
    assert [e.as_of_date for e in entries] == ["2026-10-18", "2026-10-25", "2026-11-01"]
    # sample_logs/README.md table, "new users" summed from 2026-w37: through w42 684,
    # through w43 684 + 289 = 973, through w44 973 + 338 = 1,311.
    assert [e.users for e in entries] == [684.0, 973.0, 1311.0]
    for e, r in zip(entries, results):
        assert e == entry_from_result(r)
        assert e.metrics["volume.interactions"] == r.metrics["volume.interactions"]


def test_sample_entry_fingerprint_is_hash_of_file_digests(three_weeks):
    """The fingerprint is sha256 over the sorted sha256 of the files on disk (hashlib)."""
    p, _ = three_weeks
    files = sorted((ROOT / "sample_logs" / "events").glob("*.csv.gz"))
    digests = [hashlib.sha256(f.read_bytes()).hexdigest() for f in files]
    expected = hashlib.sha256("".join(d + "\n" for d in sorted(digests)).encode()).hexdigest()
    assert input_fingerprint(digests) == expected
    assert {e.fingerprint for e in load_history(p)} == {expected}


def test_sample_entry_gaps_match_the_decision(three_weeks):
    """Stored gaps are exactly the blocking rules that did not pass, with RuleResult.gap."""
    _, results = three_weeks
    r = results[-1]
    e = entry_from_result(r)
    expected = [(v.id, x.rule.id, x.gap) for v in r.decision.tiers for x in v.results
                if x.rule.severity == "blocking" and x.outcome != "pass"
                and x.outcome != "skipped"]
    assert [(g.tier, g.rule, g.gap) for g in e.gaps] == expected
    assert e.tier_statuses == {v.id: v.status for v in r.decision.tiers}
    assert e.personalised_go is r.decision.personalised_go
