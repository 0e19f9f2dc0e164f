"""Faults with real processes: interrupts, a full disk, a read-only folder, concurrent audits.

The interrupt and concurrency tests start ``python -m advisor.cli`` as child processes and
send real signals; the disk tests mount a tiny tmpfs (skipped where mounting is not allowed)
so that the kernel itself answers "no space left" or "read-only file system". Each test
checks that the earlier reports and history are byte for byte as they were, that no
temporary file is left, and that the next run works.
"""

from __future__ import annotations

import hashlib
import os
import re
import shutil
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from advisor.cli import main
from advisor.history import load_history
from conftest import REPO, SAMPLE_CATALOG, SAMPLE_EVENTS

pytestmark = pytest.mark.skipif(os.name != "posix", reason="POSIX signals, pty and mounts")

PLAIN = {"NO_COLOR": "1", "FORCE_COLOR": None, "COLUMNS": None, "TERM": "dumb"}
REPORTS = {"audit.json", "audit.txt", "report.html", "editorial_placement.csv",
           "cold_users_by_band.csv", "quarantine.csv", "history.sqlite"}
ANSI = re.compile(rb"\x1b\[[0-9;?]*[A-Za-z]")


def _cli(*args, env=None):
    return CliRunner().invoke(main, [str(a) for a in args], env={**PLAIN, **(env or {})})


def _snapshot(folder: Path) -> dict[str, str]:
    """Every file in ``folder`` (hidden ones too) by name, with the SHA-256 of its bytes."""
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.iterdir()) if p.is_file()}


def _integrity(db: Path) -> list:
    conn = sqlite3.connect(db)
    try:
        return conn.execute("PRAGMA integrity_check").fetchall()
    finally:
        conn.close()


@pytest.fixture(scope="module")
def previous(tmp_path_factory) -> Path:
    """An output folder holding a finished audit of the sample: reports and history."""
    out = tmp_path_factory.mktemp("previous") / "out"
    result = _cli("audit", SAMPLE_EVENTS, "--catalog", SAMPLE_CATALOG, "--as-of", "2026-11-22",
                  "--no-backtest", "--out", out, "--quiet")
    assert result.exit_code == 0, result.output
    assert set(os.listdir(out)) == REPORTS
    return out


def _copy(previous: Path, dest: Path) -> Path:
    shutil.copytree(previous, dest)
    return dest


# ------------------------------------------------------------------------------ interrupts


class _Child:
    """``advisor audit`` in a child process whose stderr is a pseudo-terminal, so the CLI
    shows its progress steps (as on a terminal) and the test can wait for a given step."""

    def __init__(self, args: list[str], cwd: Path) -> None:
        import pty

        master, slave = pty.openpty()
        env = {**os.environ, "NO_COLOR": "1", "TERM": "xterm",
               "PYTHONPATH": os.pathsep.join([str(REPO), os.environ.get("PYTHONPATH", "")])}
        env.pop("COLUMNS", None)
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "advisor.cli", *args], cwd=cwd, env=env,
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=slave,
            # A shell may start background jobs with SIGINT ignored; Python then keeps
            # ignoring it. Give the child the default so Ctrl-C means KeyboardInterrupt.
            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
        os.close(slave)
        self._master = master
        self._buf = bytearray()
        self._reader = threading.Thread(target=self._pump, daemon=True)
        self._reader.start()

    def _pump(self) -> None:
        # Drain the terminal continuously: a full pty buffer would block the child.
        while True:
            try:
                chunk = os.read(self._master, 65536)
            except OSError:
                return
            if not chunk:
                return
            self._buf.extend(chunk)

    def wait_for(self, pattern: bytes, timeout: float = 120) -> None:
        end = time.monotonic() + timeout
        while pattern not in self._buf:
            assert self.proc.poll() is None, f"ended before {pattern!r}: {self.text()}"
            assert time.monotonic() < end, f"no {pattern!r} within {timeout} s: {self.text()}"
            time.sleep(0.02)

    def finish(self, timeout: float = 60) -> int:
        code = self.proc.wait(timeout=timeout)
        self._reader.join(timeout=5)
        os.close(self._master)
        return code

    def text(self) -> str:
        return ANSI.sub(b"", bytes(self._buf)).decode("utf-8", "replace")


def test_interrupt_mid_audit_leaves_reports_and_history_as_they_were(previous, tmp_path):
    """Ctrl-C (SIGINT) and SIGTERM sent to real audits in their backtest leave the earlier
    reports and history byte for byte, no temporary file, exit 130 / 143 with a one-line
    message; the next run then works."""
    sent = {signal.SIGINT: 130, signal.SIGTERM: 143}
    runs = {}
    # Both children run at once (each in its own copy of the previous output) to save time.
    for sig in sent:
        out = _copy(previous, tmp_path / sig.name)
        runs[sig] = (out, _snapshot(out), _Child(
            ["audit", str(SAMPLE_EVENTS), "--catalog", str(SAMPLE_CATALOG), "--as-of",
             "2026-11-29", "--out", str(out)], cwd=tmp_path))
    for sig, (_, _, child) in runs.items():
        child.wait_for(b"auditing: fit ")  # a model of the backtest is being fitted
        child.proc.send_signal(sig)
    for sig, (out, before, child) in runs.items():
        code = child.finish()
        text = child.text()
        assert code == sent[sig], (sig.name, code, text)
        assert "Traceback" not in text, text
        name = "SIGTERM" if sig == signal.SIGTERM else "Ctrl-C (SIGINT)"
        assert (f"error: interrupted by {name} before the audit finished: the previous "
                f"reports in {out} and the history were left as they were") in " ".join(
                    text.split())
        assert _snapshot(out) == before  # same names (no temp, WAL or journal file), bytes
    # The next run into the interrupted folder works and replaces the reports.
    out, before, _ = runs[signal.SIGTERM]
    result = _cli("audit", SAMPLE_EVENTS, "--as-of", "2026-11-29", "--no-backtest", "--out",
                  out, "--quiet")
    assert result.exit_code == 0, result.output
    after = _snapshot(out)
    assert set(after) == REPORTS and after["audit.json"] != before["audit.json"]
    assert [e.as_of[:10] for e in load_history(out / "history.sqlite")] == [
        "2026-11-22", "2026-11-29"]


def test_interrupt_while_committing_is_held_until_reports_and_history_are_complete(
        previous, tmp_path, monkeypatch):
    """SIGTERM arriving while the history is being recorded (after the reports moved into
    place) is held: the run ends 143 with reports and history both of this run."""
    import advisor.history

    out = _copy(previous, tmp_path / "out")
    before = _snapshot(out)
    real = advisor.history.record_audit

    def record_with_sigterm(result, path):
        # Only send the signal if the CLI holds it; otherwise the test process would die.
        assert signal.getsignal(signal.SIGTERM) not in (signal.SIG_DFL, signal.SIG_IGN)
        os.kill(os.getpid(), signal.SIGTERM)
        return real(result, path)

    monkeypatch.setattr(advisor.history, "record_audit", record_with_sigterm)
    result = _cli("audit", SAMPLE_EVENTS, "--as-of", "2026-11-29", "--no-backtest", "--out",
                  out, "--quiet")
    assert result.exit_code == 143, result.output
    assert "written in full" in result.stderr and "Traceback" not in result.output
    after = _snapshot(out)
    assert set(after) == REPORTS
    assert all(after[n] != before[n] for n in ("audit.json", "audit.txt", "history.sqlite"))
    assert [e.as_of[:10] for e in load_history(out / "history.sqlite")] == [
        "2026-11-22", "2026-11-29"]
    assert signal.getsignal(signal.SIGTERM) is not signal.SIG_IGN  # handlers restored


def test_history_failure_after_the_reports_moved_puts_the_previous_reports_back(
        previous, tmp_path, monkeypatch):
    """If recording the history fails, the reports already moved into place are rolled
    back: exit 6, and the folder is byte for byte as before (no mix of old and new)."""
    import advisor.history
    from advisor.errors import HistoryError

    out = _copy(previous, tmp_path / "out")
    before = _snapshot(out)

    def broken(result, path):
        assert (out / "audit.json").read_bytes() != (previous / "audit.json").read_bytes()
        raise HistoryError(f"{path}: could not write to the history database (test)")

    monkeypatch.setattr(advisor.history, "record_audit", broken)
    result = _cli("audit", SAMPLE_EVENTS, "--as-of", "2026-11-29", "--no-backtest", "--out",
                  out, "--quiet")
    assert result.exit_code == 6, result.output
    assert _snapshot(out) == before


# ---------------------------------------------------------------- full disk, read-only folder


@pytest.fixture
def tmpfs(tmp_path):
    """An 8 MB tmpfs mounted under tmp_path; skipped where mounting is not allowed."""
    mnt = tmp_path / "mnt"
    mnt.mkdir()
    try:
        done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=8m", "tmpfs", str(mnt)],
                              capture_output=True, timeout=10)
    except (OSError, subprocess.TimeoutExpired) as exc:
        pytest.skip(f"cannot run mount ({exc})")
    if done.returncode != 0:
        pytest.skip(f"mounting a tmpfs is not permitted here: {done.stderr.decode().strip()}")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", "-l", str(mnt)], capture_output=True, timeout=10)


def _fill(mnt: Path, leave: int = 16384) -> Path:
    """Fill the file system but ``leave`` bytes: the reports no longer fit."""
    free = shutil.disk_usage(mnt).free
    filler = mnt / "filler"
    with filler.open("wb") as fh:
        fh.write(b"\0" * max(0, free - leave))
    assert shutil.disk_usage(mnt).free <= leave
    return filler


def _report_args(out: Path, *more) -> list:
    return ["audit", SAMPLE_EVENTS, "--as-of", "2026-11-29", "--no-backtest", "--out", out,
            *more]


def _one_line_error(result, code: int) -> str:
    assert result.exit_code == code, (result.exit_code, result.output)
    assert isinstance(result.exception, SystemExit) and "Traceback" not in result.output
    message = result.stderr.strip()
    assert message.startswith("error: ") and "\n" not in message
    return message


def test_full_disk_on_a_first_run_exits_5_and_leaves_no_file(tmpfs):
    """No space on the device: exit 5 naming the folder and the cause, and the new output
    folder holds nothing, not even a temporary file."""
    _fill(tmpfs)
    out = tmpfs / "out"
    message = _one_line_error(_cli(*_report_args(out)), 5)
    assert f"cannot write reports into {out} (No space left on device)" in message
    assert "--out" in message
    assert list(out.iterdir()) == []


def test_full_disk_keeps_the_previous_reports_and_the_next_run_works(previous, tmpfs):
    """With the disk full, a run (history off) exits 5 and the previous reports stay byte for
    byte; once space is freed the same command succeeds."""
    out = _copy(previous, tmpfs / "out")
    before = _snapshot(out)
    filler = _fill(tmpfs)
    args = _report_args(out, "--no-history")
    message = _one_line_error(_cli(*args), 5)
    assert "No space left on device" in message
    assert _snapshot(out) == before
    filler.unlink()
    assert _cli(*args).exit_code == 0
    assert _snapshot(out)["audit.json"] != before["audit.json"]


def test_full_disk_with_a_history_exits_5_and_leaves_no_file(previous, tmpfs):
    """With the disk full and a history in the folder: exit 5 and no new file."""
    out = _copy(previous, tmpfs / "out")
    before = _snapshot(out)
    _fill(tmpfs)
    message = _one_line_error(_cli(*_report_args(out)), 5)
    assert "No space left on device" in message
    assert _snapshot(out) == before


def test_read_only_output_folder_exits_5_before_the_audit_runs(previous, tmpfs):
    """A folder on a read-only file system (read-only for root too) is refused with exit 5
    before any work, whether it exists (with reports and history) or is still to be made."""
    out = _copy(previous, tmpfs / "out")
    before = _snapshot(out)
    done = subprocess.run(["mount", "-o", "remount,ro", str(tmpfs)], capture_output=True)
    if done.returncode != 0:
        pytest.skip(f"cannot remount read-only: {done.stderr.decode().strip()}")
    message = _one_line_error(_cli(*_report_args(out)), 5)
    assert f"cannot write reports into {out} (Read-only file system)" in message
    assert _snapshot(out) == before
    message = _one_line_error(_cli(*_report_args(tmpfs / "new" / "out")), 5)
    assert f"cannot create the output folder {tmpfs / 'new' / 'out'}" in message
    assert not (tmpfs / "new").exists()


def test_report_name_taken_by_a_folder_exits_5_and_keeps_the_rest(previous, tmp_path):
    """When one report cannot be replaced (its name is a folder), nothing is replaced: exit 5,
    every other previous report byte for byte, no temporary file."""
    out = _copy(previous, tmp_path / "out")
    (out / "report.html").unlink()
    (out / "report.html").mkdir()
    before = _snapshot(out)
    message = _one_line_error(_cli(*_report_args(out, "--no-history")), 5)
    assert f"cannot write reports into {out}" in message
    assert _snapshot(out) == before and (out / "report.html").is_dir()


# ------------------------------------------------------------------------ concurrent audits


def test_two_audits_at_once_share_one_new_history_database(tmp_path):
    """Two real processes auditing different weeks into one new history database both
    finish; the database holds both entries and passes SQLite's integrity check."""
    history = tmp_path / "shared" / "history.sqlite"
    # One weekly file each (small, so the two runs overlap): as-of dates are their last days.
    weeks = {"2026-09-13": "2026-w37.csv.gz", "2026-09-20": "2026-w38.csv.gz"}
    env = {**os.environ, "NO_COLOR": "1",
           "PYTHONPATH": os.pathsep.join([str(REPO), os.environ.get("PYTHONPATH", "")])}
    procs = [subprocess.Popen(
        [sys.executable, "-m", "advisor.cli", "audit", str(SAMPLE_EVENTS / name),
         "--no-backtest", "--quiet", "--out", str(tmp_path / week), "--history", str(history)],
        env=env, cwd=tmp_path, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
        for week, name in weeks.items()]
    results = [p.communicate(timeout=180) for p in procs]
    for p, (_, err) in zip(procs, results):
        assert p.returncode == 0, err.decode()
    assert sorted(e.as_of[:10] for e in load_history(history)) == sorted(weeks)
    assert _integrity(history) == [("ok",)]
    for week in weeks:
        assert set(os.listdir(tmp_path / week)) == REPORTS - {"history.sqlite"}
    leftovers = {p.name for p in history.parent.iterdir()} - {"history.sqlite"}
    assert leftovers == set()  # WAL and shared-memory files removed on close
