"""Pure statistics: binomial intervals and concentration measures (no I/O, no printing)."""

from advisor.stats.inequality import LorenzCurve, gini, lorenz_curve, top_share
from advisor.stats.intervals import Interval, users_needed, wilson_interval, wilson_lower_bound

__all__ = [
    "Interval",
    "LorenzCurve",
    "gini",
    "lorenz_curve",
    "top_share",
    "users_needed",
    "wilson_interval",
    "wilson_lower_bound",
]
