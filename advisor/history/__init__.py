"""Audit history: a SQLite store of past audits, the week-over-week trend and a readiness
forecast.

>>> from advisor.history import load_history, forecast_readiness  # doctest: +SKIP
>>> forecast_readiness(load_history("advisor-report/history.sqlite")).next_tier  # doctest: +SKIP
"""

from advisor.history.entry import HistoryEntry, RuleGap, entry_from_result, input_fingerprint
from advisor.history.forecast import (
    Crossing,
    Forecast,
    GrowthFit,
    Projection,
    TierReach,
    fit_growth,
    forecast_readiness,
)
from advisor.history.store import (
    DEFAULT_NAME,
    HistoryStore,
    default_history_path,
    load_history,
    record_audit,
)
from advisor.history.trend import Trend, TrendRow, trend_table

__all__ = [
    "DEFAULT_NAME",
    "Crossing",
    "Forecast",
    "GrowthFit",
    "HistoryEntry",
    "HistoryStore",
    "Projection",
    "RuleGap",
    "TierReach",
    "Trend",
    "TrendRow",
    "default_history_path",
    "entry_from_result",
    "fit_growth",
    "forecast_readiness",
    "input_fingerprint",
    "load_history",
    "record_audit",
    "trend_table",
]
