"""Soak the audit with randomly corrupted small logs: zero tracebacks, zero lost rows.

Each run writes one small invented log (CSV, TSV, JSON Lines or Parquet, sometimes gzip, and
sometimes a catalogue), damages it with one to three random corruptions, and passes it to
:func:`advisor.audit` with the backtest off. Only :class:`advisor.AdvisorError` is caught as a
clean refusal; anything else is a traceback and is printed with the file that caused it.

Two row counts are checked for every completed audit:

* the validation accounting: ``rows_read == rows_used + rows_quarantined +
  duplicates_dropped`` (a row that is none of these was lost);
* when the corruption keeps the record structure (cell values changed, rows repeated or
  shuffled, columns reordered), the rows read must equal the data rows written.

The report files are rendered too, in memory (JSON through a strict parser, CSVs, terminal
text), so a report that cannot show an odd value is also caught; the HTML report, whose
charts take a second or two each, is rendered for every ``--html-every``-th completed audit.

Printed: runs, audits completed, clean refusals by error class, tracebacks, and the row
totals. Exit status 1 when a traceback or a lost row was seen.

Example::

    python bench/soak.py --runs 1000 --seed 7
"""

from __future__ import annotations

import argparse
import gzip
import io
import json
import sys
import tempfile
import time
import traceback
from collections import Counter
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

import advisor  # noqa: E402
from advisor.config import AuditConfig  # noqa: E402

#: Corruptions that change cell values or repeat/reorder whole rows: the number of data rows
#: written is known, so the rows read must match it.
ROW_PRESERVING = ("empty_ids", "bad_timestamps", "bad_values", "duplicate_rows",
                  "shuffle_rows", "shuffle_columns", "odd_ids", "unknown_events",
                  "spaces", "mixed_json_types", "blank_lines", "bom", "crlf")
#: Corruptions of the bytes or the record structure: only the accounting can be checked.
STRUCTURAL = ("bad_bytes", "truncate", "ragged_rows", "stray_quotes", "nul_bytes",
              "header_damage", "drop_column", "gzip_truncate")
CORRUPTIONS = ROW_PRESERVING + STRUCTURAL
FORMATS = ("csv", "tsv", "jsonl", "parquet")
EVENTS = ("play", "view", "rating", "purchase", "impression", "progress")


def _clean_rows(rng: np.random.Generator) -> tuple[list[str], list[list[str]]]:
    """An invented log: a few users and items, ISO or epoch times, optional columns."""
    n_users = int(rng.integers(1, 25))
    n_items = int(rng.integers(1, 20))
    n = int(rng.integers(1, 150))
    header = ["user_id", "item_id", "timestamp"]
    extra = [c for c in ("event", "value", "session") if rng.random() < 0.5]
    header += extra
    epoch = rng.random() < 0.3
    t0 = 1_767_225_600 + int(rng.integers(0, 90)) * 86_400  # 2026-01-01 + up to 90 days
    rows = []
    for _ in range(n):
        u = f"u{int(rng.integers(0, n_users)):04d}"
        i = f"i{int(rng.integers(0, n_items)):03d}"
        t = t0 + int(rng.integers(0, 30 * 86_400))
        ts = str(t) if epoch else time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(t))
        row = [u, i, ts]
        ev = EVENTS[int(rng.integers(0, len(EVENTS)))]
        for c in extra:
            if c == "event":
                row.append(ev)
            elif c == "value":
                row.append(f"{rng.integers(1, 6)}" if ev == "rating" else f"{rng.random():.2f}")
            else:
                row.append(f"s{int(rng.integers(0, 40))}")
        rows.append(row)
    return header, rows


def _garbage(rng: np.random.Generator) -> str:
    choices = ["", " ", "n/a", "2026-02-30T10:00:00Z", "1969-12-31T23:59:59Z", "-1",
               "9999-12-31T23:59:59Z", "yesterday", "1e400", "NaN", "inf", "0", "00123",
               "123", "=cmd|' /C calc'!A0", "\u00e9t\u00e9", "2026-10-25T02:30:00+02:00",
               "99999999999999999999999", "1.5", "null", "\"", "\t", "2026-01-01"]
    return choices[int(rng.integers(0, len(choices)))]


def _cell_corruption(kind: str, header: list[str], rows: list[list[str]],
                     rng: np.random.Generator) -> tuple[list[str], list[list[str]]]:
    """Corruptions applied to the cells before serialising."""
    if not rows:
        return header, rows
    pick = rng.integers(0, len(rows), size=max(1, len(rows) // 5))
    if kind == "empty_ids":
        for r in pick:
            rows[r][int(rng.integers(0, 2))] = ""
    elif kind == "bad_timestamps":
        for r in pick:
            rows[r][2] = _garbage(rng)
    elif kind == "bad_values":
        for r in pick:
            rows[r][int(rng.integers(0, len(header)))] = _garbage(rng)
    elif kind == "duplicate_rows":
        for r in pick:
            rows.extend([list(rows[r]) for _ in range(int(rng.integers(1, 30)))])
    elif kind == "shuffle_rows":
        order = rng.permutation(len(rows))
        rows = [rows[k] for k in order]
    elif kind == "shuffle_columns":
        order = rng.permutation(len(header))
        header = [header[k] for k in order]
        rows = [[r[k] for k in order] for r in rows]
    elif kind == "odd_ids":
        for r in pick:
            rows[r][int(rng.integers(0, 2))] = rng.choice(
                ["00123", "123", "18446744073709551617", "a b", " x ", "\u00fcser", "-0"])
    elif kind == "unknown_events" and "event" in header:
        k = header.index("event")
        for r in pick:
            rows[r][k] = rng.choice(["", "PLAY", "zap", "impression", " view "])
    elif kind == "spaces":
        for r in pick:
            rows[r] = [f" {c} " for c in rows[r]]
    return header, rows


def _serialise(fmt: str, header: list[str], rows: list[list[str]], rng: np.random.Generator,
               kinds: tuple[str, ...]) -> bytes:
    if fmt in ("csv", "tsv"):
        sep = "," if fmt == "csv" else "\t"
        buf = io.StringIO()
        import csv

        w = csv.writer(buf, delimiter=sep, lineterminator="\r\n" if "crlf" in kinds else "\n")
        w.writerow(header)
        for r in rows:
            w.writerow(r)
            if "blank_lines" in kinds and rng.random() < 0.1:
                buf.write("\n")
        data = buf.getvalue().encode("utf-8")
        return (b"\xef\xbb\xbf" + data) if "bom" in kinds else data
    if fmt == "jsonl":
        out = []
        for r in rows:
            rec = {}
            for k, v in zip(header, r):
                if v == "":
                    continue
                if "mixed_json_types" in kinds and v.isdigit() and rng.random() < 0.5:
                    rec[k] = int(v)
                else:
                    rec[k] = v
            out.append(json.dumps(rec))
            if "blank_lines" in kinds and rng.random() < 0.1:
                out.append("")
        return ("\n".join(out) + "\n").encode("utf-8")
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.table({h: [r[k] or None for r in rows] for k, h in enumerate(header)})
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink)
    return sink.getvalue().to_pybytes()


def _byte_corruption(kind: str, data: bytes, rng: np.random.Generator, fmt: str) -> bytes:
    b = bytearray(data)
    if not b:
        return data
    if kind == "bad_bytes":
        for p in rng.integers(0, len(b), size=int(rng.integers(1, 6))):
            b[int(p)] = int(rng.integers(0x80, 0x100))
    elif kind == "truncate":
        return bytes(b[: int(rng.integers(0, len(b)))])
    elif kind == "nul_bytes":
        b[int(rng.integers(0, len(b)))] = 0
    elif kind == "stray_quotes" and fmt != "parquet":
        for p in rng.integers(0, len(b), size=int(rng.integers(1, 4))):
            b.insert(int(p), ord('"'))
    elif kind == "ragged_rows" and fmt in ("csv", "tsv"):
        sep = b"," if fmt == "csv" else b"\t"
        lines = bytes(b).split(b"\n")
        for k in rng.integers(1, max(2, len(lines)), size=max(1, len(lines) // 6)):
            k = int(k) % len(lines)
            if rng.random() < 0.5:
                lines[k] = lines[k] + sep + b"extra"
            else:
                lines[k] = lines[k].rsplit(sep, 1)[0]
        return b"\n".join(lines)
    elif kind == "header_damage" and fmt in ("csv", "tsv"):
        first, _, rest = bytes(b).partition(b"\n")
        return first.replace(b"user", b"usr", 1).replace(b"timestamp", b"tmstmp") + b"\n" + rest
    elif kind == "drop_column" and fmt in ("csv", "tsv"):
        sep = b"," if fmt == "csv" else b"\t"
        return b"\n".join(sep.join(line.split(sep)[1:]) for line in bytes(b).split(b"\n"))
    return bytes(b)


def _catalog(rng: np.random.Generator, damaged: bool) -> bytes:
    items = [f"i{k:03d}" for k in range(int(rng.integers(1, 25)))]
    lines = ["item_id,title,category,added"]
    for it in items:
        lines.append(f"{it},Class {it},{rng.choice(['bread', 'soup', 'cake'])},2026-01-01")
    data = ("\n".join(lines) + "\n").encode()
    if damaged:
        choice = int(rng.integers(0, 3))
        if choice == 0:
            data = data.replace(b"item_id", b"itm", 1)
        elif choice == 1:
            data = data[: int(rng.integers(0, len(data)))]
        else:
            data = data.replace(b"2026-01-01", b"soon", 3)
    return data


def _render(result, *, html: bool) -> None:
    """Render the reports in memory (JSON through a strict parser); HTML when asked."""
    from rich.console import Console

    from advisor.report.files import cold_users_csv, editorial_csv, quarantine_csv, to_json
    from advisor.report.html import render_html
    from advisor.report.terminal import render

    json.loads(to_json(result))
    editorial_csv(result)
    cold_users_csv(result)
    quarantine_csv(result)
    render(result, Console(file=io.StringIO(), width=100, color_system=None))
    if html:
        render_html(result)


def soak(runs: int, seed: int, *, reports: bool = True, html_every: int = 25,
         engine: str = "pandas", show: int = 3) -> dict:
    """Run the soak; return the counts (see the module docstring)."""
    rng = np.random.default_rng(seed)
    counts: Counter = Counter()
    refusals: Counter = Counter()
    corruptions: Counter = Counter()
    rows = Counter()
    failures: list[str] = []
    with tempfile.TemporaryDirectory(prefix="advisor-soak-") as d:
        tmp = Path(d)
        for run in range(runs):
            counts["runs"] += 1
            fmt = FORMATS[int(rng.choice(4, p=[0.4, 0.15, 0.3, 0.15]))]
            gz = rng.random() < 0.2
            kinds = tuple(sorted(set(
                CORRUPTIONS[int(k)] for k in rng.integers(0, len(CORRUPTIONS),
                                                           size=int(rng.integers(1, 4))))))
            corruptions.update(kinds)
            header, data_rows = _clean_rows(rng)
            for k in kinds:
                header, data_rows = _cell_corruption(k, header, data_rows, rng)
            data = _serialise(fmt, header, data_rows, rng, kinds)
            for k in kinds:
                data = _byte_corruption(k, data, rng, fmt)
            if gz:
                data = gzip.compress(data)
                if "gzip_truncate" in kinds:
                    data = data[: int(rng.integers(0, len(data)))]
            suffix = {"csv": ".csv", "tsv": ".tsv", "jsonl": ".jsonl",
                      "parquet": ".parquet"}[fmt] + (".gz" if gz else "")
            path = tmp / f"run{run:05d}{suffix}"
            path.write_bytes(data)
            catalog = None
            if rng.random() < 0.25:
                catalog = tmp / f"run{run:05d}-catalog.csv"
                catalog.write_bytes(_catalog(rng, damaged=rng.random() < 0.3))
            as_of = None if rng.random() < 0.8 else "2026-03-15"
            structural = any(k in STRUCTURAL for k in kinds)
            try:
                result = advisor.audit(path, catalog=catalog,
                                       config=AuditConfig(backtest=False, as_of=as_of,
                                                          engine=engine))
                if reports:
                    html = html_every > 0 and counts["audits_completed"] % html_every == 0
                    counts["html_rendered"] += html
                    _render(result, html=html)
            except advisor.AdvisorError as exc:
                refusals[type(exc).__name__] += 1
                if "\n" in str(exc) or not str(exc).strip():
                    counts["refusals_not_one_line"] += 1
                    failures.append(f"run {run} ({fmt}, {kinds}): message not one line: "
                                    f"{str(exc)!r}")
            except Exception:  # noqa: BLE001 - the point is to count what escapes
                counts["tracebacks"] += 1
                keep = tmp.parent / f"advisor-soak-failure-{seed}-{run}{suffix}"
                keep.write_bytes(data)
                failures.append(f"run {run} ({fmt}, {kinds}; input kept at {keep}):\n"
                                + traceback.format_exc())
            else:
                counts["audits_completed"] += 1
                q = result.quality
                rows["read"] += q.rows_read
                rows["used"] += q.rows_used
                rows["quarantined"] += q.rows_quarantined
                rows["duplicates"] += q.duplicates_dropped
                lost = q.rows_read - (q.rows_used + q.rows_quarantined + q.duplicates_dropped)
                if lost:
                    counts["runs_losing_rows"] += 1
                    rows["lost"] += abs(lost)
                    failures.append(f"run {run} ({fmt}, {kinds}): {lost} rows unaccounted")
                if not structural:
                    counts["row_count_checked"] += 1
                    if q.rows_read != len(data_rows):
                        counts["rows_read_mismatch"] += 1
                        rows["lost"] += abs(len(data_rows) - q.rows_read)
                        failures.append(f"run {run} ({fmt}, {kinds}): wrote {len(data_rows)} "
                                        f"rows, read {q.rows_read}")
            for f in (path, catalog):
                if f is not None:
                    f.unlink(missing_ok=True)
    for text in failures[:show]:
        print(text, file=sys.stderr)
    return {"counts": dict(counts), "refusals": dict(sorted(refusals.items())),
            "rows": dict(rows), "corruptions": dict(sorted(corruptions.items())),
            "failures": len(failures)}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--runs", type=int, default=1000, help="corrupted logs to audit")
    ap.add_argument("--seed", type=int, default=20261201, help="seed of every random step")
    ap.add_argument("--no-reports", action="store_true",
                    help="audit only; do not render the report files")
    ap.add_argument("--engine", choices=("pandas", "duckdb"), default="pandas",
                    help="engine of the read, validate and aggregate stages")
    ap.add_argument("--html-every", type=int, default=25,
                    help="render the HTML report for every N-th completed audit (0: never)")
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    out = soak(args.runs, args.seed, reports=not args.no_reports, html_every=args.html_every,
               engine=args.engine)
    c, rows = out["counts"], out["rows"]
    print(f"soak: {c.get('runs', 0)} runs, seed {args.seed}, engine {args.engine}, "
          f"{time.perf_counter() - t0:.0f} s")
    print(f"  audits completed      {c.get('audits_completed', 0)} (HTML rendered for "
          f"{c.get('html_rendered', 0)})")
    refused = sum(out["refusals"].values())
    print(f"  clean refusals        {refused}  "
          + ", ".join(f"{k} {v}" for k, v in out["refusals"].items()))
    print(f"  tracebacks            {c.get('tracebacks', 0)}")
    print(f"  refusals not one line {c.get('refusals_not_one_line', 0)}")
    print(f"  rows read             {rows.get('read', 0)} = used {rows.get('used', 0)} + "
          f"quarantined {rows.get('quarantined', 0)} + duplicates "
          f"{rows.get('duplicates', 0)}")
    print(f"  rows read = rows written, checked in {c.get('row_count_checked', 0)} runs")
    print(f"  lost rows             {rows.get('lost', 0)}")
    print("  corruptions           " + ", ".join(f"{k} {v}"
                                                   for k, v in out["corruptions"].items()))
    bad = c.get("tracebacks", 0) + rows.get("lost", 0) + c.get("refusals_not_one_line", 0)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
