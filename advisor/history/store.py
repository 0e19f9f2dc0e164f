"""The audit history: an embedded SQLite database, one row per as-of date.

Safety rules, in the order they are applied:

1. A file that exists is inspected read-only before anything is written: a file SQLite
   cannot read (random bytes, a truncated copy), one that fails ``PRAGMA quick_check``, a
   SQLite database of another application (tables, but no ``advisor_meta`` table naming
   this tool) or one written by a newer schema raises :class:`HistoryError` and is left
   byte for byte as it was.
2. Only then is the database switched to write-ahead logging (WAL), so readers never block
   the writer, and given a busy timeout, so a second writer waits for the first instead of
   failing.
3. Every write (schema creation, migrations, recording an entry) is one ``BEGIN IMMEDIATE``
   transaction: it takes the write lock up front, so two audits finishing together are
   serialised and neither sees the other's half-done work.

The schema version lives in ``PRAGMA user_version``; :data:`MIGRATIONS` holds one function
per step (``MIGRATIONS[i]`` takes version ``i`` to ``i + 1``), so version 2 is one more
function. Version 0 is an empty SQLite file (no tables).
"""

from __future__ import annotations

import json
import sqlite3
import shutil
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING

from advisor import __version__
from advisor.errors import AdvisorError, HistoryError, OutputError
from advisor.history.entry import HistoryEntry, RuleGap, as_of_date, entry_from_result

if TYPE_CHECKING:  # pragma: no cover
    from advisor.pipeline import AuditResult

__all__ = ["APP_ID", "DEFAULT_NAME", "MIGRATIONS", "HistoryStore", "default_history_path",
           "load_history", "record_audit", "schema_version"]

#: File name of the history database inside the output folder.
DEFAULT_NAME = "history.sqlite"

#: Value of the ``app`` key in ``advisor_meta``: how this tool recognises its own files.
APP_ID = "advisor-audit-history"

#: Seconds a writer waits for another writer's transaction before giving up.
DEFAULT_TIMEOUT = 30.0


def _migrate_0_to_1(conn: sqlite3.Connection) -> None:
    """Version 1: the meta table and one row per audited as-of date."""
    conn.execute("CREATE TABLE advisor_meta (key TEXT PRIMARY KEY, value TEXT NOT NULL)")
    conn.executemany("INSERT INTO advisor_meta (key, value) VALUES (?, ?)", [
        ("app", APP_ID),
        ("created_utc", datetime.now(timezone.utc).isoformat(timespec="seconds")),
        ("created_by", __version__),
    ])
    conn.execute("""
        CREATE TABLE audits (
            as_of_date        TEXT PRIMARY KEY,  -- YYYY-MM-DD (UTC); re-audits replace
            as_of             TEXT NOT NULL,     -- ISO-8601 time, UTC
            recorded_utc      TEXT NOT NULL,
            fingerprint       TEXT NOT NULL,     -- sha256 over the inputs' sha256
            tool_version      TEXT NOT NULL,
            interactions      REAL,
            users             REAL,
            items_seen        REAL,
            users_ge_5        REAL,
            density           REAL,
            cooc_share        REAL,
            itemknn_lift      REAL,
            itemknn_lift_low  REAL,
            itemknn_lift_high REAL,
            headline_tier     TEXT,
            next_tier         TEXT,
            personalised_go   INTEGER NOT NULL CHECK (personalised_go IN (0, 1)),
            tier_statuses     TEXT NOT NULL,     -- JSON object: tier id -> status
            gaps              TEXT NOT NULL,     -- JSON list of blocking rules not passing
            users_needed      REAL,              -- learning curve, extra training users
            curve_train_users REAL,
            metrics           TEXT NOT NULL      -- JSON object: every metric by name
        )""")


#: Schema migrations, oldest first: ``MIGRATIONS[i]`` takes version ``i`` to ``i + 1``.
MIGRATIONS: tuple[Callable[[sqlite3.Connection], None], ...] = (_migrate_0_to_1,)

_COLUMNS = ("as_of_date", "as_of", "recorded_utc", "fingerprint", "tool_version",
            "interactions", "users", "items_seen", "users_ge_5", "density", "cooc_share",
            "itemknn_lift", "itemknn_lift_low", "itemknn_lift_high", "headline_tier",
            "next_tier", "personalised_go", "tier_statuses", "gaps", "users_needed",
            "curve_train_users", "metrics")


#: Free bytes below which a storage error is reported as a full disk.
_LOW_SPACE = 1 << 20


def schema_version() -> int:
    """The schema version this code writes (the number of migrations)."""
    return len(MIGRATIONS)


def default_history_path(out: str | Path) -> Path:
    """Where an audit writing reports to ``out`` keeps its history."""
    return Path(out) / DEFAULT_NAME


class HistoryStore:
    """One history database, opened safely; use as a context manager.

    Parameters
    ----------
    path : path
        The SQLite file.
    create : bool
        Create the file (and its folder) when missing; when False a missing file raises
        :class:`HistoryError`.
    timeout : float
        Seconds to wait for another writer before giving up.

    Raises
    ------
    HistoryError
        The file is missing (``create=False``), unreadable, damaged, another application's
        database, or written by a newer version of this tool. The file is not modified.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     with HistoryStore(pathlib.Path(d) / "history.sqlite") as store:
    ...         store.entries()
    ()
    """

    def __init__(self, path: str | Path, *, create: bool = True,
                 timeout: float = DEFAULT_TIMEOUT) -> None:
        self.path = Path(path)
        self.timeout = float(timeout)
        self._conn: sqlite3.Connection | None = None
        p = self.path
        if p.exists() and not p.is_file():
            raise HistoryError(f"{p}: is not a file; give the path of a history database "
                               f"(by default {DEFAULT_NAME} in the output folder).")
        if not p.exists():
            if not create:
                raise HistoryError(
                    f"{p}: no audit history here yet; run `advisor audit` with this output "
                    "folder first to record one (or point at the right history file).")
            try:
                p.parent.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise HistoryError(f"{p}: cannot create the folder for the history database "
                                   f"({exc}); choose a writable output folder.") from None
        # SQLite creates -wal and -shm files beside a WAL database, even to read it; when
        # opening fails for lack of storage (a full disk, a read-only folder) the ones this
        # call made go again. Only then: after other failures another process may be using
        # them, and removing a live -shm would break its locking.
        sidecars = [Path(f"{p}{suffix}") for suffix in ("-wal", "-shm")]
        new_sidecars = [f for f in sidecars if not f.exists()]
        try:
            self._open(p)
        except OutputError:
            for f in new_sidecars:
                f.unlink(missing_ok=True)
            raise

    def _open(self, p: Path) -> None:
        if p.exists() and p.stat().st_size > 0:
            self._inspect_read_only()
        try:
            conn = sqlite3.connect(str(p), timeout=self.timeout, isolation_level=None)
        except sqlite3.Error as exc:
            raise self._error(exc, "open") from None
        self._conn = conn
        try:
            conn.execute(f"PRAGMA busy_timeout = {int(self.timeout * 1000)}")
            # Between the read-only look and this connection another process may have
            # replaced the file; look again before switching the journal mode (a write).
            version = self._check(conn)
            self._use_wal(conn)
            if version < schema_version():
                with self._write() as c:
                    # Re-read inside the lock: a concurrent first audit may have created the
                    # schema while this one waited.
                    self._migrate(c, self._check(c))
        except HistoryError:
            self.close()
            raise
        except sqlite3.Error as exc:
            self.close()
            raise self._error(exc, "open") from None

    # -- opening ---------------------------------------------------------------------------

    def _use_wal(self, conn: sqlite3.Connection) -> None:
        """Switch the file to write-ahead logging unless it is already, waiting up to timeout.

        The switch needs the file to itself, and SQLite answers "database is locked" at once
        rather than through the busy timeout when other connections are opening the same new
        file; so wait and look again (another process has often switched it meanwhile).
        """
        deadline = time.monotonic() + self.timeout
        pause = 0.005
        while True:
            try:
                if conn.execute("PRAGMA journal_mode").fetchone()[0].lower() != "wal":
                    conn.execute("PRAGMA journal_mode = WAL")
                return
            except sqlite3.OperationalError as exc:
                busy = "locked" in str(exc) or "busy" in str(exc)
                if not busy or time.monotonic() + pause > deadline:
                    raise
            time.sleep(pause)
            pause = min(2 * pause, 0.25)

    def _inspect_read_only(self) -> None:
        """Look at an existing file without any chance of writing to it."""
        uri = self.path.resolve().as_uri() + "?mode=ro"
        try:
            conn = sqlite3.connect(uri, uri=True, timeout=self.timeout)
        except sqlite3.Error as exc:
            raise self._error(exc, "open") from None
        try:
            self._check(conn)
        except sqlite3.Error as exc:
            raise self._error(exc, "read") from None
        finally:
            conn.close()

    def _check(self, conn: sqlite3.Connection) -> int:
        """Schema version of an advisor history (0: empty file); raise when it is not one."""
        # One read transaction for every look: in autocommit each statement sees its own
        # snapshot, so a first audit in another process committing its schema between two
        # of them showed "no tables" beside a set schema version.
        own = not conn.in_transaction
        try:
            if own:
                conn.execute("BEGIN")
            try:
                tables = sorted(r[0] for r in conn.execute(
                    "SELECT name FROM sqlite_master WHERE type = 'table' "
                    "AND name NOT LIKE 'sqlite_%'"))
                version = int(conn.execute("PRAGMA user_version").fetchone()[0])
                ok = conn.execute("PRAGMA quick_check").fetchone()[0]
                app = None
                if "advisor_meta" in tables:
                    row = conn.execute(
                        "SELECT value FROM advisor_meta WHERE key = 'app'").fetchone()
                    app = row[0] if row else None
            finally:
                if own and conn.in_transaction:
                    conn.execute("COMMIT")
        except sqlite3.DatabaseError as exc:
            raise self._error(exc, "read") from None
        p = self.path
        if ok != "ok":
            raise HistoryError(
                f"{p}: the history database is damaged (SQLite quick_check: {ok}). It was "
                "left untouched; move it aside and re-run the audits you need (a backfill "
                "over past --as-of dates rebuilds the history).")
        if not tables and version == 0:
            return 0
        if app != APP_ID:
            shown = ", ".join(tables[:5]) + (", ..." if len(tables) > 5 else "")
            raise HistoryError(
                f"{p}: is a SQLite database of another application (tables: "
                f"{shown or 'none'}; expected an advisor history with an advisor_meta table). "
                "It was left untouched; choose another history file or move this one aside.")
        if version > schema_version():
            raise HistoryError(
                f"{p}: history schema version {version} is newer than this advisor "
                f"({__version__}) understands (up to {schema_version()}). It was left "
                "untouched; upgrade advisor or use another history file.")
        if version < 1:
            raise HistoryError(
                f"{p}: has the advisor meta table but schema version {version}; the file "
                "looks hand-edited. It was left untouched; move it aside.")
        return version

    def _error(self, exc: sqlite3.Error, action: str) -> AdvisorError:
        p = self.path
        text = str(exc)
        storage = "disk I/O error" in text or "disk is full" in text or "readonly" in text
        if storage:
            try:
                full = shutil.disk_usage(p.parent).free < _LOW_SPACE
            except OSError:
                full = False
            cause = ("No space left on device" if full else
                     "the folder or file system is read-only, or the disk failed")
            return OutputError(
                f"{p}: cannot {action} the history database ({cause}; SQLite: {text}); free "
                "some space or choose a writable --out (or --history), then run again.")
        if "locked" in text or "busy" in text:
            return HistoryError(
                f"{p}: the history database stayed locked for {self.timeout:g} s (another "
                "audit writing?); run again when it has finished.")
        if isinstance(exc, sqlite3.DatabaseError) and action in ("open", "read") and (
                "not a database" in text or "malformed" in text or "corrupt" in text):
            return HistoryError(
                f"{p}: is not a readable history database (SQLite: {text}). It was left "
                "untouched; move it aside or choose another history file, and re-run the "
                "audits you need (a backfill over past --as-of dates rebuilds the history).")
        if action == "write":
            return HistoryError(
                f"{p}: could not write to the history database (SQLite: {text}); check that "
                "the folder is writable and the disk has room, then run the audit again.")
        return HistoryError(f"{p}: cannot {action} the history database (SQLite: {text}); "
                            "check the path and its permissions.")

    @staticmethod
    def _migrate(conn: sqlite3.Connection, version: int) -> None:
        for step in MIGRATIONS[version:]:
            step(conn)
        conn.execute(f"PRAGMA user_version = {len(MIGRATIONS)}")

    @contextmanager
    def _write(self) -> Iterator[sqlite3.Connection]:
        conn = self._connection()
        try:
            conn.execute("BEGIN IMMEDIATE")
        except sqlite3.Error as exc:
            raise self._error(exc, "write") from None
        try:
            yield conn
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        try:
            conn.execute("COMMIT")
        except sqlite3.Error as exc:
            conn.execute("ROLLBACK")
            raise self._error(exc, "write") from None

    def _connection(self) -> sqlite3.Connection:
        if self._conn is None:
            raise HistoryError(f"{self.path}: the history store is closed; open it again.")
        return self._conn

    # -- public ----------------------------------------------------------------------------

    def schema_version(self) -> int:
        """The file's schema version (``PRAGMA user_version``)."""
        return int(self._connection().execute("PRAGMA user_version").fetchone()[0])

    def record(self, entry: HistoryEntry) -> bool:
        """Store one audit, replacing an entry with the same as-of date.

        Returns
        -------
        bool
            True when an entry for that date was replaced.
        """
        row = _to_row(entry)
        sql = (f"INSERT OR REPLACE INTO audits ({', '.join(_COLUMNS)}) "
               f"VALUES ({', '.join('?' * len(_COLUMNS))})")
        try:
            with self._write() as conn:
                replaced = conn.execute("SELECT 1 FROM audits WHERE as_of_date = ?",
                                        (row[0],)).fetchone() is not None
                conn.execute(sql, row)
        except sqlite3.Error as exc:
            raise self._error(exc, "write") from None
        return replaced

    def entries(self) -> tuple[HistoryEntry, ...]:
        """Every stored audit, oldest as-of date first."""
        try:
            rows = self._connection().execute(
                f"SELECT {', '.join(_COLUMNS)} FROM audits ORDER BY as_of_date").fetchall()
        except sqlite3.Error as exc:
            raise self._error(exc, "read") from None
        try:
            return tuple(_from_row(r) for r in rows)
        except (ValueError, TypeError, KeyError) as exc:
            raise HistoryError(f"{self.path}: a stored audit cannot be read back ({exc}); "
                               "the file was edited by hand or damaged. Move it aside.") from None

    def close(self) -> None:
        """Close the connection (idempotent)."""
        if self._conn is not None:
            self._conn.close()
            self._conn = None

    def __enter__(self) -> HistoryStore:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def _to_row(e: HistoryEntry) -> tuple:
    return (as_of_date(e.as_of), e.as_of, e.recorded_utc, e.fingerprint, e.tool_version,
            e.interactions, e.users, e.items_seen, e.users_ge_5, e.density, e.cooc_share,
            e.itemknn_lift, e.itemknn_lift_low, e.itemknn_lift_high, e.headline_tier,
            e.next_tier, int(bool(e.personalised_go)),
            json.dumps(dict(e.tier_statuses)),
            json.dumps([g.to_dict() for g in e.gaps]),
            e.users_needed, e.curve_train_users,
            json.dumps(dict(sorted(e.metrics.items())), allow_nan=False))


def _from_row(r: tuple) -> HistoryEntry:
    d = dict(zip(_COLUMNS, r))
    d.pop("as_of_date")
    d["personalised_go"] = bool(d["personalised_go"])
    d["tier_statuses"] = json.loads(d["tier_statuses"])
    d["gaps"] = tuple(RuleGap.from_dict(g) for g in json.loads(d["gaps"]))
    d["metrics"] = json.loads(d["metrics"])
    return HistoryEntry(**d)


def record_audit(result: AuditResult, path: str | Path, *,
                 timeout: float = DEFAULT_TIMEOUT) -> HistoryEntry:
    """Record one audit in the history at ``path`` (created when missing).

    Returns the entry written; an entry with the same as-of date is replaced.

    Raises
    ------
    HistoryError
        The history file is damaged, foreign, newer, or cannot be written.
    """
    entry = entry_from_result(result)
    with HistoryStore(path, timeout=timeout) as store:
        store.record(entry)
    return entry


def load_history(path: str | Path) -> tuple[HistoryEntry, ...]:
    """Every audit in the history at ``path``, oldest first.

    Raises
    ------
    HistoryError
        The file is missing, damaged, foreign or newer.
    """
    with HistoryStore(path, create=False) as store:
        return store.entries()
