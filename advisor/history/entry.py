"""What one audit leaves in the history: a compact, JSON-safe summary of an :class:`AuditResult`.

An entry keeps the numbers a weekly trend and a readiness forecast need (volume, activity,
co-occurrence, the item-neighbour lift), the verdicts (headline tier, go / no-go, every tier's
status), what the blocking rules still lack, and the full flat metrics dict so that a later
version can trend a metric nobody thought of today.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover
    from advisor.pipeline import AuditResult

__all__ = ["KEY_METRICS", "HistoryEntry", "RuleGap", "as_of_date", "entry_from_result",
           "input_fingerprint"]

#: Entry field -> audit metric it is read from (the explicit columns of the store).
KEY_METRICS = {
    "interactions": "volume.interactions",
    "users": "volume.users",
    "items_seen": "volume.items_seen",
    "users_ge_5": "activity.users_ge_5",
    "density": "volume.density",
    "cooc_share": "cooc.share_interactions_ge_3_neighbours",
    "itemknn_lift": "evidence.itemknn_lift",
    "itemknn_lift_low": "evidence.itemknn_lift_low",
    "itemknn_lift_high": "evidence.itemknn_lift_high",
    "users_needed": "evidence.users_needed_for_target",
}


@dataclass(frozen=True, slots=True)
class RuleGap:
    """One blocking rule that did not pass at this audit."""

    tier: str
    """Id of the tier the rule belongs to."""
    rule: str
    """Rule id, e.g. ``cf.users_with_history``."""
    metric: str
    """Metric the rule reads, e.g. ``activity.users_ge_5``."""
    op: str
    """Comparison that passes: ``>=``, ``>``, ``<=`` or ``<``."""
    threshold: float
    """Value the metric must reach, in the metric's unit."""
    value: float | None
    """Measured value (None: not measured)."""
    outcome: str
    """``fail``, ``borderline`` or ``not_measured``."""
    gap: float | None
    """Distance from passing, in the metric's unit (None when not measured)."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return {k: getattr(self, k) for k in self.__slots__}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> RuleGap:
        """Inverse of :meth:`to_dict`."""
        return cls(**{k: d.get(k) for k in cls.__slots__})


@dataclass(frozen=True, slots=True)
class HistoryEntry:
    """The record one audit leaves in the history database."""

    as_of: str
    """Audit date and time (ISO-8601, UTC): events after it were set aside."""
    recorded_utc: str
    """When the audit ran (ISO-8601, UTC)."""
    fingerprint: str
    """SHA-256 (hex) over the sorted SHA-256 digests of the input files; the same files give
    the same fingerprint whatever their names or the as-of date."""
    tool_version: str
    """Version of the advisor package that ran the audit."""
    interactions: float | None
    """Counted interactions (``volume.interactions``)."""
    users: float | None
    """Distinct users with a counted interaction (``volume.users``)."""
    items_seen: float | None
    """Distinct items with a counted interaction (``volume.items_seen``)."""
    users_ge_5: float | None
    """Users with at least five distinct items (``activity.users_ge_5``)."""
    density: float | None
    """Distinct user-item pairs / (users x catalogue items), 0-1 (``volume.density``)."""
    cooc_share: float | None
    """Share of interactions on items with three or more significant neighbours, 0-1
    (``cooc.share_interactions_ge_3_neighbours``)."""
    itemknn_lift: float | None
    """Mean per-user NDCG@k gain of item neighbours over popularity (None: no backtest)."""
    itemknn_lift_low: float | None
    """Lower end of that lift's interval."""
    itemknn_lift_high: float | None
    """Upper end of that lift's interval."""
    headline_tier: str | None
    """Id of the highest ready tier (None: none is ready)."""
    next_tier: str | None
    """Id of the first tier above the headline (None at the top)."""
    personalised_go: bool
    """Go for personalised rows."""
    tier_statuses: dict[str, str] = field(default_factory=dict)
    """Tier id -> ``ready``, ``borderline`` or ``not_ready``, lowest tier first."""
    gaps: tuple[RuleGap, ...] = ()
    """Every blocking tier rule that did not pass, lowest tier first."""
    users_needed: float | None = None
    """Learning curve: extra training users for the target lift (None: met, not estimable
    or no backtest)."""
    curve_train_users: float | None = None
    """Training users of the backtest behind ``users_needed`` (None: no backtest)."""
    metrics: dict[str, float | None] = field(default_factory=dict)
    """Every metric of the audit, by name."""

    @property
    def as_of_date(self) -> str:
        """The as-of date (``YYYY-MM-DD``, UTC): the key an audit replaces."""
        return as_of_date(self.as_of)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields (plus ``as_of_date``)."""
        d: dict[str, Any] = {"as_of_date": self.as_of_date}
        for k in self.__slots__:
            v = getattr(self, k)
            if k == "gaps":
                v = [g.to_dict() for g in v]
            elif isinstance(v, dict):
                v = dict(v)
            d[k] = v
        return d


def as_of_date(as_of: str) -> str:
    """The UTC calendar date of an ISO-8601 time (a bare date is returned as is).

    Examples
    --------
    >>> as_of_date("2026-10-18T23:59:59.999999+00:00"), as_of_date("2026-10-19T01:00+02:00")
    ('2026-10-18', '2026-10-18')
    """
    t = datetime.fromisoformat(as_of)
    if t.tzinfo is not None:
        t = t.astimezone(timezone.utc)
    return t.date().isoformat()


def input_fingerprint(digests) -> str:
    """SHA-256 (hex) over the sorted SHA-256 hex digests of the input files.

    Notes
    -----
    Sorting makes the fingerprint independent of file order and names: it identifies the
    bytes that were read. The as-of date is not part of it, so weekly ``--as-of`` audits of
    one unchanged folder share a fingerprint.

    Examples
    --------
    >>> input_fingerprint(["b" * 64, "a" * 64]) == input_fingerprint(["a" * 64, "b" * 64])
    True
    """
    h = hashlib.sha256()
    for d in sorted(digests):
        h.update(d.encode("ascii"))
        h.update(b"\n")
    return h.hexdigest()


def _num(v: Any) -> float | None:
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def entry_from_result(result: AuditResult) -> HistoryEntry:
    """Summarise one audit result as a history entry.

    Parameters
    ----------
    result : AuditResult
        What :func:`advisor.audit` returned.

    Returns
    -------
    HistoryEntry
        Key metrics, verdicts, the blocking rules' gaps and the flat metrics dict.
    """
    m = {k: _num(v) for k, v in sorted(result.metrics.items())}
    d = result.decision
    gaps = tuple(
        RuleGap(tier=v.id, rule=r.rule.id, metric=r.rule.metric, op=r.rule.op,
                threshold=float(r.rule.threshold), value=_num(r.value), outcome=r.outcome,
                gap=_num(r.gap))
        for v in d.tiers for r in v.results
        if r.rule.severity == "blocking" and r.outcome in ("fail", "borderline", "not_measured"))
    ev = result.evidence
    split = getattr(ev, "split", None) if ev is not None else None
    train = _num(getattr(split, "train_users", None)) if split is not None else None
    return HistoryEntry(
        as_of=result.run.as_of,
        recorded_utc=result.run.started_utc,
        fingerprint=input_fingerprint(f.sha256 for f in result.inputs),
        tool_version=result.run.tool_version,
        **{k: m.get(metric) for k, metric in KEY_METRICS.items() if k != "users_needed"},
        headline_tier=d.headline_tier,
        next_tier=d.next_tier,
        personalised_go=bool(d.personalised_go),
        tier_statuses={v.id: v.status for v in d.tiers},
        gaps=gaps,
        users_needed=m.get(KEY_METRICS["users_needed"]),
        curve_train_users=train,
        metrics=m,
    )
