"""The one family of errors the tool raises at its users.

Every message says what went wrong, where (file, line, rule, key), what was expected,
what arrived, and what to do about it. The CLI turns each class into a clean message and
a documented exit code; library code never exits or prints.
"""

from __future__ import annotations

__all__ = [
    "AdvisorError",
    "ConfigError",
    "EngineUnsupportedError",
    "HistoryError",
    "InsufficientDataError",
    "LogFormatError",
    "OutputError",
    "RulesError",
]


class AdvisorError(Exception):
    """Base class of every error the tool raises on purpose."""

    exit_code = 1


class LogFormatError(AdvisorError, ValueError):
    """An input file (log or catalogue) cannot be read or lacks what the audit needs."""

    exit_code = 3


class ConfigError(AdvisorError, ValueError):
    """A config file or option is malformed, misspelled or contradictory."""

    exit_code = 2


class EngineUnsupportedError(ConfigError):
    """The chosen engine does not read this input (yet); another engine does. With the
    default engine choice (``auto``) the audit falls back to the in-memory engine."""

    def __init__(self, message: str, *, reason: str | None = None):
        super().__init__(message)
        self.reason = reason or message
        """What the engine does not read, in a few words (for the fallback note)."""


class RulesError(ConfigError):
    """A rules file is malformed: names the rule and the key at fault."""


class InsufficientDataError(AdvisorError, ValueError):
    """The log was readable but leaves nothing to audit (for example every row quarantined)."""

    exit_code = 4


class OutputError(AdvisorError, OSError):
    """A report could not be written (read-only folder, full disk, path outside the output)."""

    exit_code = 5


class HistoryError(AdvisorError):
    """The audit history database cannot be opened, read or written (corrupt, foreign,
    newer schema, locked too long); the file is left as it was."""

    exit_code = 6
