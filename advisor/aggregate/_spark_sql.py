"""Input files and validation SQL for the Spark engine (private).

The Spark engine runs the rules of ``_sql_validate.py`` (DuckDB SQL) in Spark SQL. Every
rule here mirrors one there, and through it one in ``advisor/validate``; a change there must
be made here too (``tests/test_aggregate_spark.py`` compares the two engines).

Inputs are Parquet only: a local file or folder, or a URI Spark reads itself (``s3a://``,
``hdfs://``, ``file://``). Each file's footer is read first, with pyarrow (a remote footer is
fetched through Hadoop's file system and handed to pyarrow), so the columns are detected and
typed exactly as the in-memory reader detects them. Column types whose reading in Spark could
differ from the embedded engines' are refused with an :class:`EngineUnsupportedError` (a
:class:`ConfigError`) pointing at ``--engine duckdb``; nothing is read differently in
silence:

* integers, booleans and text become the same text (Spark's cast writes integers and
  booleans as pyarrow does);
* float32 values go through their shortest text (as the in-memory reader does). Spark's own
  float-to-text cast (Java's ``Float.toString``) is not guaranteed shortest before Java 19,
  and a longer text reads as another double, so the distinct float32 values are read by
  pyarrow on the driver and joined back;
* nanosecond and INT96 timestamps (Spark cannot read them exactly), decimals, binary,
  nested and other types are refused.

Lines: Parquet has none, so the row number + 1 stands in (as in the other engines); the row
number is Spark's exact ``_metadata.row_index``.
"""

from __future__ import annotations

import io
import re
import warnings
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import unquote

import numpy as np
import pandas as pd
import pyarrow as pa

from advisor.aggregate._sql_input import _fingerprint
from advisor.aggregate._sql_validate import _ISO, _LO_DAY, _LO_US, _HI_DAY, _HI_US, _WHOLE
from advisor.aggregate._sql_validate import _EPOCH_BUCKETS, _WHITESPACE
from advisor.config import LogColumns
from advisor.errors import ConfigError, EngineUnsupportedError, LogFormatError
from advisor.load.columns import detect_log_columns
from advisor.load.model import LINE_COL, SOURCE_COL, ColumnDetection, InputFile
from advisor.load.readers import (
    _arrow_frame,
    _one_line,
    detect_format,
    list_input_files,
    open_parquet,
)
from advisor.validate.timestamps import _BASIC_DATE, _HI, _LO, NUMBER_PATTERN

_URI = re.compile(r"[A-Za-z][A-Za-z0-9+.-]*://")
_SCHEME_AUTHORITY = re.compile(r"[A-Za-z][A-Za-z0-9+.-]*:(?://[^/]*)?")
_GLOB = re.compile(r"([\[\]{}*?\\])")
#: Spark's binaryFile source holds a whole file in one byte array.
MAX_REMOTE_BYTES = 2**31 - 1

_ROLE_TEXT = ("text", "int", "uint64", "bool", "null")
_ROLE_TS = ("text", "int", "ts_utc", "ts_naive", "date")
_ROLE_VALUE = ("text", "bool", "int", "uint64", "double", "float32")
_SPARK_TYPE = {"text": "STRING", "bool": "BOOLEAN", "uint64": "DECIMAL(20,0)",
               "double": "DOUBLE", "float32": "FLOAT", "ts_utc": "TIMESTAMP",
               "ts_naive": "TIMESTAMP_NTZ", "date": "DATE"}
_INT_SPARK = {(8, True): "TINYINT", (16, True): "SMALLINT", (32, True): "INT",
              (64, True): "BIGINT", (8, False): "SMALLINT", (16, False): "INT",
              (32, False): "BIGINT"}


def is_uri(logs) -> bool:
    """True when ``logs`` names a location by URI (Spark reads it through Hadoop)."""
    return isinstance(logs, str) and _URI.match(logs) is not None


def lit(text: str) -> str:
    """A Spark SQL string literal (backslash escapes are read by Spark's parser)."""
    return "'" + text.replace("\\", "\\\\").replace("'", "\\'") + "'"


def ident(name: str) -> str:
    return "`" + name.replace("`", "``") + "`"


def full(x: str, pattern: str) -> str:
    """``x`` matches ``pattern`` in full (RLIKE finds a match anywhere)."""
    anchored = r"\A(?:" + pattern + r")\z"
    return f"({x} RLIKE {lit(anchored)})"


def fdiv(a: str, b: int) -> str:
    """Floor division of BIGINT ``a`` by ``b > 0`` (Spark's ``div`` truncates toward zero)."""
    return f"(CASE WHEN ({a}) >= 0 THEN ({a}) div {b} ELSE -((-({a}) - 1) div {b}) - 1 END)"


def _ws_class() -> str:
    parts, run = [], []
    for c in _WHITESPACE + [None]:
        if run and (c is None or c != run[-1] + 1):
            lo, hi = run[0], run[-1]
            parts.append(f"\\x{{{lo:x}}}" + (f"-\\x{{{hi:x}}}" if hi > lo else ""))
            run = []
        if c is not None:
            run.append(c)
    return "[" + "".join(parts) + "]"


_WS = _ws_class()


def clean(x: str) -> str:
    """As ``adv_clean``: strip the characters ``str.strip()`` removes; empty becomes NULL.
    Values whose first and last characters are printable ASCII (nearly every id) skip the
    regular expression."""
    pattern = lit(rf"\A{_WS}+|{_WS}+\z")
    return (f"(CASE WHEN ascii({x}) BETWEEN 33 AND 126 AND ascii(substring({x}, -1, 1)) "
            f"BETWEEN 33 AND 126 THEN {x} ELSE nullif(regexp_replace({x}, {pattern}, ''), '') "
            "END)")


def _dbl(value: float | int) -> str:
    return f"CAST({int(value)} AS DOUBLE)"


def ekind(x: str) -> str:
    whens = " ".join(f"WHEN abs(CAST({x} AS DOUBLE)) < {_dbl(b)} THEN {k}"
                     for b, k in _EPOCH_BUCKETS[:-1])
    return f"(CASE {whens} ELSE 5 END)"


def efactor(k: str) -> str:
    return (f"(CASE {k} WHEN 2 THEN 1000000000 WHEN 3 THEN 1000000 WHEN 4 THEN 1000 "
            "ELSE 1 END)")


def efits(x: str) -> str:
    v = f"CAST({x} AS DOUBLE) * CAST({efactor(ekind(x))} AS DOUBLE)"
    return f"({v} > {_dbl(_LO.value)} AND {v} < {_dbl(_HI.value)})"


# --------------------------------------------------------------------------- input files


@dataclass(frozen=True, slots=True)
class ParquetInput:
    """One Parquet log file as the Spark engine reads it."""

    index: int
    """Position in reading order (the ``f`` column)."""
    spark_path: str
    """Path handed to Spark (glob characters escaped)."""
    key: str
    """Decoded path, to match Spark's ``_metadata.file_path``."""
    source: str
    """Name for messages (relative to the LOGS folder)."""
    local: Path | None
    """The file on this machine, or None when Spark reads it from a URI."""
    columns: dict[str, str]
    """Canonical field -> column name in the file."""
    kinds: dict[str, str]
    """Canonical field -> how its column is read (``text``, ``int``, ``ts_utc`` ...)."""
    arrow_types: dict[str, pa.DataType]
    """Canonical field -> the column's type as pyarrow reads it (for raw text)."""
    spark_types: dict[str, str]
    """Canonical field -> Spark SQL type of the column."""
    info: InputFile


def _refuse(source: str, what: str) -> EngineUnsupportedError:
    return EngineUnsupportedError(
        f"{source}: --engine spark does not read {what}; use --engine duckdb (or --engine "
        "pandas) for this input.", reason=f"{source}: {what}"
    )


def _kind(t: pa.DataType) -> tuple[str, str | None] | None:
    """(kind, Spark SQL type) of a pyarrow type, None when not read exactly by Spark."""
    if pa.types.is_dictionary(t):
        t = t.value_type
    if pa.types.is_string(t) or pa.types.is_large_string(t):
        return "text", "STRING"
    if pa.types.is_null(t):
        return "null", None
    if pa.types.is_integer(t):
        signed = pa.types.is_signed_integer(t)
        if t.bit_width == 64 and not signed:
            return "uint64", _SPARK_TYPE["uint64"]
        return "int", _INT_SPARK[(t.bit_width, signed)]
    if pa.types.is_boolean(t):
        return "bool", "BOOLEAN"
    if pa.types.is_float32(t):
        return "float32", "FLOAT"
    if pa.types.is_float64(t):
        return "double", "DOUBLE"
    if pa.types.is_timestamp(t) and t.unit in ("s", "ms", "us"):
        return ("ts_utc", "TIMESTAMP") if t.tz else ("ts_naive", "TIMESTAMP_NTZ")
    if pa.types.is_date32(t):
        return "date", "DATE"
    return None


def _describe(t: pa.DataType) -> str:
    if pa.types.is_timestamp(t) and t.unit == "ns":
        return f"a nanosecond timestamp ({t}) (Spark reads microseconds)"
    return f"type {t}"


def _remote_listing(spark, uri: str) -> tuple[list[tuple[object, str, str, int]], list[str],
                                              bool]:
    """Files under a URI: (Hadoop path, decoded path, name, size), skipped names, folder?"""
    jvm = spark._jvm
    conf = spark._jsc.hadoopConfiguration()
    try:
        root = jvm.org.apache.hadoop.fs.Path(uri)
        fs = root.getFileSystem(conf)
        status = fs.getFileStatus(root)
    except Exception as exc:  # py4j errors; FileNotFoundException among them
        text = _one_line(exc)
        if "FileNotFound" in text:
            raise LogFormatError(f"{uri}: no such file or folder; check the path.") from None
        raise LogFormatError(
            f"{uri}: Spark cannot reach it ({text[:300]}); check the URI and the credentials "
            "and connector Spark is configured with."
        ) from None
    if status.isFile():
        name = status.getPath().getName()
        if detect_format(name) is None:
            raise LogFormatError(
                f"{uri}: unsupported file type; expected Parquet (.parquet or .pq). Export "
                "the data as Parquet or point at the folder that holds it.")
        return [(status.getPath(), status.getPath().toUri().getPath(), uri,
                 int(status.getLen()))], [], False
    base = status.getPath().toUri().getPath().rstrip("/") + "/"
    found, skipped = [], []
    it = fs.listFiles(status.getPath(), True)
    while it.hasNext():
        st = it.next()
        path = st.getPath()
        decoded = path.toUri().getPath()
        rel = decoded[len(base):] if decoded.startswith(base) else path.getName()
        if any(part.startswith(".") for part in rel.split("/")):
            continue
        if detect_format(rel) is None:
            skipped.append(rel)
        else:
            found.append((path, decoded, rel, int(st.getLen())))
    found.sort(key=lambda x: x[2])
    skipped.sort()
    if not found:
        seen = ", ".join(skipped[:10]) + (" ..." if len(skipped) > 10 else "")
        raise LogFormatError(
            f"{uri}: the folder holds no readable file (expected Parquet); found: "
            f"{seen or 'nothing'}. Point at the folder that holds the exported files.")
    return found, skipped, True


def _remote_footer(spark, jpath, size: int, source: str) -> bytes:
    """A Parquet file's footer as a small stand-alone buffer pyarrow can open."""
    jvm = spark._jvm
    io_utils = jvm.org.apache.commons.io.IOUtils
    if size < 12:
        raise LogFormatError(f"{source}: not a valid Parquet file (only {size} bytes); export "
                             "it again.")
    stream = jpath.getFileSystem(spark._jsc.hadoopConfiguration()).open(jpath)
    try:
        stream.seek(size - 8)
        tail = bytes(io_utils.toByteArray(stream, 8))
        n = int.from_bytes(tail[:4], "little")
        if tail[4:] != b"PAR1" or n > size - 12:
            raise LogFormatError(f"{source}: not a valid Parquet file (no Parquet footer); "
                                 "export it again, or check that the suffix matches the content.")
        stream.seek(size - 8 - n)
        footer = bytes(io_utils.toByteArray(stream, n))
    finally:
        stream.close()
    return b"PAR1" + footer + tail


def _remote_digests(spark, files: list[tuple[object, str, str, int]]) -> dict[str, str]:
    """SHA-256 of remote files, computed by Spark's executors (each file read once)."""
    from pyspark.sql import functions as F

    big = [name for _, _, name, size in files if size > MAX_REMOTE_BYTES]
    if big:
        raise ConfigError(
            f"{big[0]}: larger than 2 GiB; the Spark engine fingerprints each remote file in "
            "one piece and cannot hold it. Write the log as smaller Parquet files (a few "
            "hundred MB each is usual), or copy it locally and use --engine duckdb.")
    paths = [_GLOB.sub(r"\\\1", p.toString()) for p, _, _, _ in files]
    got = (spark.read.format("binaryFile").load(paths)
           .select("path", F.sha2("content", 256).alias("h")).toArrow())
    out = {}
    for path, h in zip(got.column("path").to_pylist(), got.column("h").to_pylist()):
        out[path_key(path, encoded=False)] = h
    return out


def path_key(path: str, *, encoded: bool = True) -> str:
    """The path part of a Hadoop path or URI, decoded: ``file:/a%20b`` -> ``/a b``."""
    m = _SCHEME_AUTHORITY.match(path)
    rest = path[m.end():] if m else path
    return unquote(rest) if encoded else rest


def open_inputs(spark, logs, columns: LogColumns | None
                ) -> tuple[list[ParquetInput], ColumnDetection, tuple[str, ...]]:
    """Every Parquet log file under ``logs`` (a local path or a URI), with the mapping.

    Raises
    ------
    LogFormatError
        As :func:`advisor.load.read_logs` does (missing columns, files that map differently).
    ConfigError
        For inputs this engine does not read (not Parquet, or column types Spark reads
        differently).
    """
    given = (columns or LogColumns()).given()
    if is_uri(logs):
        listed, skipped, in_folder = _remote_listing(spark, logs)
        entries = [(None, jp, key, name, size) for jp, key, name, size in listed]
    else:
        files, skipped = list_input_files(logs)
        in_folder = Path(logs).is_dir()
        entries = []
        for path, name in files:
            absolute = str(Path(path).resolve())
            entries.append((Path(path), "file://" + absolute, absolute, name, None))
    for _, _, _, name, _ in entries:
        fmt, compressed = detect_format(name) or ("csv", False)
        if fmt != "parquet":
            raise EngineUnsupportedError(
                f"{name}: --engine spark reads Parquet only, and this is {fmt.upper()}; use "
                "--engine duckdb or --engine pandas, or convert the log to Parquet.",
                reason=f"{name}: {fmt.upper()}, not Parquet")
        if compressed:
            raise _refuse(name, "gzip-compressed Parquet")
    digests = {}
    if is_uri(logs):
        digests = _remote_digests(spark, [(jp, key, name, size)
                                          for _, jp, key, name, size in entries])
    out: list[ParquetInput] = []
    first: tuple[str, ColumnDetection] | None = None
    unused: dict[str, None] = {}
    for index, (local, target, key, name, size) in enumerate(entries):
        if local is not None:
            pf, header = open_parquet(local, name)
        else:
            pf, header = open_parquet(io.BytesIO(_remote_footer(spark, target, size, name)),
                                      name)
        det = detect_log_columns(header, given=given, source=name)
        if first is None:
            first = (name, det)
        elif det.mapping != first[1].mapping:
            show = ", ".join(f"{k}={v!r}" for k, v in det.mapping.items())
            show0 = ", ".join(f"{k}={v!r}" for k, v in first[1].mapping.items())
            raise LogFormatError(
                f"{name}: columns map differently from {first[0]} ({show} versus {show0}); "
                "every file in a folder must have the same columns. Rename the columns in "
                f"{name} or move it out of the folder."
            )
        unused.update(dict.fromkeys(det.unused))
        kinds, arrow_types, spark_types = {}, {}, {}
        for field, col in det.mapping.items():
            t = pf.schema_arrow.field(col).type
            got = _kind(t)
            allowed = (_ROLE_TS if field == "ts" else _ROLE_VALUE if field == "value"
                       else _ROLE_TEXT)
            if got is None or got[0] not in allowed:
                raise _refuse(name, f"a {field} column of {_describe(t)} ({col!r})")
            kinds[field], spark_types[field] = got
            arrow_types[field] = t
        if local is not None:
            info = _fingerprint(local, name, in_folder, "parquet", False, pf.metadata.num_rows)
            spark_path = _GLOB.sub(r"\\\1", target)
        else:
            info = InputFile(path=name if in_folder else str(logs), format="parquet",
                             compressed=False, size_bytes=size, sha256=digests[key],
                             rows=pf.metadata.num_rows)
            spark_path = _GLOB.sub(r"\\\1", target.toString())
        out.append(ParquetInput(index, spark_path, key, name, local, dict(det.mapping), kinds,
                                arrow_types, spark_types, info))
    assert first is not None
    detection = ColumnDetection(mapping=dict(first[1].mapping), detected=first[1].detected,
                                unused=tuple(unused))
    return out, detection, tuple(skipped)


def read_schema(inp: ParquetInput) -> str:
    """DDL schema of the mapped, non-null columns (what Spark reads of the file)."""
    cols = dict.fromkeys(inp.columns[f] for f in inp.columns if inp.spark_types[f] is not None)
    types = {inp.columns[f]: inp.spark_types[f] for f in inp.columns
             if inp.spark_types[f] is not None}
    return ", ".join(f"{ident(c)} {types[c]}" for c in cols)


def group_signature(inp: ParquetInput) -> tuple:
    """Files with equal signatures are read by one Spark scan."""
    return tuple((f, c, inp.kinds[f], inp.spark_types[f], str(inp.arrow_types[f]))
                 for f, c in inp.columns.items())


def _text_expr(inp: ParquetInput, field: str) -> str:
    if field not in inp.columns or inp.kinds[field] == "null":
        return "CAST(NULL AS STRING)"
    q = ident(inp.columns[field])
    return q if inp.kinds[field] == "text" else f"CAST({q} AS STRING)"


def canonical_columns(inp: ParquetInput) -> list[str]:
    """Spark SQL for the canonical columns of one file's rows (as ``_sql_input._select``);
    the float32 value column is kept raw as ``value_x`` for the driver-side lookup."""
    q = ident(inp.columns["ts"])
    kind = inp.kinds["ts"]
    if kind == "text":
        ts_s, ts_i, ts_c = q, "CAST(NULL AS BIGINT)", 0
    elif kind == "int":
        ts_s, ts_i, ts_c = "CAST(NULL AS STRING)", f"CAST({q} AS BIGINT)", 1
    elif kind == "ts_utc":
        ts_s, ts_i, ts_c = "CAST(NULL AS STRING)", f"unix_micros({q})", 4
    elif kind == "ts_naive":
        # Read at the engine's session time zone, UTC: the instant the wall time names in UTC.
        ts_s, ts_i, ts_c = "CAST(NULL AS STRING)", f"unix_micros(CAST({q} AS TIMESTAMP))", 2
    else:  # date
        ts_s, ts_i, ts_c = "CAST(NULL AS STRING)", f"CAST(unix_date({q}) AS BIGINT)", 5
    value_s, value_d, value_x = "CAST(NULL AS STRING)", "CAST(NULL AS DOUBLE)", \
        "CAST(NULL AS FLOAT)"
    if "value" in inp.columns:
        v, vk = ident(inp.columns["value"]), inp.kinds["value"]
        if vk == "text":
            value_s = v
        elif vk == "bool":
            value_s = f"CAST({v} AS STRING)"
        elif vk == "float32":
            value_x = v
        else:
            value_d = f"CAST({v} AS DOUBLE)"
    return [
        "_metadata.file_path AS fp", "_metadata.row_index + 1 AS line",
        f"{_text_expr(inp, 'user')} AS user_s", f"{_text_expr(inp, 'item')} AS item_s",
        f"{ts_s} AS ts_s", f"{ts_i} AS ts_i", f"CAST({ts_c} AS TINYINT) AS ts_c",
        f"{_text_expr(inp, 'event')} AS event_s", f"{value_s} AS value_s",
        f"{value_d} AS value_d", f"{value_x} AS value_x",
        f"{_text_expr(inp, 'session')} AS session_s",
    ]


def float32_lookup(values: pa.Array) -> pa.Table:
    """float32 -> the double of its shortest text, as the in-memory reader reads it."""
    x = pa.array(values, pa.float32()).drop_null()
    return pa.table({"x": x, "d": x.cast(pa.string()).cast(pa.float64())})


# --------------------------------------------------------------------------- row views


def row_views(src: str) -> list[tuple[str, str]]:
    """(name, SQL) of the row views, as ``create_row_views`` and the SQL half of
    ``create_timestamp_view``: ``adv_t4`` (the one the engine caches) holds what later steps
    read of each row: cleaned keys, ``st0`` (0 missing, 1 read, 2 unreadable, 3 left to the
    driver), ``ts_ns0``, ``kind0``, ``naive0`` and ``date0``."""
    t1 = f"""
        SELECT fp, line, {clean('user_s')} AS u_key, {clean('item_s')} AS i_key,
               {clean('event_s')} AS ev_key, {clean('session_s')} AS s_key,
               ts_c, ts_i, CASE WHEN ts_c = 0 THEN {clean('ts_s')} END AS ts_key,
               {clean('value_s')} AS v_key, value_d
        FROM {src}"""
    t2 = f"""
        SELECT *,
          CASE WHEN ts_c = 1 THEN ts_i
               WHEN ts_key IS NOT NULL AND {full('ts_key', _WHOLE)}
                    AND NOT {full('ts_key', _BASIC_DATE)}
               THEN CAST(ts_key AS BIGINT) END AS ep,
          CASE WHEN ts_key IS NOT NULL AND {full('ts_key', _ISO)}
               THEN CASE WHEN length(ts_key) = 10 THEN 'D'
                         WHEN substring(ts_key, -1, 1) = 'Z' THEN 'Z'
                         WHEN substring(ts_key, -6, 1) IN ('+', '-') THEN 'O'
                         ELSE 'N' END END AS iso
        FROM adv_t1"""
    # The strict pattern fixes the layout (see _sql_validate): the offset is the last six
    # characters. The text left is read as a wall time; the session time zone is UTC.
    t3 = """
        SELECT *,
          CASE WHEN iso IS NOT NULL THEN
          unix_micros(CAST(try_cast(CASE iso
                WHEN 'Z' THEN substring(ts_key, 1, length(ts_key) - 1)
                WHEN 'O' THEN substring(ts_key, 1, length(ts_key) - 6)
                ELSE ts_key END AS TIMESTAMP_NTZ) AS TIMESTAMP))
          - CASE WHEN iso = 'O' THEN
                 (CASE WHEN substring(ts_key, -6, 1) = '-' THEN -1 ELSE 1 END)
                 * (CAST(substring(ts_key, -5, 2) AS BIGINT) * 3600
                    + CAST(substring(ts_key, -2, 2) AS BIGINT) * 60) * 1000000
                 ELSE 0 END END AS iso_us
        FROM adv_t2"""
    t4 = f"""
        SELECT fp, line, u_key, i_key, ev_key, s_key, v_key, value_d, st0,
          CASE WHEN st0 = 3 THEN ts_key END AS ts_key,
          CASE WHEN st0 = 1 THEN
            CASE WHEN ep IS NOT NULL THEN ep * {efactor(ekind('ep'))}
                 WHEN ts_c = 0 THEN iso_us * 1000
                 WHEN ts_c IN (2, 4) THEN ts_i * 1000
                 ELSE ts_i * 86400000000000 END END AS ts_ns0,
          CASE WHEN st0 = 1 THEN CASE WHEN ep IS NOT NULL THEN {ekind('ep')} ELSE 1 END
               END AS kind0,
          st0 = 1 AND CASE WHEN ep IS NOT NULL THEN false WHEN ts_c = 0 THEN iso = 'N'
                           ELSE ts_c = 2 END AS naive0,
          st0 = 1 AND CASE WHEN ep IS NOT NULL THEN false WHEN ts_c = 0 THEN iso = 'D'
                           ELSE ts_c = 5 END AS date0
        FROM (SELECT *,
          CASE WHEN ts_c = 0 AND ts_key IS NULL THEN 0
               WHEN ts_c > 0 AND ts_i IS NULL THEN 0
               WHEN ep IS NOT NULL THEN CASE WHEN {efits('ep')} THEN 1 ELSE 2 END
               WHEN ts_c = 0 AND iso_us IS NOT NULL THEN
                    CASE WHEN iso_us BETWEEN {_LO_US} AND {_HI_US} THEN 1 ELSE 2 END
               WHEN ts_c = 0 THEN 3
               WHEN ts_c IN (2, 4) THEN
                    CASE WHEN ts_i BETWEEN {_LO_US} AND {_HI_US} THEN 1 ELSE 2 END
               ELSE CASE WHEN ts_i BETWEEN {_LO_DAY} AND {_HI_DAY} THEN 1 ELSE 2 END
          END AS st0 FROM adv_t3)"""
    return [("adv_t1", t1), ("adv_t2", t2), ("adv_t3", t3), ("adv_t4", t4)]


#: One pass over the rows: per event text and file (count, first line, timestamp statistics
#: of the values read in SQL) and, in the same scan, the distinct timestamp texts left to the
#: driver. The files come back under Spark's names for them, matched to ours on the driver.
SCAN_STATS = """
    SELECT grouping(odd) AS g, ev_key, fp, odd, count(*) AS n, min(line) AS first_line,
           max(ts_ns0) AS ts_max, count_if(kind0 = 1) AS k1, count_if(kind0 = 2) AS k2,
           count_if(kind0 = 3) AS k3, count_if(kind0 = 4) AS k4, count_if(kind0 = 5) AS k5,
           count_if(naive0) AS naive, count_if(date0) AS dates
    FROM (SELECT *, CASE WHEN st0 = 3 THEN ts_key END AS odd FROM adv_t4)
    GROUP BY GROUPING SETS ((ev_key, fp), (odd))"""

#: Rows with their position (file << 40 | line) and the timestamp read on either side.
T5 = """
    SELECT {hint} t.*,
      shiftleft(CAST(coalesce(m.f, raise_error('internal: a file the Spark engine did not list'))
                     AS BIGINT), 40) + t.line AS pos,
      CASE WHEN t.st0 <> 3 THEN t.st0
           WHEN lk.st IS NULL THEN raise_error('internal: a timestamp left unread by Spark')
           ELSE lk.st END AS ts_st,
      CASE WHEN t.st0 <> 3 THEN t.ts_ns0 WHEN lk.st = 1 THEN lk.ns END AS ts_ns
    FROM adv_t4 t LEFT JOIN adv_lk lk ON t.st0 = 3 AND lk.key = t.ts_key
    LEFT JOIN adv_fm m ON m.fp = t.fp"""


def rows_sql(*, has_event: bool, missing_r: int, as_of_ns: int | None,
             has_catalog: bool) -> str:
    """``adv_rows`` as ``_sql_validate.create_rows``, keyed by the cleaned ids."""
    if has_event:
        rule = f"coalesce(em.r, {missing_r})"
        join_em = "LEFT JOIN adv_em em ON em.ev_key = t.ev_key"
    else:
        rule, join_em = "0", ""
    after = f"WHEN t.ts_ns > {as_of_ns} THEN 3" if as_of_ns is not None else ""
    empty_event = "WHEN t.ev_key IS NULL THEN 6" if has_event else ""
    unknown = "WHEN c.item IS NULL THEN 9" if has_catalog else ""
    join_cat = "LEFT JOIN adv_cat c ON c.item = t.i_key" if has_catalog else ""
    return f"""
        SELECT t.pos, t.u_key, t.i_key, t.ts_ns AS ts, ru.r,
               CASE WHEN t.nonnum THEN NULL ELSE t.v_num END AS value, t.s_key AS sess,
               t.nonnum AND ru.kind = 'none' AS ignored,
               CAST(CASE WHEN t.ts_st = 0 THEN 1 WHEN t.ts_st = 2 THEN 2 {after}
                    WHEN t.u_key IS NULL THEN 4 WHEN t.i_key IS NULL THEN 5 {empty_event}
                    WHEN t.nonnum AND ru.kind <> 'none' THEN 7
                    WHEN coalesce(t.v_num < ru.lo OR t.v_num > ru.hi, false)
                         AND NOT t.nonnum THEN 8
                    {unknown}
                    ELSE 0 END AS TINYINT) AS reason
        FROM (SELECT *, (v_key IS NOT NULL OR value_d IS NOT NULL)
                        AND (v_num IS NULL OR isnan(v_num)
                             OR abs(v_num) = CAST('Infinity' AS DOUBLE)) AS nonnum
              FROM (SELECT *, CASE WHEN v_key IS NOT NULL THEN
                                     CASE WHEN {full('v_key', NUMBER_PATTERN)}
                                          THEN try_cast(v_key AS DOUBLE) END
                                   ELSE value_d END AS v_num
                    FROM adv_t5)) t
        {join_em}
        JOIN adv_rules ru ON ru.r = {rule}
        {join_cat}"""


#: Usable events, exact duplicates merged (``n`` copies, first at ``pos``).
EVENTS = """
    SELECT u_key, i_key, ts, r, value, sess, min(pos) AS pos, count(*) AS n,
           count_if(ignored) AS ign
    FROM adv_rows WHERE reason = 0
    GROUP BY u_key, i_key, ts, r, value, sess"""

#: The first row repeating an earlier event: the smallest position that is not its
#: event's first copy (``first_duplicate`` without a window over every row).
FIRST_DUPLICATE = """
    SELECT min(t.pos) AS pos FROM adv_rows t
    JOIN (SELECT u_key, i_key, ts, r, value, sess, pos AS p1 FROM adv_ev WHERE n > 1) d
      ON t.u_key = d.u_key AND t.i_key = d.i_key AND t.ts = d.ts AND t.r = d.r
         AND t.value <=> d.value AND t.sess <=> d.sess
    WHERE t.reason = 0 AND t.pos > d.p1"""

#: Per rule (event type): events, first position, duplicates, ignored values, events with a
#: value and with a session.
PER_RULE = """
    SELECT r, count(*) AS c, min(pos) AS first, sum(n - 1) AS dup, sum(ign) AS ign,
           count_if(value IS NOT NULL) AS nv, count_if(sess IS NOT NULL) AS ns
    FROM adv_ev GROUP BY r"""


# --------------------------------------------------------------------------- raw rows


def remote_raw_rows(spark, inputs: list[ParquetInput], fm: pa.Table, fields: list[str],
                    f: np.ndarray, line: np.ndarray) -> pd.DataFrame:
    """As ``_sql_input.raw_rows`` for files Spark reads from a URI: the wanted rows are
    fetched by Spark (one query per group of alike files), cast back to the type pyarrow reads
    from the file, and written as text by the in-memory reader's own code.

    ``fm`` maps Spark's file names (``fp``) to file indices (``f``)."""
    from pyspark.sql.functions import broadcast

    n = len(f)
    out = {name: np.full(n, None, dtype=object) for name in fields}
    groups: dict[tuple, list[ParquetInput]] = {}
    for inp in inputs:
        groups.setdefault(group_signature(inp), []).append(inp)
    row = np.asarray(line, dtype=np.int64) - 1
    for members in groups.values():
        inp = members[0]
        sel = np.flatnonzero(np.isin(f, [m.index for m in members]))
        cols = sorted({inp.columns[x] for x in fields if inp.kinds[x] != "null"})
        if sel.size == 0 or not cols:
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FutureWarning)  # pyspark on pandas 3
            wanted = spark.createDataFrame(pa.table({
                "f": pa.array(f[sel], pa.int32()), "adv_row": pa.array(row[sel], pa.int64())}))
            names = spark.createDataFrame(fm)
        df = (spark.read.schema(read_schema(inp)).parquet(*[m.spark_path for m in members])
              .selectExpr("_metadata.file_path AS fp", "_metadata.row_index AS adv_row",
                          *[f"{ident(c)} AS {ident('c_' + c)}" for c in cols]))
        table = (df.join(broadcast(names), "fp")
                 .join(broadcast(wanted), ["f", "adv_row"]).toArrow())
        got_key = (table.column("f").to_numpy().astype(np.int64) << 40) \
            + table.column("adv_row").to_numpy()
        order = pd.Index(got_key).get_indexer((f[sel].astype(np.int64) << 40) + row[sel])
        table = table.take(pa.array(order))
        typed = pa.table({c: table.column("c_" + c).cast(_field_type(inp, c)) for c in cols})
        frame = _arrow_frame(typed, cols, inp.source, "|")
        for name in fields:
            if inp.kinds[name] != "null":
                out[name][sel] = frame[inp.columns[name]].to_numpy(dtype=object)
    frame = pd.DataFrame({name: pd.Series(out[name], dtype="str") for name in fields})
    for name in fields:
        col = frame[name]
        frame[name] = col.where(col.notna() & (col != ""), None)
    names = {i.index: i.source for i in inputs}
    frame[SOURCE_COL] = pd.Series([names[int(i)] for i in f], dtype="str")
    frame[LINE_COL] = np.asarray(line, dtype=np.int64)
    return frame


def _field_type(inp: ParquetInput, col: str) -> pa.DataType:
    field = next(x for x, c in inp.columns.items() if c == col)
    t = inp.arrow_types[field]
    return t.value_type if pa.types.is_dictionary(t) else t
