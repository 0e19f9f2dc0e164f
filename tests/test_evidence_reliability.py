"""Tests for advisor.evidence.reliability: Spearman-Brown and split-half neighbour agreement."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given
from hypothesis import strategies as st

from advisor.evidence.reliability import (
    _row_jaccard,
    _row_pearson,
    neighbour_reliability,
    spearman_brown,
    spearman_brown_factor,
)


def test_spearman_brown_doubles_a_half_test_reliability():
    """rho = 0.5 at half length gives 2(0.5)/(1 + 0.5) = 2/3 at full length."""
    # Spearman-Brown formula, REFERENCES.md: rho_k = k rho / (1 + (k - 1) rho).
    assert spearman_brown(0.5, 2.0) == pytest.approx(2 / 3)
    assert spearman_brown(0.6, 1.0) == pytest.approx(0.6)


@given(st.floats(0.01, 0.99), st.floats(0.01, 0.99))
def test_spearman_brown_factor_inverts_the_projection(rho, target):
    """Projecting by the returned factor reaches the target exactly."""
    factor = spearman_brown_factor(rho, target)
    assert spearman_brown(rho, factor) == pytest.approx(target)


def test_spearman_brown_factor_is_none_without_positive_agreement():
    """No amount of data helps when the agreement is zero or negative."""
    assert spearman_brown_factor(0.0, 0.8) is None
    assert spearman_brown_factor(-0.2, 0.8) is None


def test_row_pearson_matches_numpy_corrcoef_without_the_diagonal():
    """Per-row Pearson over the off-diagonal cells equals numpy.corrcoef on them."""
    rng = np.random.default_rng(0)
    a = rng.random((3, 8))
    b = a + rng.normal(0, 0.3, size=(3, 8))
    for i in range(3):
        a[i, i] = b[i, i] = 0.0
    got = _row_pearson(sp.csr_matrix(a), sp.csr_matrix(b))
    for i in range(3):
        keep = np.arange(8) != i
        assert got[i] == pytest.approx(np.corrcoef(a[i, keep], b[i, keep])[0, 1])


def test_row_jaccard_compares_each_items_top_k_sets_from_a_full_sort():
    """Overlap of the halves' top-k positive neighbours, own item excluded, ties to the lower
    index, for rows that are items in no particular order: |A & B| / |A | B| per row."""
    rng = np.random.default_rng(4)
    items = np.array([7, 2, 11, 0])
    a = np.round(rng.random((4, 12)), 1) * (rng.random((4, 12)) < 0.6)  # ties and zeros
    b = np.round(rng.random((4, 12)), 1) * (rng.random((4, 12)) < 0.6)
    a[0, 7] = b[0, 7] = 5.0  # the own item must never count
    b[3] = 0.0  # nothing on one side: overlap 0

    def top(row, item):
        order = [j for j in np.lexsort((np.arange(row.size), -row)) if j != item]
        return {j for j in order[:3] if row[j] > 0}

    got = _row_jaccard(sp.csr_matrix(a), sp.csr_matrix(b), 3, items)
    for r, item in enumerate(items):
        sa, sb = top(a[r], item), top(b[r], item)
        assert got[r] == pytest.approx(len(sa & sb) / len(sa | sb))


def _clustered(n_users: int, seed: int, *, taste: float) -> sp.csr_matrix:
    rng = np.random.default_rng(seed)
    n_items, clusters = 60, 3
    own = rng.integers(0, clusters, size=n_users)
    x = np.zeros((n_users, n_items), dtype=np.float32)
    for u in range(n_users):
        for _ in range(8):
            j = own[u] * 20 + rng.integers(20) if rng.random() < taste else rng.integers(n_items)
            x[u, j] = 1.0
    return sp.csr_matrix(x)


def test_reliability_grows_with_more_users():
    """The same taste structure measured on more users gives more reliable neighbour rows."""
    small = neighbour_reliability(_clustered(60, 0, taste=0.9), rng=np.random.default_rng(0))
    large = neighbour_reliability(_clustered(1200, 0, taste=0.9), rng=np.random.default_rng(0))
    assert large.reliability > small.reliability
    assert large.users == 1200 and large.items_compared == 60


def test_reliability_is_higher_with_taste_structure_than_without():
    """Clustered tastes give steadier neighbour rows than uniformly random picks."""
    taste = neighbour_reliability(_clustered(400, 1, taste=0.9), rng=np.random.default_rng(0))
    noise = neighbour_reliability(_clustered(400, 1, taste=0.0), rng=np.random.default_rng(0))
    assert taste.reliability > noise.reliability
    assert taste.top_k_overlap > noise.top_k_overlap


def test_users_needed_follow_spearman_brown():
    """Extra users = (factor - 1) x users, with the factor from the projected reliability."""
    r = neighbour_reliability(_clustered(200, 2, taste=0.6), rng=np.random.default_rng(0))
    assert r.status == "estimated"
    factor = spearman_brown_factor(r.reliability, 0.8)
    assert r.users_needed == int(np.ceil((factor - 1) * r.users))


def test_reliability_is_not_estimable_without_items_in_both_halves():
    """Two users cannot give an item two users in each half."""
    x = sp.csr_matrix(np.ones((2, 4), dtype=np.float32))
    r = neighbour_reliability(x, rng=np.random.default_rng(0))
    assert r.status == "not_estimable" and r.reliability is None
