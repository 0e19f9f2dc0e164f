"""Weekly readiness audit of a recommendation service's interaction logs."""

__version__ = "0.1.0"
