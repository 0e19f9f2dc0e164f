"""Read timestamp text (ISO-8601 or epoch numbers) into UTC instants, and fix the audit date.

Each value is judged on its own, so a column that mixes formats (two systems appended to one
export) is still read; the mix is reported. Everything becomes ``datetime64[ns, UTC]``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from advisor.errors import ConfigError

__all__ = ["NUMBER_PATTERN", "ParsedTimestamps", "parse_timestamps", "resolve_as_of"]

#: Epoch unit by magnitude of |x|: below 1e11 seconds (1e11 s is the year 5138), below 1e14
#: milliseconds, below 1e17 microseconds, else nanoseconds. Common practice, no published source.
_EPOCH_UNITS = (
    (1e11, "epoch_seconds", 1e9),
    (1e14, "epoch_milliseconds", 1e6),
    (1e17, "epoch_microseconds", 1e3),
    (np.inf, "epoch_nanoseconds", 1.0),
)
#: A plain decimal number. ASCII classes only, no ``\\s``: Arrow's RE2 then runs it, many
#: times faster than Python's ``re`` on a million rows.
NUMBER_PATTERN = r"[+-]?(?:[0-9]+[.]?[0-9]*|[.][0-9]+)(?:[eE][+-]?[0-9]+)?"
_NUMBER = NUMBER_PATTERN
# YYYYMMDD read as a date (ISO-8601 basic form): as epoch seconds it would be August 1970.
_BASIC_DATE = r"(?:19|20)[0-9]{2}(?:0[1-9]|1[0-2])(?:0[1-9]|[12][0-9]|3[01])"
_YEAR = r"[12][0-9]{3}"
_ZONED = r".*[0-9]:[0-9]{2}(?::[0-9]{2}(?:[.,][0-9]+)?)? *(?:[zZ]|[+-][0-9]{2}(?::?[0-9]{2})?)"
_DATE_ONLY = r"[0-9]{4}-[0-9]{2}-[0-9]{2}|" + _BASIC_DATE
# datetime64[ns] spans 1677-09-21 to 2262-04-11; later or earlier values cannot be held.
_LO = pd.Timestamp("1677-09-22", tz="UTC")
_HI = pd.Timestamp("2262-04-10", tz="UTC")


@dataclass(frozen=True, slots=True)
class ParsedTimestamps:
    """Timestamps read from text, with what was found."""

    values: pd.Series
    """The instants (``datetime64[ns, UTC]``), NaT where missing or unreadable; same index as
    the input."""
    missing: np.ndarray
    """Boolean per row: the cell was empty."""
    bad: np.ndarray
    """Boolean per row: a value was there but could not be read as a timestamp."""
    kinds: dict[str, int]
    """Rows read per format (``iso8601``, ``epoch_seconds``, ``epoch_milliseconds``,
    ``epoch_microseconds``, ``epoch_nanoseconds``), formats with no row left out."""
    naive: int
    """ISO-8601 values with a time of day but no zone, read as UTC."""
    date_only: int
    """Values with a date and no time of day (read as midnight UTC)."""

    @property
    def format(self) -> str:
        """The one format found, ``mixed`` when several, ``none`` when no row was read."""
        if not self.kinds:
            return "none"
        return next(iter(self.kinds)) if len(self.kinds) == 1 else "mixed"

    def notes(self) -> tuple[str, ...]:
        """Plain statements for the report about how the timestamps were read."""
        out = []
        names = {
            "iso8601": "ISO-8601 text",
            "epoch_seconds": "epoch seconds (numbers below 1e11)",
            "epoch_milliseconds": "epoch milliseconds (numbers from 1e11 to 1e14)",
            "epoch_microseconds": "epoch microseconds (numbers from 1e14 to 1e17)",
            "epoch_nanoseconds": "epoch nanoseconds (numbers from 1e17)",
        }
        if len(self.kinds) == 1:
            out.append(f"Timestamps were read as {names[self.format]}.")
        elif self.kinds:
            parts = ", ".join(f"{n:,} as {names[k]}" for k, n in self.kinds.items())
            out.append(f"Timestamps mix formats; each row was read on its own: {parts}.")
        if self.naive:
            out.append(f"{self.naive:,} ISO-8601 timestamps have no time zone and were read "
                       "as UTC.")
        if self.date_only:
            out.append(f"{self.date_only:,} timestamps are dates without a time of day, read "
                       "as midnight UTC; events within such a day have no order.")
        return tuple(out)

    def to_dict(self) -> dict:
        return {
            "format": self.format,
            "kinds": {k: int(v) for k, v in self.kinds.items()},
            "missing": int(self.missing.sum()),
            "bad": int(self.bad.sum()),
            "naive": int(self.naive),
            "date_only": int(self.date_only),
        }


def parse_timestamps(values: pd.Series, *, years: bool = False) -> ParsedTimestamps:
    """Read timestamp text row by row (vectorised) into ``datetime64[ns, UTC]``.

    Parameters
    ----------
    values : pandas.Series
        Text as read (strings, missing as NA); surrounding spaces are ignored.
    years : bool, default False
        Read a bare four-digit number (``1995``) as a year instead of epoch seconds; meant
        for catalogue dates such as a release year.

    Returns
    -------
    ParsedTimestamps

    Notes
    -----
    A value that is a plain number is an epoch count whose unit follows from its magnitude:
    ``|x| < 1e11`` seconds, ``< 1e14`` milliseconds, ``< 1e17`` microseconds, else
    nanoseconds (common practice, no published source; the bounds leave centuries of margin
    either side for present-day data). Eight digits forming a valid ``YYYYMMDD`` between 1900
    and 2099 are read as a date. Any other text is read as ISO-8601 by
    ``pandas.to_datetime(format="ISO8601")``; a value with an offset or ``Z`` is converted to
    UTC, one without is taken to be UTC. Values outside the ``datetime64[ns]`` range
    (1677-2262) count as unreadable.

    Examples
    --------
    >>> p = parse_timestamps(pd.Series(["2024-03-01T12:00:00+01:00", "1709290800",
    ...                                 "1709290800000", "soon", None]))
    >>> [str(t) for t in p.values[:3]] + [str(p.values[3])]
    ['2024-03-01 11:00:00+00:00', '2024-03-01 11:00:00+00:00', '2024-03-01 11:00:00+00:00', 'NaT']
    >>> p.format, p.bad.tolist()
    ('mixed', [False, False, False, True, False])
    """
    text = values.astype("str").str.strip()
    missing = (text.isna() | text.eq("")).to_numpy(dtype=bool)
    present = ~missing
    basic = present & text.str.fullmatch(_BASIC_DATE).fillna(False).to_numpy(dtype=bool)
    year = (present & text.str.fullmatch(_YEAR).fillna(False).to_numpy(dtype=bool)
            if years else np.zeros(len(text), dtype=bool))
    numeric = (present & text.str.fullmatch(_NUMBER).fillna(False).to_numpy(dtype=bool)
               & ~basic & ~year)
    iso = present & ~numeric

    ns = np.full(len(text), np.iinfo(np.int64).min, dtype=np.int64)  # NaT
    kinds: dict[str, int] = {}
    if iso.any():
        sub = text[iso]
        parsed = pd.to_datetime(sub, format="ISO8601", utc=True, errors="coerce")
        ok = parsed.notna() & parsed.between(_LO, _HI)
        ns[np.flatnonzero(iso)[ok.to_numpy()]] = (
            parsed[ok].dt.tz_localize(None).to_numpy("datetime64[ns]").view(np.int64))
        zoned = sub.str.fullmatch(_ZONED).fillna(False)
        date_only = sub.str.fullmatch(_DATE_ONLY).fillna(False)
        naive = int((ok & ~zoned & ~date_only).sum())
        n_dates = int((ok & date_only).sum())
        if ok.any():
            kinds["iso8601"] = int(ok.sum())
    else:
        naive = n_dates = 0
    if numeric.any():
        idx = np.flatnonzero(numeric)
        sub = text[numeric]
        # Whole numbers are scaled in integers: in float64 an epoch in milliseconds times 1e6
        # is off by up to 512 ns, enough to turn ...:01.000 into ...:00.999999.
        whole = sub.str.fullmatch(r"[+-]?[0-9]{1,18}").fillna(False).to_numpy(dtype=bool)
        num = np.zeros(len(sub))
        num[~whole] = sub[~whole].astype("float64").to_numpy()
        ints = np.zeros(len(sub), dtype=np.int64)
        ints[whole] = sub[whole].astype("int64").to_numpy()
        num[whole] = ints[whole]
        mag = np.abs(num)
        lower = 0.0
        for upper, name, factor in _EPOCH_UNITS:
            sel = (mag >= lower) & (mag < upper)
            lower = upper
            if not sel.any():
                continue
            scaled = np.round(num[sel] * factor)
            fits = (scaled > _LO.value) & (scaled < _HI.value)
            out = np.where(fits, scaled, 0).astype(np.int64)
            exact = whole[sel] & fits
            out[exact] = ints[sel][exact] * np.int64(factor)
            ns[idx[sel][fits]] = out[fits]
            if fits.any():
                kinds[name] = int(fits.sum())
    ts = pd.Series(pd.to_datetime(ns, unit="ns", utc=True), index=values.index)
    ts = ts.astype("datetime64[ns, UTC]")
    bad = present & ts.isna().to_numpy()
    return ParsedTimestamps(values=ts, missing=missing, bad=bad,
                            kinds=dict(sorted(kinds.items(), key=lambda kv: -kv[1])),
                            naive=naive, date_only=n_dates)


_ISO_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")


def resolve_as_of(as_of: str | None, latest: pd.Timestamp) -> tuple[pd.Timestamp, str]:
    """The audit date as a UTC instant, and a sentence saying where it came from.

    Parameters
    ----------
    as_of : str or None
        An ISO date (``2024-03-10``: the end of that day, UTC) or datetime (naive = UTC).
        ``None`` means ``latest``.
    latest : pandas.Timestamp
        The latest event time in the log (UTC), used when ``as_of`` is ``None``.

    Returns
    -------
    (pandas.Timestamp, str)
        Events strictly after the instant are out of the audit.

    Raises
    ------
    ConfigError
        If ``as_of`` is not an ISO date or datetime.

    Examples
    --------
    >>> resolve_as_of("2024-03-10", pd.NaT)[0]
    Timestamp('2024-03-10 23:59:59.999999+0000', tz='UTC')
    """
    if as_of is None:
        return latest, f"Audit date: the latest event in the log, {_show(latest)}."
    text = str(as_of).strip()
    if _ISO_DATE.fullmatch(text):
        try:
            day = pd.Timestamp(text, tz="UTC")
        except ValueError:
            day = None
        if day is not None:
            end = (day + pd.Timedelta(days=1) - pd.Timedelta(microseconds=1)).as_unit("ns")
            return end, (f"Audit date (as_of {text}): events after the end of that day "
                         f"({_show(end)}) are set aside.")
    try:
        ts = pd.Timestamp(text)
    except (ValueError, TypeError):
        ts = pd.NaT
    if ts is pd.NaT or pd.isna(ts):
        raise ConfigError(
            f"as_of is {as_of!r}; expected an ISO date such as 2024-03-10 or a datetime such "
            "as 2024-03-10T18:00:00Z. Fix the --as-of option or as_of under [audit]."
        )
    ts = ts.tz_localize("UTC") if ts.tzinfo is None else ts.tz_convert("UTC")
    ts = ts.as_unit("ns")
    return ts, f"Audit date (as_of {text}): events after {_show(ts)} are set aside."


def _show(ts: pd.Timestamp) -> str:
    if pd.isna(ts):
        return "none (no readable timestamp)"
    return ts.strftime("%Y-%m-%d %H:%M:%S UTC")
