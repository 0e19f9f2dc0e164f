"""The aggregate stage: the only stage whose cost grows with the raw log.

It turns validated events into compact sufficient statistics (distinct user-item pairs,
per-user and per-item counts, weekly counts, the capped user x item matrix) that every later
stage reads. This is the seam where another engine can plug in: whatever computes the
aggregates, the profilers, evidence, rules and reports only see :class:`Aggregates`.
"""

from advisor.aggregate.model import Aggregates
from advisor.aggregate.pandas_engine import aggregate

__all__ = ["Aggregates", "aggregate"]
