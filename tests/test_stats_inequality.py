"""Tests for advisor.stats.inequality: Gini, Lorenz curve, top share."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from advisor.errors import ConfigError, InsufficientDataError, LogFormatError
from advisor.stats import LorenzCurve, gini, lorenz_curve, top_share

# numpy >= 2 renamed trapz to trapezoid; setup.cfg still allows numpy 1.24.
trapezoid = getattr(np, "trapezoid", None) or np.trapz

amounts = st.lists(st.integers(0, 1000), min_size=1, max_size=60).filter(lambda v: sum(v) > 0)


def _gini_by_pairs(x):
    """Textbook definition: sum over all ordered pairs |xi - xj| / (2 n^2 mean)."""
    x = np.asarray(x, float)
    return np.abs(x[:, None] - x[None, :]).sum() / (2 * x.size**2 * x.mean())


def test_gini_matches_documented_example():
    """1,3,2,1,1,1,4 gives 0.3076923."""
    # documented example of a standard R inequality package (REFERENCES.md [P])
    assert gini([1, 3, 2, 1, 1, 1, 4]) == pytest.approx(0.3076923, abs=1e-7)


def test_gini_population_and_small_sample_forms_on_one_to_five():
    """1..5 gives 0.2666667 (population) and 0.3333333 (n/(n-1), Shani & Gunawardana)."""
    # REFERENCES.md: 0.2666667 and 0.3333333 [P]
    assert gini([1, 2, 3, 4, 5]) == pytest.approx(0.2666667, abs=1e-7)
    assert gini([1, 2, 3, 4, 5], small_sample=True) == pytest.approx(0.3333333, abs=1e-7)


@settings(max_examples=100, deadline=None)
@given(amounts)
def test_gini_equals_half_relative_mean_absolute_difference(x):
    """The sorted formula equals the all-pairs definition (Gini 1912)."""
    assert gini(x) == pytest.approx(_gini_by_pairs(x), abs=1e-12)


@settings(max_examples=100, deadline=None)
@given(amounts, st.randoms(use_true_random=False), st.integers(1, 50))
def test_gini_ignores_order_and_scale(x, rnd, factor):
    """Shuffling units or multiplying every amount by a constant changes nothing."""
    shuffled = list(x)
    rnd.shuffle(shuffled)
    assert gini(shuffled) == pytest.approx(gini(x), abs=1e-12)
    assert gini([v * factor for v in x]) == pytest.approx(gini(x), abs=1e-12)


def test_gini_is_zero_when_equal_and_maximal_when_one_unit_holds_all():
    """Equal amounts give 0; one holder gives 1 - 1/n, or 1 in the small-sample form."""
    assert gini([4, 4, 4, 4]) == pytest.approx(0.0, abs=1e-15)
    assert gini([0, 0, 0, 9]) == pytest.approx(0.75)
    assert gini([0, 0, 0, 9], small_sample=True) == pytest.approx(1.0)


def test_gini_counts_unseen_items_as_zeros():
    """Adding never-consumed catalogue items raises the concentration."""
    seen = [5, 3, 2, 8]
    assert gini(seen + [0, 0, 0]) > gini(seen)
    assert gini(seen + [0, 0, 0]) == pytest.approx(_gini_by_pairs(seen + [0, 0, 0]))


@pytest.mark.parametrize("bad", [[], [0, 0, 0]])
def test_gini_refuses_empty_or_zero_total(bad):
    """Empty input or a zero total raises InsufficientDataError (shares undefined)."""
    with pytest.raises(InsufficientDataError):
        gini(bad)


@pytest.mark.parametrize("bad", [[1, -2, 3], [1, float("nan")], [[1, 2], [3, 4]]])
def test_gini_refuses_negative_nonfinite_or_2d_values(bad):
    """Negative, non-finite or non-1-D amounts raise LogFormatError."""
    with pytest.raises(LogFormatError):
        gini(bad)


def test_gini_small_sample_needs_two_units():
    """The n/(n-1) form is undefined for a single unit."""
    assert gini([7]) == 0.0
    with pytest.raises(InsufficientDataError, match="at least 2"):
        gini([7], small_sample=True)


def test_lorenz_area_relation_equals_gini_on_fine_grid():
    """1 - 2 * trapezoid area under the Lorenz curve equals the Gini (random case)."""
    rng = np.random.default_rng(11)
    x = rng.poisson(rng.pareto(1.5, size=50) * 4)
    x[0] = max(x[0], 1)
    curve = lorenz_curve(x, points=1001)  # grid step 1/1000 contains every vertex k/50
    area = trapezoid(curve.value_share, curve.population_share)
    assert 1 - 2 * area == pytest.approx(gini(x), abs=1e-12)
    coarse = lorenz_curve(x, points=21)  # coarse grid: an approximation only
    assert 1 - 2 * trapezoid(coarse.value_share, coarse.population_share) == pytest.approx(
        gini(x), abs=0.05)


@settings(max_examples=60, deadline=None)
@given(amounts, st.integers(2, 50))
def test_lorenz_curve_runs_from_origin_to_one_below_diagonal(x, points):
    """The curve starts at (0,0), ends at (1,1), rises, and never exceeds equality."""
    c = lorenz_curve(x, points=points)
    assert c.population_share.shape == c.value_share.shape == (points,)
    assert c.value_share[0] == 0.0 and c.value_share[-1] == 1.0
    assert c.population_share[0] == 0.0 and c.population_share[-1] == 1.0
    assert np.all(np.diff(c.value_share) >= -1e-12)
    assert np.all(c.value_share <= c.population_share + 1e-12)


def test_lorenz_curve_to_dict_is_json_safe():
    """to_dict gives lists of plain floats."""
    c = lorenz_curve([0, 0, 1, 3], points=5)
    assert isinstance(c, LorenzCurve)
    back = json.loads(json.dumps(c.to_dict()))
    assert back["value_share"] == [0.0, 0.0, 0.0, 0.25, 1.0]


@pytest.mark.parametrize("points", [1, 0, 2.5, True])
def test_lorenz_curve_rejects_bad_point_counts(points):
    """points must be an integer of at least 2."""
    with pytest.raises(ConfigError, match="points"):
        lorenz_curve([1, 2], points=points)


@settings(max_examples=100, deadline=None)
@given(amounts, st.floats(0.01, 1.0))
def test_top_share_equals_sum_of_largest_ceil_fraction_units(x, fraction):
    """The share is the k largest amounts over the total, k = ceil(fraction * n)."""
    k = math.ceil(round(fraction * len(x), 9))
    want = sum(sorted(x, reverse=True)[:k]) / sum(x)
    assert top_share(x, fraction=fraction) == pytest.approx(want, abs=1e-12)


def test_top_share_takes_exact_unit_count_despite_float_error():
    """fraction 0.07 of 100 units takes 7 units, not 8 (0.07 * 100 = 7.000000000000001)."""
    assert 0.07 * 100 > 7  # the floating-point trap this guards against
    x = list(range(100, 0, -1))
    assert top_share(x, fraction=0.07) == pytest.approx(sum(range(100, 93, -1)) / sum(x))


def test_top_share_of_all_units_is_one_and_of_equal_units_is_fraction():
    """The whole population holds everything; equal units hold their head count share."""
    assert top_share([3, 1, 2], fraction=1.0) == pytest.approx(1.0)
    assert top_share([5] * 10, fraction=0.2) == pytest.approx(0.2)


@pytest.mark.parametrize("fraction", [0, -0.2, 1.5, float("nan")])
def test_top_share_rejects_fraction_outside_unit_interval(fraction):
    """fraction must be in (0, 1]."""
    with pytest.raises(ConfigError, match="fraction"):
        top_share([1, 2, 3], fraction=fraction)
