"""What the report files may say about people: user ids are left out, or replaced by salted hashes.

Reports travel by e-mail and chat, so by default no file lists a raw user id. The only report
that holds per-row identifiers is the quarantine file; its ``user`` and ``session`` columns
(a session id is tied to one person as closely as the user id) are either left out (the
default: the file and line still locate each row in the input) or replaced by keyed hashes
when the person running the audit asks for them, so that rows of the same account can be
grouped without naming it.
"""

from __future__ import annotations

import hashlib
import hmac
import os
from dataclasses import dataclass

import pandas as pd

from advisor.errors import ConfigError

__all__ = ["ID_COLUMNS", "MODES", "SALT_ENV", "IdPolicy", "hash_id", "id_policy",
           "protect_ids"]

#: How user ids may appear in reports.
MODES = ("omit", "hashed")

#: Environment variable read for the salt when ``--salt`` is not given.
SALT_ENV = "ADVISOR_ID_SALT"

#: Columns of row-level reports that identify a person.
ID_COLUMNS = ("user", "session")

#: Hex digits kept of each HMAC (64 bits: collisions are unlikely below about 10**9 ids).
HASH_DIGITS = 16


def hash_id(value: str, salt: str) -> str:
    """A keyed, truncated hash of one id: HMAC-SHA256 with ``salt`` as the key.

    Parameters
    ----------
    value : str
        The raw id, exactly as read (ids are opaque strings).
    salt : str
        The secret key; the same salt gives the same hash, so rows of one account stay
        grouped across files and weeks.

    Returns
    -------
    str
        The first 16 hexadecimal digits of ``HMAC-SHA256(key=salt, msg=value)`` (UTF-8).

    Notes
    -----
    A keyed hash, not a plain one: without the salt nobody can hash candidate ids and match
    them, which a plain SHA-256 of a short numeric id would allow in seconds. Truncated to
    64 bits: by the birthday bound two of ``n`` ids collide with probability about
    ``n**2 / 2**65`` (under 3% for a billion ids). Pseudonymous, not anonymous: whoever holds
    the salt and the raw log can link a hash back to its account.

    References
    ----------
    Krawczyk, Bellare and Canetti (1997), "HMAC: Keyed-Hashing for Message Authentication",
    RFC 2104.

    Examples
    --------
    >>> hash_id("u000341", "pepper")
    'e50887f723fe86c4'
    >>> hash_id("u1", "a") == hash_id("u1", "b")
    False
    """
    return hmac.new(salt.encode("utf-8"), str(value).encode("utf-8"),
                    hashlib.sha256).hexdigest()[:HASH_DIGITS]


@dataclass(frozen=True, slots=True)
class IdPolicy:
    """How user ids are shown in the report files."""

    mode: str = "omit"
    """``omit`` (id columns left out) or ``hashed`` (replaced by HMAC-SHA256 of the salt)."""
    salt: str | None = None
    """Key of the hashes (``hashed`` only); never written to any report."""

    def __post_init__(self) -> None:
        if self.mode not in MODES:
            raise ConfigError(f"--user-ids must be one of {', '.join(MODES)}, got "
                              f"{self.mode!r}")
        if self.mode == "hashed" and not self.salt:
            raise ConfigError(
                "--user-ids hashed needs a salt (the key of the hashes): give --salt TEXT or "
                f"set the environment variable {SALT_ENV}; keep it secret and reuse it so "
                "that hashes stay comparable between audits.")

    @property
    def note(self) -> str:
        """One sentence for the reports saying what was done with the ids."""
        cols = " and ".join(ID_COLUMNS)
        if self.mode == "omit":
            return (f"quarantine.csv leaves out the {cols} columns (--user-ids omit); file and "
                    "line locate each row in the input. Use --user-ids hashed --salt TEXT to "
                    "group rows by account without naming it.")
        return (f"quarantine.csv shows the {cols} columns as salted hashes (--user-ids "
                f"hashed: HMAC-SHA256 keyed with the salt, first {HASH_DIGITS} hex digits); "
                "the salt is not written anywhere.")

    def to_dict(self) -> dict:
        """The policy for the JSON report: the mode and what it did, never the salt."""
        return {
            "user_ids": self.mode,
            "columns": list(ID_COLUMNS),
            "method": None if self.mode == "omit"
            else f"HMAC-SHA256 keyed with a salt, first {HASH_DIGITS} hex digits",
            "note": self.note,
        }


def id_policy(mode: str = "omit", salt: str | None = None, *,
              environ: dict | None = None) -> IdPolicy:
    """The policy asked for on the command line; the salt falls back to ``ADVISOR_ID_SALT``.

    Raises
    ------
    ConfigError
        If ``mode`` is unknown, or ``hashed`` is asked for without a salt.

    Examples
    --------
    >>> id_policy().mode, id_policy("hashed", environ={"ADVISOR_ID_SALT": "s"}).salt
    ('omit', 's')
    """
    env = os.environ if environ is None else environ
    if mode == "hashed" and not salt:
        salt = env.get(SALT_ENV) or None
    return IdPolicy(mode=mode, salt=salt if mode == "hashed" else None)


def protect_ids(frame: pd.DataFrame, policy: IdPolicy) -> pd.DataFrame:
    """A copy of ``frame`` whose id columns are dropped (``omit``) or hashed (``hashed``).

    Missing ids stay missing (a row set aside for an empty user id has nothing to hide).

    Examples
    --------
    >>> df = pd.DataFrame({"user": ["u1", None], "item": ["a", "b"]})
    >>> list(protect_ids(df, IdPolicy()).columns)
    ['item']
    >>> protect_ids(df, IdPolicy("hashed", "s"))["user"].isna().tolist()
    [False, True]
    """
    present = [c for c in ID_COLUMNS if c in frame.columns]
    if policy.mode == "omit":
        return frame.drop(columns=present)
    out = frame.copy()
    for col in present:
        out[col] = pd.Series(
            [None if v is None or v is pd.NA or (isinstance(v, float) and v != v)
             else hash_id(v, policy.salt) for v in out[col].tolist()],
            index=out.index, dtype="str")
    return out
