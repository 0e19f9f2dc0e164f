"""Learning curve: how the lift over popularity grows with the number of training users.

Popularity and the best personalised candidate are refitted on nested, seeded subsamples
of the training users; the per-user lifts are fitted as ``lift = a + b * log2(users)`` with
statsmodels OLS, and the fit is used to say how many more users a lift target needs, or
that the curve does not support an estimate.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
import scipy.sparse as sp
from statsmodels.regression.linear_model import OLS
from statsmodels.tools.tools import add_constant

from advisor.evidence.compare import BOOTSTRAP_RESAMPLES, bootstrap_mean_interval
from advisor.evidence.model import CurvePoint, CurveProjection, LearningCurve

__all__ = ["MAX_EXTRAPOLATION", "fit_learning_curve", "measure_points", "subsample_users"]

MAX_EXTRAPOLATION = 1000.0
"""Largest multiple of today's training users an estimate may extrapolate to; beyond it the
curve is said not to support an estimate (common practice, no published source)."""

_FORM = "lift = a + b * log2(training users), OLS on per-user lifts, user-clustered errors"


def subsample_users(train: sp.csr_matrix, fractions: tuple[float, ...], *,
                    rng: np.random.Generator) -> list[tuple[float, int, sp.csr_matrix]]:
    """Nested seeded subsamples of the training users (rows of users dropped, not items).

    Returns
    -------
    list of (fraction, users kept, matrix)
        The matrix keeps the full shape; rows of dropped users are empty. Smaller fractions
        are subsets of larger ones, so the curve is not bent by sampling noise between sizes.

    Examples
    --------
    >>> x = sp.csr_matrix(np.eye(4, dtype=np.float32))
    >>> [(f, n) for f, n, _ in subsample_users(x, (0.5, 1.0), rng=np.random.default_rng(0))]
    [(0.5, 2), (1.0, 4)]
    """
    users = np.flatnonzero(np.diff(train.indptr) > 0)
    order = rng.permutation(users)
    out = []
    for f in sorted(fractions):
        n = max(1, int(math.ceil(f * len(order))))
        keep = np.zeros(train.shape[0], dtype=np.float32)
        keep[order[:n]] = 1.0
        sub = (sp.diags(keep) @ train).tocsr()
        sub.eliminate_zeros()
        out.append((f, n, sub))
    return out


def fit_learning_curve(points: list[tuple[float, int, np.ndarray, np.ndarray]], *,
                       candidate: str, lift_target: float, confidence: float = 0.95,
                       rng: np.random.Generator,
                       resamples: int = BOOTSTRAP_RESAMPLES,
                       population_train_users: int | None = None) -> LearningCurve:
    """Fit lift against log2(training users) and estimate the users a lift target needs.

    Parameters
    ----------
    points : list of (fraction, training users, candidate per-user NDCG, baseline per-user NDCG)
        One entry per size; the per-user arrays are aligned on the same test users.
    candidate : str
        Name of the refitted personalised candidate.
    lift_target : float
        Relative lift over popularity worth having (0.10 = 10%).
    confidence : float, optional
        Level of every interval.
    rng : numpy.random.Generator
        Seeded generator for the per-point bootstrap intervals.
    population_train_users : int, optional
        When the points come from a seeded sample of the log's users: the training users the
        whole log would give. The projections then include that size, and ``users_needed``
        counts from it rather than from the sample.

    Returns
    -------
    LearningCurve
        Points, fitted slope per doubling with interval, projections and the estimate.

    Notes
    -----
    Every (size, user) lift is one observation of ``lift = a + b log2(n)``; the same users
    appear at every size, so standard errors are clustered by user (statsmodels
    ``cov_type="cluster"``). Intervals are for the fitted mean lift, which is what a
    decision reads, not for one user's lift. Variation from which users were subsampled is
    not in them. The absolute target is ``lift_target`` x popularity NDCG@k at full size,
    treating popularity's accuracy as flat in size. An estimate is made only when the lift
    at today's size is already above zero (interval), the slope's interval is above zero,
    and the target needs at most ``MAX_EXTRAPOLATION`` times today's users: a candidate that
    starts below popularity on small samples also "climbs" towards it, and extrapolating
    that past zero would promise a lift the data never showed. ``still_climbing`` itself
    reads the slope only. A log-linear form is a convention (learning curves usually
    flatten), so any estimate is an extrapolation.

    Examples
    --------
    >>> u = np.linspace(0, 1, 50)
    >>> pts = [(f, n, 0.1 + 0.01 * np.log2(n) + 0.01 * u, np.full(50, 0.1))
    ...        for f, n in [(0.25, 100), (0.5, 200), (1.0, 400)]]
    >>> lc = fit_learning_curve(pts, candidate="itemknn", lift_target=1.5,
    ...                         rng=np.random.default_rng(0))
    >>> round(lc.slope, 4), lc.status
    (0.01, 'estimated')
    """
    pts = sorted(points, key=lambda p: p[1])
    curve_points = []
    for f, n, cand, base in pts:
        d = np.asarray(cand, dtype=np.float64) - np.asarray(base, dtype=np.float64)
        ci = bootstrap_mean_interval(d, confidence=confidence, resamples=resamples, rng=rng)
        curve_points.append(CurvePoint(
            fraction=float(f), train_users=int(n), baseline_ndcg=float(np.mean(base)),
            candidate_ndcg=float(np.mean(cand)), lift=float(d.mean()),
            lift_low=ci[0] if ci else None, lift_high=ci[1] if ci else None))
    full = curve_points[-1]
    target_abs = lift_target * full.baseline_ndcg
    empty = dict(intercept=None, slope=None, slope_low=None, slope_high=None,
                 still_climbing=None, projections=())
    sizes = sorted({p.train_users for p in curve_points})
    n_users = len(pts[0][2])
    # "Met" asks for the same evidence as the go: the point estimate at the target and an
    # interval above zero; a point estimate alone does not show the target is reached.
    shown = full.lift_low is not None and full.lift_low > 0
    if full.lift >= target_abs and full.baseline_ndcg > 0 and shown:
        status, reason = "met", "the lift at today's size already meets the target"
    else:
        status, reason = "not_estimable", ""
    if len(sizes) < 2 or n_users < 2:
        return LearningCurve(candidate=candidate, points=tuple(curve_points), form=_FORM,
                             target_lift=target_abs, users_needed=None, status=status,
                             reason=reason or "fewer than two training sizes or test users",
                             **empty)
    y = np.concatenate([np.asarray(c, float) - np.asarray(b, float) for _, _, c, b in pts])
    x = np.concatenate([np.full(len(c), math.log2(n)) for _, n, c, _ in pts])
    groups = np.tile(np.arange(n_users), len(pts))
    design = add_constant(x, has_constant="add")
    alpha = 1.0 - confidence
    if np.ptp(y) == 0:
        intercept, slope, s_low, s_high = float(y[0]), 0.0, 0.0, 0.0
        res = None
    else:
        res = OLS(y, design).fit(cov_type="cluster", cov_kwds={"groups": groups})
        intercept, slope = (float(v) for v in res.params)
        s_low, s_high = (float(v) for v in res.conf_int(alpha)[1])
    climbing = s_low > 0
    now = full.train_users
    whole = population_train_users if (population_train_users or 0) > now else None
    projections = []
    if res is not None:
        grid = sorted({now * m for m in (1, 2, 4, 8)} | ({whole} if whole else set()))
        frame = res.get_prediction(
            add_constant(np.log2(np.array(grid, float)), has_constant="add")
        ).summary_frame(alpha=alpha)
        projections = [CurveProjection(train_users=int(g), lift=float(r.mean),
                                       low=float(r.mean_ci_lower), high=float(r.mean_ci_upper))
                       for g, r in zip(grid, frame.itertuples())]
    needed = None
    if status != "met":
        if full.lift_low is None or full.lift_low <= 0:
            reason = ("no lift over popularity at today's size (its interval is not above "
                      "zero); a rising curve may only be closing the gap to popularity")
        elif not climbing:
            reason = ("the slope's interval is not above zero (flat or falling curve), "
                      "so more users cannot be promised to reach the target")
        elif full.baseline_ndcg <= 0:
            reason = "popularity scores zero, so a relative target is undefined"
        else:
            n_target = 2.0 ** ((target_abs - intercept) / slope)
            if n_target > MAX_EXTRAPOLATION * now:
                reason = (f"the fit reaches the target only beyond {MAX_EXTRAPOLATION:g}x "
                          "today's users, too far to extrapolate")
            elif whole is not None:
                status = "estimated"
                needed = max(0, int(math.ceil(n_target - whole)))
                reason = (f"extrapolated from a sample of {now:,} training users to the log's "
                          f"{whole:,}: " + (f"about {needed:,} more training users for the "
                                            "target lift" if needed else
                                            "the fitted curve reaches the target at the log's "
                                            "full size (a projection, not a measurement)"))
            else:
                status = "estimated"
                needed = max(0, int(math.ceil(n_target - now)))
                reason = (f"extrapolated from the fitted curve: about {needed} more training "
                          "users for the target lift")
    return LearningCurve(candidate=candidate, points=tuple(curve_points), form=_FORM,
                         intercept=intercept, slope=slope, slope_low=s_low, slope_high=s_high,
                         still_climbing=climbing, target_lift=target_abs, users_needed=needed,
                         status=status, reason=reason, projections=tuple(projections))


def measure_points(fractions: tuple[float, ...], train: sp.csr_matrix,
                   evaluate: Callable[[sp.csr_matrix], tuple[np.ndarray, np.ndarray]], *,
                   rng: np.random.Generator, full: tuple[np.ndarray, np.ndarray] | None = None
                   ) -> list[tuple[float, int, np.ndarray, np.ndarray]]:
    """Refit and evaluate at each fraction of training users.

    ``evaluate`` maps a (subsampled) training matrix to per-user NDCG of (candidate,
    popularity) on the fixed test users. ``full`` reuses the results already computed on all
    training users for fraction 1.
    """
    out = []
    for f, n, sub in subsample_users(train, fractions, rng=rng):
        cand, base = full if (full is not None and f >= 1.0) else evaluate(sub)
        out.append((f, n, cand, base))
    return out
