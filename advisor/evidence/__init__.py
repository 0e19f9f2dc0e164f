"""Evidence stage: offline backtest, activity bands, learning curve, neighbour reliability.

The pipeline calls :func:`gather_evidence`; its :class:`Evidence` result carries every
number with its interval and the settings that produced it, and ``Evidence.metrics()``
gives the flat ``evidence.*`` values the rules engine reads.
"""

from advisor.evidence.gather import gather_evidence
from advisor.evidence.model import (
    ActivityBand,
    CandidateResult,
    CurvePoint,
    CurveProjection,
    Evidence,
    LearningCurve,
    NeighbourReliability,
    PairedComparison,
    SplitSummary,
)

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
    "gather_evidence",
]
