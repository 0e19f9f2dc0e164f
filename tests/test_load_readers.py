"""Reading logs and catalogues: every format, folders, line numbers, and every error message."""

from __future__ import annotations

import gzip
import hashlib
import json
import os

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from advisor.config import CatalogColumns, LogColumns
from advisor.errors import LogFormatError
from advisor.load import detect_format, read_catalog, read_logs
from advisor.validate.timestamps import parse_timestamps

# Invented rows: ids with leading zeros must survive, one cell is empty.
ROWS = [
    {"user_id": "u1", "item_id": "00123", "timestamp": "2024-03-01T10:00:00Z", "event": "play"},
    {"user_id": "u2", "item_id": "123", "timestamp": "2024-03-01T11:00:00+02:00",
     "event": "click"},
    {"user_id": "007", "item_id": "00123", "timestamp": "1709290800", "event": ""},
]


def _delimited(rows: list[dict], sep: str) -> str:
    head = sep.join(rows[0])
    return "\n".join([head] + [sep.join(r.values()) for r in rows]) + "\n"


def _write(path, fmt: str, rows: list[dict] = ROWS, *, gz: bool = False) -> None:
    if fmt in ("csv", "tsv", "txt-tab", "txt-comma"):
        sep = "," if fmt in ("csv", "txt-comma") else "\t"
        data = _delimited(rows, sep).encode()
    elif fmt in ("jsonl", "ndjson", "json-lines"):
        data = "".join(json.dumps({k: v for k, v in r.items() if v != ""}) + "\n"
                       for r in rows).encode()
    elif fmt == "json-array":
        data = json.dumps([{k: v for k, v in r.items() if v != ""} for r in rows]).encode()
    elif fmt == "parquet":
        table = pa.table({k: [r[k] or None for r in rows] for k in rows[0]})
        sink = pa.BufferOutputStream()
        pq.write_table(table, sink)
        data = sink.getvalue().to_pybytes()
    else:  # pragma: no cover
        raise AssertionError(fmt)
    path.write_bytes(gzip.compress(data) if gz else data)


SUFFIX = {"csv": ".csv", "tsv": ".tsv", "txt-tab": ".txt", "txt-comma": ".txt",
          "jsonl": ".jsonl", "ndjson": ".ndjson", "json-lines": ".json", "json-array": ".json",
          "parquet": ".parquet"}
FORMAT = {"csv": "csv", "tsv": "tsv", "txt-tab": "tsv", "txt-comma": "csv", "jsonl": "jsonl",
          "ndjson": "jsonl", "json-lines": "jsonl", "json-array": "json", "parquet": "parquet"}


@pytest.mark.parametrize("gz", [False, True])
@pytest.mark.parametrize("fmt", list(SUFFIX))
def test_every_format_reads_the_same_rows_as_strings(tmp_path, fmt, gz):
    """Each format, plain or gzip, gives the same strings, ids with leading zeros intact."""
    path = tmp_path / f"plays{SUFFIX[fmt]}{'.gz' if gz else ''}"
    _write(path, fmt, gz=gz)
    log = read_logs(path)
    assert log.rows["user"].tolist() == ["u1", "u2", "007"]
    assert log.rows["item"].tolist() == ["00123", "123", "00123"]
    assert log.rows["ts"].tolist() == [r["timestamp"] for r in ROWS]
    assert log.rows["event"].isna().tolist() == [False, False, True]
    assert log.rows["_source"].tolist() == [path.name] * 3
    (info,) = log.files
    assert (info.format, info.compressed, info.rows) == (FORMAT[fmt], gz, 3)
    assert info.path == str(path)


def test_fingerprint_is_size_and_sha256_of_the_bytes_on_disk(tmp_path):
    """The fingerprint matches os.stat and hashlib over the (compressed) file."""
    path = tmp_path / "plays.csv.gz"
    _write(path, "csv", gz=True)
    (info,) = read_logs(path).files
    assert info.size_bytes == os.stat(path).st_size
    assert info.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def test_detect_format_reads_suffixes():
    """Suffixes decide the format; .gz marks compression; unknown suffixes give None."""
    assert detect_format("a/b.TSV.gz") == ("tsv", True)
    assert detect_format("x.pq") == ("parquet", False)
    assert detect_format("x.ndjson") == ("jsonl", False)
    assert detect_format("x.xlsx") is None


def test_lines_are_physical_lines_with_quoted_newlines_blank_lines_and_crlf(tmp_path):
    """A quoted value spanning lines, a blank line, CRLF and a BOM keep true line numbers."""
    text = ('\ufeffuser,item,ts\r\n'
            'u1,"a, b",2024-01-01\r\n'
            'u2,"two\r\nline\r\nname",2024-01-02\r\n'
            '\r\n'
            'u3,c,2024-01-03\r\n')
    path = tmp_path / "q.csv"
    path.write_bytes(text.encode("utf-8"))
    log = read_logs(path)
    assert log.rows["user"].tolist() == ["u1", "u2", "u3"]
    assert log.rows["item"].tolist() == ["a, b", "two\r\nline\r\nname", "c"]
    # Expected lines counted in the text itself: the line on which each record starts.
    body = text.lstrip("\ufeff")
    expected = [body[: body.index(u)].count("\n") + 1 for u in ("u1,", "u2,", "u3,")]
    assert expected == [2, 3, 7]
    assert log.rows["_line"].tolist() == expected


def test_plain_csv_lines_are_row_number_plus_one(tmp_path):
    """Without quoted newlines, data row k (from 1) is on line k + 1."""
    path = tmp_path / "p.csv"
    _write(path, "csv")
    assert read_logs(path).rows["_line"].tolist() == [2, 3, 4]


def test_folder_reads_supported_files_recursively_sorted_and_skips_hidden(tmp_path):
    """A folder is read in relative-path order; hidden files are ignored, others listed."""
    (tmp_path / "week2").mkdir()
    _write(tmp_path / "week2" / "b.jsonl", "jsonl", ROWS[1:2])
    _write(tmp_path / "week2" / "a.csv.gz", "csv", ROWS[:1], gz=True)
    _write(tmp_path / "b.parquet", "parquet", ROWS[2:])
    _write(tmp_path / ".partial.csv", "csv", ROWS)
    (tmp_path / ".hidden").mkdir()
    _write(tmp_path / ".hidden" / "x.csv", "csv", ROWS)
    (tmp_path / "notes.md").write_text("not data")
    log = read_logs(tmp_path)
    assert [f.path for f in log.files] == ["b.parquet", "week2/a.csv.gz", "week2/b.jsonl"]
    assert log.rows["_source"].tolist() == ["b.parquet", "week2/a.csv.gz", "week2/b.jsonl"]
    assert log.rows["user"].tolist() == ["007", "u1", "u2"]
    assert log.skipped_files == ("notes.md",)


def test_folder_without_supported_files_lists_what_it_found(tmp_path):
    """An empty-handed folder names itself and the files it holds."""
    (tmp_path / "export.xlsx").write_bytes(b"PK")
    with pytest.raises(LogFormatError) as err:
        read_logs(tmp_path)
    assert str(tmp_path) in str(err.value) and "export.xlsx" in str(err.value)
    assert ".csv" in str(err.value)


def test_folder_files_with_different_columns_name_the_odd_file(tmp_path):
    """A file whose columns map differently is named, with both mappings."""
    _write(tmp_path / "a.csv", "csv")
    (tmp_path / "b.csv").write_text("user_id,item_id,timestamp\nu1,i1,2024-01-01\n")
    with pytest.raises(LogFormatError) as err:
        read_logs(tmp_path)
    msg = str(err.value)
    assert msg.startswith("b.csv:") and "a.csv" in msg and "same columns" in msg


def test_given_columns_are_used(tmp_path):
    """Options name the columns; the mapping records them as given, not detected."""
    (tmp_path / "p.csv").write_text("who,what,when\nu1,i1,2024-01-01\n")
    log = read_logs(tmp_path / "p.csv", LogColumns(user="who", item="what", ts="when"))
    assert log.columns.mapping == {"user": "who", "item": "what", "ts": "when"}
    assert log.columns.detected == ()
    assert log.rows["item"].tolist() == ["i1"]


def test_missing_required_column_error_names_the_file(tmp_path):
    """A log without an item column fails with the file name and the options to use."""
    (tmp_path / "p.csv").write_text("user,when\nu1,2024-01-01\n")
    with pytest.raises(LogFormatError, match=r"p\.csv: no column found for item, ts"):
        read_logs(tmp_path / "p.csv")


def test_invalid_utf8_names_file_offset_and_fix(tmp_path):
    """A Latin-1 byte gives the file, line, byte offset and 're-save as UTF-8'."""
    data = "user,item,ts\nu1,café,2024-01-01\n".encode("latin-1")
    (tmp_path / "p.csv").write_bytes(data)
    with pytest.raises(LogFormatError) as err:
        read_logs(tmp_path / "p.csv")
    msg = str(err.value)
    assert msg.startswith("p.csv line 2:")
    assert f"byte offset {data.index(bytes([0xE9]))}" in msg
    assert "re-save the file as UTF-8" in msg


def test_utf16_with_byte_order_mark_is_read(tmp_path):
    """Spreadsheet 'Unicode text' exports (UTF-16 with BOM) are decoded."""
    (tmp_path / "p.txt").write_bytes("user\titem\tts\nu1\t00123\t2024-01-01\n".encode("utf-16"))
    log = read_logs(tmp_path / "p.txt")
    assert log.rows["item"].tolist() == ["00123"] and log.files[0].format == "tsv"


@pytest.mark.parametrize(
    ("name", "data", "phrase"),
    [
        ("e.csv", b"", "the file is empty"),
        ("e.csv", b"\n\n  \n", "the file is empty"),
        ("h.csv", b"user,item,ts\n", "has a header (user, item, ts) but no data rows"),
        ("t.csv", b"user,item,ts\nu1,i1,2024,extra\n", "line 2: 4 fields but the header has 3"),
        ("q.csv", b'user,item,ts\nu1,"open,2024\nu2,i2,2024\n', "line 2: cannot be parsed"),
        ("b.csv", b"user,item\x00,ts\n", "binary"),
        ("p.csv", b"PAR1\x00\x00", "this is a Parquet file"),
        ("n.csv.gz", b"user,item,ts\n", "named .gz but not gzip-compressed"),
        ("c.csv.gz", gzip.compress(b"user,item,ts\nu1,i1,2024-01-01\n" * 50)[:40],
         "gzip data is corrupt or truncated"),
        ("x.parquet", b"user,item,ts\nu1,i1,2024\n", "not a valid Parquet file"),
        ("j.jsonl", b'{"user": "u1", "item": "i1", "ts": "2024"}\n{"user": "u2",\n',
         "line 2: not valid JSON"),
        ("k.jsonl", b'{"user": "u1", "item": "i1", "ts": "2024"}\n[1, 2]\n',
         "line 2: expected a JSON object"),
        ("a.json", b"[]", "holds no records"),
        ("a.json", b'{"user": 1}', "no column found"),
        ("l.xlsx", b"PK", "unsupported file type '.xlsx'"),
    ],
)
def test_unreadable_files_raise_log_format_error_naming_file_and_problem(tmp_path, name, data,
                                                                         phrase):
    """Each kind of unreadable input gives a LogFormatError with the file name and the cause."""
    (tmp_path / name).write_bytes(data)
    with pytest.raises(LogFormatError) as err:
        read_logs(tmp_path / name)
    assert name in str(err.value)
    assert phrase in str(err.value)


def test_missing_path_says_so(tmp_path):
    """A path that does not exist is named."""
    with pytest.raises(LogFormatError, match="no such file or folder"):
        read_logs(tmp_path / "nope.csv")


def test_gzip_without_gz_suffix_is_decompressed(tmp_path):
    """Content decides compression: gzip bytes under a .csv name are still read."""
    path = tmp_path / "p.csv"
    path.write_bytes(gzip.compress(_delimited(ROWS, ",").encode()))
    log = read_logs(path)
    assert log.files[0].compressed and log.rows["item"].tolist()[0] == "00123"


def test_json_lines_with_blank_lines_keep_line_numbers(tmp_path):
    """Blank lines in JSON Lines are skipped but counted."""
    path = tmp_path / "p.jsonl"
    path.write_text('{"user": "u1", "item": "i", "ts": "2024-01-01"}\n\n  \n'
                    '{"user": "u2", "item": "i", "ts": "2024-01-02"}\n')
    assert read_logs(path).rows["_line"].tolist() == [1, 4]


def test_json_mixed_types_and_zones_stay_as_written(tmp_path):
    """Numbers and strings mixed in one field, and zoned times, come back as their text."""
    path = tmp_path / "p.jsonl"
    path.write_text('{"user": 7, "item": "00123", "ts": "2024-01-01T10:00:00+02:00"}\n'
                    '{"user": "u2", "item": 123, "ts": 1709290800, "extra": {"a": 1}}\n'
                    '{"user": 8.0, "item": "x", "ts": 1.5e9, "value": null}\n')
    log = read_logs(path)
    assert log.rows["user"].tolist() == ["7", "u2", "8"]
    assert log.rows["item"].tolist() == ["00123", "123", "x"]
    assert log.rows["ts"].tolist()[:2] == ["2024-01-01T10:00:00+02:00", "1709290800"]
    assert log.rows["_line"].tolist() == [1, 2, 3]


def test_json_zoned_timestamps_are_not_reinterpreted_by_the_fast_reader(tmp_path):
    """Arrow's timestamp inference would drop the zone text; the reader keeps it."""
    path = tmp_path / "p.jsonl"
    path.write_text("".join(
        json.dumps({"user": "u", "item": "i", "ts": f"2024-01-0{d}T10:00:00+02:00"}) + "\n"
        for d in range(1, 4)))
    assert read_logs(path).rows["ts"].tolist()[0] == "2024-01-01T10:00:00+02:00"


def test_parquet_typed_columns_become_text_that_reads_back_to_the_same_values(tmp_path):
    """Integer ids and zoned timestamps in Parquet become strings that parse to the same."""
    ts = pd.to_datetime(["2024-03-01 10:00:00.123456", "2024-03-02 00:00:00.000000"], utc=True)
    pd.DataFrame({"user_id": [1, 22], "item_id": ["00123", "9"], "ts": ts}).to_parquet(
        tmp_path / "p.parquet")
    log = read_logs(tmp_path / "p.parquet")
    assert log.rows["user"].tolist() == ["1", "22"]
    assert log.rows["_line"].tolist() == [1, 2]
    back = parse_timestamps(log.rows["ts"]).values
    assert (back.to_numpy() == ts.to_numpy()).all()


def test_catalogue_reads_list_categories_from_json_and_parquet(tmp_path):
    """List-valued categories are joined with the configured separator."""
    (tmp_path / "c.jsonl").write_text(
        '{"item_id": "00123", "title": "Tea", "tags": ["drink", "hot"]}\n'
        '{"item_id": "9", "title": "Ice", "tags": []}\n')
    cat = read_catalog(tmp_path / "c.jsonl", CatalogColumns(category_separator=";"))
    assert cat.rows["categories"].tolist()[0] == "drink;hot"
    assert cat.rows["item"].tolist() == ["00123", "9"]
    pq.write_table(pa.table({"sku": ["a"], "genres": [["x", "y"]]}), tmp_path / "c.parquet")
    cat = read_catalog(tmp_path / "c.parquet")
    assert cat.columns.mapping == {"item": "sku", "categories": "genres"}
    assert cat.rows["categories"].tolist() == ["x|y"]


def test_catalogue_must_be_one_file(tmp_path):
    """A folder given as the catalogue is refused with the fix."""
    with pytest.raises(LogFormatError, match="the catalogue must be one file"):
        read_catalog(tmp_path)


def test_catalogue_given_column_absent_lists_columns(tmp_path):
    """A misspelled catalogue column names the file and the columns that exist."""
    (tmp_path / "c.csv").write_text("item_id,title\n1,Tea\n")
    with pytest.raises(LogFormatError) as err:
        read_catalog(tmp_path / "c.csv", CatalogColumns(categories="genre"))
    assert "c.csv" in str(err.value) and "'item_id', 'title'" in str(err.value)
