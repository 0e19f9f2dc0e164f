"""Evaluate rules against the audit's metrics: tier ladder, surfaces, go / no-go."""

from __future__ import annotations

import math
from dataclasses import dataclass

from advisor.rules.model import Rule, RuleResult, RuleSet, Verdict

_SEVERITY_RANK = {"ready": 0, "borderline": 1, "not_ready": 2}

#: The tier whose readiness decides the go for personalised rows.
PERSONALISED_TIER = "item_neighbourhood"


@dataclass(frozen=True, slots=True)
class Decision:
    """Everything the rules engine decided."""

    tiers: tuple[Verdict, ...]
    """One verdict per tier, lowest first."""
    surfaces: tuple[Verdict, ...]
    """One verdict per surface."""
    headline_tier: str | None
    """Id of the highest ready tier (None: none is ready)."""
    next_tier: str | None
    """Id of the first tier above the headline (None at the top)."""
    personalised_go: bool
    """Go for personalised rows: the item-neighbourhood tier is ready."""
    personalised_reasons: tuple[str, ...]
    """Why the go / no-go came out as it did."""

    def tier(self, tier_id: str) -> Verdict:
        return next(v for v in self.tiers if v.id == tier_id)

    def to_dict(self) -> dict:
        return {
            "headline_tier": self.headline_tier,
            "next_tier": self.next_tier,
            "personalised_rows": {"go": self.personalised_go,
                                  "reasons": list(self.personalised_reasons)},
            "tiers": [v.to_dict() for v in self.tiers],
            "surfaces": [v.to_dict() for v in self.surfaces],
        }


def evaluate_rule(rule: Rule, value: float | None) -> RuleResult:
    """Compare one measured value with a rule's threshold and borderline band.

    Examples
    --------
    >>> from advisor.rules.model import Rule
    >>> r = Rule("x", "t", "m", ">=", 10, 5, "blocking", "fail", "", "", "", "")
    >>> [evaluate_rule(r, v).outcome for v in (12, 7, 3, None)]
    ['pass', 'borderline', 'fail', 'not_measured']
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return RuleResult(rule, None, "skipped" if rule.missing == "skip" else "not_measured")
    v = float(value)
    if _compare(v, rule.op, rule.threshold):
        return RuleResult(rule, v, "pass")
    if rule.borderline is not None and _compare(v, _inclusive(rule.op), rule.borderline):
        return RuleResult(rule, v, "borderline")
    return RuleResult(rule, v, "fail")


def _inclusive(op: str) -> str:
    return ">=" if op in (">=", ">") else "<="


def _compare(v: float, op: str, t: float) -> bool:
    return {">=": v >= t, ">": v > t, "<=": v <= t, "<": v < t}[op]


def _verdict(scope_id: str, name: str, rules, metrics: dict) -> Verdict:
    results = tuple(evaluate_rule(r, metrics.get(r.metric)) for r in rules)
    status = "ready"
    reasons = []
    for res in results:
        r = res.rule
        if r.severity != "blocking" or res.outcome in ("pass", "skipped"):
            continue
        if res.outcome == "not_measured":
            level = "not_ready" if r.missing == "fail" else "borderline"
            reasons.append(f"{r.id}: {r.metric} was not measured")
        elif res.outcome == "borderline":
            level = "borderline"
            reasons.append(f"{r.id}: {r.metric} = {_fmt(res.value)}, borderline "
                           f"(needs {r.op} {_fmt(r.threshold)})")
        else:
            level = "not_ready"
            reasons.append(f"{r.id}: {r.metric} = {_fmt(res.value)}, needs {r.op} "
                           f"{_fmt(r.threshold)}")
        status = max(status, level, key=_SEVERITY_RANK.__getitem__)
    return Verdict(scope_id, name, status, results, tuple(reasons))


def _fmt(x: float | None) -> str:
    if x is None:
        return "n/a"
    if float(x).is_integer() and abs(x) >= 1:
        return f"{int(x):,}"
    return f"{x:.3g}"


def decide(ruleset: RuleSet, metrics: dict) -> Decision:
    """Evaluate every tier and surface.

    A tier's status is ``not_ready`` if any blocking rule fails (or is unmeasured with
    ``missing = "fail"``), ``borderline`` if any is borderline (or unmeasured with
    ``missing = "borderline"``), else ``ready``. The headline is the highest ready tier; a
    tier can be ready while a lower one is not (item neighbourhoods need no categories, per-
    segment lists do). A surface takes the worse of its tier's status and its own rules'.
    Personalised rows are a go when the item-neighbourhood tier is ready: its rules include
    the backtest's requirement that personalisation beat popularity on this data.
    """
    tiers = tuple(_verdict(t.id, t.name, ruleset.for_scope(t.id), metrics)
                  for t in ruleset.tiers)
    order = [t.id for t in ruleset.tiers]
    ready = [v.id for v in tiers if v.status == "ready"]
    headline = ready[-1] if ready else None
    above = order.index(headline) + 1 if headline else 0
    next_tier = order[above] if above < len(order) else None

    by_id = {v.id: v for v in tiers}
    surfaces = []
    for s in ruleset.surfaces:
        own = _verdict(s.id, s.name, ruleset.for_scope(s.id), metrics)
        tier_v = by_id[s.tier]
        if tier_v.status == "ready":
            surfaces.append(own)
            continue
        status = max(own.status, tier_v.status, key=_SEVERITY_RANK.__getitem__)
        reasons = own.reasons + (f"tier '{tier_v.name}' is {tier_v.status.replace('_', ' ')}",)
        surfaces.append(Verdict(s.id, s.name, status, own.results, reasons))

    cf = by_id[PERSONALISED_TIER]
    go = cf.status == "ready"
    if go:
        reasons = (f"Tier '{cf.name}' is ready: every blocking rule passes.",)
    else:
        reasons = tuple(cf.reasons)
    return Decision(tiers, tuple(surfaces), headline, next_tier, go, reasons)
