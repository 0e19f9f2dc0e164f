"""Input files for the DuckDB engine: one SQL ``SELECT`` per file, in canonical columns.

DuckDB reads the files itself (out of core). This module decides, per file, how each mapped
column becomes the canonical text or number the validation rules read, so that the result
is the same as the in-memory reader's (``advisor.load.readers``): integers and booleans as
their text, strings as they are, Parquet timestamps as instants. Anything whose text form
could differ between the two readers is refused with an :class:`EngineUnsupportedError`
that points at ``--engine pandas``; nothing is read differently in silence.

Lines: Parquet has none, so the row number + 1 stands in (as in the in-memory reader). A
delimited file is read only when every record is on its own line (no blank lines, no line
breaks inside quoted values); then row ``r`` (0-based) is line ``r + 2``. Other files are
refused rather than given approximate lines.
"""

from __future__ import annotations

import csv
import gzip
import hashlib
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from advisor.config import LogColumns
from advisor.errors import EngineUnsupportedError, LogFormatError
from advisor.load.columns import detect_log_columns
from advisor.load.model import LINE_COL, LOG_FIELDS, SOURCE_COL, ColumnDetection, InputFile
from advisor.load.readers import _arrow_frame, detect_format, list_input_files, open_parquet

#: DuckDB column types read as text exactly as the in-memory reader writes them.
_INT_TYPES = {"TINYINT", "SMALLINT", "INTEGER", "BIGINT", "UTINYINT", "USMALLINT", "UINTEGER",
              "UBIGINT", "HUGEINT", "UHUGEINT"}
_TS_CLASS = {"TIMESTAMP": 2, "TIMESTAMP_S": 2, "TIMESTAMP_MS": 2, "TIMESTAMP_NS": 3,
             "TIMESTAMP WITH TIME ZONE": 4, "DATE": 5}

#: Timestamp column classes (``ts_c``): 0 text, 1 integer epoch, 2 naive timestamp (micro-
#: seconds), 3 naive timestamp (nanoseconds), 4 zoned timestamp (microseconds), 5 date (days).
TS_TEXT, TS_INT = 0, 1

_GZIP_MAGIC = b"\x1f\x8b"


@dataclass(frozen=True, slots=True)
class SourceFile:
    """One log file as the engine reads it."""

    index: int
    """Position of the file in reading order (the ``f`` column)."""
    path: Path
    source: str
    """Name for messages (relative to the LOGS folder)."""
    format: str
    """``parquet``, ``csv`` or ``tsv``."""
    select: str
    """SQL producing the canonical columns of every row."""
    columns: dict[str, str]
    """Canonical field -> column name in the file."""
    info: InputFile


def quote_ident(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def quote_str(text: str) -> str:
    return "'" + text.replace("'", "''") + "'"


def _unsupported(source: str, what: str) -> EngineUnsupportedError:
    return EngineUnsupportedError(
        f"{source}: --engine duckdb does not read {what} yet; use --engine pandas for this "
        "input (it reads every supported format).", reason=f"{source}: {what}"
    )


def _fingerprint(path: Path, source: str, in_folder: bool, fmt: str, compressed: bool,
                 rows: int) -> InputFile:
    digest = hashlib.sha256()
    try:
        with path.open("rb") as fh:
            for block in iter(lambda: fh.read(1 << 22), b""):
                digest.update(block)
        size = path.stat().st_size
    except OSError as exc:
        raise LogFormatError(
            f"{source}: cannot be read ({exc.strerror or exc}); check the path and permissions."
        ) from None
    return InputFile(path=source if in_folder else str(path), format=fmt, compressed=compressed,
                     size_bytes=size, sha256=digest.hexdigest(), rows=rows)


def _head(path: Path, source: str, n: int = 65536) -> bytes:
    try:
        with path.open("rb") as fh:
            return fh.read(n)
    except OSError as exc:
        raise LogFormatError(
            f"{source}: cannot be read ({exc.strerror or exc}); check the path and permissions."
        ) from None


# --------------------------------------------------------------------------- expressions


def _text_expr(col: str | None, dtype: str | None, field: str, source: str) -> str:
    """SQL for an id, event or session column as text (NULL when absent)."""
    if col is None:
        return "NULL::VARCHAR"
    q = quote_ident(col)
    if dtype == "VARCHAR":
        return q
    if dtype in _INT_TYPES or dtype == "BOOLEAN":
        return f"CAST({q} AS VARCHAR)"
    if dtype == '"NULL"' or dtype == "NULL":
        return "NULL::VARCHAR"
    raise _unsupported(source, f"a {field} column of type {dtype} ({col!r})")


def _ts_exprs(col: str, dtype: str, source: str) -> tuple[str, str, str]:
    """(text, integer, class) SQL for the timestamp column."""
    q = quote_ident(col)
    if dtype == "VARCHAR":
        return q, "NULL::BIGINT", str(TS_TEXT)
    if dtype in _INT_TYPES and dtype not in ("UBIGINT", "HUGEINT", "UHUGEINT"):
        return "NULL::VARCHAR", f"CAST({q} AS BIGINT)", str(TS_INT)
    cls = _TS_CLASS.get(dtype)
    if cls in (2, 4):
        return "NULL::VARCHAR", f"epoch_us({q})", str(cls)
    if cls == 3:
        return "NULL::VARCHAR", f"epoch_ns({q})", str(cls)
    if cls == 5:
        return "NULL::VARCHAR", f"CAST(datediff('day', DATE '1970-01-01', {q}) AS BIGINT)", "5"
    raise _unsupported(source, f"a timestamp column of type {dtype} ({col!r})")


def _value_exprs(col: str | None, dtype: str | None, source: str) -> tuple[str, str]:
    """(text, number) SQL for the value column."""
    if col is None:
        return "NULL::VARCHAR", "NULL::DOUBLE"
    q = quote_ident(col)
    if dtype == "VARCHAR":
        return q, "NULL::DOUBLE"
    if dtype == "BOOLEAN":
        return f"CAST({q} AS VARCHAR)", "NULL::DOUBLE"
    if dtype in _INT_TYPES or dtype == "DOUBLE":
        return "NULL::VARCHAR", f"CAST({q} AS DOUBLE)"
    if dtype == "FLOAT":
        # The in-memory reader goes through the shortest text of the float32 (0.1f -> "0.1"
        # -> 0.1), not through its exact double value (0.10000000149...).
        return "NULL::VARCHAR", f"CAST(CAST({q} AS VARCHAR) AS DOUBLE)"
    raise _unsupported(source, f"a value column of type {dtype} ({col!r})")


def _select(index: int, scan: str, line: str, mapping: dict[str, str], types: dict[str, str],
            source: str) -> str:
    col = {f: mapping.get(f) for f in LOG_FIELDS}
    typ = {f: types.get(c) for f, c in col.items() if c is not None}
    ts_s, ts_i, ts_c = _ts_exprs(col["ts"], typ["ts"], source)
    value_s, value_d = _value_exprs(col["value"], typ.get("value"), source)
    parts = [
        f"{index}::INTEGER AS f",
        f"({line})::BIGINT AS line",
        f"{_text_expr(col['user'], typ['user'], 'user', source)} AS user_s",
        f"{_text_expr(col['item'], typ['item'], 'item', source)} AS item_s",
        f"{ts_s} AS ts_s", f"{ts_i} AS ts_i", f"{ts_c}::TINYINT AS ts_c",
        f"{_text_expr(col['event'], typ.get('event'), 'event', source)} AS event_s",
        f"{value_s} AS value_s", f"{value_d} AS value_d",
        f"{_text_expr(col['session'], typ.get('session'), 'session', source)} AS session_s",
    ]
    return f"SELECT {', '.join(parts)} FROM {scan}"


# --------------------------------------------------------------------------- per format


def _parquet(con, index: int, path: Path, source: str, given: dict[str, str],
             in_folder: bool) -> tuple[SourceFile, ColumnDetection]:
    if _head(path, source, 2) == _GZIP_MAGIC:
        raise _unsupported(source, "gzip-compressed Parquet")
    pf, header = open_parquet(path, source)
    det = detect_log_columns(header, given=given, source=source)
    ts_field = pf.schema_arrow.field(det.mapping["ts"])
    if pa.types.is_timestamp(ts_field.type) and ts_field.type.tz and ts_field.type.unit == "ns":
        raise _unsupported(source, "zoned nanosecond timestamps")
    scan = f"read_parquet({quote_str(str(path))}, file_row_number=true)"
    types = dict(con.execute(f"SELECT column_name, column_type FROM (DESCRIBE SELECT * FROM "
                             f"{scan})").fetchall())
    select = _select(index, scan, "file_row_number + 1", det.mapping, types, source)
    info = _fingerprint(path, source, in_folder, "parquet", False, pf.metadata.num_rows)
    return SourceFile(index, path, source, "parquet", select, dict(det.mapping), info), det


def _count_lines(path: Path, compressed: bool) -> tuple[int, bool]:
    """Physical lines (as the in-memory reader counts them) and whether one is blank."""
    opener = gzip.open if compressed else open
    lines, blank, prev, last = 0, False, b"\n", b""
    with opener(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 22), b""):
            lines += block.count(b"\n")
            if (prev == b"\n" and block[:1] in (b"\n", b"\r")) or b"\n\n" in block \
                    or b"\n\r\n" in block:
                blank = True
            prev = block[-1:]
            last = block
    if last and not last.endswith(b"\n"):
        lines += 1
    return lines, blank


def _delimited(con, index: int, path: Path, source: str, fmt: str, given: dict[str, str],
               in_folder: bool, table: str) -> tuple[SourceFile, ColumnDetection]:
    head = _head(path, source)
    compressed = head.startswith(_GZIP_MAGIC)
    if compressed:
        try:
            with gzip.open(path, "rb") as fh:
                head = fh.read(65536)
        except (OSError, EOFError) as exc:
            raise LogFormatError(
                f"{source}: the gzip data is corrupt or truncated ({exc}); copy or export the "
                "file again, or check it with 'gzip -t'."
            ) from None
    elif detect_format(path)[1]:
        raise LogFormatError(
            f"{source}: named .gz but not gzip-compressed (expected the gzip signature 1f 8b "
            "at the start); rename the file without .gz or compress it with gzip."
        )
    if head.startswith((b"\xff\xfe", b"\xfe\xff")) or b"\x00" in head:
        raise _unsupported(source, "UTF-16 or binary text")
    if head.startswith(b"PAR1"):
        raise LogFormatError(
            f"{source}: this is a Parquet file, not {fmt} text; rename it to .parquet.")
    if fmt == "txt":
        fmt = "tsv" if b"\t" in head.split(b"\n", 1)[0] else "csv"
    sep = "\t" if fmt == "tsv" else ","
    first = head.split(b"\n", 1)[0].decode("utf-8-sig", errors="replace").rstrip("\r")
    if not first.strip():
        raise _unsupported(source, "delimited text starting with a blank line")
    header = next(csv.reader(io.StringIO(first), delimiter=sep))
    header = [h.strip() if h.strip() else f"unnamed_{i + 1}" for i, h in enumerate(header)]
    det = detect_log_columns(header, given=given, source=source)
    lines, blank = _count_lines(path, compressed)
    if blank:
        raise _unsupported(source, "delimited text with blank lines (their line numbers "
                                   "would be approximate)")
    names = [f"c{i}" for i in range(len(header))]
    cols = "{" + ", ".join(f"{quote_str(c)}: 'VARCHAR'" for c in names) + "}"
    opts = (f"delim={quote_str(sep)}, quote='\"', escape='\"', header=true, auto_detect=false, "
            f"columns={cols}, null_padding=true, "
            f"compression={quote_str('gzip' if compressed else 'none')}")
    try:
        # Insertion order is kept while loading, so rowid is the row's position in the file.
        con.execute("SET preserve_insertion_order = true")
        con.execute(f"CREATE TEMP TABLE {table} AS SELECT * FROM "
                    f"read_csv({quote_str(str(path))}, {opts})")
    except Exception as exc:  # duckdb.Error; the module is imported lazily
        # Quoted line breaks, ragged rows or bad bytes: the in-memory reader either reads
        # them or names the offending line, so point there.
        raise EngineUnsupportedError(
            f"{source}: --engine duckdb cannot read it as {fmt.upper()} "
            f"({str(exc).splitlines()[0]}); use --engine pandas, which reads quoted line "
            "breaks and names the line of any real fault.",
            reason=(f"{source}: DuckDB's {fmt.upper()} reader stopped: "
                    f"{str(exc).splitlines()[0][:160]}")
        ) from None
    rows = con.execute(f"SELECT count(*) FROM {table}").fetchall()[0][0]
    if rows == 0:
        raise LogFormatError(
            f"{source}: has a header ({', '.join(header)}) but no data rows; remove it or "
            "export it again."
        )
    if rows + 1 != lines:
        raise _unsupported(source, "delimited text whose quoted values hold line breaks "
                                   "(their line numbers would be approximate)")
    positions: dict[str, str] = {}
    for name, c in zip(header, names):
        positions.setdefault(name, c)
    mapping = {f: positions[c] for f, c in det.mapping.items()}
    types = {c: "VARCHAR" for c in names}
    select = _select(index, table, "rowid + 2", mapping, types, source)
    info = _fingerprint(path, source, in_folder, fmt, compressed, rows)
    return SourceFile(index, path, source, fmt, select, mapping, info), det


def open_sources(con, path: str | Path, columns: LogColumns | None
                 ) -> tuple[list[SourceFile], ColumnDetection, tuple[str, ...]]:
    """Every log file under ``path`` as a :class:`SourceFile`, with the column mapping.

    Raises
    ------
    LogFormatError
        As :func:`advisor.load.read_logs` does (missing columns, files that map differently).
    EngineUnsupportedError
        For inputs this engine does not read yet (JSON, gzip-compressed Parquet, exotic
        column types, delimited text with blank lines or multi-line values).
    """
    cols = columns or LogColumns()
    files, skipped = list_input_files(path)
    in_folder = Path(path).is_dir()
    out: list[SourceFile] = []
    first: tuple[str, ColumnDetection] | None = None
    unused: dict[str, None] = {}
    for index, (file, source) in enumerate(files):
        fmt = (detect_format(file) or ("csv", False))[0]
        if fmt == "jsonl":
            raise _unsupported(source, "JSON or JSON Lines")
        if fmt == "parquet":
            src, det = _parquet(con, index, file, source, cols.given(), in_folder)
        else:
            src, det = _delimited(con, index, file, source, fmt, cols.given(), in_folder,
                                  f"csv_{index}")
        if first is None:
            first = (source, det)
        elif det.mapping != first[1].mapping:
            show = ", ".join(f"{k}={v!r}" for k, v in det.mapping.items())
            show0 = ", ".join(f"{k}={v!r}" for k, v in first[1].mapping.items())
            raise LogFormatError(
                f"{source}: columns map differently from {first[0]} ({show} versus {show0}); "
                "every file in a folder must have the same columns. Rename the columns in "
                f"{source} or move it out of the folder."
            )
        unused.update(dict.fromkeys(det.unused))
        out.append(src)
    assert first is not None
    detection = ColumnDetection(mapping=dict(first[1].mapping), detected=first[1].detected,
                                unused=tuple(unused))
    return out, detection, tuple(skipped)


def raw_rows(con, sources: list[SourceFile], fields: list[str], f: np.ndarray,
             line: np.ndarray) -> pd.DataFrame:
    """The raw canonical columns of a few rows, as the in-memory reader would have read them.

    Parameters
    ----------
    con : duckdb connection
        Holds the loaded delimited files (their text is exactly as written).
    sources : list of SourceFile
    fields : list of str
        Canonical fields present in the log.
    f, line : numpy.ndarray
        File index and line of each wanted row, in the order wanted.

    Returns
    -------
    pandas.DataFrame
        ``fields`` as strings (missing as NA), ``_source``, ``_line``.
    """
    n = len(f)
    out = {name: np.full(n, None, dtype=object) for name in fields}
    for src in sources:
        sel = np.flatnonzero(f == src.index)
        if sel.size == 0:
            continue
        if src.format == "parquet":
            frame = _parquet_rows(src, fields, line[sel] - 1)
        else:
            frame = _delimited_rows(con, src, fields, line[sel])
        for name in fields:
            out[name][sel] = frame[name].to_numpy(dtype=object)
    frame = pd.DataFrame({name: pd.Series(out[name], dtype="str") for name in fields})
    for name in fields:
        col = frame[name]
        frame[name] = col.where(col.notna() & (col != ""), None)
    names = {s.index: s.source for s in sources}
    frame[SOURCE_COL] = pd.Series([names[int(i)] for i in f], dtype="str")
    frame[LINE_COL] = np.asarray(line, dtype=np.int64)
    return frame


def _delimited_rows(con, src: SourceFile, fields: list[str], lines: np.ndarray) -> pd.DataFrame:
    """Rows of a loaded delimited file by line, text as written."""
    con.register("adv_want_df", pd.DataFrame({"line": np.asarray(lines, dtype=np.int64)}))
    cols = ", ".join(f"{quote_ident(src.columns[f])} AS {quote_ident(f)}" for f in fields)
    got = con.execute(f"SELECT rowid + 2 AS line, {cols} FROM csv_{src.index} "
                      "WHERE rowid + 2 IN (SELECT line FROM adv_want_df)").df()
    con.unregister("adv_want_df")
    got = got.set_index("line").loc[np.asarray(lines, dtype=np.int64)]
    return got.reset_index(drop=True)


def _parquet_rows(src: SourceFile, fields: list[str], rows: np.ndarray) -> pd.DataFrame:
    """Rows (0-based numbers) of a Parquet file, reading only the row groups that hold them."""
    pf = pq.ParquetFile(src.path)
    cols = [src.columns[f] for f in fields]
    starts = np.cumsum([0] + [pf.metadata.row_group(g).num_rows
                              for g in range(pf.num_row_groups)])
    group = np.searchsorted(starts, rows, side="right") - 1
    pieces, order = [], []
    for g in np.unique(group):
        at = np.flatnonzero(group == g)
        table = pf.read_row_group(int(g), columns=sorted(set(cols)))
        pieces.append(table.take(pa.array(rows[at] - starts[g])))
        order.append(at)
    table = pa.concat_tables(pieces)
    frame = _arrow_frame(table, sorted(set(cols)), src.source, "|")
    frame = frame.iloc[np.argsort(np.concatenate(order), kind="stable")]
    return pd.DataFrame({f: frame[src.columns[f]].to_numpy(dtype=object) for f in fields})
