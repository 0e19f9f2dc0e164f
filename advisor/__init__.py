"""Weekly readiness audit of a recommendation service's interaction logs.

>>> import advisor
>>> result = advisor.audit("sample_logs/events",
...                        catalog="sample_logs/catalog.csv")  # doctest: +SKIP
>>> result.decision.personalised_go  # doctest: +SKIP
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

from advisor.config import AuditConfig, load_config
from advisor.errors import (
    AdvisorError,
    ConfigError,
    HistoryError,
    InsufficientDataError,
    LogFormatError,
    OutputError,
    RulesError,
)

# The audit pulls in pandas, scipy and statsmodels; load it on first use so that
# `advisor --help` and `import advisor.errors` stay fast (PEP 562 module __getattr__).
_LAZY = {
    "SCHEMA_VERSION": "advisor.pipeline",
    "AuditResult": "advisor.pipeline",
    "audit": "advisor.pipeline",
    "to_json": "advisor.report.files",
    "write_reports": "advisor.report.files",
    "load_rules": "advisor.rules.loader",
}


def __getattr__(name: str):
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'advisor' has no attribute {name!r}")


__all__ = [
    "AdvisorError",
    "AuditConfig",
    "AuditResult",
    "ConfigError",
    "HistoryError",
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
