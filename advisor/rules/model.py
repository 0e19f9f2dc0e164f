"""Rules, tiers, surfaces and the verdicts the engine gives."""

from __future__ import annotations

from dataclasses import dataclass

OPS = (">=", ">", "<=", "<")
SEVERITIES = ("blocking", "advisory")
MISSING = ("fail", "borderline", "skip")
STATUSES = ("ready", "borderline", "not_ready")


@dataclass(frozen=True, slots=True)
class Rule:
    """One readiness rule, as read from a rules file."""

    id: str
    """Unique id, e.g. ``cf.users_with_history``."""
    scope: str
    """The tier or surface id the rule belongs to."""
    metric: str
    """Name of the audit metric it reads, e.g. ``activity.users_ge_5``."""
    op: str
    """Comparison: ``>=``, ``>``, ``<=`` or ``<`` (value op threshold passes)."""
    threshold: float
    """Value the metric must reach to pass."""
    borderline: float | None
    """Between this and ``threshold`` the rule is borderline; None: no borderline band."""
    severity: str
    """``blocking`` (decides the verdict) or ``advisory`` (adds a note)."""
    missing: str
    """Outcome when the metric is not measured: ``fail``, ``borderline`` or ``skip``."""
    rationale: str
    """Why the rule exists."""
    source: str
    """A published source, or "common practice, no published source"."""
    fix: str
    """What to do when it fails (may be empty)."""
    origin: str
    """Where the rule came from: ``shipped`` or the user's rules file path."""

    def to_dict(self) -> dict:
        return {k: getattr(self, k) for k in self.__slots__}


@dataclass(frozen=True, slots=True)
class Tier:
    """A method tier; tiers are ordered lowest first."""

    id: str
    name: str
    summary: str

    def to_dict(self) -> dict:
        return {"id": self.id, "name": self.name, "summary": self.summary}


@dataclass(frozen=True, slots=True)
class Surface:
    """A row a service shows; ready only when its tier is ready and its own rules pass."""

    id: str
    name: str
    tier: str

    def to_dict(self) -> dict:
        return {"id": self.id, "name": self.name, "tier": self.tier}


@dataclass(frozen=True, slots=True)
class RuleSet:
    """Tiers (ordered), surfaces and rules."""

    tiers: tuple[Tier, ...]
    surfaces: tuple[Surface, ...]
    rules: tuple[Rule, ...]

    def for_scope(self, scope: str) -> tuple[Rule, ...]:
        return tuple(r for r in self.rules if r.scope == scope)


@dataclass(frozen=True, slots=True)
class RuleResult:
    """One rule evaluated against the audit."""

    rule: Rule
    """The rule."""
    value: float | None
    """Measured value of the metric (None: not measured)."""
    outcome: str
    """``pass``, ``borderline``, ``fail``, ``not_measured`` or ``skipped``."""

    @property
    def gap(self) -> float | None:
        """How far the value is from passing, in the metric's unit (0 when it passes)."""
        if self.value is None:
            return None
        r = self.rule
        if r.op in (">=", ">"):
            return max(0.0, r.threshold - self.value)
        return max(0.0, self.value - r.threshold)

    def to_dict(self) -> dict:
        r = self.rule
        return {
            "rule": r.id,
            "metric": r.metric,
            "op": r.op,
            "threshold": r.threshold,
            "borderline": r.borderline,
            "severity": r.severity,
            "value": self.value,
            "outcome": self.outcome,
            "gap": self.gap,
            "rationale": r.rationale,
            "source": r.source,
            "fix": r.fix,
            "origin": r.origin,
        }


@dataclass(frozen=True, slots=True)
class Verdict:
    """Readiness of one tier or surface, with the evidence that produced it."""

    id: str
    """Tier or surface id."""
    name: str
    """Display name."""
    status: str
    """``ready``, ``borderline`` or ``not_ready``."""
    results: tuple[RuleResult, ...]
    """Every rule of this scope, evaluated."""
    reasons: tuple[str, ...]
    """Plain sentences: why it is not ready / borderline (empty when ready)."""

    def to_dict(self) -> dict:
        return {
            "id": self.id,
            "name": self.name,
            "status": self.status,
            "reasons": list(self.reasons),
            "rules": [r.to_dict() for r in self.results],
        }
