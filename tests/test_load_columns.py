"""Column detection: common names, options that win, and messages that say how to fix."""

from __future__ import annotations

import pytest

from advisor.errors import ConfigError, LogFormatError
from advisor.load.columns import (
    CATALOG_CANDIDATES,
    LOG_CANDIDATES,
    detect_catalog_columns,
    detect_log_columns,
    fold_name,
)


@pytest.mark.parametrize(
    ("header", "expected"),
    [
        (["user_id", "item_id", "timestamp"], {"user": "user_id", "item": "item_id",
                                               "ts": "timestamp"}),
        (["UserId", "movieId", "timestamp", "rating"],
         {"user": "UserId", "item": "movieId", "ts": "timestamp", "value": "rating"}),
        (["Customer ID", "SKU", "Event Time", "Action", "Amount", "Session ID"],
         {"user": "Customer ID", "item": "SKU", "ts": "Event Time", "event": "Action",
          "value": "Amount", "session": "Session ID"}),
        (["member", "episode_id", "occurred_at", "type", "watch_fraction"],
         {"user": "member", "item": "episode_id", "ts": "occurred_at", "event": "type",
          "value": "watch_fraction"}),
    ],
)
def test_common_column_names_are_detected_case_and_punctuation_blind(header, expected):
    """Common names are found whatever their case, spaces or underscores."""
    det = detect_log_columns(header, given={}, source="a.csv")
    assert det.mapping == expected
    assert set(det.detected) == set(expected)
    assert det.unused == ()


def test_unmatched_columns_are_listed_as_unused():
    """Columns that map to no field are reported as unused, in file order."""
    det = detect_log_columns(["rownames", "user", "item", "ts", "country"], given={},
                             source="a.csv")
    assert det.unused == ("rownames", "country")


def test_first_candidate_wins_and_a_column_is_used_once():
    """With 'timestamp' and 'date' both present the earlier candidate wins; the other is unused."""
    det = detect_log_columns(["date", "user", "item", "timestamp"], given={}, source="a.csv")
    assert det.mapping["ts"] == "timestamp"
    assert det.unused == ("date",)


def test_given_column_wins_over_detection():
    """A column named by option is used even when a common name is also present."""
    det = detect_log_columns(["user", "account", "item", "ts"], given={"user": "account"},
                             source="a.csv")
    assert det.mapping["user"] == "account"
    assert "user" not in det.detected
    assert det.unused == ("user",)


def test_given_column_absent_names_file_and_lists_columns():
    """A given column missing from the file names the file, the option and the columns found."""
    with pytest.raises(LogFormatError) as err:
        detect_log_columns(["uid", "item", "ts"], given={"user": "user_name"}, source="w1.csv")
    msg = str(err.value)
    assert "w1.csv" in msg and "'user_name'" in msg and "'uid', 'item', 'ts'" in msg
    assert "--user-col" in msg


def test_missing_required_column_names_file_columns_and_fix():
    """No item column: the message names the file, the columns found and both fixes."""
    with pytest.raises(LogFormatError) as err:
        detect_log_columns(["who", "what", "when"], given={}, source="plays.csv")
    msg = str(err.value)
    assert msg.startswith("plays.csv: no column found for user, item, ts")
    assert "'who', 'what', 'when'" in msg
    assert "--item-col" in msg and "[columns]" in msg


def test_single_column_header_hints_at_the_delimiter():
    """A header read as one column holding semicolons suggests the delimiter is wrong."""
    with pytest.raises(LogFormatError, match="separated by semicolons"):
        detect_log_columns(["user;item;ts"], given={}, source="eu.csv")


def test_one_column_given_for_two_fields_is_a_config_error():
    """Naming the same column for user and item is contradictory."""
    with pytest.raises(ConfigError, match="both user and item"):
        detect_log_columns(["id", "ts"], given={"user": "id", "item": "id"}, source="a.csv")


def test_catalogue_columns_are_detected():
    """Catalogue names, including 'id' for the item, are found."""
    det = detect_catalog_columns(
        ["id", "Name", "Genres", "release_date", "avg_rating", "num_ratings"], given={},
        source="items.csv")
    assert det.mapping == {"item": "id", "title": "Name", "categories": "Genres",
                           "added": "release_date", "rating": "avg_rating",
                           "rating_count": "num_ratings"}


def test_catalogue_without_item_column_says_how_to_name_it():
    """A catalogue with no item column names the file and the [catalog.columns] fix."""
    with pytest.raises(LogFormatError) as err:
        detect_catalog_columns(["title", "genres"], given={}, source="items.csv")
    assert "items.csv" in str(err.value) and "[catalog.columns]" in str(err.value)


def test_candidate_lists_have_no_name_twice_within_a_field():
    """Each candidate list folds to distinct names, so the priority order is unambiguous."""
    for table in (LOG_CANDIDATES, CATALOG_CANDIDATES):
        for names in table.values():
            folded = [fold_name(n) for n in names]
            assert len(folded) == len(set(folded))


def test_log_fields_do_not_share_candidates():
    """No common name is claimed by two log fields (else detection would depend on order)."""
    seen: dict[str, str] = {}
    for field, names in LOG_CANDIDATES.items():
        for n in names:
            assert seen.setdefault(fold_name(n), field) == field
