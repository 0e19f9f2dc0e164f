"""Load stage: read log and catalogue files, map their columns onto the canonical fields."""

from advisor.load.columns import detect_catalog_columns, detect_log_columns
from advisor.load.model import (
    CATALOG_FIELDS,
    LINE_COL,
    LOG_FIELDS,
    REQUIRED_LOG_FIELDS,
    SOURCE_COL,
    ColumnDetection,
    InputFile,
    RawCatalog,
    RawLog,
)
from advisor.load.readers import SUPPORTED_SUFFIXES, detect_format, read_catalog, read_logs

__all__ = [
    "CATALOG_FIELDS",
    "LINE_COL",
    "LOG_FIELDS",
    "REQUIRED_LOG_FIELDS",
    "SOURCE_COL",
    "SUPPORTED_SUFFIXES",
    "ColumnDetection",
    "InputFile",
    "RawCatalog",
    "RawLog",
    "detect_catalog_columns",
    "detect_format",
    "detect_log_columns",
    "read_catalog",
    "read_logs",
]
