"""Report files: strict JSON with a fingerprint, spreadsheet-safe CSVs, atomic writes."""

from __future__ import annotations

import csv
import gzip
import hashlib
import io
import json
import math
import os
from pathlib import Path

import pandas as pd
import pytest

import advisor
from advisor.errors import OutputError
from advisor.report import files as report_files
from advisor.report.files import (
    COLD_USERS_NAME,
    EDITORIAL_NAME,
    JSON_NAME,
    QUARANTINE_NAME,
    TEXT_NAME,
    editorial_csv,
    neutralise_cell,
    quarantine_csv,
    to_json,
    write_reports,
)
from conftest import HOSTILE_TITLES, SAMPLE_CATALOG, SAMPLE_EVENTS

REPORT_NAMES = {JSON_NAME, EDITORIAL_NAME, COLD_USERS_NAME, QUARANTINE_NAME, TEXT_NAME}


def _strict_loads(text: str):
    """json.loads that refuses NaN and Infinity, which are not JSON (RFC 8259, section 6)."""
    def refuse(name):
        raise ValueError(f"non-standard JSON constant {name}")
    return json.loads(text, parse_constant=refuse)


def _csv_rows(text: str) -> list[dict]:
    return list(csv.DictReader(io.StringIO(text)))


# ----------------------------------------------------------------------------------- JSON


def test_json_report_is_strict_json_with_a_schema_version(sample_audit):
    """The JSON parses with NaN/Infinity refused and carries the documented schema version."""
    doc = _strict_loads(to_json(sample_audit))
    assert doc["schema_version"] == advisor.SCHEMA_VERSION == "1.0"  # README: "schema 1.0"
    for key in ("run", "inputs", "quality", "verdict", "cold_users", "cold_items", "profile",
                "evidence", "metrics"):  # README's table of top-level keys
        assert key in doc


def test_json_report_holds_every_metric_with_its_value(sample_audit):
    """Every metric the rules read is in the JSON under its name, NaN written as null."""
    metrics = _strict_loads(to_json(sample_audit))["metrics"]
    assert set(metrics) == set(sample_audit.metrics)
    for name, value in sample_audit.metrics.items():
        if value is None or (isinstance(value, float) and math.isnan(value)):
            assert metrics[name] is None, name
        else:
            assert metrics[name] == pytest.approx(float(value), rel=1e-12), name


def test_json_fingerprint_matches_sha256_and_size_of_each_input(sample_audit):
    """Each input file's recorded SHA-256 and size equal hashlib's and the file system's."""
    files = _strict_loads(to_json(sample_audit))["inputs"]["files"]
    on_disk = sorted(SAMPLE_EVENTS.iterdir()) + [SAMPLE_CATALOG]
    assert len(files) == len(on_disk)
    for entry, path in zip(files, on_disk):
        assert Path(entry["path"]).name == path.name
        data = path.read_bytes()
        assert entry["sha256"] == hashlib.sha256(data).hexdigest()
        assert entry["size_bytes"] == len(data)


def test_json_records_the_run_parameters(sample_audit):
    """Seed, as-of date, tool version and the effective config are in the JSON."""
    run = _strict_loads(to_json(sample_audit))["run"]
    assert run["seed"] == sample_audit.run.seed == run["config"]["seed"]
    assert run["tool_version"] == advisor.__version__
    assert run["as_of"].startswith("2026-11-29")  # the sample's last logged day (README)
    assert run["config"]["backtest"] is True


# ------------------------------------------------------------------------------------ CSV


@pytest.mark.parametrize("cell", ["=1+1", "+1", "-1+2", "@SUM(A1)", "\tx", "\rx",
                                  '=HYPERLINK("http://x","y")'])
def test_neutralise_cell_prefixes_formula_starts_with_a_quote(cell):
    """Text starting with = + - @ tab or CR gets a leading quote (OWASP, 'CSV Injection')."""
    assert neutralise_cell(cell) == "'" + cell


@pytest.mark.parametrize("cell", ["Tart", "", " =1", "a=b", "'=1", -3, -2.5, 0, None])
def test_neutralise_cell_leaves_harmless_cells_and_numbers_alone(cell):
    """Ordinary text and numbers (a negative number is data) pass through unchanged."""
    assert neutralise_cell(cell) == cell


def test_formula_title_in_the_catalogue_is_neutralised_in_the_editorial_csv(hostile_audit):
    """A catalogue title =HYPERLINK("x") reaches editorial_placement.csv as text, not a formula."""
    rows = {r["item"]: r for r in _csv_rows(editorial_csv(hostile_audit))}
    assert rows["c0406"]["title"] == "'" + HOSTILE_TITLES["c0406"]
    assert rows["c0405"]["title"] == HOSTILE_TITLES["c0405"]  # brackets are harmless in CSV
    for row in rows.values():
        for value in row.values():
            assert not value.startswith(("=", "+", "@", "\t", "\r")), row
            if value.startswith("-"):  # only negative numbers may start with a minus
                float(value)


def test_editorial_csv_lists_the_whole_placement_in_rank_order(sample_audit):
    """The CSV has every cold item of the placement list, ranked 1..n."""
    rows = _csv_rows(editorial_csv(sample_audit))
    placement = sample_audit.cold_items.placement
    assert [int(r["rank"]) for r in rows] == list(range(1, len(placement) + 1))
    assert [r["item"] for r in rows] == list(placement["item"])
    assert len(rows) == sample_audit.cold_items.cold


def test_quarantine_csv_has_one_row_per_quarantined_row_with_reason_file_and_line(sample_audit):
    """quarantine.csv holds every row set aside, each with reason, file and line."""
    rows = _csv_rows(quarantine_csv(sample_audit))
    q = sample_audit.quality
    assert len(rows) == q.rows_quarantined == len(sample_audit.quarantine) > 0
    assert {"reason", "file", "line"} <= set(rows[0])
    per_reason = pd.Series([r["reason"] for r in rows]).value_counts().to_dict()
    quarantined = {i.code: i.count for i in q.issues if i.severity == "quarantined"}
    assert per_reason == quarantined


def test_quarantine_csv_file_and_line_point_at_the_raw_row(sample_audit):
    """Reading the named file at the named line gives back the quarantined row's ids
    (the user id as the HMAC-SHA256 the hashed mode writes; by default it is left out)."""
    import hmac

    from advisor.report.privacy import IdPolicy

    rows = _csv_rows(quarantine_csv(sample_audit, privacy=IdPolicy("hashed", "k")))
    cache: dict[str, list[str]] = {}
    for row in rows:
        if row["file"] not in cache:
            with gzip.open(SAMPLE_EVENTS / row["file"], "rt", encoding="utf-8") as fh:
                cache[row["file"]] = fh.read().splitlines()
        raw = next(csv.reader([cache[row["file"]][int(row["line"]) - 1]]))  # lines count from 1
        user = raw[0] and hmac.new(b"k", raw[0].encode(), hashlib.sha256).hexdigest()[:16]
        assert user == row["user"] and raw[1] == row["item"] and raw[2] == row["ts"], row


def test_cold_user_csv_agrees_with_the_cold_user_counts(sample_audit):
    """cold_users_by_band.csv sums to the users and cold users the report states."""
    rows = _csv_rows(report_files.cold_users_csv(sample_audit))
    cu = sample_audit.cold_users
    assert sum(int(r["cold_active_users"]) for r in rows) == cu.cold_active_users
    assert sum(int(r["active_users"]) for r in rows) == cu.active_users
    # Every user with at least one counted item falls in exactly one band.
    assert sum(int(r["users"]) for r in rows) == sample_audit.profile.activity.users_at_least[0]


# ---------------------------------------------------------------------------- atomic writes


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in folder.iterdir()}


def test_write_reports_writes_every_file_and_nothing_else(sample_audit, tmp_path):
    """All five report files land in the folder, with no temporary files left over."""
    written = write_reports(sample_audit, tmp_path / "out", text="report\n")
    assert set(written) == REPORT_NAMES
    assert set(os.listdir(tmp_path / "out")) == REPORT_NAMES
    assert (tmp_path / "out" / TEXT_NAME).read_text(encoding="utf-8") == "report\n"
    assert _strict_loads((tmp_path / "out" / JSON_NAME).read_text(encoding="utf-8"))


def test_report_files_get_the_usual_permissions(sample_audit, tmp_path):
    """Reports are created 0666 minus the umask, like any new file (open(2)), not 0600."""
    mask = os.umask(0o022)
    os.umask(mask)
    write_reports(sample_audit, tmp_path)
    for name in (JSON_NAME, EDITORIAL_NAME):
        assert (tmp_path / name).stat().st_mode & 0o777 == 0o666 & ~mask


def _fail_second_replace(monkeypatch):
    """Make the second os.replace call fail once, as a full disk or an I/O error would."""
    real = os.replace
    calls = {"n": 0}

    def flaky(src, dst, *args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 2:
            raise OSError(28, "No space left on device")
        return real(src, dst, *args, **kwargs)

    monkeypatch.setattr(report_files.os, "replace", flaky)
    return calls


def test_failure_mid_write_leaves_the_previous_report_intact(sample_audit, sample_audit_quick,
                                                             tmp_path, monkeypatch):
    """A write that fails after the first file was moved puts the earlier report back whole."""
    write_reports(sample_audit, tmp_path, text="first run\n")
    before = _snapshot(tmp_path)
    calls = _fail_second_replace(monkeypatch)
    with pytest.raises(OutputError, match="No space left on device"):
        write_reports(sample_audit_quick, tmp_path, text="second run\n")
    assert calls["n"] >= 2  # the failure really came after a file had been moved
    assert _snapshot(tmp_path) == before  # same names (no temp files), same bytes


def test_failure_mid_write_into_a_fresh_folder_leaves_no_report(sample_audit, tmp_path,
                                                                monkeypatch):
    """Without an earlier report, a failed write leaves no report file and no temp file."""
    _fail_second_replace(monkeypatch)
    with pytest.raises(OutputError):
        write_reports(sample_audit, tmp_path / "out")
    assert os.listdir(tmp_path / "out") == []


def test_interrupt_mid_write_leaves_no_temp_files(sample_audit, tmp_path, monkeypatch):
    """Ctrl-C during the writes is re-raised and cleans up its temporary files."""
    write_reports(sample_audit, tmp_path)
    before = _snapshot(tmp_path)
    real_fsync = os.fsync
    calls = {"n": 0}

    def interrupted(fd):
        calls["n"] += 1
        if calls["n"] == 3:
            raise KeyboardInterrupt
        return real_fsync(fd)

    monkeypatch.setattr(report_files.os, "fsync", interrupted)
    with pytest.raises(KeyboardInterrupt):
        write_reports(sample_audit, tmp_path, text="x")
    assert _snapshot(tmp_path) == before


def test_repeated_run_replaces_the_reports(sample_audit, sample_audit_quick, tmp_path):
    """Writing twice into the same folder leaves the second run's files, and no others."""
    write_reports(sample_audit, tmp_path)
    write_reports(sample_audit_quick, tmp_path)
    doc = _strict_loads((tmp_path / JSON_NAME).read_text(encoding="utf-8"))
    assert doc["evidence"] is None  # the quick run had no backtest
    assert set(os.listdir(tmp_path)) == REPORT_NAMES - {TEXT_NAME}


def test_output_path_under_a_file_is_an_output_error(sample_audit, tmp_path):
    """An --out folder that cannot be created raises OutputError naming the folder."""
    (tmp_path / "plain.txt").write_text("x")
    with pytest.raises(OutputError, match="plain.txt"):
        write_reports(sample_audit, tmp_path / "plain.txt" / "reports")


def test_read_only_folder_is_an_output_error(sample_audit, tmp_path):
    """A folder the user cannot write to raises OutputError and leaves nothing behind."""
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o500)
    try:
        if os.access(folder, os.W_OK):
            pytest.skip("running with privileges that ignore folder permissions (root)")
        with pytest.raises(OutputError, match="writable"):
            write_reports(sample_audit, folder)
        assert os.listdir(folder) == []
    finally:
        folder.chmod(0o700)
