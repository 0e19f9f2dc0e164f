"""Report files: JSON, CSV and the quarantine file, written atomically into one folder.

Each file is first written to a temporary name in the output folder and then moved over the
final name with :func:`os.replace`, which is atomic on POSIX and Windows; an interrupted or
repeated run never leaves a half-written report. Only this module writes report files.
"""

from __future__ import annotations

import datetime as _dt
import io
import json
import math
import os
import shutil
import tempfile
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd

from advisor.errors import OutputError
from advisor.pipeline import AuditResult
from advisor.report.privacy import IdPolicy, protect_ids

JSON_NAME = "audit.json"
EDITORIAL_NAME = "editorial_placement.csv"
COLD_USERS_NAME = "cold_users_by_band.csv"
QUARANTINE_NAME = "quarantine.csv"
TEXT_NAME = "audit.txt"
HTML_NAME = "report.html"

#: Leading characters that make spreadsheets evaluate a cell (OWASP, "CSV Injection").
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def neutralise_cell(value):
    """Prefix a text cell that a spreadsheet would evaluate with a single quote.

    Notes
    -----
    Follows the OWASP guidance on CSV injection: cells beginning with ``=``, ``+``, ``-``,
    ``@``, tab or carriage return are prefixed with ``'``. Numbers are left alone (a
    negative number is data, not a formula).

    Examples
    --------
    >>> neutralise_cell("=HYPERLINK(1)"), neutralise_cell(-3), neutralise_cell("Tart")
    ("'=HYPERLINK(1)", -3, 'Tart')
    """
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


def _json_default(o):
    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.floating):
        return None if math.isnan(o) else float(o)
    if isinstance(o, np.bool_):
        return bool(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, (pd.Timestamp, _dt.datetime, _dt.date)):
        return o.isoformat()
    if o is pd.NaT or o is pd.NA:
        return None
    if isinstance(o, (set, tuple)):
        return list(o)
    raise TypeError(f"cannot put {type(o).__name__} into JSON")


def _nan_to_none(x):
    if isinstance(x, float) and math.isnan(x):
        return None
    if isinstance(x, dict):
        return {k: _nan_to_none(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_nan_to_none(v) for v in x]
    return x


def to_json(result: AuditResult, *, privacy: IdPolicy | None = None) -> str:
    """The JSON report (strict JSON: NaN becomes null), with a ``privacy`` entry saying how
    user ids were treated in the report files (default: left out); never the salt."""
    doc = result.to_dict()
    doc["privacy"] = (privacy or IdPolicy()).to_dict()
    return json.dumps(_nan_to_none(doc), default=_json_default, indent=2,
                      allow_nan=False, ensure_ascii=False)


def _csv(df: pd.DataFrame) -> str:
    buf = io.StringIO()
    safe = df.copy()
    for col in safe.columns:
        if safe[col].dtype == object or pd.api.types.is_string_dtype(safe[col]):
            safe[col] = safe[col].map(neutralise_cell)
    safe.to_csv(buf, index=False, lineterminator="\n")
    return buf.getvalue()


def editorial_csv(result: AuditResult) -> str:
    """The full editorial placement list as CSV."""
    df = result.cold_items.placement.copy()
    for col in ("added", "first_seen"):
        df[col] = df[col].map(lambda t: None if t is None or t is pd.NaT or t != t
                              else pd.Timestamp(t).isoformat())
    return _csv(df)


def cold_users_csv(result: AuditResult) -> str:
    """The cold-user summary by activity band as CSV."""
    df = result.cold_users.bands.copy()
    df["max_items"] = df["max_items"].map(lambda v: "" if v != v else int(v))
    return _csv(df)


def quarantine_csv(result: AuditResult, *, privacy: IdPolicy | None = None) -> str:
    """Rows set aside, each with its reason, file and line; user and session ids left out
    or hashed as ``privacy`` says (default: left out)."""
    rows = protect_ids(result.quarantine, privacy or IdPolicy())
    return _csv(rows.rename(columns={"_source": "file", "_line": "line"}))


def write_reports(result: AuditResult, out_dir: str | Path, *, text: str | None = None,
                  html: str | None = None, privacy: IdPolicy | None = None,
                  then: Callable[[], object] | None = None) -> list[str]:
    """Write every report file into ``out_dir`` atomically; return the names written.

    ``text`` (the terminal report) and ``html`` (the HTML report) are written when given.
    ``privacy`` says how user ids appear (default: left out). ``then`` is called once every
    file is in place; if it raises, the previous reports are put back (see
    :func:`write_atomically`).

    Raises
    ------
    OutputError
        If the folder cannot be created or written (read-only, disk full).
    """
    out = Path(out_dir)
    files = {
        JSON_NAME: to_json(result, privacy=privacy),
        EDITORIAL_NAME: editorial_csv(result),
        COLD_USERS_NAME: cold_users_csv(result),
        QUARANTINE_NAME: quarantine_csv(result, privacy=privacy),
    }
    if text is not None:
        files[TEXT_NAME] = text
    if html is not None:
        files[HTML_NAME] = html
    write_atomically(out, files, then=then)
    return list(files)


def check_output_folder(out_dir: str | Path) -> None:
    """Fail fast, before a long audit, when ``out_dir`` cannot receive report files.

    An existing folder is tested by creating and removing a hidden empty file in it (the only
    test that sees a read-only file system for every user, root included); a folder still to
    be made is judged by its nearest existing parent (which must be a writable folder), so
    nothing is created or written outside ``out_dir``.

    Raises
    ------
    OutputError
        If the folder, or the parent it would be made in, is not a writable folder.
    """
    out = Path(out_dir)
    if out.is_dir():
        try:
            fd, probe = tempfile.mkstemp(prefix=".advisor-probe.", suffix=".tmp", dir=out)
            os.close(fd)
            os.unlink(probe)
        except OSError as exc:
            raise OutputError(
                f"cannot write reports into {out} ({exc.strerror or exc}); the folder is "
                "read-only or full. Free space, make it writable, or choose --out") from None
        return
    parent = out
    while not parent.is_dir():
        if parent.exists() or parent.parent == parent:
            raise OutputError(f"cannot create the output folder {out} ({parent} is not a "
                              "folder); choose another folder with --out")
        parent = parent.parent
    if not os.access(parent, os.W_OK | os.X_OK):
        raise OutputError(f"cannot create the output folder {out} ({parent} is read-only); "
                          "choose another folder with --out")


def _file_mode() -> int:
    """Mode of a newly created file under the current umask (``mkstemp`` would give 0600)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return 0o666 & ~mask


def write_atomically(out: Path, files: dict[str, str], *,
                     then: Callable[[], object] | None = None) -> None:
    """Write all ``files`` (name -> text) into ``out``; all land or none is replaced.

    Parameters
    ----------
    out : Path
        The output folder (created when missing).
    files : dict
        File name -> text.
    then : callable, optional
        Called after every file is in place and before the previous versions are dropped:
        the commit of another store that must change together with the reports (the audit
        history). If it raises, the previous reports are put back and the error propagates.

    Notes
    -----
    Every file is written in full to a temporary name first, then moved over its final name
    with :func:`os.replace`. Files already in ``out`` are kept as hard links (copies where
    links are not supported) until every move (and ``then``) has succeeded, so an error or an
    interrupt part-way through puts the earlier report back. Only a hard kill between two
    moves can leave a mix of whole old and whole new files; a half-written file is never
    left behind.
    """
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"cannot create the output folder {out} ({exc.strerror}); "
                          "choose another folder with --out") from None
    temps: list[tuple[str, Path]] = []
    committing = False
    backups: dict[str, Path] = {}
    moved: list[str] = []
    mode = _file_mode()
    try:
        for name, content in files.items():
            fd, tmp = tempfile.mkstemp(prefix=f".{name}.", suffix=".tmp", dir=out)
            temps.append((name, Path(tmp)))
            with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
                if hasattr(os, "fchmod"):
                    os.fchmod(fh.fileno(), mode)
                fh.write(content)
                fh.flush()
                os.fsync(fh.fileno())
        for name, _ in temps:
            if (out / name).is_file():
                backups[name] = _backup(out / name)
        for name, tmp in temps:
            os.replace(tmp, out / name)
            moved.append(name)
        if then is not None:
            committing = True
            then()
    except BaseException as exc:
        _roll_back(out, moved, backups)
        for _, tmp in temps:
            tmp.unlink(missing_ok=True)
        if isinstance(exc, OSError) and not committing:
            raise OutputError(
                f"cannot write reports into {out} ({exc.strerror or exc}); check that the "
                "folder is writable and the disk has space, or choose --out") from None
        raise
    for bak in backups.values():
        bak.unlink(missing_ok=True)


def _backup(path: Path) -> Path:
    """A second name for ``path``'s current content, in the same folder."""
    fd, bak = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".bak", dir=path.parent)
    os.close(fd)
    bak_path = Path(bak)
    try:
        bak_path.unlink()
        os.link(path, bak_path)
    except OSError:
        try:
            shutil.copy2(path, bak_path)
        except BaseException:
            bak_path.unlink(missing_ok=True)
            raise
    return bak_path


def _roll_back(out: Path, moved: list[str], backups: dict[str, Path]) -> None:
    """Put back the files that were there before; remove the ones that were not."""
    for name in moved:
        try:
            if name in backups:
                os.replace(backups.pop(name), out / name)
            else:
                (out / name).unlink(missing_ok=True)
        except OSError:
            pass  # best effort: the original error is the one to report
    for bak in backups.values():
        bak.unlink(missing_ok=True)
