"""Apache Spark engine: validate and aggregate a Parquet log where it lives.

For logs on a cluster or in a data lake: Spark reads the Parquet files (a local file or
folder, or a URI such as ``s3a://``, ``hdfs://`` or ``file://``), applies the validation rules
of the embedded engines in Spark SQL and computes the same :class:`Aggregates`. Only what the
later stages need comes back to the driver: one row per user, item, distinct pair and week,
the quarantined rows, the distinct odd timestamp texts, the rating events, and the quality
report. The events themselves are never collected.

Both embedded engines and this one must give identical results;
``tests/test_aggregate_spark.py`` compares it with the DuckDB engine. What Spark could read
differently (other formats than Parquet, nanosecond or INT96 timestamps, decimals, binary or
nested columns) is refused with a :class:`ConfigError` pointing at ``--engine duckdb``.

Notes
-----
*Session.* With ``config.spark_master`` unset, the active Spark session is used (and left
running); otherwise a session is started (``local[threads]`` by default, UTC, no web UI,
Arrow transfers) and stopped on :meth:`close`. While the engine is open it sets a few SQL
options of the session (UTC session time zone, ANSI arithmetic, case-sensitive column names,
Parquet timestamps without a zone read as such, ...; see ``_SESSION_CONF``) and restores them
on close; its temporary
views carry a private ``adv_<token>_`` prefix and are dropped on close.

*Ids.* Users and items are numbered in sorted code-point order (the order
``pandas.factorize(sort=True)`` and DuckDB give). The per-user counts and the pairs come back
keyed by the id text and are sorted and numbered on the driver (pyarrow compares UTF-8 bytes,
which orders code points); the per-item counts are summed from the pairs. No global sort or
window runs in Spark. The cost: the pair rows bring their two id texts to the driver instead of
two integers (transient; the numbered pairs are held anyway).

*Memory.* The typed rows are cached once (memory, spilling to disk) so the log is read and its
texts cleaned once; after the checks they give way to the de-duplicated events, which stay
cached until :meth:`close`. The driver holds what the other engines hold: the aggregates, the
quarantined rows and the rating events.

*Remote files.* Listed and opened through Hadoop's file system; the footers go to pyarrow,
the SHA-256 fingerprints are computed by Spark's executors (``binaryFile``, one read of each
file; files above 2 GiB are refused), and quarantined rows are fetched by Spark and written as
text by the in-memory reader's code. Local paths are handed to Spark as ``file://`` URIs; on a
cluster they must be on storage every executor mounts.

``pyspark`` is imported only when this engine is used.

Example
-------
>>> from advisor.config import AuditConfig
>>> with SparkEngine.open("logs.parquet", AuditConfig(engine="spark")) as eng:  # doctest: +SKIP
...     log = eng.validate(None)
...     agg = eng.aggregate(log)
"""

from __future__ import annotations

import os
import secrets
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from advisor.aggregate import _spark_sql as ss
from advisor.aggregate._engine_common import (
    anomaly_issues,
    busiest_first,
    check_enough,
    duplicate_issue,
    finish_validation,
    implausible_result,
    quarantine_issues,
    start_validation,
    unmapped_issue,
    weekly_frame,
)
from advisor.aggregate._sql_input import SourceFile, raw_rows
from advisor.aggregate._sql_validate import KIND_NAMES, read_odd_timestamps
from advisor.aggregate.model import Aggregates, labels_in
from advisor.aggregate.pandas_engine import _WEEK
from advisor.aggregate.summary import EventSummary
from advisor.config import AuditConfig
from advisor.errors import ConfigError
from advisor.load.model import LOG_FIELDS, ColumnDetection, InputFile, RawCatalog
from advisor.load.readers import _one_line
from advisor.validate.anomalies import (
    MIN_USERS_FOR_QUANTILE,
    ImplausibleUsers,
)
from advisor.validate.checks import QUARANTINE_REASONS, build_catalog
from advisor.validate.model import QualityIssue, ValidatedLog

__all__ = ["SparkEngine"]

_DAY_NS = 86_400_000_000_000
_HOUR_NS = 3_600_000_000_000
_SEC_NS = 1_000_000_000
_MONDAY_SHIFT = 3 * 86400
#: Odd timestamp texts up to this many are broadcast to every task (a hash table of that
#: size is a few tens of MB); beyond, Spark chooses the join.
_BROADCAST_ODD = 1_000_000
#: SQL options the engine's queries rely on, set while it is open and restored on close.
_SESSION_CONF = {
    "spark.sql.session.timeZone": "UTC",
    "spark.sql.timestampType": "TIMESTAMP_LTZ",  # TIMESTAMP means an instant
    "spark.sql.parser.escapedStringLiterals": "false",  # backslashes in literals escape
    "spark.sql.ansi.enabled": "true",
    "spark.sql.caseSensitive": "true",
    "spark.sql.parquet.inferTimestampNTZ.enabled": "true",
    "spark.sql.files.ignoreCorruptFiles": "false",
    "spark.sql.files.ignoreMissingFiles": "false",
}
_NEEDS = ("--engine spark needs the pyspark package (pip install 'advisor[spark]') and Java 17 "
          "or later (on PATH or in JAVA_HOME)")


def _start(config: AuditConfig):
    """The Spark session to use, and whether this engine started it."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FutureWarning)  # pyspark on pandas 3
            from pyspark import SparkContext
            from pyspark.sql import SparkSession
    except ImportError:
        raise ConfigError(f"{_NEEDS}; pyspark is not installed. Install it, or use "
                          "--engine duckdb.") from None
    if config.spark_master is None:
        active = SparkSession.getActiveSession()
        if active is not None:
            return active, False
    threads = int(config.threads or os.cpu_count() or 1)
    master = config.spark_master or f"local[{threads}]"
    existing = SparkContext._active_spark_context is not None
    builder = (SparkSession.builder.master(master).appName("advisor audit")
               .config("spark.sql.session.timeZone", "UTC")
               .config("spark.ui.enabled", "false")
               .config("spark.ui.showConsoleProgress", "false")
               .config("spark.sql.execution.arrow.pyspark.enabled", "true"))
    if master.startswith("local"):
        builder = builder.config("spark.sql.shuffle.partitions", str(2 * threads))
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FutureWarning)  # pyspark on pandas 3
            spark = builder.getOrCreate()
    except Exception as exc:  # Java missing or too old, master unreachable
        raise ConfigError(
            f"Spark could not start with master {master!r} ({_one_line(exc)[:300]}). {_NEEDS}; "
            "check them, or use --engine duckdb."
        ) from None
    if not existing:
        spark.sparkContext.setLogLevel("ERROR")
    return spark, not existing


class SparkEngine:
    """One Parquet log opened in a Spark session; use as a context manager.

    Call :meth:`validate`, then (optionally) :meth:`event_items`, :meth:`aggregate` and
    :meth:`summary`, in that order. Views, cached tables and session options are cleaned up
    on :meth:`close` (and the session stopped if the engine started it).
    """

    def __init__(self, spark, owned: bool, config: AuditConfig):
        self._spark = spark
        self._owned = owned
        self._config = config
        self._prefix = f"adv_{secrets.token_hex(4)}_"
        self._views: list[str] = []
        self._cached: dict[str, object] = {}
        self._saved: dict[str, str | None] = {}
        self._inputs: list[ss.ParquetInput] = []
        self.columns: ColumnDetection | None = None
        """How the log's columns were mapped (as :attr:`RawLog.columns`)."""
        self.skipped_files: tuple[str, ...] = ()
        self._rules: pd.DataFrame | None = None
        self._per_rule: pd.DataFrame | None = None
        self._labels: tuple[np.ndarray, np.ndarray] | None = None
        self._users: pa.Table | None = None
        self._days: pd.DataFrame | None = None
        self._fm: pa.Table | None = None

    def _configure(self) -> None:
        """Set the SQL options the queries rely on, remembering the session's own."""
        for key, value in _SESSION_CONF.items():
            self._saved[key] = self._spark.conf.get(key, None)
            self._spark.conf.set(key, value)

    # ------------------------------------------------------------------ lifecycle

    @classmethod
    def open(cls, logs: str | Path, config: AuditConfig) -> SparkEngine:
        """Open the Parquet log (a file, a folder, or a URI Spark reads) for this engine.

        Raises
        ------
        LogFormatError
            As :func:`advisor.load.read_logs`.
        ConfigError
            If pyspark or Java is missing, or the input is not Parquet or has column types
            Spark would read differently.
        """
        spark, owned = _start(config)
        engine = None
        try:
            engine = cls(spark, owned, config)
            engine._configure()
            engine._load(logs)
        except BaseException:
            if engine is not None:
                engine.close()
            elif owned:
                spark.stop()
            raise
        return engine

    def close(self) -> None:
        """Drop the views and cached tables, restore the session options, and stop the
        session if this engine started it."""
        if self._spark is None:
            return
        spark, self._spark = self._spark, None
        for df in self._cached.values():
            df.unpersist()
        for name in self._views:
            spark.catalog.dropTempView(name)
        if self._owned:
            spark.stop()
            return
        for key, value in self._saved.items():
            if value is None:
                spark.conf.unset(key)
            else:
                spark.conf.set(key, value)

    def __enter__(self) -> SparkEngine:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    @property
    def files(self) -> tuple[InputFile, ...]:
        """The log files read (as :attr:`RawLog.files`)."""
        return tuple(i.info for i in self._inputs)

    # ------------------------------------------------------------------ Spark helpers

    def _q(self, sql: str) -> str:
        return sql.replace("adv_", self._prefix)

    def _arrow(self, sql: str) -> pa.Table:
        return self._spark.sql(self._q(sql)).toArrow()

    def _df(self, sql: str) -> pd.DataFrame:
        return self._arrow(sql).to_pandas()

    def _view(self, name: str, sql: str, *, cache: bool = False) -> None:
        df = self._spark.sql(self._q(sql))
        if cache:
            from pyspark import StorageLevel

            df = df.persist(StorageLevel.MEMORY_AND_DISK)
            self._cached[name] = df
        self._register(name, df)

    def _register(self, name: str, df) -> None:
        full = self._q(name)
        df.createOrReplaceTempView(full)
        if full not in self._views:
            self._views.append(full)

    def _table(self, name: str, table: pa.Table) -> None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FutureWarning)
            self._register(name, self._spark.createDataFrame(table))

    def _drop(self, name: str) -> None:
        df = self._cached.pop(name, None)
        if df is not None:
            df.unpersist()
        full = self._q(name)
        self._spark.catalog.dropTempView(full)
        self._views.remove(full)

    def _where_pos(self, pos: int) -> tuple[str, int]:
        f, line = int(pos) >> 40, int(pos) & ((1 << 40) - 1)
        return self._inputs[f].source, line

    # ------------------------------------------------------------------ input

    def _load(self, logs) -> None:
        spark = self._spark
        logs = logs if ss.is_uri(logs) else Path(logs)
        self._inputs, self.columns, self.skipped_files = ss.open_inputs(
            spark, logs, self._config.columns)
        groups: dict[tuple, list[ss.ParquetInput]] = {}
        for inp in self._inputs:
            groups.setdefault(ss.group_signature(inp), []).append(inp)
        floats = []
        for k, members in enumerate(groups.values()):
            try:
                df = (spark.read.schema(ss.read_schema(members[0]))
                      .parquet(*[m.spark_path for m in members])
                      .selectExpr(*ss.canonical_columns(members[0])))
            except Exception as exc:  # an AnalysisException: a path Spark cannot take
                raise ConfigError(
                    f"{members[0].source}: Spark cannot read it ({_one_line(exc)[:300]}); use "
                    "--engine duckdb for this input.") from None
            self._register(f"adv_g{k}", df)
            if members[0].kinds.get("value") == "float32":
                floats.append(f"SELECT DISTINCT value_x FROM adv_g{k}")
        if floats:
            got = self._arrow(" UNION ".join(floats)).column("value_x")
            self._table("adv_f32", ss.float32_lookup(got.combine_chunks()))
        parts = []
        for k, members in enumerate(groups.values()):
            value_d, join = "g.value_d", ""
            if members[0].kinds.get("value") == "float32":
                value_d, join = "l.d", " LEFT JOIN adv_f32 l ON l.x = g.value_x"
            parts.append(f"SELECT g.fp, g.line, g.user_s, g.item_s, g.ts_s, g.ts_i, g.ts_c, "
                         f"g.event_s, g.value_s, {value_d} AS value_d, g.session_s "
                         f"FROM adv_g{k} g{join}")
        self._view("adv_src", " UNION ALL ".join(parts))
        for name, sql in ss.row_views("adv_src"):
            # The typed rows are kept (memory, spilling to disk): the log is read and its
            # texts cleaned once, for the statistics and for the rows' checks.
            self._view(name, sql, cache=name == "adv_t4")

    def _file_map(self, names: list[str]) -> np.ndarray:
        """Spark's name of each file (``_metadata.file_path``) -> the file's index."""
        index = {i.key: i.index for i in self._inputs}
        got = np.asarray([index.get(ss.path_key(fp), -1) for fp in names], dtype=np.int64)
        if (got < 0).any() or np.unique(got).size != len(self._inputs):
            odd = next((fp for fp, i in zip(names, got) if i < 0), "(a file missing)")
            raise ConfigError(
                f"Spark names the file {odd} in a way the engine cannot match to the files it "
                "listed; use --engine duckdb for this input.")
        self._fm = pa.table({"fp": pa.array(names, pa.string()), "f": pa.array(got, pa.int32())})
        self._table("adv_fm", self._fm)
        return got

    # ------------------------------------------------------------------ validate

    def _scan(self) -> tuple[pd.DataFrame, dict]:
        """As ``_sql_validate.scan_stats``, with the odd timestamp texts read in between."""
        st = self._arrow(ss.SCAN_STATS)
        g = st.column("g").to_numpy()
        per = st.filter(pa.array(g == 1))
        odd = st.filter(pa.array((g == 0) & st.column("odd").is_valid().to_numpy(
            zero_copy_only=False)))
        fps = pc.unique(per.column("fp"))
        f = self._file_map(fps.to_pylist())[pc.index_in(per.column("fp"), value_set=fps)
                                              .to_numpy()]
        first = (f << 40) + per.column("first_line").to_numpy()
        lk = read_odd_timestamps(odd.column("odd").to_pylist())
        odd_n = odd.column("n").to_numpy()
        ok = lk["st"].to_numpy() == 1
        kind = lk["kind"].to_numpy()
        kinds = {}
        for k, name in KIND_NAMES.items():
            n = int(pc.sum(per.column(f"k{k}")).as_py() or 0) + int(odd_n[ok & (kind == k)].sum())
            if n:
                kinds[name] = n
        ts_max = [v for v in [pc.max(per.column("ts_max")).as_py()] if v is not None]
        if ok.any():
            ts_max.append(int(lk["ns"][ok].max()))
        stats = {
            "rows": int(pc.sum(per.column("n")).as_py()),
            "kinds": dict(sorted(kinds.items(), key=lambda kv: -kv[1])),
            "naive": int(pc.sum(per.column("naive")).as_py())
            + int(odd_n[lk["naive"].to_numpy(dtype=bool)].sum()),
            "date_only": int(pc.sum(per.column("dates")).as_py())
            + int(odd_n[lk["date"].to_numpy(dtype=bool)].sum()),
            "ts_max": pd.Timestamp(max(ts_max), unit="ns", tz="UTC") if ts_max else pd.NaT,
        }
        ns = lk["ns"]
        self._table("adv_lk", pa.table({
            "key": pa.array(lk["key"].to_numpy(dtype=object), pa.string()),
            "ns": pa.array(ns.to_numpy(dtype=np.int64, na_value=0), pa.int64(),
                           mask=ns.isna().to_numpy()),
            "st": pa.array(lk["st"].to_numpy(dtype=np.int8), pa.int8())}))
        hint = "/*+ BROADCAST(lk), BROADCAST(m) */" if len(lk) <= _BROADCAST_ODD \
            else "/*+ BROADCAST(m) */"
        self._view("adv_t5", ss.T5.format(hint=hint))
        frame = pd.DataFrame({"ev_key": per.column("ev_key").to_pandas(),
                              "first": first}).groupby("ev_key", dropna=False).min()
        return frame.reset_index(), stats

    def validate(self, catalog: RawCatalog | None) -> ValidatedLog:
        """Check, type and de-duplicate the log, as :func:`advisor.validate.validate` does.

        The returned log has ``events = None``: the events stay in Spark. Everything else
        (quarantine, quality, implausible users, as_of, catalogue) is as the other engines
        give it.

        Raises
        ------
        InsufficientDataError
            If no row survives the checks, or none of the kept events counts.
        ConfigError
            If ``config.as_of`` cannot be read.
        """
        config = self._config
        mapping = self.columns.mapping
        per_event, stats = self._scan()
        n_rows = stats["rows"]
        start = start_validation(self.skipped_files, per_event, stats, mapping, config)
        notes, as_of, em, rules = start.notes, start.as_of, start.event_map, start.rules
        self._rules = rules
        self._table("adv_rules", pa.Table.from_pandas(rules, preserve_index=False))
        if em is not None:
            self._table("adv_em", pa.Table.from_pandas(em, preserve_index=False))
        cat_obj, cat_issues = None, ()
        if catalog is not None:
            cat_obj, cat_issues = build_catalog(
                catalog, separator=config.catalog_columns.category_separator)
            items = pc.unique(pa.array(cat_obj.items["item"].astype("str").to_numpy(
                dtype=object), pa.string()))
            self._table("adv_cat", pa.table({"item": items}))

        self._view("adv_rows", ss.rows_sql(
            has_event=start.has_event, missing_r=start.missing_r,
            as_of_ns=None if pd.isna(as_of) else int(as_of.value),
            has_catalog=catalog is not None), cache=True)
        q = self._df("""
            SELECT q.pos, q.reason, q.i_key AS item, ru.event, q.value, q.r, q.ignored
            FROM adv_rows q JOIN adv_rules ru ON ru.r = q.r WHERE q.reason > 0""")
        q = q.sort_values("pos", kind="stable").reset_index(drop=True)
        self._drop("adv_t4")  # the rows hold all later steps need
        self._view("adv_ev", ss.EVENTS, cache=True)
        per_rule = self._df(ss.PER_RULE)
        self._per_rule = per_rule
        rows_used, dups = int(per_rule["c"].sum()), int(per_rule["dup"].sum())
        ignored = int(per_rule["ign"].sum()) + int((q["ignored"].fillna(False).astype(bool)
                                                    & (q["reason"] == 9)).to_numpy().sum())
        if mapping.get("value") is not None and ignored:
            notes.append(f"{ignored:,} values that are not numbers belong to event types whose "
                         "value is not used; they were read as missing.")

        present = [f for f in LOG_FIELDS if f in mapping]
        pos = q["pos"].to_numpy(dtype=np.int64)
        qrows = self._raw_rows(present, pos >> 40, pos & ((1 << 40) - 1))
        reason = q["reason"].to_numpy(dtype=np.int8)
        quarantine = qrows[present].copy()
        quarantine["reason"] = pd.Series(
            np.asarray(QUARANTINE_REASONS, dtype=object)[reason - 1], dtype="str")
        quarantine["_source"] = qrows["_source"].to_numpy(dtype=object)
        quarantine["_line"] = qrows["_line"].to_numpy(dtype=np.int64)

        issues = quarantine_issues(q, qrows, reason, rules, as_of, config,
                                    catalog.file.path if catalog is not None else None)
        if dups:
            first = self._arrow(ss.FIRST_DUPLICATE).column("pos")[0].as_py()
            issues.append(duplicate_issue(dups, *self._where_pos(first)))
        unmapped = self._unmapped_issue()
        if unmapped is not None:
            issues.append(unmapped)
        check_enough(n_rows, rows_used, qrows, reason, self._counted, self._event_types,
                      mapping)
        self._drop("adv_rows")  # every later step reads the events

        bots = self._implausible()
        return finish_validation(
            bots=bots, anomalies=self._anomaly_issues(bots, as_of), issues=issues,
            notes=notes, catalog_issues=cat_issues, n_rows=n_rows, rows_used=rows_used,
            quarantine=quarantine, duplicates=dups, timestamp_format=start.timestamp_format,
            as_of=as_of, catalog=cat_obj, config=config)

    def _raw_rows(self, fields: list[str], f: np.ndarray, line: np.ndarray) -> pd.DataFrame:
        """The raw text of the quarantined rows, as the in-memory reader would show it."""
        if any(i.local is None for i in self._inputs):
            return ss.remote_raw_rows(self._spark, self._inputs, self._fm, fields, f, line)
        sources = [SourceFile(i.index, i.local, i.source, "parquet", "", i.columns, i.info)
                   for i in self._inputs]
        return raw_rows(None, sources, fields, f, line)

    def _counted(self) -> int:
        counts = self._rules["counts"].to_numpy(dtype=bool)
        pr = self._per_rule
        return int(pr["c"].to_numpy()[counts[pr["r"].to_numpy()]].sum())

    def _event_types(self) -> dict[str, int]:
        """Usable events per (lower-cased) event type, most frequent first; ties in order of
        first appearance."""
        pr = self._per_rule
        names = self._rules["event"].to_numpy(dtype=object)[pr["r"].to_numpy()]
        order = np.lexsort((pr["first"].to_numpy(), -pr["c"].to_numpy()))
        return {str(names[i]): int(pr["c"].iat[i]) for i in order}

    def _unmapped_issue(self) -> QualityIssue | None:
        if "event" not in self.columns.mapping:
            return None
        pr = self._per_rule
        mapped = self._rules["mapped"].to_numpy(dtype=bool)[pr["r"].to_numpy()]
        per = pr.loc[~mapped]
        if per.empty:
            return None
        per = per.iloc[np.lexsort((per["first"].to_numpy(), -per["c"].to_numpy()))]
        names = self._rules["event"].to_numpy(dtype=object)[per["r"].to_numpy()]
        file, line = self._where_pos(int(per["first"].min()))
        return unmapped_issue(list(names), per["c"].to_numpy(), file, line, self._config)

    def _implausible(self) -> ImplausibleUsers:
        """As :func:`advisor.validate.implausible_users`, on the counted events in Spark."""
        config = self._config
        self._view("adv_cev", f"""
            SELECT e.u_key AS u, e.i_key AS i, {ss.fdiv('e.ts', _SEC_NS)} AS sec,
                   e.pos, e.ts
            FROM adv_ev e JOIN adv_rules ru ON ru.r = e.r WHERE ru.counts""")
        # Per user, from counts per (user, clock hour): the hourly rule in the same pass.
        self._users = _sorted(self._arrow(f"""
            SELECT u, sum(c) AS n, min(first) AS first, min(lo) AS lo, max(hi) AS hi,
                   max(c) AS top_hour
            FROM (SELECT u, count(*) AS c, min(pos) AS first, min(sec) AS lo, max(sec) AS hi
                  FROM adv_cev GROUP BY u, {ss.fdiv('ts', _HOUR_NS)})
            GROUP BY u"""), "u")
        per = self._users.select(["u", "n", "first", "top_hour"]).to_pandas()
        counts = per["n"].to_numpy(dtype=np.int64)
        threshold = None
        volume = np.zeros(len(per), dtype=bool)
        if len(per) >= MIN_USERS_FOR_QUANTILE:
            threshold = float(config.implausible_factor
                              * np.quantile(counts, config.implausible_quantile))
            volume = counts > threshold
        rate = per["top_hour"].to_numpy(dtype=np.int64) > int(config.max_events_per_hour)
        order = busiest_first(volume, rate, counts, per["first"].to_numpy())
        name = per["u"].to_numpy(dtype=object)
        return implausible_result(order, name, counts, volume, rate, threshold, len(per))

    def _first_at(self, where: str) -> tuple[str, int]:
        pos = self._arrow(f"SELECT pos FROM adv_ev WHERE {where} ORDER BY ts, pos "
                          "LIMIT 1").column("pos")[0].as_py()
        return self._where_pos(pos)

    def _anomaly_issues(self, bots: ImplausibleUsers, as_of: pd.Timestamp
                        ) -> tuple[list[QualityIssue], list[str]]:
        """Daily counts and row look-ups in Spark; the issues themselves come from
        :func:`advisor.validate.anomalies.issues_from_daily`, as on the other engines."""
        days = self._df(f"""
            SELECT {ss.fdiv('e.ts', _DAY_NS)} AS d, count(*) AS c, count_if(ru.counts) AS ci
            FROM adv_ev e JOIN adv_rules ru ON ru.r = e.r GROUP BY 1""").sort_values("d")
        self._days = days
        return anomaly_issues(days["d"].to_numpy(), days["c"].to_numpy(), bots, as_of=as_of,
                              config=self._config, first_of_users=self._first_of_users,
                              first_at=self._first_at)

    def _first_of_users(self, users: tuple[str, ...]) -> tuple[str, int]:
        self._table("adv_bots", pa.table({"u": pa.array(list(users), pa.string())}))
        pos = self._arrow("SELECT min(pos) AS pos FROM adv_ev WHERE u_key IN "
                          "(SELECT u FROM adv_bots)").column("pos")[0].as_py()
        return self._where_pos(pos)

    # ------------------------------------------------------------------ aggregate

    def event_items(self) -> np.ndarray:
        """Distinct item ids (str) with at least one usable event of any type."""
        got = self._arrow("SELECT DISTINCT i_key FROM adv_ev").column("i_key")
        return got.to_numpy(zero_copy_only=False).astype(object)

    def aggregate(self, log: ValidatedLog) -> Aggregates:
        """The :class:`Aggregates` of the validated events, as the other engines compute them.

        ``log`` is what :meth:`validate` returned, possibly with its catalogue trimmed
        (``pipeline._catalog_as_of``); its catalogue gives the unseen items.

        Notes
        -----
        Counted users and items are numbered ``0..n-1`` in sorted code-point order of their
        ids, the numbering ``pandas.factorize(sort=True)`` gives the in-memory engine.
        """
        users = self._users
        got = self._arrow("""
            SELECT u, i, min(sec) AS first_ts, max(sec) AS last_ts, count(*) AS events
            FROM adv_cev GROUP BY u, i""")
        items = pc.unique(got.column("i"))
        items = items.take(pc.sort_indices(items))
        user_labels = users.column("u").to_numpy(zero_copy_only=False).astype(object)
        seen = items.to_numpy(zero_copy_only=False).astype(object)
        n_users, n_seen = len(user_labels), len(seen)
        item_labels = np.asarray(seen, dtype=object)
        if log.catalog is not None:
            cat_ids = log.catalog.items["item"].to_numpy(dtype=object)
            unseen = np.setdiff1d(cat_ids.astype(str), item_labels.astype(str))
            item_labels = np.concatenate([item_labels, unseen.astype(object)])
        self._labels = (user_labels, item_labels)
        n_items = item_labels.size

        pu = pc.index_in(got.column("u"), value_set=users.column("u")).to_numpy()
        pi = pc.index_in(got.column("i"), value_set=items).to_numpy()
        order = np.lexsort((pi, pu))
        pairs = pd.DataFrame({
            "user_idx": pu[order].astype(np.int32),
            "item_idx": pi[order].astype(np.int32),
            "first_ts": got.column("first_ts").to_numpy()[order].astype(np.int64),
            "last_ts": got.column("last_ts").to_numpy()[order].astype(np.int64),
        })
        user_items = np.bincount(pairs["user_idx"].to_numpy(), minlength=n_users).astype(np.int64)
        item_users = np.bincount(pairs["item_idx"].to_numpy(), minlength=n_items).astype(np.int64)
        user_events = users.column("n").to_numpy().astype(np.int64)
        user_first = users.column("lo").to_numpy().astype(np.int64)
        user_last = users.column("hi").to_numpy().astype(np.int64)
        item_events = np.zeros(n_items, dtype=np.int64)
        # Per item, from the pairs: counted events and first counted second.
        np.add.at(item_events, pi, got.column("events").to_numpy().astype(np.int64))
        first_seen = np.full(n_seen, np.iinfo(np.int64).max, dtype=np.int64)
        np.minimum.at(first_seen, pi, got.column("first_ts").to_numpy().astype(np.int64))
        item_first = np.full(n_items, -1, dtype=np.int64)
        item_first[:n_seen] = first_seen

        implausible = labels_in(user_labels, log.implausible_users)
        weekly = self._weekly(user_first, first_seen)
        return Aggregates(
            user_labels=user_labels,
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
            counted_events=int(user_events.sum()),
            all_events=int(self._per_rule["c"].sum()),
            first_ts=int(user_first.min()),
            last_ts=int(user_last.max()),
        )

    def _weekly(self, user_first: np.ndarray, item_first: np.ndarray) -> pd.DataFrame:
        """As ``pandas_engine._weekly``: weeks over the span of all usable events."""
        def wk(col: str) -> str:
            return f"({ss.fdiv(f'{col} + {_MONDAY_SHIFT}', _WEEK)} * {_WEEK} - {_MONDAY_SHIFT})"

        days = self._days
        w = (days["d"].to_numpy(dtype=np.int64) * 86400 + _MONDAY_SHIFT) // _WEEK * _WEEK \
            - _MONDAY_SHIFT  # a UTC day lies in one week (weeks start at midnight)
        every = pd.DataFrame({"w": w, "c": days["c"].to_numpy(), "ci": days["ci"].to_numpy()}
                             ).groupby("w", as_index=False).sum()
        counted = self._df(f"""
            SELECT w, count(*) AS active, count_if(array_contains(ws, w - {_WEEK})) AS returning
            FROM (SELECT explode(ws) AS w, ws
                  FROM (SELECT collect_set({wk('sec')}) AS ws FROM adv_cev GROUP BY u))
            GROUP BY w""")
        return weekly_frame(every["w"], every["c"], every["ci"], counted["w"],
                             counted["active"], counted["returning"], user_first, item_first)

    def summary(self) -> EventSummary:
        """The :class:`EventSummary` (call after :meth:`aggregate`)."""
        if self._labels is None:
            raise RuntimeError("call aggregate() before summary()")
        pr = self._per_rule
        kind = self._rules["kind"].to_numpy(dtype=object)[pr["r"].to_numpy()]
        nv = pr["nv"].to_numpy(dtype=np.int64)
        by_kind = {k: int(nv[kind == k].sum()) for k in ("progress", "rating", "price")}
        ratings = None
        if by_kind["rating"]:
            user_labels, item_labels = self._labels
            r = self._arrow(f"""
                SELECT e.u_key AS u, e.i_key AS i, {ss.fdiv('e.ts', _SEC_NS)} AS ts, e.value,
                       e.pos
                FROM adv_ev e JOIN adv_rules ru ON ru.r = e.r
                WHERE ru.kind = 'rating' AND e.value IS NOT NULL""")
            r = r.take(pc.sort_indices(r, sort_keys=[("pos", "ascending")]))
            uidx = pd.Index(user_labels).get_indexer(r.column("u").to_numpy(zero_copy_only=False))
            iidx = pd.Index(item_labels).get_indexer(r.column("i").to_numpy(zero_copy_only=False))
            ok = (uidx >= 0) & (iidx >= 0)
            ratings = pd.DataFrame({"item_idx": iidx[ok].astype(np.int64),
                                    "user_idx": uidx[ok].astype(np.int64),
                                    "ts": r.column("ts").to_numpy()[ok].astype(np.int64),
                                    "value": r.column("value").to_numpy()[ok].astype(np.float64)})
        return EventSummary(
            progress_events=by_kind["progress"],
            rating_events=by_kind["rating"],
            price_events=by_kind["price"],
            sessions=bool((pr["ns"].to_numpy() > 0).any()),
            event_types=self._event_types(),
            ratings=ratings,
        )


# --------------------------------------------------------------------------- pure helpers
# Engine-neutral pieces (the DuckDB engine holds the same logic inside its methods).


def _sorted(table: pa.Table, key: str) -> pa.Table:
    """Rows sorted by the id text in code-point order (Arrow compares UTF-8 bytes)."""
    return table.take(pc.sort_indices(table, sort_keys=[(key, "ascending")]))
