"""Concentration of interactions over items (or users): Gini, Lorenz curve, top share.

Pure functions on a 1-D array of non-negative amounts (usually interactions per item,
including zeros for catalogue items nobody touched: those are legitimate zeros and pull
the Gini up, as they should).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from advisor.errors import ConfigError, InsufficientDataError, LogFormatError

__all__ = ["LorenzCurve", "gini", "lorenz_curve", "top_share"]


@dataclass(frozen=True, slots=True)
class LorenzCurve:
    """Points of a Lorenz curve, units ordered from the smallest amount to the largest."""

    population_share: np.ndarray
    """Cumulative share of units (items), ascending from 0 to 1."""
    value_share: np.ndarray
    """Cumulative share of the total held by those units, ascending from 0 to 1."""

    def to_dict(self) -> dict:
        """JSON-safe plain Python: two lists of floats."""
        return {
            "population_share": [float(v) for v in self.population_share],
            "value_share": [float(v) for v in self.value_share],
        }


def _amounts(values, where: str) -> np.ndarray:
    x = np.asarray(values, dtype=float)
    if x.ndim != 1:
        raise LogFormatError(
            f"{where}: expected a 1-D array of amounts (one per unit), got shape {x.shape}; "
            "pass e.g. interactions per item as a flat array"
        )
    if x.size == 0:
        raise InsufficientDataError(
            f"{where}: no units given (empty array); concentration needs at least one "
            "unit with a positive amount"
        )
    bad = ~np.isfinite(x) | (x < 0)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise LogFormatError(
            f"{where}: {int(bad.sum())} amount(s) are negative or not finite (first at "
            f"position {i}: {x[i]!r}); expected counts or weights >= 0; drop or fix them"
        )
    total = x.sum()
    if total <= 0:
        raise InsufficientDataError(
            f"{where}: all {x.size} amounts are zero, so shares are undefined; "
            "concentration needs at least one interaction"
        )
    return x


def gini(values, *, small_sample: bool = False) -> float:
    """Gini coefficient of non-negative amounts (mean-absolute-difference form).

    Parameters
    ----------
    values : array_like
        1-D non-negative amounts, one per unit (e.g. interactions per item, zeros
        included for items never seen).
    small_sample : bool, optional
        Multiply by ``n / (n - 1)``. Default ``False`` (population form).

    Returns
    -------
    float
        0 when every unit holds the same amount; close to 1 when one unit holds
        everything (exactly ``1 - 1/n`` in the population form, 1 in the small-sample
        form).

    Raises
    ------
    InsufficientDataError
        If ``values`` is empty or sums to zero (shares undefined), or if
        ``small_sample=True`` with a single unit.
    LogFormatError
        If ``values`` is not 1-D or holds negative or non-finite numbers.

    Notes
    -----
    With the amounts sorted ascending, ``x_(1) <= ... <= x_(n)``, and mean ``m``::

        G = sum_i (2 i - n - 1) x_(i) / (n^2 m)

    This is half the relative mean absolute difference over all ordered pairs
    (self-pairs included), and equals one minus twice the area under the Lorenz curve
    (see :func:`lorenz_curve`), which is why it is the default: it matches the picture in
    the report. The small-sample form ``G * n / (n - 1)`` excludes self-pairs, reaches 1
    when one unit holds everything, and is the one written in Shani & Gunawardana
    (2011); the two differ by under 1% once ``n > 100``, i.e. for any real catalogue.

    References
    ----------
    .. [1] Gini, C. (1912). Variabilita e mutabilita. Bologna: Tipografia di Paolo Cuppini.
    .. [2] Shani, G. & Gunawardana, A. (2011). Evaluating recommendation systems. In
       Recommender Systems Handbook, Springer, 257-297.

    Examples
    --------
    >>> round(gini([1, 3, 2, 1, 1, 1, 4]), 7)
    0.3076923
    >>> round(gini([1, 2, 3, 4, 5], small_sample=True), 7)
    0.3333333
    """
    x = np.sort(_amounts(values, "gini"))
    n = x.size
    if small_sample and n < 2:
        raise InsufficientDataError(
            "gini: the small-sample form needs at least 2 units (it multiplies by "
            "n / (n - 1)); got 1; use small_sample=False or pass more units"
        )
    i = np.arange(1, n + 1, dtype=float)
    # n^2 * mean == n * total; dividing by the total first keeps large counts well scaled.
    g = float(np.dot(2.0 * i - n - 1.0, x / x.sum()) / n)
    if small_sample:
        g *= n / (n - 1.0)
    return g


def lorenz_curve(values, *, points: int = 21) -> LorenzCurve:
    """Lorenz curve of non-negative amounts, sampled at evenly spaced population shares.

    Parameters
    ----------
    values : array_like
        1-D non-negative amounts, one per unit.
    points : int, optional
        Number of evenly spaced population shares from 0 to 1 (inclusive), at least 2.
        Default 21 (every 5%).

    Returns
    -------
    LorenzCurve
        ``population_share`` and ``value_share`` arrays of length ``points``.

    Raises
    ------
    ConfigError
        If ``points`` is not an integer >= 2.
    InsufficientDataError, LogFormatError
        As :func:`gini`.

    Notes
    -----
    The exact curve joins ``(k/n, S_k / S_n)`` for ``k = 0..n``, with ``S_k`` the sum of the
    ``k`` smallest amounts; between those vertices it is linear, and the sampled points
    are read off it by linear interpolation. When the sample grid contains every vertex
    (``points - 1`` a multiple of ``n``), ``1 - 2 * trapezoid(value_share,
    population_share)`` equals :func:`gini` exactly; on a coarser grid it is an
    approximation.

    References
    ----------
    .. [1] Lorenz, M. O. (1905). Methods of measuring the concentration of wealth.
       Publications of the American Statistical Association 9(70):209-219.

    Examples
    --------
    >>> curve = lorenz_curve([0, 0, 1, 3], points=5)
    >>> [float(v) for v in curve.value_share]
    [0.0, 0.0, 0.0, 0.25, 1.0]
    """
    if isinstance(points, bool) or not isinstance(points, (int, np.integer)) or points < 2:
        raise ConfigError(
            f"lorenz_curve: points must be an integer >= 2 (the curve's ends), got {points!r}"
        )
    x = np.sort(_amounts(values, "lorenz_curve"))
    n = x.size
    vertices_x = np.arange(n + 1, dtype=float) / n
    vertices_y = np.concatenate(([0.0], np.cumsum(x))) / x.sum()
    vertices_y[-1] = 1.0  # the cumulative sum may miss 1.0 by a rounding error
    pop = np.linspace(0.0, 1.0, int(points))
    return LorenzCurve(population_share=pop, value_share=np.interp(pop, vertices_x, vertices_y))


def top_share(values, *, fraction: float = 0.2) -> float:
    """Share of the total held by the top ``fraction`` of units (the short head).

    Parameters
    ----------
    values : array_like
        1-D non-negative amounts, one per unit (e.g. interactions per item).
    fraction : float, optional
        Fraction of units counted as the head, in (0, 1]. Default 0.2.

    Returns
    -------
    float
        Sum of the ``ceil(fraction * n)`` largest amounts divided by the total.

    Raises
    ------
    ConfigError
        If ``fraction`` is not in (0, 1].
    InsufficientDataError, LogFormatError
        As :func:`gini`.

    Notes
    -----
    The head is ``ceil(fraction * n)`` units, so it always holds at least one unit
    (a tolerance of 1e-9 keeps ``0.07 * 100`` at 7 units despite floating-point error). Units
    are taken in descending order of amount, ties broken by a stable sort (input order);
    the share itself does not depend on which of several tied units is taken, since tied
    units hold equal amounts. "Top 20% of items" as the short head is common practice in
    long-tail work, no single source.

    Examples
    --------
    >>> top_share([10, 0, 0, 0, 0, 5, 5, 0, 0, 0], fraction=0.2)
    0.75
    """
    try:
        f = float(fraction)
    except (TypeError, ValueError):
        f = float("nan")
    if isinstance(fraction, bool) or not 0.0 < f <= 1.0:
        raise ConfigError(
            f"top_share: fraction must be in (0, 1], got {fraction!r}; pass e.g. 0.2 for "
            "the top 20% of units"
        )
    x = _amounts(values, "top_share")
    k = max(1, math.ceil(f * x.size - 1e-9))
    head = np.sort(x)[::-1][:k]
    return float(head.sum() / x.sum())
