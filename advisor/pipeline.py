"""One audit, end to end: load -> validate -> aggregate -> profile -> evidence -> rules.

This is the library entry point behind ``advisor audit``; a notebook user calls
:func:`audit` and gets the same :class:`AuditResult` the command line renders.
"""

from __future__ import annotations

import re
import time
from dataclasses import asdict, dataclass, replace
from datetime import datetime, timezone
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from advisor import __version__
from advisor.aggregate import Aggregates, aggregate
from advisor.config import AuditConfig
from advisor.errors import AdvisorError, ConfigError, EngineUnsupportedError, LogFormatError
from advisor.load import read_catalog, read_logs
from advisor.load.model import ColumnDetection, InputFile
from advisor.profile.bundle import Profile, build_profile, item_categories
from advisor.rules.cold import ColdItems, ColdUsers, cold_items, cold_users
from advisor.rules.engine import Decision, decide
from advisor.rules.loader import load_rules
from advisor.rules.metrics import profile_metrics, quality_metrics
from advisor.rules.model import RuleSet
from advisor.validate import validate
from advisor.validate.model import Catalog, QualityReport, ValidatedLog

#: Version of the JSON report layout; bump on any incompatible change.
SCHEMA_VERSION = "1.0"

#: Defaults for cold thresholds (common practice, no published source; REFERENCES: at least
#: five interactions per user before user-personalised rows; 10-20 users per item).
DEFAULT_MIN_USER_ITEMS = 5
DEFAULT_MIN_ITEM_USERS = 10
DEFAULT_MIN_NEIGHBOURS = 1


@dataclass(frozen=True, slots=True)
class RunInfo:
    """How this audit was run."""

    tool_version: str
    """Version of the advisor package."""
    started_utc: str
    """When the run started (ISO-8601, UTC)."""
    seconds: float
    """Wall-clock duration of the audit, in seconds."""
    as_of: str
    """Audit date: events after it were set aside (ISO-8601, UTC)."""
    seed: int
    """Seed of every random step."""
    engine: str
    """Engine that read, validated and counted the events (``pandas``, ``duckdb`` or
    ``spark``; with ``engine = "auto"`` the one chosen)."""
    config: dict
    """Effective settings."""

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True, slots=True)
class AuditResult:
    """Everything one audit found and decided."""

    run: RunInfo
    inputs: tuple[InputFile, ...]
    """Log files read (with sizes and SHA-256), then the catalogue file if any."""
    columns: ColumnDetection
    """How the log's columns were mapped."""
    catalog_columns: ColumnDetection | None
    quality: QualityReport
    quarantine: pd.DataFrame
    """Rows set aside, with reasons (written beside the report)."""
    profile: Profile
    evidence: object | None
    """Backtest, learning curve and neighbour reliability (None when switched off)."""
    metrics: dict
    """Every metric the rules can read, by name."""
    rules: RuleSet
    decision: Decision
    cold_users: ColdUsers
    cold_items: ColdItems

    def to_dict(self) -> dict:
        return {
            "schema_version": SCHEMA_VERSION,
            "run": self.run.to_dict(),
            "inputs": {"files": [f.to_dict() for f in self.inputs],
                       "columns": self.columns.to_dict(),
                       "catalog_columns": None if self.catalog_columns is None
                       else self.catalog_columns.to_dict()},
            "quality": self.quality.to_dict(),
            "verdict": self.decision.to_dict(),
            "cold_users": self.cold_users.to_dict(),
            "cold_items": self.cold_items.to_dict(),
            "profile": self.profile.to_dict(),
            "evidence": None if self.evidence is None else self.evidence.to_dict(),
            "metrics": dict(sorted(self.metrics.items())),
        }


def audit(logs: str | Path, *, catalog: str | Path | None = None,
          config: AuditConfig | None = None,
          progress: Callable[[str], None] | None = None) -> AuditResult:
    """Audit interaction logs (a file or a folder) and, optionally, a catalogue.

    Parameters
    ----------
    logs : path
        A log file (CSV, TSV, Parquet, JSON Lines, optionally gzip) or a folder of them.
    catalog : path, optional
        The catalogue file.
    config : AuditConfig, optional
        Settings; defaults when None.
    progress : callable, optional
        Called with a short step name as each stage starts.

    Raises
    ------
    AdvisorError
        A subclass naming the file, line, rule or key at fault and what to do.
    """
    config = config or AuditConfig()
    say = progress or (lambda _step: None)
    t0 = time.perf_counter()
    started = datetime.now(timezone.utc).isoformat(timespec="seconds")
    rules = load_rules(config.rules_file)

    engine = config.engine
    if engine != "spark" and re.match(r"^[A-Za-z][A-Za-z0-9+.-]*://", str(logs)):
        raise ConfigError(
            f"{logs}: a URI; only --engine spark reads logs where they live (s3a://, "
            "hdfs://, file://). Use --engine spark, or copy the files to a local folder.")
    fallback = None
    if engine == "auto":
        try:
            stages = _engine_stages(logs, catalog, config, say, engine="duckdb")
            engine = "duckdb"
        except EngineUnsupportedError as exc:
            stages, engine = _pandas_stages(logs, catalog, config, say), "pandas"
            fallback = (f"Read in memory (pandas engine): the embedded DuckDB engine does "
                        f"not read this input ({exc.reason}).")
    elif engine in ("duckdb", "spark"):
        stages = _engine_stages(logs, catalog, config, say, engine=engine)
    else:
        stages = _pandas_stages(logs, catalog, config, say)
    files, columns, raw_cat, log, agg, events = stages
    if fallback is not None:
        log = replace(log, quality=replace(log.quality, notes=log.quality.notes + (fallback,)))
    say("profiling")
    profile = build_profile(log, agg, config, events=events)
    metrics = {**profile_metrics(profile), **quality_metrics(log.quality)}

    evidence = None
    if config.backtest:
        say("backtesting")
        evidence = _evidence(agg, log, config, say)
        metrics.update(evidence.metrics())

    say("deciding")
    decision = decide(rules, metrics)
    threshold, source = _user_threshold(metrics)
    as_of_s = int(log.as_of.timestamp())
    users = cold_users(agg.user_items, agg.user_last_ts, as_of_s, threshold=threshold,
                       threshold_source=source)
    c = profile.cooccurrence
    items = cold_items(agg.item_labels, agg.item_users, c.significant_neighbours,
                       c.best_p, c.best_base, min_users=DEFAULT_MIN_ITEM_USERS,
                       min_neighbours=DEFAULT_MIN_NEIGHBOURS, confidence=config.confidence,
                       item_first_ts=agg.item_first_ts,
                       catalog=None if log.catalog is None else log.catalog.items)
    run = RunInfo(
        tool_version=__version__,
        started_utc=started,
        seconds=round(time.perf_counter() - t0, 3),
        as_of=log.as_of.isoformat(),
        seed=config.seed,
        engine=engine,
        config=_config_dict(config),
    )
    inputs = files + ((raw_cat.file,) if raw_cat is not None else ())
    return AuditResult(run, inputs, columns,
                       None if raw_cat is None else raw_cat.columns, log.quality,
                       log.quarantine, profile, evidence, metrics, rules, decision, users, items)


def _pandas_stages(logs, catalog, config: AuditConfig, say):
    """Read, validate and aggregate in memory."""
    say("reading logs")
    raw = read_logs(logs, config.columns)
    raw_cat = read_catalog(catalog, config.catalog_columns) if catalog is not None else None
    say("validating")
    log = _catalog_as_of(validate(raw, raw_cat, config))
    say("aggregating")
    return raw.files, raw.columns, raw_cat, log, aggregate(log), None


def _engine_stages(logs, catalog, config: AuditConfig, say, *, engine: str):
    """Read, validate and aggregate with the DuckDB or the Spark engine (the events stay in
    the engine; only the aggregates come back)."""
    if engine == "spark":
        from advisor.aggregate.spark_engine import SparkEngine as Engine
    else:
        from advisor.aggregate.duckdb_engine import DuckDBEngine as Engine

    say("reading logs")
    try:
        return _run_engine(Engine, logs, catalog, config, say)
    except AdvisorError:
        raise
    except Exception as exc:
        if engine == "duckdb":
            _raise_for_duckdb(exc)
        elif type(exc).__module__.split(".")[0] in ("pyspark", "py4j"):
            first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
            raise LogFormatError(
                f"Spark stopped while reading or counting the log ({first[:300]}); check that "
                "the Parquet files are readable from the cluster and not corrupt, or audit a "
                "local copy with --engine duckdb.") from None
        raise


def _raise_for_duckdb(exc: Exception) -> None:
    """Turn an error DuckDB raised while reading or counting into the tool's own: out of
    memory says what to change; anything else (an encoding or format fault DuckDB meets in
    a file) points at the in-memory engine, which names the row at fault, and lets
    ``engine = "auto"`` fall back to it."""
    import duckdb

    if not isinstance(exc, duckdb.Error):
        return
    first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    if isinstance(exc, duckdb.OutOfMemoryException):
        raise ConfigError(
            f"DuckDB ran out of memory ({first}); raise engine_memory_gib in [audit], or free "
            "disk space in the temporary folder it spills to.") from None
    raise EngineUnsupportedError(
        f"--engine duckdb stopped reading the log ({first}); use --engine pandas, which "
        "reads it or names the file and row at fault.",
        reason=f"DuckDB stopped: {first[:160]}") from None


def _run_engine(Engine, logs, catalog, config: AuditConfig, say):
    with Engine.open(logs, config) as engine:
        raw_cat = read_catalog(catalog, config.catalog_columns) if catalog is not None else None
        say("validating")
        log = engine.validate(raw_cat)
        if log.catalog is not None:
            log = _catalog_as_of(log, event_items=engine.event_items())
        say("aggregating")
        agg = engine.aggregate(log)
        events = engine.summary()
        return engine.files, engine.columns, raw_cat, log, agg, events


def _catalog_as_of(log: ValidatedLog, *, event_items=None) -> ValidatedLog:
    """The catalogue as it stood at the audit date.

    Items added after ``log.as_of`` did not exist yet when a past week is replayed: kept, they
    would count as never consumed, lower the coverage and head the editorial list. They are
    left out (and the report says how many), unless the log already has events for them.
    ``event_items`` lists the items with events when ``log.events`` is not held (DuckDB).
    """
    if log.catalog is None:
        return log
    items = log.catalog.items
    later = np.array(items["added"] > log.as_of, dtype=bool)
    if not later.any():
        return log
    # A set of the distinct ids: Series.isin on pyarrow strings is slow on long logs.
    seen = set((log.events["item"].unique() if event_items is None else event_items).tolist())
    later &= ~np.array([i in seen for i in items["item"].tolist()], dtype=bool)
    if not later.any():
        return log
    n = int(later.sum())
    note = (f"{n:,} catalogue item{'s' if n != 1 else ''} added after the audit date "
            f"{log.as_of.strftime('%Y-%m-%d %H:%M:%S')} UTC left out: they did not exist yet.")
    quality = replace(log.quality, notes=log.quality.notes + (note,))
    catalog = Catalog(items=items[~later].reset_index(drop=True))
    return replace(log, catalog=catalog, quality=quality)


def _user_threshold(metrics: dict) -> tuple[int, str]:
    """Distinct items before a user gets personalised rows: from the backtest when it found
    the activity band where personalisation starts to win, else the common-practice default."""
    found = metrics.get("evidence.min_history_for_lift")
    if found is not None:
        return int(found), "backtest"
    return DEFAULT_MIN_USER_ITEMS, "default"


def _evidence(agg: Aggregates, log, config: AuditConfig, say):
    from advisor.evidence import gather_evidence

    # The three columns the backtest reads, without copying the pairs table first.
    cols = {"user_idx": agg.pairs["user_idx"].to_numpy(),
            "item_idx": agg.pairs["item_idx"].to_numpy(),
            "ts": agg.pairs["first_ts"].to_numpy()}
    if config.exclude_implausible and agg.implausible.any():
        keep = ~agg.implausible[cols["user_idx"]]
        cols = {k: v[keep] for k, v in cols.items()}
    pairs = pd.DataFrame(cols, copy=False)
    cats = None
    if log.catalog is not None and log.catalog.has_categories:
        first = [c[0] if c else None for c in item_categories(agg, log)]
        codes, _ = pd.factorize(pd.Series(first, dtype=object), use_na_sentinel=True)
        cats = codes.astype(np.int64)
    return gather_evidence(pairs, agg.n_users, agg.n_items, item_category=cats,
                           seed=config.seed, max_test_users=config.backtest_users,
                           max_users=config.backtest_sample_users,
                           confidence=config.confidence, threads=config.threads,
                           progress=say)


def _config_dict(config: AuditConfig) -> dict:
    d = asdict(config)
    d["events"] = [asdict(e) for e in config.events]
    return d
