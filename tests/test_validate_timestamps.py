"""Timestamp reading (ISO-8601, epoch s/ms) and the audit date, checked against the stdlib."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from advisor.errors import ConfigError
from advisor.validate.timestamps import parse_timestamps, resolve_as_of

UTC = dt.timezone.utc


def _py(values) -> list:
    """Parsed instants as Python datetimes (None for NaT)."""
    return [None if pd.isna(t) else t.to_pydatetime() for t in values]


def test_iso_with_zone_matches_stdlib_fromisoformat():
    """Zoned ISO text gives the instant datetime.fromisoformat gives, in UTC."""
    texts = ["2024-03-01T12:00:00+01:00", "2024-03-01T12:00:00Z", "2024-12-31T23:59:59.5-05:30"]
    p = parse_timestamps(pd.Series(texts))
    expected = [dt.datetime.fromisoformat(t.replace("Z", "+00:00")).astimezone(UTC)
                for t in texts]  # stdlib datetime.fromisoformat
    assert _py(p.values) == expected
    assert p.format == "iso8601" and p.naive == 0
    assert str(p.values.dtype) == "datetime64[ns, UTC]"


def test_naive_iso_is_read_as_utc_and_said():
    """ISO text without a zone is taken as UTC and a note says so."""
    p = parse_timestamps(pd.Series(["2024-03-01T12:00:00", "2024-03-01 13:30"]))
    assert _py(p.values) == [dt.datetime(2024, 3, 1, 12, tzinfo=UTC),
                             dt.datetime(2024, 3, 1, 13, 30, tzinfo=UTC)]
    assert p.naive == 2
    assert any("no time zone" in n and "UTC" in n for n in p.notes())


def test_dates_without_time_are_midnight_utc_and_said():
    """Date-only values (also YYYYMMDD) are midnight UTC; a note says the order in a day is lost."""
    p = parse_timestamps(pd.Series(["2024-03-01", "20240302"]))
    assert _py(p.values) == [dt.datetime(2024, 3, 1, tzinfo=UTC),
                             dt.datetime(2024, 3, 2, tzinfo=UTC)]
    assert p.date_only == 2 and p.naive == 0
    assert any("dates without a time of day" in n for n in p.notes())


def test_epoch_seconds_and_milliseconds_are_told_apart_by_magnitude():
    """1709290800 is seconds and 1709290800123 milliseconds; both match datetime.fromtimestamp."""
    p = parse_timestamps(pd.Series(["1709290800", "1709290800123", "1709290800.5"]))
    expected = [dt.datetime.fromtimestamp(1709290800, UTC),  # stdlib
                dt.datetime.fromtimestamp(1709290800.123, UTC),
                dt.datetime.fromtimestamp(1709290800.5, UTC)]
    assert _py(p.values) == expected
    assert p.kinds == {"epoch_seconds": 2, "epoch_milliseconds": 1}
    assert p.format == "mixed"


def test_all_epoch_milliseconds_reports_that_format():
    """A column of millisecond epochs reports epoch_milliseconds."""
    p = parse_timestamps(pd.Series(["1700000000000", "1700000000001"]))
    assert p.format == "epoch_milliseconds"
    assert "epoch milliseconds" in p.notes()[0]


def test_mixed_formats_are_each_read_and_reported():
    """ISO and epoch rows in one column are each read; the note gives the counts."""
    p = parse_timestamps(pd.Series(["2024-03-01T11:00:00Z", "1709290800", "1709290800"]))
    assert p.values.nunique() == 1
    assert p.kinds == {"epoch_seconds": 2, "iso8601": 1}
    assert "2 as epoch seconds" in p.notes()[0] and "1 as ISO-8601" in p.notes()[0]


def test_unreadable_and_missing_are_kept_apart():
    """Garbage is 'bad', empty is 'missing', neither becomes a time."""
    p = parse_timestamps(pd.Series(["next tuesday", "", None, "2024-02-30", "1e400", "ok"]))
    assert p.values.isna().all()
    assert p.missing.tolist() == [False, True, True, False, False, False]
    assert p.bad.tolist() == [True, False, False, True, True, True]
    assert p.format == "none"


def test_values_beyond_the_nanosecond_range_are_bad_not_an_overflow():
    """Year 9999 or 1e25 cannot be held in datetime64[ns]; they count as unreadable."""
    p = parse_timestamps(pd.Series(["9999-01-01T00:00:00", "1e25", "2024-01-01"]))
    assert p.bad.tolist() == [True, True, False]


def test_years_option_reads_four_digit_numbers_as_years():
    """For catalogue dates, '1995' is the year 1995, not 1995 seconds after 1970."""
    assert _py(parse_timestamps(pd.Series(["1995"]), years=True).values) == [
        dt.datetime(1995, 1, 1, tzinfo=UTC)]
    assert _py(parse_timestamps(pd.Series(["1995"])).values) == [
        dt.datetime.fromtimestamp(1995, UTC)]


@settings(max_examples=60, deadline=None)
@given(st.datetimes(min_value=dt.datetime(1990, 1, 1), max_value=dt.datetime(2200, 1, 1),
                    timezones=st.sampled_from([UTC, dt.timezone(dt.timedelta(hours=5, minutes=30)),
                                               dt.timezone(dt.timedelta(hours=-8))])))
def test_iso_and_epoch_forms_of_one_instant_agree(moment):
    """isoformat(), epoch seconds and epoch milliseconds of one instant parse to the same UTC."""
    moment = moment.replace(microsecond=(moment.microsecond // 1000) * 1000)
    ms = round(moment.timestamp() * 1000)
    p = parse_timestamps(pd.Series([moment.isoformat(), str(ms)]))
    got = _py(p.values)
    assert got[0] == moment.astimezone(UTC)
    assert got[1] == dt.datetime.fromtimestamp(ms / 1000, UTC).replace(
        microsecond=(ms % 1000) * 1000)


def test_as_of_date_is_the_end_of_that_day():
    """A date means events up to 23:59:59.999999 UTC of that day are in."""
    as_of, note = resolve_as_of("2024-03-10", pd.NaT)
    assert as_of == pd.Timestamp("2024-03-10 23:59:59.999999", tz="UTC")
    assert "2024-03-10" in note
    assert pd.Timestamp("2024-03-10 23:59:59.999999", tz="UTC") <= as_of
    assert pd.Timestamp("2024-03-11 00:00:00", tz="UTC") > as_of


def test_as_of_datetime_with_zone_is_converted_and_naive_is_utc():
    """A zoned as_of is converted to UTC; a naive one is UTC."""
    assert resolve_as_of("2024-03-10T18:00:00+02:00", pd.NaT)[0] == pd.Timestamp(
        "2024-03-10 16:00", tz="UTC")
    assert resolve_as_of("2024-03-10 18:00", pd.NaT)[0] == pd.Timestamp(
        "2024-03-10 18:00", tz="UTC")


def test_as_of_defaults_to_the_latest_event():
    """Without as_of the latest event is the audit date, and the note says so."""
    latest = pd.Timestamp("2024-03-10 17:00", tz="UTC")
    as_of, note = resolve_as_of(None, latest)
    assert as_of == latest and "latest event" in note


@pytest.mark.parametrize("bad", ["last week", "2024-13-01", "10/03/2024x"])
def test_unreadable_as_of_is_a_config_error_with_the_fix(bad):
    """An unreadable as_of names the value and the two ways to set it."""
    with pytest.raises(ConfigError) as err:
        resolve_as_of(bad, pd.NaT)
    assert repr(bad) in str(err.value) and "--as-of" in str(err.value)


def test_parsing_keeps_the_index_and_is_vectorised_over_many_rows():
    """100,000 epoch rows parse quickly and keep the input index."""
    s = pd.Series(np.arange(1_700_000_000, 1_700_100_000).astype(str),
                  index=np.arange(100_000) * 2)
    p = parse_timestamps(s)
    assert (p.values.index == s.index).all()
    assert p.values.iloc[-1] == pd.Timestamp(1_700_099_999, unit="s", tz="UTC")
