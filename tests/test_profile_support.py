"""Tests for advisor.profile.support: item support over the catalogue and the long tail.

Expected numbers: counts worked by hand; the Gini of 1,3,2,1,1,1,4 = 0.3076923 from the
documented example of a standard R inequality package (REFERENCES.md [P]); the Gini of a
catalogue with unseen items checked against the mean-absolute-difference definition computed
directly with numpy.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from builders import build_log

from advisor.aggregate import aggregate
from advisor.profile.support import SUPPORT_LEVELS, long_tail_profile, support_profile
from advisor.stats.inequality import gini, lorenz_curve, top_share

HAND = [
    ("u1", "a", "2024-01-01T10:00:00Z"),
    ("u1", "a", "2024-01-03T10:00:00Z"),
    ("u1", "b", "2024-01-07T23:59:59Z"),
    ("u2", "a", "2024-01-08T00:00:00Z"),
    ("u1", "c", "2024-01-09T00:00:00Z"),
    ("u3", "b", "2024-01-24T00:00:00Z"),
    ("u2", "c", "2024-01-25T00:00:00Z"),
]

# Interactions per item 1, 3, 2, 1, 1, 1, 4 (REFERENCES.md [P] Gini example), each event by
# a different user so that distinct users per item equal the same numbers.
GINI_COUNTS = [1, 3, 2, 1, 1, 1, 4]


def _gini_log(catalog=None):
    rows = []
    for k, c in enumerate(GINI_COUNTS):
        rows += [(f"u{k}-{j}", f"i{k}", f"2024-01-0{1 + j}T00:00:00Z") for j in range(c)]
    return build_log(rows, catalog=catalog)


def _mad_gini(x):
    """Gini as half the relative mean absolute difference over all ordered pairs."""
    x = np.asarray(x, float)
    return np.abs(x[:, None] - x[None, :]).sum() / (2 * x.size**2 * x.mean())


def test_support_profile_counts_the_whole_catalogue():
    """Items a, b, c with two users each and two unseen items: shares over all five."""
    s = support_profile(aggregate(build_log(HAND, catalog=["a", "b", "c", "y", "z"])))
    assert s.levels == SUPPORT_LEVELS == (1, 5, 10, 20, 50, 100)
    assert s.items_at_least == (3, 0, 0, 0, 0, 0)
    assert s.share_at_least == pytest.approx((3 / 5, 0, 0, 0, 0, 0))
    assert s.coverage == pytest.approx(3 / 5)
    assert s.median_users == 2.0  # users per item 2, 2, 2, 0, 0


def test_support_profile_with_custom_levels():
    """Custom levels 2 and 3 on items with 1, 3, 2, 1, 1, 1, 4 users (worked by hand)."""
    s = support_profile(aggregate(_gini_log()), levels=(2, 3))
    assert s.items_at_least == (3, 2)  # {3, 2, 4} and {3, 4}
    assert s.share_at_least == pytest.approx((3 / 7, 2 / 7))
    assert s.coverage == 1.0 and s.median_users == 1.0


def test_long_tail_gini_matches_the_published_example():
    """Interactions 1, 3, 2, 1, 1, 1, 4 over seven items have Gini 0.3076923."""
    lt = long_tail_profile(aggregate(_gini_log()))
    # R inequality package documented example (REFERENCES.md [P]).
    assert round(lt.gini, 7) == 0.3076923
    # Top 20% of 7 items = ceil(1.4) = 2 items, holding 4 + 3 of 13 interactions (by hand).
    assert lt.top20_share == pytest.approx(7 / 13)


def test_long_tail_gini_counts_unseen_catalogue_items_as_zeros():
    """Catalogue items nobody touched enter the Gini as zeros and raise it."""
    catalog = [f"i{k}" for k in range(7)] + ["never1", "never2", "never3"]
    agg = aggregate(_gini_log(catalog))
    lt = long_tail_profile(agg)
    padded = GINI_COUNTS + [0, 0, 0]
    assert lt.gini == pytest.approx(_mad_gini(padded), rel=1e-12)  # definition, numpy
    assert lt.gini == pytest.approx(gini(agg.item_events), rel=1e-12)  # the stats function
    assert lt.gini > round(0.3076923, 7) + 0.1  # seen items alone give 0.3077
    # ceil(0.2 * 10) = 2 items still hold 7 of 13 interactions.
    assert lt.top20_share == pytest.approx(top_share(padded, fraction=0.2)) == pytest.approx(7 / 13)


def test_long_tail_lorenz_curve_is_the_stats_functions_curve():
    """The Lorenz points are the stats function's 21 points, running from (0, 0) to (1, 1)."""
    agg = aggregate(_gini_log(["extra"] + [f"i{k}" for k in range(7)]))
    lt = long_tail_profile(agg)
    curve = lorenz_curve(agg.item_events.astype(float), points=21)
    assert lt.lorenz_population == pytest.approx(tuple(curve.population_share))
    assert lt.lorenz_value == pytest.approx(tuple(curve.value_share))
    assert (lt.lorenz_population[0], lt.lorenz_value[0]) == (0.0, 0.0)
    assert (lt.lorenz_population[-1], lt.lorenz_value[-1]) == (1.0, 1.0)


def test_long_tail_weighs_interactions_not_distinct_users():
    """A user repeating an item adds to its interactions, hence to the concentration."""
    base = [("u1", "a", "2024-01-01T00:00:00Z"), ("u2", "b", "2024-01-01T00:00:00Z")]
    even = long_tail_profile(aggregate(build_log(base)))
    repeat = long_tail_profile(aggregate(build_log(base + [("u1", "a", "2024-01-02T00:00:00Z")])))
    assert even.gini == 0.0
    assert repeat.gini == pytest.approx(_mad_gini([2, 1]))  # 1/6


def test_support_and_long_tail_to_dict_are_json_safe():
    """Both ``to_dict`` results survive strict JSON and name the Gini estimator."""
    agg = aggregate(_gini_log())
    s = json.loads(json.dumps(support_profile(agg).to_dict(), allow_nan=False))
    lt = json.loads(json.dumps(long_tail_profile(agg).to_dict(), allow_nan=False))
    assert s["items_at_least"][0] == 7
    assert "population" in lt["gini_estimator"]
    assert len(lt["lorenz"]["population_share"]) == 21
