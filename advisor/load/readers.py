"""Read interaction logs and catalogues from CSV, TSV, Parquet or JSON Lines (gzip too).

The only module that touches input files. Every value is kept as the string it was read
(ids are opaque: ``00123`` and ``123`` are different ids); empty cells become missing. Each
row carries its file (``_source``) and its physical line (``_line``) so that later messages
can point at it. Anything that cannot be read becomes a :class:`LogFormatError` naming the
file and the fix; no parser traceback reaches the user.
"""

from __future__ import annotations

import csv
import gzip
import hashlib
import io
import json
import re
import zlib
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.json as pajson
import pyarrow.parquet as pq

from advisor.config import CatalogColumns, LogColumns
from advisor.errors import LogFormatError
from advisor.load.columns import detect_catalog_columns, detect_log_columns
from advisor.load.model import (
    CATALOG_FIELDS,
    LINE_COL,
    LOG_FIELDS,
    SOURCE_COL,
    ColumnDetection,
    InputFile,
    RawCatalog,
    RawLog,
)

__all__ = ["SUPPORTED_SUFFIXES", "detect_format", "list_input_files", "read_catalog",
           "read_logs"]

#: File name suffix -> format. ``.txt`` is tab-separated when its first line holds a tab,
#: comma-separated otherwise. ``.json`` may hold JSON Lines or one JSON array of objects.
SUPPORTED_SUFFIXES: dict[str, str] = {
    ".csv": "csv",
    ".tsv": "tsv",
    ".tab": "tsv",
    ".txt": "txt",
    ".parquet": "parquet",
    ".pq": "parquet",
    ".jsonl": "jsonl",
    ".ndjson": "jsonl",
    ".json": "jsonl",
}

_GZIP_MAGIC = b"\x1f\x8b"
_PARQUET_MAGIC = b"PAR1"
_SUPPORTED_TEXT = ", ".join(SUPPORTED_SUFFIXES) + " (each optionally .gz)"


@dataclass(frozen=True, slots=True)
class _Table:
    """One file's content before column mapping (private)."""

    header: list[str]
    columns: Callable[[list[str]], pd.DataFrame]
    """Given source column names, returns them as string columns (missing as NA)."""
    lines: np.ndarray
    format: str
    rows: int


def detect_format(path: str | Path) -> tuple[str, bool] | None:
    """Format and compression of a file, judged by its name.

    Parameters
    ----------
    path : str or Path
        File name; only the suffixes are read.

    Returns
    -------
    tuple (format, compressed) or None
        ``format`` is ``csv``, ``tsv``, ``txt`` (decided on reading), ``parquet`` or ``jsonl``;
        ``None`` when the suffix is not supported.

    Examples
    --------
    >>> detect_format("plays/2024-03-01.csv.gz")
    ('csv', True)
    >>> detect_format("notes.md") is None
    True
    """
    name = Path(path).name.lower()
    compressed = name.endswith(".gz")
    if compressed:
        name = name[:-3]
    suffix = Path(name).suffix
    fmt = SUPPORTED_SUFFIXES.get(suffix)
    return None if fmt is None else (fmt, compressed)


def list_input_files(path: str | Path) -> tuple[list[tuple[Path, str]], list[str]]:
    """Files to read under ``path``, and the files passed over.

    Parameters
    ----------
    path : str or Path
        One file, or a folder read recursively.

    Returns
    -------
    files : list of (Path, str)
        Each file with its name for messages: the file name for a single file, the path
        relative to the folder (with ``/``) for a folder; sorted by that relative path.
    skipped : list of str
        Files in the folder with an unsupported suffix (hidden files are left out silently).

    Raises
    ------
    LogFormatError
        If the path does not exist, a single file has an unsupported suffix, or a folder
        holds no supported file.
    """
    p = Path(path)
    if p.is_file():
        if detect_format(p) is None:
            raise LogFormatError(
                f"{p}: unsupported file type {p.suffix or '(no suffix)'!r}; expected one of "
                f"{_SUPPORTED_TEXT}. Export the data in one of these formats or rename the file."
            )
        return [(p, p.name)], []
    if not p.is_dir():
        raise LogFormatError(f"{p}: no such file or folder; check the path.")
    files: list[tuple[Path, str]] = []
    skipped: list[str] = []
    for f in sorted(p.rglob("*"), key=lambda q: q.relative_to(p).as_posix()):
        rel = f.relative_to(p)
        if any(part.startswith(".") for part in rel.parts) or not f.is_file():
            continue
        (files.append((f, rel.as_posix())) if detect_format(f) else skipped.append(rel.as_posix()))
    if not files:
        seen = ", ".join(skipped[:10]) + (" ..." if len(skipped) > 10 else "")
        raise LogFormatError(
            f"{p}: the folder holds no readable file (expected {_SUPPORTED_TEXT}); found: "
            f"{seen or 'nothing'}. Point at the folder that holds the exported files."
        )
    return files, skipped


# --------------------------------------------------------------------------- bytes and text


def _one_line(exc: BaseException) -> str:
    """A parser's error text on one line: Arrow's and zlib's messages can span lines, and a
    message that names a file should stay one line on the terminal."""
    return " ".join(str(exc).split()) or type(exc).__name__


def _read_bytes(path: Path, source: str) -> bytes:
    try:
        return path.read_bytes()
    except OSError as exc:
        raise LogFormatError(
            f"{source}: cannot be read ({exc.strerror or exc}); check the path and permissions."
        ) from None


def _decompress(data: bytes, source: str, named_gz: bool) -> tuple[bytes, bool]:
    if not data.startswith(_GZIP_MAGIC):
        if named_gz:
            raise LogFormatError(
                f"{source}: named .gz but not gzip-compressed (expected the gzip signature "
                "1f 8b at the start); rename the file without .gz or compress it with gzip."
            )
        return data, False
    try:
        return gzip.decompress(data), True
    except (OSError, EOFError, zlib.error) as exc:
        raise LogFormatError(
            f"{source}: the gzip data is corrupt or truncated ({_one_line(exc)}); copy or "
            "export the file again, or check it with 'gzip -t'."
        ) from None


def _decode(data: bytes, source: str, fmt: str, compressed: bool) -> str:
    if data.startswith(_PARQUET_MAGIC):
        raise LogFormatError(
            f"{source}: this is a Parquet file, not {fmt} text; rename it to .parquet."
        )
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        try:
            return data.decode("utf-16")
        except UnicodeDecodeError as exc:
            raise LogFormatError(
                f"{source}: starts like UTF-16 text but is not valid UTF-16 ({exc.reason}); "
                "re-save it as UTF-8."
            ) from None
    if b"\x00" in data[:65536]:
        raise LogFormatError(
            f"{source}: holds NUL bytes, so it is binary, not {fmt} text; check that the file "
            "suffix matches its content, or export it again as UTF-8 text."
        )
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        # utf-8-sig reports offsets after the byte-order mark; report offsets in the file.
        offset = exc.start + (3 if data.startswith(b"\xef\xbb\xbf") else 0)
        line = data.count(b"\n", 0, offset) + 1
        where = " of the decompressed data" if compressed else ""
        raise LogFormatError(
            f"{source} line {line}: byte {data[offset]:#04x} at byte offset {offset}{where} is "
            "not valid UTF-8; re-save the file as UTF-8 (for example 'Save as... CSV UTF-8', "
            "or iconv -f latin1 -t utf-8)."
        ) from None


def _physical_lines(text: str) -> int:
    if not text:
        return 0
    return text.count("\n") + (0 if text.endswith("\n") else 1)


def _strings(frame: pd.DataFrame) -> pd.DataFrame:
    """Every column as strings with empty cells missing."""
    out = {}
    for name in frame.columns:
        col = frame[name].astype("str")
        out[name] = col.where(col != "", None)
    return pd.DataFrame(out, index=frame.index)


# --------------------------------------------------------------------------- delimited text


def _header_names(values: list) -> list[str]:
    return [str(v).strip() if str(v).strip() else f"unnamed_{i + 1}" for i, v in
            enumerate(values)]


def _csv_module_parse(text: str, sep: str, source: str) -> tuple[list[str], list, list[int]]:
    """Parse with the csv module, which reports physical lines (slow path, exact lines)."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=sep, strict=True)
    header: list[str] | None = None
    rows: list[list[str]] = []
    lines: list[int] = []
    prev = 0
    while True:
        start = prev + 1
        try:
            rec = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            raise LogFormatError(
                f"{source} line {start}: cannot be parsed as delimited text "
                f"({_one_line(exc)}); a quoted value is probably not closed or has text after "
                "the closing quote. Fix the quoting on that line."
            ) from None
        prev = reader.line_num
        if not rec:
            continue
        if header is None:
            header = rec
            continue
        if len(rec) > len(header):
            raise LogFormatError(
                f"{source} line {start}: {len(rec)} fields but the header has {len(header)}; "
                "a value probably holds the delimiter without quotes. Quote that value or "
                "remove the extra delimiter."
            )
        rows.append(rec + [""] * (len(header) - len(rec)))
        lines.append(start)
    return header or [], rows, lines


def _read_delimited(text: str, sep: str, source: str, fmt: str) -> _Table:
    n_lines = _physical_lines(text)
    frame = None
    if text.strip():
        try:
            frame = pd.read_csv(io.StringIO(text), sep=sep, header=None, dtype=str,
                                na_filter=False, engine="c", skip_blank_lines=True)
        except pd.errors.EmptyDataError:
            frame = None
        except (pd.errors.ParserError, ValueError):
            frame = None  # the csv module below reports the physical line of the fault
    if frame is not None and len(frame) == n_lines:
        # No blank line and no line break inside a quoted value: row i is line i + 1.
        header = _header_names(frame.iloc[0].tolist())
        body = frame.iloc[1:].reset_index(drop=True)
        body.columns = range(body.shape[1])
        lines = np.arange(2, len(body) + 2, dtype=np.int64)
    else:
        hdr, rows, line_list = _csv_module_parse(text, sep, source)
        header = _header_names(hdr)
        body = pd.DataFrame(rows, columns=range(len(header)), dtype=str)
        lines = np.asarray(line_list, dtype=np.int64)
    if not header:
        raise LogFormatError(
            f"{source}: the file is empty (no header, no rows); remove it or export it again."
        )
    if len(body) == 0:
        raise LogFormatError(
            f"{source}: has a header ({', '.join(header)}) but no data rows; remove it or "
            "export it again."
        )
    positions = {}
    for i, name in enumerate(header):
        positions.setdefault(name, i)

    def columns(names: list[str]) -> pd.DataFrame:
        sub = body[[positions[n] for n in names]]
        sub.columns = names
        return _strings(sub)

    return _Table(header=header, columns=columns, lines=lines, format=fmt, rows=len(body))


# --------------------------------------------------------------------------- arrow tables


def _arrow_to_str(arr: pa.ChunkedArray, sep: str) -> pa.ChunkedArray | None:
    """One Arrow column as strings; ``None`` when its type has no sensible text form."""
    t = arr.type
    if pa.types.is_dictionary(t):
        arr = arr.cast(t.value_type)
        t = arr.type
    if pa.types.is_string(t) or pa.types.is_large_string(t):
        return arr.cast(pa.string())
    if pa.types.is_null(t):
        return pa.chunked_array([pa.nulls(len(arr), pa.string())])
    if (pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_boolean(t)
            or pa.types.is_decimal(t) or pa.types.is_date(t) or pa.types.is_timestamp(t)):
        # Timestamps become ISO text ('2024-01-01 10:00:00.000000000Z' when zoned), read back
        # by validation like any other ISO-8601 value.
        return pc.cast(arr, pa.string())
    if pa.types.is_list(t) or pa.types.is_large_list(t):
        v = t.value_type
        if pa.types.is_string(v) or pa.types.is_large_string(v):
            return pc.binary_join(arr.cast(pa.list_(pa.string())), sep)
    return None


def _check_utf8(col: pa.ChunkedArray, name: str, source: str) -> None:
    """Raise when a string column holds bytes that are not UTF-8.

    Arrow does not check the text it reads from Parquet; an invalid value would fail deep in
    pandas later. The first bad value is named by its row and byte offset.
    """
    try:
        col.validate(full=True)
        return
    except pa.ArrowInvalid:
        pass
    for row, value in enumerate(col.cast(pa.binary()).to_pylist()):
        if value is None:
            continue
        try:
            value.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise LogFormatError(
                f"{source} row {row + 1}: column {name!r} holds byte {value[exc.start]:#04x} "
                f"at byte offset {exc.start} of its value, which is not valid UTF-8; export "
                "the file again with that column as UTF-8 text."
            ) from None
    raise LogFormatError(  # pragma: no cover - Arrow found a fault Python's decoder did not
        f"{source}: column {name!r} is not valid text; export the file again.")


def _arrow_frame(table: pa.Table, names: list[str], source: str, sep: str) -> pd.DataFrame:
    out = {}
    for name in names:
        col = _arrow_to_str(table.column(name), sep)
        if col is None:
            raise LogFormatError(
                f"{source}: column {name!r} has type {table.column(name).type}, which cannot "
                "be read as text; store it as text or numbers."
            )
        _check_utf8(col, name, source)
        out[name] = col.to_pandas()
    return _strings(pd.DataFrame(out))


def open_parquet(target, source: str) -> tuple[pq.ParquetFile, list[str]]:
    """Open a Parquet file (path or file object) for reading, with its column names.

    Raises
    ------
    LogFormatError
        If it is not valid Parquet or has no data rows (one line, naming ``source``).
    """
    try:
        pf = pq.ParquetFile(target)
        header = list(pf.schema_arrow.names)
        n = pf.metadata.num_rows
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise LogFormatError(
            f"{source}: not a valid Parquet file ({_one_line(exc)}); export it again, or check "
            "that the suffix matches the content."
        ) from None
    if n == 0:
        raise LogFormatError(
            f"{source}: has columns ({', '.join(header)}) but no data rows; remove it or "
            "export it again."
        )
    return pf, header


def _read_parquet(data: bytes, source: str, sep: str) -> _Table:
    pf, header = open_parquet(io.BytesIO(data), source)
    n = pf.metadata.num_rows

    def columns(names: list[str]) -> pd.DataFrame:
        try:
            table = pf.read(columns=names)
        except (pa.ArrowException, OSError, ValueError) as exc:
            raise LogFormatError(
                f"{source}: the Parquet data is corrupt ({_one_line(exc)}); export the file again."
            ) from None
        return _arrow_frame(table, names, source, sep)

    # Parquet has no lines; the row number + 1 stands in for it.
    return _Table(header=header, columns=columns, lines=np.arange(1, n + 1, dtype=np.int64),
                  format="parquet", rows=n)


# --------------------------------------------------------------------------- JSON


def _json_cell(v: object, sep: str) -> str | None:
    if v is None:
        return None
    if isinstance(v, str):
        return v
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        # Integral floats print without '.0', as Arrow does, so 123.0 reads as id '123'.
        return str(int(v)) if v.is_integer() and abs(v) < 1e16 else repr(v)
    if isinstance(v, list) and all(isinstance(x, (str, int, float)) for x in v):
        return sep.join(_json_cell(x, sep) or "" for x in v)
    return json.dumps(v, ensure_ascii=False)


def _records_table(records: list, lines: np.ndarray, source: str, sep: str,
                   fmt: str) -> _Table:
    header: dict[str, None] = {}
    for rec in records:
        header.update(dict.fromkeys(rec))
    names = list(header)

    def columns(wanted: list[str]) -> pd.DataFrame:
        out = {n: [_json_cell(r.get(n), sep) for r in records] for n in wanted}
        return _strings(pd.DataFrame(out, dtype=object).fillna(""))

    return _Table(header=names, columns=columns, lines=lines, format=fmt, rows=len(records))


def _read_json_lines_python(text: str, source: str, sep: str) -> _Table:
    records: list[dict] = []
    lines: list[int] = []
    for i, line in enumerate(text.split("\n"), start=1):
        if not line.strip():
            continue
        try:
            rec = json.loads(line)
        except json.JSONDecodeError as exc:
            raise LogFormatError(
                f"{source} line {i}: not valid JSON ({exc.msg}: column {exc.colno}); JSON "
                "Lines needs one complete JSON object per line. Fix or remove that line."
            ) from None
        if not isinstance(rec, dict):
            raise LogFormatError(
                f"{source} line {i}: expected a JSON object ({{...}}), got "
                f"{type(rec).__name__}; JSON Lines needs one object per line."
            )
        records.append(rec)
        lines.append(i)
    return _records_table(records, np.asarray(lines, dtype=np.int64), source, sep, "jsonl")


#: A run of digits longer than float64 holds exactly (2**53 has 16 digits).
_LONG_DIGITS = re.compile(rb"[0-9]{16,}")


class _Fallback(Exception):
    """Arrow's JSON result cannot be trusted; read with the json module (private)."""


def _read_json_lines(text: str, source: str, sep: str) -> _Table:
    # Fast path: Arrow's JSON reader. It infers ISO strings as timestamps (dropping the zone
    # text), so such columns are read again as plain strings. Anything unusual (mixed types
    # in a column, nested objects, more than one object on a line) falls back to the json
    # module, which is slower but exact about lines and errors.
    line_list = text.split("\n")
    nonblank = np.flatnonzero(pd.Series(line_list, dtype="str").str.strip().ne("").to_numpy())
    raw = text.encode("utf-8")
    try:
        table = pajson.read_json(io.BytesIO(raw))
        # Arrow reads an integer beyond int64 (or one in a column that also holds fractions)
        # as a float64: two ids such as 12345678901234567891 and ...892 would become one. A
        # column of floats next to a run of 16+ digits (beyond float64's 2**53) goes to the
        # json module, whose integers are exact.
        if (any(pa.types.is_floating(f.type) for f in table.schema)
                and _LONG_DIGITS.search(raw) is not None):
            raise _Fallback
        stamped = [f.name for f in table.schema if pa.types.is_timestamp(f.type)]
        if stamped:
            schema = pa.schema([(name, pa.string()) for name in stamped])
            opts = pajson.ParseOptions(explicit_schema=schema, unexpected_field_behavior="infer")
            table = pajson.read_json(io.BytesIO(raw), parse_options=opts)
        ok = table.num_rows == len(nonblank) and all(
            _arrow_to_str(table.column(i)[:1], sep) is not None
            for i in range(table.num_columns))
    except (pa.ArrowException, _Fallback):
        ok = False
    if not ok:
        return _read_json_lines_python(text, source, sep)
    header = list(table.column_names)

    def columns(names: list[str]) -> pd.DataFrame:
        return _arrow_frame(table, names, source, sep)

    return _Table(header=header, columns=columns, lines=(nonblank + 1).astype(np.int64),
                  format="jsonl", rows=table.num_rows)


def _read_json_array(text: str, source: str, sep: str) -> _Table:
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise LogFormatError(
            f"{source} line {exc.lineno}: not valid JSON ({exc.msg}); fix the file or export "
            "it as JSON Lines (one object per line)."
        ) from None
    if not isinstance(doc, list) or not all(isinstance(r, dict) for r in doc):
        raise LogFormatError(
            f"{source}: expected a JSON array of objects or JSON Lines; got another JSON "
            "shape. Export one object per event."
        )
    # A JSON array has no useful lines; the record number stands in for it.
    return _records_table(doc, np.arange(1, len(doc) + 1, dtype=np.int64), source, sep, "json")


# --------------------------------------------------------------------------- one file


def _read_table(path: Path, source: str, sep: str, *,
                in_folder: bool) -> tuple[_Table, InputFile]:
    fmt, named_gz = detect_format(path) or ("csv", False)
    disk = _read_bytes(path, source)
    data, compressed = _decompress(disk, source, named_gz)
    if not data.strip():
        raise LogFormatError(
            f"{source}: the file is empty (no header, no rows); remove it or export it again."
        )
    if fmt == "parquet":
        table = _read_parquet(data, source, sep)
    else:
        text = _decode(data, source, fmt, compressed)
        if fmt == "jsonl":
            if text.lstrip().startswith("["):
                table = _read_json_array(text, source, sep)
            else:
                table = _read_json_lines(text, source, sep)
        else:
            if fmt == "txt":
                first = text.split("\n", 1)[0]
                fmt = "tsv" if "\t" in first else "csv"
            table = _read_delimited(text, "\t" if fmt == "tsv" else ",", source, fmt)
        if table.rows == 0:
            raise LogFormatError(
                f"{source}: holds no records; remove it or export it again."
            )
    info = InputFile(
        path=source if in_folder else str(path),
        format=table.format,
        compressed=compressed,
        size_bytes=len(disk),
        sha256=hashlib.sha256(disk).hexdigest(),
        rows=table.rows,
    )
    return table, info


def _canonical(table: _Table, detection: ColumnDetection, fields: tuple[str, ...],
               source: str) -> pd.DataFrame:
    wanted = [f for f in fields if f in detection.mapping]
    frame = table.columns([detection.mapping[f] for f in wanted])
    frame.columns = wanted
    frame[SOURCE_COL] = source
    frame[LINE_COL] = table.lines
    return frame.reset_index(drop=True)


def read_logs(path: str | Path, columns: LogColumns | None = None) -> RawLog:
    """Read an interaction log: one file or every supported file in a folder.

    Parameters
    ----------
    path : str or Path
        A ``.csv``, ``.tsv``, ``.txt``, ``.parquet``/``.pq`` or ``.jsonl``/``.ndjson``/
        ``.json`` file, each optionally gzip-compressed (``.gz``), or a folder of them
        (read recursively, sorted by relative path, hidden files skipped).
    columns : LogColumns, optional
        Column names chosen by the user; unnamed fields are auto-detected.

    Returns
    -------
    RawLog
        Every row, values as read (strings, missing as NA), with ``_source`` and ``_line``.

    Raises
    ------
    LogFormatError
        If a file cannot be read (not found, unsupported, corrupt, not UTF-8, empty, header
        only), a required column is missing, or files in a folder have different columns.

    Notes
    -----
    Lines are physical lines with the header as line 1, also when a quoted value spans
    lines. For Parquet the row number + 1, and for a JSON array the record number, stand in
    for the line. Arrow's JSON reader is used when it can be exact, else the json module.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (d / "plays.csv").write_text("user_id,item_id,ts\\n7,00123,1700000000\\n")
    >>> log = read_logs(d / "plays.csv")
    >>> log.rows["item"].tolist(), log.rows["_line"].tolist()
    (['00123'], [2])
    """
    cols = columns or LogColumns()
    files, skipped = list_input_files(path)
    frames: list[pd.DataFrame] = []
    infos: list[InputFile] = []
    first: tuple[str, ColumnDetection] | None = None
    unused: dict[str, None] = {}
    for file, source in files:
        table, info = _read_table(file, source, "|", in_folder=Path(path).is_dir())
        det = detect_log_columns(table.header, given=cols.given(), source=source)
        if first is None:
            first = (source, det)
        elif det.mapping != first[1].mapping:
            raise LogFormatError(
                f"{source}: columns map differently from {first[0]} ({_show(det.mapping)} "
                f"versus {_show(first[1].mapping)}); every file in a folder must have the same "
                f"columns. Rename the columns in {source} or move it out of the folder."
            )
        unused.update(dict.fromkeys(det.unused))
        frames.append(_canonical(table, det, LOG_FIELDS, source))
        infos.append(info)
    assert first is not None  # list_input_files never returns an empty list
    rows = frames[0] if len(frames) == 1 else pd.concat(frames, ignore_index=True)
    detection = ColumnDetection(mapping=dict(first[1].mapping), detected=first[1].detected,
                                unused=tuple(unused))
    return RawLog(rows=rows, files=tuple(infos), columns=detection,
                  skipped_files=tuple(skipped))


def _show(mapping: dict[str, str]) -> str:
    return ", ".join(f"{k}={v!r}" for k, v in mapping.items())


def read_catalog(path: str | Path, columns: CatalogColumns | None = None) -> RawCatalog:
    """Read a catalogue file (one row per item).

    Parameters
    ----------
    path : str or Path
        One file in any format :func:`read_logs` reads.
    columns : CatalogColumns, optional
        Column names chosen by the user, and the category separator (list values in JSON or
        Parquet are joined with it).

    Returns
    -------
    RawCatalog

    Raises
    ------
    LogFormatError
        If the path is a folder, the file cannot be read, or no item column is found.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (d / "items.csv").write_text("sku,name,tags\\n00123,Tea,drink|hot\\n")
    >>> read_catalog(d / "items.csv").columns.mapping
    {'item': 'sku', 'title': 'name', 'categories': 'tags'}
    """
    cols = columns or CatalogColumns()
    p = Path(path)
    if p.is_dir():
        raise LogFormatError(
            f"{p}: the catalogue must be one file, got a folder; combine the catalogue into "
            "one file."
        )
    files, _ = list_input_files(p)
    file, source = files[0]
    table, info = _read_table(file, source, cols.category_separator, in_folder=False)
    det = detect_catalog_columns(table.header, given=cols.given(), source=source)
    rows = _canonical(table, det, CATALOG_FIELDS, source)
    return RawCatalog(rows=rows, file=info, columns=det)
