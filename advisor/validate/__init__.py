"""Validate stage: type the raw rows, set aside bad ones with a reason, report data problems."""

from advisor.validate.anomalies import (
    ImplausibleUsers,
    daily_counts,
    implausible_users,
    logging_gaps,
    volume_drops,
)
from advisor.validate.checks import QUARANTINE_REASONS, build_catalog, validate
from advisor.validate.model import (
    Catalog,
    QualityIssue,
    QualityReport,
    ValidatedLog,
)
from advisor.validate.timestamps import ParsedTimestamps, parse_timestamps, resolve_as_of

__all__ = [
    "QUARANTINE_REASONS",
    "Catalog",
    "ImplausibleUsers",
    "ParsedTimestamps",
    "QualityIssue",
    "QualityReport",
    "ValidatedLog",
    "build_catalog",
    "daily_counts",
    "implausible_users",
    "logging_gaps",
    "parse_timestamps",
    "resolve_as_of",
    "validate",
    "volume_drops",
]
