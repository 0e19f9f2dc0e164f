"""Weekly readiness audit of a recommendation service's interaction logs.

>>> import advisor
>>> result = advisor.audit("sample_logs/events", catalog="sample_logs/catalog.csv")  # doctest: +SKIP
>>> result.decision.personalised_go  # doctest: +SKIP
"""

__version__ = "0.1.0"

from advisor.config import AuditConfig, load_config
from advisor.errors import (
    AdvisorError,
    ConfigError,
    InsufficientDataError,
    LogFormatError,
    OutputError,
    RulesError,
)
from advisor.pipeline import SCHEMA_VERSION, AuditResult, audit
from advisor.report.files import to_json, write_reports
from advisor.rules.loader import load_rules

__all__ = [
    "AdvisorError",
    "AuditConfig",
    "AuditResult",
    "ConfigError",
    "InsufficientDataError",
    "LogFormatError",
    "OutputError",
    "RulesError",
    "SCHEMA_VERSION",
    "__version__",
    "audit",
    "load_config",
    "load_rules",
    "to_json",
    "write_reports",
]
