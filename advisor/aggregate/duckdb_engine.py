"""Embedded DuckDB engine: read, validate and aggregate a log out of core.

The in-memory path holds every event in pandas. This engine lets DuckDB read the files
(Parquet, CSV, TSV, gzip too), apply the same validation rules in SQL and compute the same
:class:`Aggregates`; only what the later stages need comes back to Python: the aggregates
(one row per user, item, distinct pair and week), the quarantined rows, the quality report,
and an :class:`EventSummary`. Peak memory is bounded by DuckDB's ``memory_limit`` (it spills
to a temporary folder) plus the aggregates themselves.

Both engines must give identical results; ``tests/test_aggregate_duckdb.py`` checks it. What
this engine does not read yet (JSON Lines, gzip-compressed Parquet, delimited text with blank
lines or line breaks inside quoted values, exotic column types) is refused with a
:class:`EngineUnsupportedError` pointing at ``--engine pandas``.

``duckdb`` is imported only when this engine is used.

Example
-------
>>> from advisor.config import AuditConfig
>>> with DuckDBEngine.open("sample_logs/events", AuditConfig(engine="duckdb")) as eng:
...     log = eng.validate(None)
...     agg = eng.aggregate(log)
>>> agg.n_users > 0
True
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from advisor.aggregate import _sql_validate as sv
from advisor.aggregate._engine_common import (
    anomaly_issues,
    busiest_first,
    check_enough,
    duplicate_issue,
    finish_validation,
    implausible_result,
    quarantine_issues,
    renumber,
    start_validation,
    unmapped_issue,
    weekly_frame,
)
from advisor.aggregate._sql_input import SourceFile, open_sources, raw_rows
from advisor.aggregate.model import Aggregates, labels_in
from advisor.aggregate.pandas_engine import _WEEK
from advisor.aggregate.summary import EventSummary
from advisor.config import AuditConfig
from advisor.errors import EngineUnsupportedError
from advisor.load.model import LOG_FIELDS, ColumnDetection, InputFile, RawCatalog
from advisor.validate.anomalies import (
    MIN_USERS_FOR_QUANTILE,
    ImplausibleUsers,
)
from advisor.validate.checks import QUARANTINE_REASONS, build_catalog
from advisor.validate.model import QualityIssue, ValidatedLog

__all__ = ["DuckDBEngine", "memory_limit_bytes"]

_DAY_NS = 86_400_000_000_000
_HOUR_NS = 3_600_000_000_000
_SEC_NS = 1_000_000_000
_MONDAY_SHIFT = 3 * 86400
#: Share of the machine's memory DuckDB may use before it spills to its temporary folder,
#: and the most it may use whatever the machine: the aggregates that come back to Python
#: (about 36 bytes per distinct user-item pair) need room beside it, and the 100M-event
#: benchmark must stay under 8 GiB (common practice, no published source; set
#: ``engine_memory_gib`` to give DuckDB more on a large machine).
MEMORY_SHARE = 0.25
MEMORY_CAP = 2 << 30




def memory_limit_bytes(share: float = MEMORY_SHARE, cap: int = MEMORY_CAP) -> int:
    """``share`` of the machine's physical memory, at most ``cap``, in bytes (``cap`` when
    the machine's memory is unknown)."""
    try:
        total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        return int(cap)
    return int(min(total * share, cap))


def _connect(threads: int | None, temp_dir: str, memory_gib: float | None = None):
    try:
        import duckdb
    except ImportError:
        raise EngineUnsupportedError(
            "--engine duckdb needs the duckdb package, which is not installed; install it "
            "(pip install duckdb) or use --engine pandas.",
            reason="the duckdb package is not installed"
        ) from None
    con = duckdb.connect(":memory:", config={
        "threads": int(threads or os.cpu_count() or 1),
        "memory_limit": f"{_memory_bytes(memory_gib) // (1 << 20)}MB",
        "temp_directory": temp_dir,
    })
    con.execute("SET TimeZone = 'UTC'")
    return con


def _memory_bytes(memory_gib: float | None) -> int:
    return memory_limit_bytes() if memory_gib is None else int(memory_gib * (1 << 30))


class DuckDBEngine:
    """One log opened in an embedded DuckDB database; use as a context manager.

    Call :meth:`validate`, then (optionally) :meth:`event_items`, :meth:`aggregate` and
    :meth:`summary`, in that order. The temporary database and spill folder are removed on
    :meth:`close`.
    """

    def __init__(self, con, temp_dir: str, sources: list[SourceFile], columns: ColumnDetection,
                 skipped: tuple[str, ...], config: AuditConfig):
        self._con = con
        self._temp_dir = temp_dir
        self._sources = sources
        self.columns = columns
        """How the log's columns were mapped (as :attr:`RawLog.columns`)."""
        self.skipped_files = skipped
        self._config = config
        self._rules: pd.DataFrame | None = None
        self._codes: tuple[np.ndarray, np.ndarray] | None = None

    # ------------------------------------------------------------------ lifecycle

    @classmethod
    def open(cls, logs: str | Path, config: AuditConfig) -> DuckDBEngine:
        """Open the log files (a file or a folder) for this engine.

        Raises
        ------
        LogFormatError
            As :func:`advisor.load.read_logs`.
        EngineUnsupportedError
            If duckdb is missing, or the input is of a kind this engine does not read yet.
        """
        temp_dir = tempfile.mkdtemp(prefix="advisor-duckdb-")
        con = None
        try:
            con = _connect(config.threads, temp_dir, config.engine_memory_gib)
            sv.create_macros(con)
            sources, columns, skipped = open_sources(con, logs, config.columns)
            con.execute("SET preserve_insertion_order = false")
            union = " UNION ALL ".join(s.select for s in sources)
            sv.create_row_views(con, union)
        except BaseException:
            if con is not None:
                con.close()
            shutil.rmtree(temp_dir, ignore_errors=True)
            raise
        return cls(con, temp_dir, sources, columns, skipped, config)

    def close(self) -> None:
        """Close the database and remove its temporary folder."""
        if self._con is not None:
            self._con.close()
            self._con = None
        shutil.rmtree(self._temp_dir, ignore_errors=True)

    def __enter__(self) -> DuckDBEngine:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    @property
    def files(self) -> tuple[InputFile, ...]:
        """The log files read (as :attr:`RawLog.files`)."""
        return tuple(s.info for s in self._sources)

    def _df(self, sql: str) -> pd.DataFrame:
        return self._con.execute(sql).df()

    def _where_pos(self, pos: int) -> tuple[str, int]:
        f, line = int(pos) >> 40, int(pos) & ((1 << 40) - 1)
        return self._sources[f].source, line

    # ------------------------------------------------------------------ validate

    def validate(self, catalog: RawCatalog | None) -> ValidatedLog:
        """Check, type and de-duplicate the log, as :func:`advisor.validate.validate` does.

        The returned log has ``events = None``: the events stay in DuckDB. Everything else
        (quarantine, quality, implausible users, as_of, catalogue) is as the in-memory path
        gives it.

        Raises
        ------
        InsufficientDataError
            If no row survives the checks, or none of the kept events counts.
        ConfigError
            If ``config.as_of`` cannot be read.
        """
        con, config = self._con, self._config
        mapping = self.columns.mapping

        odd = sv.read_odd_timestamps(sv.odd_timestamp_keys(con))
        con.register("adv_lk_df", odd)
        con.execute("CREATE OR REPLACE TEMP TABLE adv_lk AS SELECT key, ns::BIGINT AS ns, "
                    "st::TINYINT AS st, kind::TINYINT AS kind, naive, date FROM adv_lk_df")
        con.unregister("adv_lk_df")
        sv.create_timestamp_view(con)
        per_event, stats = sv.scan_stats(con)
        n_rows = stats["rows"]
        start = start_validation(self.skipped_files, per_event, stats, mapping, config)
        notes, as_of, em, rules = start.notes, start.as_of, start.event_map, start.rules
        self._rules = rules
        con.register("adv_rules_df", rules)
        con.execute("CREATE OR REPLACE TEMP TABLE adv_rules AS SELECT * FROM adv_rules_df")
        con.unregister("adv_rules_df")
        if em is not None:
            con.register("adv_em_df", em)
            con.execute("CREATE OR REPLACE TEMP TABLE adv_em AS SELECT * FROM adv_em_df")
            con.unregister("adv_em_df")

        cat_obj, cat_issues = None, ()
        if catalog is not None:
            cat_obj, cat_issues = build_catalog(
                catalog, separator=config.catalog_columns.category_separator)
            items = pd.DataFrame({"item": cat_obj.items["item"].astype("str")})
            con.register("adv_cat_df", items)
            con.execute("CREATE OR REPLACE TEMP TABLE adv_cat AS SELECT DISTINCT item "
                        "FROM adv_cat_df")
            con.unregister("adv_cat_df")

        sv.create_dictionaries(con)
        sv.create_rows(con, has_event=start.has_event, missing_r=start.missing_r,
                       as_of_ns=None if pd.isna(as_of) else int(as_of.value),
                       has_catalog=catalog is not None)
        sv.create_events(con)
        q = self._df("""
            SELECT q.pos, q.reason, d.key AS item, ru.event, q.value, q.r, q.ignored
            FROM adv_rows q JOIN adv_rules ru USING (r) LEFT JOIN adv_idict d ON d.code = q.i
            WHERE q.reason > 0 ORDER BY q.pos""")
        ev_stats = con.execute("SELECT count(*), coalesce(sum(n - 1), 0), coalesce(sum(ign), 0) "
                               "FROM adv_ev").fetchall()[0]
        rows_used, dups = int(ev_stats[0]), int(ev_stats[1])
        ignored = int(ev_stats[2]) + int((q["ignored"].fillna(False).astype(bool)
                                          & (q["reason"] == 9)).to_numpy().sum())
        if mapping.get("value") is not None and ignored:
            notes.append(f"{ignored:,} values that are not numbers belong to event types whose "
                         "value is not used; they were read as missing.")

        present = [f for f in LOG_FIELDS if f in mapping]
        pos = q["pos"].to_numpy(dtype=np.int64)
        qrows = raw_rows(con, self._sources, present, pos >> 40, pos & ((1 << 40) - 1))
        reason = q["reason"].to_numpy(dtype=np.int8)
        quarantine = qrows[present].copy()
        quarantine["reason"] = pd.Series(
            np.asarray(QUARANTINE_REASONS, dtype=object)[reason - 1], dtype="str")
        # Assigned as numpy arrays, as the in-memory path does (pandas infers the dtype).
        quarantine["_source"] = qrows["_source"].to_numpy(dtype=object)
        quarantine["_line"] = qrows["_line"].to_numpy(dtype=np.int64)

        issues = self._row_issues(q, qrows, reason, as_of,
                                  catalog.file.path if catalog is not None else None)
        if dups:
            file, line = self._where_pos(sv.first_duplicate(con))
            issues.append(duplicate_issue(dups, file, line))
        unmapped = self._unmapped_issue()
        if unmapped is not None:
            issues.append(unmapped)
        self._check_enough(n_rows, rows_used, qrows, reason)
        con.execute("DROP TABLE adv_rows")  # every later step reads the events

        bots = self._implausible()
        return finish_validation(
            bots=bots, anomalies=self._anomaly_issues(bots, as_of), issues=issues,
            notes=notes, catalog_issues=cat_issues, n_rows=n_rows, rows_used=rows_used,
            quarantine=quarantine, duplicates=dups, timestamp_format=start.timestamp_format,
            as_of=as_of, catalog=cat_obj, config=config)

    def _row_issues(self, q: pd.DataFrame, qrows: pd.DataFrame, reason: np.ndarray,
                    as_of: pd.Timestamp, cat_src: str | None) -> list[QualityIssue]:
        """The quarantine issues, by the in-memory path's own message code."""
        return quarantine_issues(q, qrows, reason, self._rules, as_of, self._config, cat_src)

    def _unmapped_issue(self) -> QualityIssue | None:
        if "event" not in self.columns.mapping:
            return None
        per = self._df("""
            SELECT ru.event, count(*) AS c, min(e.pos) AS first FROM adv_ev e
            JOIN adv_rules ru USING (r) WHERE NOT ru.mapped GROUP BY ru.event
            ORDER BY c DESC, first""")
        if per.empty:
            return None
        file, line = self._where_pos(int(per["first"].min()))
        return unmapped_issue(list(per["event"]), per["c"].to_numpy(), file, line,
                              self._config)

    def _check_enough(self, n_rows: int, rows_used: int, qrows: pd.DataFrame,
                      reason: np.ndarray) -> None:
        def counted() -> int:
            return self._con.execute("SELECT count(*) FROM adv_ev JOIN adv_rules USING (r) "
                                     "WHERE counts").fetchall()[0][0]

        check_enough(n_rows, rows_used, qrows, reason, counted, self._event_types,
                     self.columns.mapping)

    def _event_types(self) -> dict[str, int]:
        per = self._df("SELECT ru.event, count(*) AS c, min(e.pos) AS first FROM adv_ev e "
                       "JOIN adv_rules ru USING (r) GROUP BY ru.event ORDER BY c DESC, first")
        return {str(k): int(v) for k, v in zip(per["event"], per["c"])}

    def _implausible(self) -> ImplausibleUsers:
        """As :func:`advisor.validate.implausible_users`, on the counted events in DuckDB."""
        config = self._config
        per = self._df("""
            SELECT e.u, count(*) AS n, min(e.pos) AS first FROM adv_ev e
            JOIN adv_rules ru USING (r) WHERE ru.counts GROUP BY e.u""")
        counts = per["n"].to_numpy(dtype=np.int64)
        threshold = None
        volume = np.zeros(len(per), dtype=bool)
        if len(per) >= MIN_USERS_FOR_QUANTILE:
            threshold = float(config.implausible_factor
                              * np.quantile(counts, config.implausible_quantile))
            volume = counts > threshold
        # Only a user with more counted events in all than the hourly limit can break it.
        cap = int(config.max_events_per_hour)
        self._con.register("adv_busy_df", pd.DataFrame(
            {"u": per["u"].to_numpy(dtype=np.int64)[counts > cap]}))
        fast = self._df(f"""
            SELECT DISTINCT u FROM (
                SELECT e.u, adv_fdiv(e.ts, {_HOUR_NS}) AS h
                FROM adv_ev e JOIN adv_rules ru USING (r)
                WHERE ru.counts AND e.u IN (SELECT u FROM adv_busy_df)
                GROUP BY e.u, h HAVING count(*) > {cap})""")
        self._con.unregister("adv_busy_df")
        rate = per["u"].isin(fast["u"]).to_numpy()
        order = busiest_first(volume, rate, counts, per["first"].to_numpy())
        self._con.register("adv_flag_df", pd.DataFrame(
            {"code": per["u"].to_numpy(dtype=np.int64)[order]}))
        found = self._df("SELECT d.code, d.key FROM adv_udict d "
                         "WHERE d.code IN (SELECT code FROM adv_flag_df)")
        self._con.unregister("adv_flag_df")
        key = dict(zip(found["code"].astype(np.int64), found["key"].astype(str)))
        name = {int(i): key[int(per["u"].iat[i])] for i in order}
        return implausible_result(order, name, counts, volume, rate, threshold, len(per))

    def _first_at(self, where: str) -> tuple[str, int]:
        pos = self._con.execute(f"SELECT pos FROM adv_ev WHERE {where} ORDER BY ts, pos "
                                "LIMIT 1").fetchall()[0][0]
        return self._where_pos(pos)

    def _anomaly_issues(self, bots: ImplausibleUsers, as_of: pd.Timestamp
                        ) -> tuple[list[QualityIssue], list[str]]:
        """Daily counts and row look-ups in SQL; the issues themselves come from
        :func:`advisor.validate.anomalies.issues_from_daily`, as on the pandas path."""
        days = self._df(f"SELECT adv_fdiv(ts, {_DAY_NS}) AS d, count(*) AS c FROM adv_ev "
                        "GROUP BY ALL ORDER BY 1")
        return anomaly_issues(days["d"].to_numpy(), days["c"].to_numpy(), bots, as_of=as_of,
                              config=self._config, first_of_users=self._first_of_users,
                              first_at=self._first_at)

    def _first_of_users(self, users: tuple[str, ...]) -> tuple[str, int]:
        self._con.register("adv_bots_df", pd.DataFrame({"key": list(users)}))
        try:
            pos = self._con.execute(
                "SELECT min(pos) FROM adv_ev WHERE u IN (SELECT code FROM adv_udict "
                "WHERE key IN (SELECT key FROM adv_bots_df))").fetchall()[0][0]
        finally:
            self._con.unregister("adv_bots_df")
        return self._where_pos(pos)

    # ------------------------------------------------------------------ aggregate

    def event_items(self) -> np.ndarray:
        """Distinct item ids (str) with at least one usable event of any type."""
        return self._df("SELECT key FROM adv_idict WHERE code IN (SELECT DISTINCT i "
                        "FROM adv_ev)")["key"].to_numpy(dtype=object)

    def aggregate(self, log: ValidatedLog) -> Aggregates:
        """The :class:`Aggregates` of the validated events, as the pandas engine computes them.

        ``log`` is what :meth:`validate` returned, possibly with its catalogue trimmed
        (``pipeline._catalog_as_of``); its catalogue gives the unseen items.

        Notes
        -----
        Users and items are grouped by their dictionary codes, which follow the sorted ids;
        the counted ones are then renumbered ``0..n-1`` in the same order, which is the
        numbering ``pandas.factorize(sort=True)`` gives the in-memory engine. Ids sort by
        code point in both (DuckDB compares UTF-8 bytes, which orders the same way).
        """
        con = self._con
        con.execute(f"""
            CREATE OR REPLACE TEMP TABLE adv_cev AS
            SELECT e.u, e.i, adv_fdiv(e.ts, {_SEC_NS}) AS sec
            FROM adv_ev e JOIN adv_rules ru USING (r) WHERE ru.counts""")
        users = self._df("SELECT code, key FROM adv_udict WHERE code IN "
                         "(SELECT DISTINCT u FROM adv_cev) ORDER BY code")
        items = self._df("SELECT code, key FROM adv_idict WHERE code IN "
                         "(SELECT DISTINCT i FROM adv_cev) ORDER BY code")
        ucodes = users["code"].to_numpy(dtype=np.int64)
        icodes = items["code"].to_numpy(dtype=np.int64)
        user_labels = users["key"].to_numpy(dtype=object)
        seen = items["key"].to_numpy(dtype=object)
        n_users, n_seen = len(user_labels), len(seen)
        item_labels = np.asarray(seen, dtype=object)
        if log.catalog is not None:
            cat_ids = log.catalog.items["item"].to_numpy(dtype=object)
            unseen = np.setdiff1d(cat_ids.astype(str), item_labels.astype(str))
            item_labels = np.concatenate([item_labels, unseen.astype(object)])
        self._codes = (ucodes, item_labels)
        n_items = item_labels.size

        per_user = self._df("SELECT u, count(*) AS n, min(sec) AS lo, max(sec) AS hi "
                            "FROM adv_cev GROUP BY u ORDER BY u")
        user_events = per_user["n"].to_numpy(dtype=np.int64)
        user_first = per_user["lo"].to_numpy(dtype=np.int64)
        user_last = per_user["hi"].to_numpy(dtype=np.int64)
        per_item = self._df("SELECT i, count(*) AS n, min(sec) AS lo FROM adv_cev GROUP BY i "
                            "ORDER BY i")
        item_events = np.zeros(n_items, dtype=np.int64)
        item_events[:n_seen] = per_item["n"].to_numpy(dtype=np.int64)
        first_seen = per_item["lo"].to_numpy(dtype=np.int64)
        item_first = np.full(n_items, -1, dtype=np.int64)
        item_first[:n_seen] = first_seen

        implausible = labels_in(np.asarray(user_labels, dtype=object), log.implausible_users)
        totals = con.execute("SELECT count(*), min(sec), max(sec) FROM adv_cev").fetchall()[0]
        all_events = con.execute("SELECT count(*) FROM adv_ev").fetchall()[0][0]
        weekly = self._weekly(user_first, first_seen)
        # The largest result last, so that it is not held while DuckDB works on the others.
        pairs = self._pairs(renumber(ucodes), renumber(icodes), int(totals[0]))
        pu, pi = pairs["user_idx"].to_numpy(), pairs["item_idx"].to_numpy()
        user_items = np.bincount(pu, minlength=n_users).astype(np.int64)
        item_users = np.bincount(pi, minlength=n_items).astype(np.int64)
        return Aggregates(
            user_labels=np.asarray(user_labels, dtype=object),
            item_labels=item_labels,
            n_seen_items=n_seen,
            pairs=pairs,
            user_items=user_items,
            user_events=user_events,
            user_first_ts=user_first,
            user_last_ts=user_last,
            item_users=item_users,
            item_events=item_events,
            item_first_ts=item_first,
            weekly=weekly,
            implausible=implausible,
            counted_events=int(totals[0]),
            all_events=int(all_events),
            first_ts=int(totals[1]),
            last_ts=int(totals[2]),
        )

    def _pairs(self, user_lut: np.ndarray, item_lut: np.ndarray, events: int
               ) -> pd.DataFrame:
        """``Aggregates.pairs``, streamed out of DuckDB in batches into numpy columns
        allocated for ``events`` rows (the counted events, at least the distinct pairs):
        pages past the last pair are never touched, so they take no memory, and the peak is
        the frame plus one batch, not an Arrow table plus its pandas copy, nor batches plus
        their concatenation. (A counting query to size the columns exactly made DuckDB run
        out of memory at 100M events; lowering its memory for this step did too.)"""
        dtypes = {"user_idx": np.int32, "item_idx": np.int32, "first_ts": np.int64,
                  "last_ts": np.int64}
        out = {name: np.empty(events, dtype=dtype) for name, dtype in dtypes.items()}
        reader = self._con.sql("""
            SELECT u AS user_idx, i AS item_idx, min(sec) AS first_ts, max(sec) AS last_ts
            FROM adv_cev GROUP BY u, i ORDER BY u, i""").to_arrow_reader(1 << 20)
        at = 0
        for batch in reader:
            size = batch.num_rows
            if at + size > events:
                raise RuntimeError(f"internal: more pairs than the {events} counted events")
            for name, col in zip(batch.schema.names, batch.columns):
                values = col.to_numpy(zero_copy_only=False)
                if name == "user_idx":
                    values = user_lut[values]
                elif name == "item_idx":
                    values = item_lut[values]
                out[name][at:at + size] = values
            at += size
        return pd.DataFrame({name: col[:at] for name, col in out.items()}, copy=False)

    def _weekly(self, user_first: np.ndarray, item_first: np.ndarray) -> pd.DataFrame:
        """As ``pandas_engine._weekly``: weeks over the span of all usable events."""
        def wk(col: str) -> str:
            return (f"adv_fdiv({col} + {_MONDAY_SHIFT}, {_WEEK}) * {_WEEK} - {_MONDAY_SHIFT}")

        every = self._df(f"SELECT {wk(f'adv_fdiv(ts, {_SEC_NS})')} AS w, count(*) AS c "
                         "FROM adv_ev GROUP BY ALL")
        counted = self._df(f"""
            WITH a AS (SELECT DISTINCT {wk('sec')} AS w, u FROM adv_cev)
            SELECT a.w, count(*) AS active, count(b.u) AS returning FROM a
            LEFT JOIN a b ON b.u = a.u AND b.w = a.w - {_WEEK} GROUP BY a.w""")
        inter = self._df(f"SELECT {wk('sec')} AS w, count(*) AS c FROM adv_cev GROUP BY ALL")
        return weekly_frame(every["w"], every["c"], inter.set_index("w")["c"].reindex(
            every["w"], fill_value=0).to_numpy(), counted["w"], counted["active"],
            counted["returning"], user_first, item_first)

    def summary(self) -> EventSummary:
        """The :class:`EventSummary` (call after :meth:`aggregate`)."""
        if self._codes is None:
            raise RuntimeError("call aggregate() before summary()")
        kinds = self._df("SELECT ru.kind, count(*) AS c FROM adv_ev e JOIN adv_rules ru "
                         "USING (r) WHERE e.value IS NOT NULL GROUP BY ru.kind")
        by_kind = dict(zip(kinds["kind"].astype(str), kinds["c"].astype(int)))
        sessions = self._con.execute('SELECT count(*) FROM (SELECT 1 FROM adv_ev WHERE '
                                     '"session" IS NOT NULL LIMIT 1)').fetchall()[0][0] > 0
        ratings = None
        if by_kind.get("rating", 0):
            ucodes, item_labels = self._codes
            r = self._df(f"""
                SELECT e.u, e.i, adv_fdiv(e.ts, {_SEC_NS}) AS ts, e.value
                FROM adv_ev e JOIN adv_rules ru USING (r)
                WHERE ru.kind = 'rating' AND e.value IS NOT NULL ORDER BY e.pos""")
            keys = self._df("SELECT code, key FROM adv_idict ORDER BY code")
            item_of_code = np.full(int(keys["code"].max()) + 1, -1, dtype=np.int64)
            item_of_code[keys["code"].to_numpy(dtype=np.int64)] = pd.Index(
                item_labels).get_indexer(keys["key"].to_numpy(dtype=object))
            u = r["u"].to_numpy(dtype=np.int64)
            at = np.minimum(np.searchsorted(ucodes, u), max(len(ucodes) - 1, 0))
            uidx = np.where(ucodes[at] == u, at, -1) if len(ucodes) else np.full(len(u), -1)
            iidx = item_of_code[r["i"].to_numpy(dtype=np.int64)]
            ok = (uidx >= 0) & (iidx >= 0)
            ratings = pd.DataFrame({"item_idx": iidx[ok].astype(np.int64),
                                    "user_idx": uidx[ok].astype(np.int64),
                                    "ts": r["ts"].to_numpy(dtype=np.int64)[ok],
                                    "value": r["value"].to_numpy(dtype=np.float64)[ok]})
        return EventSummary(
            progress_events=int(by_kind.get("progress", 0)),
            rating_events=int(by_kind.get("rating", 0)),
            price_events=int(by_kind.get("price", 0)),
            sessions=bool(sessions),
            event_types=self._event_types(),
            ratings=ratings,
        )
