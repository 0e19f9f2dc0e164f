"""Frozen results of the evidence stage: what was split, fitted, measured and compared.

Every result has a docstring under each field (meaning, unit) and a ``to_dict()`` that
returns plain JSON-safe Python types. ``Evidence.metrics()`` flattens the numbers the
rules engine reads into ``evidence.*`` keys.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import Any

__all__ = [
    "ActivityBand",
    "CandidateResult",
    "CurvePoint",
    "CurveProjection",
    "Evidence",
    "LearningCurve",
    "NeighbourReliability",
    "PairedComparison",
    "SplitSummary",
]


def _plain(value: Any) -> Any:
    """Convert numpy scalars, tuples and nested results into JSON-safe Python values."""
    if value is None or isinstance(value, (bool, str)):
        return value
    if hasattr(value, "to_dict"):
        return value.to_dict()
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if hasattr(value, "item"):  # numpy scalar
        value = value.item()
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    return value


def _as_dict(obj: Any) -> dict[str, Any]:
    return {f.name: _plain(getattr(obj, f.name)) for f in fields(obj)}


@dataclass(frozen=True, slots=True)
class SplitSummary:
    """How the interactions were divided into training and test data."""

    protocol: str
    """``"global_time"`` (train before one cutoff, test after it) or ``"per_user_holdout"``
    (each user's most recent items held out)."""
    is_temporal: bool
    """True for the global time split; the per-user hold-out lets training data from after a
    user's test period leak into the model (Ji et al. 2023)."""
    reason: str
    """One sentence on why this protocol was chosen."""
    cutoff_ts: int | None
    """Global cutoff, epoch seconds (global time split only)."""
    reference_ts: int
    """End of the training data, epoch seconds: the cutoff, or the last training interaction
    for the per-user hold-out. The recent-popularity window ends here."""
    returning_users: int
    """Users with history before the global cutoff and a new item after it (counted for both
    protocols, since it decides between them)."""
    min_returning_users: int
    """Returning users needed for the global time split (common practice, no published source)."""
    test_share: float
    """Target share of interactions in the test window, or of each user's items held out."""
    train_pairs: int
    """Distinct (user, item) pairs in the training data."""
    test_pairs: int
    """Held-out (user, item) pairs of the evaluated test users."""
    train_users: int
    """Users with at least one training interaction."""
    eligible_test_users: int
    """Users who have training history and at least one held-out item."""
    test_users: int
    """Users evaluated (a seeded sample of the eligible ones when there are more than the cap)."""
    max_test_users: int
    """Cap on evaluated users."""
    sampled: bool
    """True when the evaluated users are a sample of the eligible ones."""
    population_users: int
    """Users with counted interactions handed to the backtest (the log's users)."""
    users_sampled: bool
    """True when the backtest ran on a seeded sample of ``population_users`` users (a cost
    bound on large logs): every model then trains on fewer users than the log has, which
    usually understates the lift the whole log supports."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return _as_dict(self)


@dataclass(frozen=True, slots=True)
class CandidateResult:
    """Offline accuracy of one candidate recommender over the full catalogue."""

    name: str
    """Short identifier (``popularity``, ``recent_popularity``, ``category_popularity``,
    ``itemknn``, ``latent``)."""
    method: str
    """What was fitted, with its settings (for the report)."""
    personalised: bool
    """True when the list depends on the user's own items (item neighbours, latent factors)."""
    users: int
    """Test users evaluated."""
    ndcg: float
    """Mean NDCG@k over test users (binary gains), 0-1."""
    ndcg_low: float | None
    """Lower end of the seeded percentile-bootstrap interval for the mean NDCG@k."""
    ndcg_high: float | None
    """Upper end of that interval."""
    recall: float
    """Mean recall@k, denominator min(k, number of held-out items), 0-1."""
    recall_low: float | None
    """Lower end of the bootstrap interval for the mean recall@k."""
    recall_high: float | None
    """Upper end of that interval."""
    coverage: float
    """Catalogue coverage@k: share of all items recommended to at least one test user, 0-1."""
    long_tail_share: float
    """Share of recommendation slots filled with items outside the top 20% by training
    interactions, 0-1."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return _as_dict(self)


@dataclass(frozen=True, slots=True)
class PairedComparison:
    """Per-user paired difference in NDCG@k between a candidate and a baseline."""

    candidate: str
    """Candidate name."""
    baseline: str
    """Baseline name."""
    users: int
    """Test users in the comparison."""
    candidate_ndcg: float
    """Candidate mean NDCG@k."""
    baseline_ndcg: float
    """Baseline mean NDCG@k."""
    lift: float
    """Mean per-user difference candidate - baseline, NDCG@k units."""
    lift_low: float | None
    """Lower end of the seeded percentile-bootstrap interval for the mean difference."""
    lift_high: float | None
    """Upper end of that interval."""
    p_value: float | None
    """Two-sided p-value of the paired t-test on the per-user differences."""
    test: str
    """Name of the paired test."""
    effect_size: float | None
    """Paired Cohen's d_z: mean difference / standard deviation of the differences."""
    effect_size_name: str
    """Name of the effect size."""
    relative_lift: float | None
    """Lift / baseline mean NDCG@k (None when the baseline mean is zero)."""
    wins: int
    """Users where the candidate's NDCG@k is higher."""
    losses: int
    """Users where the baseline's NDCG@k is higher."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return _as_dict(self)


@dataclass(frozen=True, slots=True)
class ActivityBand:
    """Lift of the best personalised candidate for users with a given history length."""

    low: int
    """Smallest number of training items of a user in the band."""
    high: int | None
    """Largest number (None: no upper bound)."""
    users: int
    """Test users in the band."""
    enough_users: bool
    """True when the band has at least the minimum users for an interval to be read."""
    comparison: PairedComparison | None
    """Paired comparison in the band (None when the band is empty)."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return _as_dict(self)


@dataclass(frozen=True, slots=True)
class CurvePoint:
    """One point of the learning curve: both models refitted on a share of training users."""

    fraction: float
    """Share of training users kept."""
    train_users: int
    """Training users kept."""
    baseline_ndcg: float
    """Popularity mean NDCG@k at this size."""
    candidate_ndcg: float
    """Best personalised candidate mean NDCG@k at this size."""
    lift: float
    """Mean per-user lift, NDCG@k units."""
    lift_low: float | None
    """Lower end of the bootstrap interval of the lift."""
    lift_high: float | None
    """Upper end of that interval."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return _as_dict(self)


@dataclass(frozen=True, slots=True)
class CurveProjection:
    """Fitted mean lift at a training size, with its interval (an extrapolation beyond 1x)."""

    train_users: int
    """Training users."""
    lift: float
    """Fitted mean lift, NDCG@k units."""
    low: float
    """Lower end of the interval for the fitted mean lift."""
    high: float
    """Upper end of that interval."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return _as_dict(self)


@dataclass(frozen=True, slots=True)
class LearningCurve:
    """Lift against training size, fitted as ``lift = a + b * log2(train users)``."""

    candidate: str
    """Personalised candidate refitted at each size."""
    points: tuple[CurvePoint, ...]
    """Measured points, smallest first."""
    form: str
    """Fitted form, in words."""
    intercept: float | None
    """Fitted a (lift at one training user, NDCG@k units; not meaningful on its own)."""
    slope: float | None
    """Fitted b: lift gained per doubling of training users, NDCG@k units."""
    slope_low: float | None
    """Lower end of the slope's confidence interval (user-clustered standard errors)."""
    slope_high: float | None
    """Upper end of that interval."""
    still_climbing: bool | None
    """True when the slope's interval is above zero."""
    target_lift: float | None
    """Absolute lift the target asks for: relative target x popularity NDCG@k at full size."""
    users_needed: int | None
    """Extra training users beyond today's for the fitted lift to reach the target
    (None when met or not estimable)."""
    status: str
    """``"met"``, ``"estimated"`` or ``"not_estimable"``."""
    reason: str
    """Why the estimate is what it is, in one sentence."""
    projections: tuple[CurveProjection, ...]
    """Fitted lift with intervals at 1x, 2x, 4x and 8x today's training users."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return _as_dict(self)


@dataclass(frozen=True, slots=True)
class NeighbourReliability:
    """Split-half agreement of item neighbour lists, projected with Spearman-Brown."""

    measure: str
    """How agreement is measured, in words."""
    neighbours: int
    """Neighbours per item (top-k)."""
    users: int
    """Users split into the two halves."""
    items_compared: int
    """Items with enough support in both halves to be compared."""
    top_k_overlap: float | None
    """Mean Jaccard overlap of the two halves' top-k neighbour sets, 0-1 (descriptive)."""
    half_agreement: float | None
    """Agreement between the halves (a correlation, -1..1)."""
    reliability: float | None
    """Spearman-Brown projection to the full data (twice a half)."""
    target: float
    """Target reliability."""
    users_needed: int | None
    """Extra users beyond today's for the projected reliability to reach the target
    (None when met or not estimable)."""
    status: str
    """``"met"``, ``"estimated"`` or ``"not_estimable"``."""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return _as_dict(self)


@dataclass(frozen=True, slots=True)
class Evidence:
    """Everything the offline backtest found, with the settings that produced it."""

    seed: int
    """Seed of every random step (test-user sample, bootstrap, subsamples, halves)."""
    k: int
    """List length for every @k metric."""
    confidence: float
    """Confidence level of every interval."""
    split: SplitSummary | None
    """Split protocol and sample sizes (None when the log has no users to split)."""
    candidates: tuple[CandidateResult, ...]
    """Accuracy of each candidate (empty when nothing could be evaluated)."""
    comparisons: tuple[PairedComparison, ...]
    """Each non-popularity candidate against global popularity."""
    best_candidate: str | None
    """Personalised candidate with the highest mean NDCG@k."""
    latent_vs_itemknn: PairedComparison | None
    """Latent model against item neighbours (paired)."""
    bands: tuple[ActivityBand, ...]
    """Best candidate against popularity by user history length."""
    min_history_for_lift: int | None
    """Lower edge of the first band (with enough users) whose lift interval is above zero."""
    learning_curve: LearningCurve | None
    """Lift against training size."""
    reliability: NeighbourReliability | None
    """Split-half reliability of item neighbour lists."""
    lift_target: float
    """Relative NDCG@k lift over popularity counted as worth having."""
    notes: tuple[str, ...]
    """Plain-language caveats (leakier protocol, too few users, skipped steps)."""

    def candidate(self, name: str) -> CandidateResult | None:
        """The result of the named candidate, or None."""
        return next((c for c in self.candidates if c.name == name), None)

    def comparison(self, name: str) -> PairedComparison | None:
        """The comparison of the named candidate against popularity, or None."""
        return next((c for c in self.comparisons if c.candidate == name), None)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dictionary of the fields."""
        return _as_dict(self)

    def metrics(self) -> dict[str, float | None]:
        """Flat ``evidence.*`` numbers for the rules engine (None when not computable)."""

        def num(x: Any) -> float | None:
            if x is None:
                return None
            x = float(x)
            return x if math.isfinite(x) else None

        def get(obj: Any, attr: str) -> float | None:
            return None if obj is None else num(getattr(obj, attr))

        m: dict[str, float | None] = {}
        s = self.split
        m["evidence.test_users"] = float(s.test_users) if s else 0.0
        m["evidence.protocol_is_temporal"] = None if s is None else float(s.is_temporal)
        for name in ("popularity", "recent_popularity", "category_popularity", "itemknn",
                     "latent"):
            c = self.candidate(name)
            m[f"evidence.{name}_ndcg"] = get(c, "ndcg")
            m[f"evidence.{name}_recall"] = get(c, "recall")
            m[f"evidence.{name}_coverage"] = get(c, "coverage")
        for name in ("itemknn", "latent"):
            c = self.comparison(name)
            m[f"evidence.{name}_lift"] = get(c, "lift")
            m[f"evidence.{name}_lift_low"] = get(c, "lift_low")
            m[f"evidence.{name}_lift_high"] = get(c, "lift_high")
            m[f"evidence.{name}_lift_p"] = get(c, "p_value")
            m[f"evidence.{name}_relative_lift"] = get(c, "relative_lift")
            m[f"evidence.{name}_effect_size"] = get(c, "effect_size")
        best = self.comparison(self.best_candidate) if self.best_candidate else None
        m["evidence.best_lift"] = get(best, "lift")
        m["evidence.best_lift_low"] = get(best, "lift_low")
        m["evidence.best_lift_high"] = get(best, "lift_high")
        m["evidence.best_lift_p"] = get(best, "p_value")
        m["evidence.best_relative_lift"] = get(best, "relative_lift")
        m["evidence.best_effect_size"] = get(best, "effect_size")
        lvi = self.latent_vs_itemknn
        m["evidence.latent_vs_itemknn"] = get(lvi, "lift")
        m["evidence.latent_vs_itemknn_low"] = get(lvi, "lift_low")
        m["evidence.latent_vs_itemknn_high"] = get(lvi, "lift_high")
        m["evidence.latent_vs_itemknn_p"] = get(lvi, "p_value")
        m["evidence.min_history_for_lift"] = num(self.min_history_for_lift)
        lc = self.learning_curve
        m["evidence.curve_slope_per_doubling"] = get(lc, "slope")
        m["evidence.curve_slope_low"] = get(lc, "slope_low")
        m["evidence.curve_still_climbing"] = (
            None if lc is None or lc.still_climbing is None else float(lc.still_climbing))
        m["evidence.users_needed_for_target"] = get(lc, "users_needed")
        r = self.reliability
        m["evidence.neighbour_reliability"] = get(r, "reliability")
        m["evidence.neighbour_half_agreement"] = get(r, "half_agreement")
        m["evidence.neighbour_top_k_overlap"] = get(r, "top_k_overlap")
        m["evidence.users_needed_for_reliability_0_8"] = (
            get(r, "users_needed") if r is not None and r.target == 0.8 else None)
        return m
