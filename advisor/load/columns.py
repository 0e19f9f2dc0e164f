"""Map a file's column names onto the canonical log and catalogue fields.

A column named by the user (option or config file) always wins; the remaining fields are
looked up in a list of common names. Names are compared after folding case and dropping
everything but letters and digits, so ``User ID``, ``user_id`` and ``userId`` are the same.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence

from advisor.errors import ConfigError, LogFormatError
from advisor.load.model import CATALOG_FIELDS, LOG_FIELDS, ColumnDetection

__all__ = [
    "CATALOG_CANDIDATES",
    "LOG_CANDIDATES",
    "detect_catalog_columns",
    "detect_log_columns",
    "fold_name",
]

#: Common source names per canonical log field, in priority order (the first match wins).
#: Names are compared folded (see :func:`fold_name`), so ``userid`` and ``UserId`` match
#: ``user_id``.
LOG_CANDIDATES: dict[str, tuple[str, ...]] = {
    "user": (
        "user", "user_id", "uid", "customer", "customer_id", "member", "member_id",
        "account", "account_id", "visitor", "visitor_id", "subscriber_id", "profile_id",
        "client_id", "person_id", "reader_id", "listener_id", "viewer_id", "student_id",
    ),
    "item": (
        "item", "item_id", "product", "product_id", "sku", "content", "content_id",
        "movie_id", "track_id", "song_id", "title_id", "asset_id", "video_id", "book_id",
        "isbn", "article_id", "course_id", "class_id", "episode_id", "show_id", "program_id",
        "programme_id", "offer_id", "listing_id", "post_id", "game_id", "app_id", "media_id",
        "iid",
    ),
    "ts": (
        "timestamp", "ts", "time", "event_time", "event_timestamp", "datetime",
        "date", "created_at", "occurred_at", "event_date", "logged_at",
        "unix_time", "epoch",
    ),
    "event": (
        "event", "event_type", "event_name", "action", "action_type",
        "interaction", "interaction_type", "activity", "type", "behavior", "behaviour",
    ),
    "value": (
        "value", "rating", "score", "stars", "progress", "watch_fraction", "completion",
        "percent_watched", "amount", "price", "revenue",
    ),
    "session": ("session", "session_id", "visit_id"),
}

#: Common source names per canonical catalogue field, most specific first.
CATALOG_CANDIDATES: dict[str, tuple[str, ...]] = {
    "item": LOG_CANDIDATES["item"] + ("id",),
    "title": ("title", "name", "item_name", "item_title", "product_name", "product_title",
              "display_name", "label"),
    "categories": ("categories", "category", "genres", "genre", "tags", "tag", "section",
                   "topics", "topic"),
    "added": ("added", "date_added", "added_at", "added_on", "created_at", "available_from",
              "released", "release_date", "published", "published_at", "publish_date",
              "launch_date", "first_seen"),
    "rating": ("rating", "avg_rating", "average_rating", "mean_rating", "score", "stars"),
    "rating_count": ("rating_count", "num_ratings", "ratings_count", "n_ratings",
                     "number_of_ratings", "vote_count", "votes", "review_count", "num_reviews"),
}

_LOG_OPTIONS = {f: f"--{f}-col" for f in LOG_FIELDS}

_FOLD = re.compile(r"[^0-9a-z]+")


def fold_name(name: str) -> str:
    """Fold a column name for comparison: lower case, letters and digits only.

    Examples
    --------
    >>> fold_name(" User ID") == fold_name("user_id") == fold_name("userId")
    True
    """
    return _FOLD.sub("", name.lower())


def _delimiter_hint(header: Sequence[str]) -> str:
    # One column whose name holds a separator usually means the file uses another delimiter.
    if len(header) == 1:
        for sep, what in ((";", "semicolons"), ("\t", "tabs"), (",", "commas"), ("|", "pipes")):
            if sep in header[0]:
                return (f" The header looks separated by {what}: save the file with commas "
                        "(.csv) or tabs (.tsv).")
    return ""


def _detect(
    header: Sequence[str],
    *,
    given: Mapping[str, str],
    candidates: Mapping[str, tuple[str, ...]],
    fields: Sequence[str],
    required: Sequence[str],
    source: str,
    how_to_name: Mapping[str, str],
) -> ColumnDetection:
    header = [str(h) for h in header]
    found = ", ".join(repr(h) for h in header) or "(none)"
    mapping: dict[str, str] = {}
    seen: dict[str, str] = {}
    for field in fields:
        col = given.get(field)
        if col is None:
            continue
        if col not in header:
            raise LogFormatError(
                f"{source}: the {field} column was given as {col!r}, but the file has no such "
                f"column; columns found: {found}. Fix the name ({how_to_name[field]}); "
                "names are case-sensitive."
            )
        if col in seen:
            raise ConfigError(
                f"{source}: column {col!r} was given for both {seen[col]} and {field}; "
                "each field needs its own column."
            )
        mapping[field] = col
        seen[col] = field
    detected: list[str] = []
    folded = [(fold_name(h), h) for h in header]
    for field in fields:
        if field in mapping:
            continue
        for name in candidates.get(field, ()):
            key = fold_name(name)
            hit = next((h for f, h in folded if f == key and h not in seen), None)
            if hit is not None:
                mapping[field] = hit
                seen[hit] = field
                detected.append(field)
                break
    missing = [f for f in required if f not in mapping]
    if missing:
        fixes = "; ".join(f"{f}: {how_to_name[f]}" for f in missing)
        raise LogFormatError(
            f"{source}: no column found for {', '.join(missing)}; columns found: {found}. "
            f"Name the column(s) explicitly ({fixes}).{_delimiter_hint(header)}"
        )
    unused = tuple(h for h in header if h not in seen)
    return ColumnDetection(mapping=mapping, detected=tuple(detected), unused=unused)


def detect_log_columns(
    header: Sequence[str], *, given: Mapping[str, str], source: str
) -> ColumnDetection:
    """Map a log file's header onto ``user``, ``item``, ``ts``, ``event``, ``value``, ``session``.

    Parameters
    ----------
    header : sequence of str
        Column names as they appear in the file.
    given : mapping
        Canonical field -> column name named by the user (``LogColumns.given()``); these win.
    source : str
        File name, for messages.

    Returns
    -------
    ColumnDetection
        The mapping, the fields that were auto-detected, and the columns left unused.

    Raises
    ------
    LogFormatError
        If a given column is not in the file, or ``user``, ``item`` or ``ts`` cannot be found.
    ConfigError
        If one column is given for two fields.

    Notes
    -----
    Candidates are tried in the order of :data:`LOG_CANDIDATES`; a column is used for at most
    one field. The lists are common practice, no published source.

    Examples
    --------
    >>> d = detect_log_columns(["UserId", "movieId", "timestamp", "rating"], given={},
    ...                        source="a.csv")
    >>> d.mapping
    {'user': 'UserId', 'item': 'movieId', 'ts': 'timestamp', 'value': 'rating'}
    """
    how = {f: f"option {_LOG_OPTIONS[f]} or {f} = \"...\" under [columns] in the config file"
           for f in LOG_FIELDS}
    return _detect(header, given=given, candidates=LOG_CANDIDATES, fields=LOG_FIELDS,
                   required=("user", "item", "ts"), source=source, how_to_name=how)


def detect_catalog_columns(
    header: Sequence[str], *, given: Mapping[str, str], source: str
) -> ColumnDetection:
    """Map a catalogue file's header onto ``item``, ``title``, ``categories``, ``added``,
    ``rating``, ``rating_count``.

    Parameters
    ----------
    header : sequence of str
        Column names as they appear in the file.
    given : mapping
        Canonical field -> column name named by the user (``CatalogColumns.given()``).
    source : str
        File name, for messages.

    Returns
    -------
    ColumnDetection

    Raises
    ------
    LogFormatError
        If a given column is not in the file, or no item column can be found.

    Notes
    -----
    Common names, common practice, no published source. ``id`` is accepted as the item
    column of a catalogue (not of a log, where it is ambiguous).

    Examples
    --------
    >>> detect_catalog_columns(["movieId", "title", "genres"], given={},
    ...                        source="items.csv").mapping
    {'item': 'movieId', 'title': 'title', 'categories': 'genres'}
    """
    how = {f: f"{f} = \"...\" under [catalog.columns] in the config file"
           for f in CATALOG_FIELDS}
    return _detect(header, given=given, candidates=CATALOG_CANDIDATES, fields=CATALOG_FIELDS,
                   required=("item",), source=source, how_to_name=how)
