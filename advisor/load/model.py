"""What the load stage hands to validation: raw rows, mapped to canonical column names.

Only the load stage touches input files. It maps the user's columns onto the canonical
names below, keeps every value as the string it read (ids are opaque strings: ``00123`` and
``123`` are different items), and records each row's source file and line so that later
messages can point at it.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

#: Canonical log columns. ``user``, ``item`` and ``ts`` are required.
LOG_FIELDS = ("user", "item", "ts", "event", "value", "session")
REQUIRED_LOG_FIELDS = ("user", "item", "ts")

#: Canonical catalogue columns. ``item`` is required.
CATALOG_FIELDS = ("item", "title", "categories", "added", "rating", "rating_count")

#: Bookkeeping columns carried on every raw row.
SOURCE_COL = "_source"  # file name (relative to the LOGS argument when it is a folder)
LINE_COL = "_line"  # 1-based physical line of the row in its file (header is line 1)


@dataclass(frozen=True, slots=True)
class InputFile:
    """One input file, for the fingerprint in the JSON report."""

    path: str
    """Path as given (or relative to the LOGS folder)."""
    format: str
    """Detected format: ``csv``, ``tsv``, ``parquet`` or ``jsonl``."""
    compressed: bool
    """True when gzip-compressed."""
    size_bytes: int
    """Size on disk, in bytes."""
    sha256: str
    """SHA-256 of the bytes on disk (hex)."""
    rows: int
    """Data rows read (header excluded)."""

    def to_dict(self) -> dict:
        return {
            "path": self.path,
            "format": self.format,
            "compressed": self.compressed,
            "size_bytes": self.size_bytes,
            "sha256": self.sha256,
            "rows": self.rows,
        }


@dataclass(frozen=True, slots=True)
class ColumnDetection:
    """How the input's columns were mapped onto the canonical fields."""

    mapping: dict[str, str]
    """Canonical field -> source column name, for every field that was found."""
    detected: tuple[str, ...]
    """Canonical fields whose column was auto-detected (not given by option or config)."""
    unused: tuple[str, ...]
    """Source columns that were not mapped to anything (kept out of the audit)."""

    def to_dict(self) -> dict:
        return {
            "mapping": dict(self.mapping),
            "detected": list(self.detected),
            "unused": list(self.unused),
        }


@dataclass(frozen=True, slots=True)
class RawLog:
    """Every row read from the interaction logs, unparsed."""

    rows: pd.DataFrame
    """Columns: the canonical ``LOG_FIELDS`` present (object/string dtype, values as read,
    missing as ``pd.NA``/None), plus ``_source`` and ``_line``."""
    files: tuple[InputFile, ...]
    """Files read, in the order read (sorted by name within a folder)."""
    columns: ColumnDetection
    """How columns were mapped."""
    skipped_files: tuple[str, ...] = ()
    """Files in the LOGS folder passed over because their type is not supported (relative
    paths); hidden files are not listed."""


@dataclass(frozen=True, slots=True)
class RawCatalog:
    """Every row read from the catalogue file, unparsed."""

    rows: pd.DataFrame
    """Columns: the canonical ``CATALOG_FIELDS`` present (strings as read), ``_source`` and
    ``_line``."""
    file: InputFile
    """The catalogue file."""
    columns: ColumnDetection
    """How columns were mapped."""
