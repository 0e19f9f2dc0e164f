"""Reports safe to share: no raw user id unless asked (then salted hashes); config is inert data.

The user ids to look for are read from the sample logs with the standard library (gzip and
csv), independently of the tool; the expected hashes are computed with the stdlib ``hmac``.
"""

from __future__ import annotations

import csv
import gzip
import hashlib
import hmac
import json
import re
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

from advisor.cli import main
from advisor.config import _AUDIT_KEYS, AuditConfig
from advisor.errors import ConfigError
from advisor.report.privacy import SALT_ENV, IdPolicy, hash_id, id_policy, protect_ids
from conftest import SAMPLE_CATALOG, SAMPLE_EVENTS

PLAIN = {"NO_COLOR": "1", "FORCE_COLOR": None, "COLUMNS": None, "TERM": "dumb"}
IMPLAUSIBLE = "u003238"  # the sample's planted implausible account (sample_logs/README.md)
SALT = "correct horse battery staple"
TOKEN = re.compile(rb"[A-Za-z0-9_.-]+")


def _cli(*args, env=None):
    return CliRunner().invoke(main, [str(a) for a in args], env={**PLAIN, **(env or {})})


def _sample_lines() -> dict[str, list[str]]:
    return {p.name: gzip.open(p, "rt", encoding="utf-8").read().splitlines()
            for p in sorted(SAMPLE_EVENTS.glob("*.csv.gz"))}


@pytest.fixture(scope="module")
def sample_users() -> set[str]:
    """Every user id in the sample logs, read with gzip and csv (not with the tool)."""
    users = set()
    for lines in _sample_lines().values():
        users.update(row["user_id"] for row in csv.DictReader(lines) if row["user_id"])
    assert IMPLAUSIBLE in users and len(users) > 1000  # the control: the ids are there
    return users


def _written_tokens(out: Path) -> set[bytes]:
    """Every word-like token in every file the audit wrote (history database included)."""
    found = set()
    for p in out.iterdir():
        found.update(TOKEN.findall(p.read_bytes()))
    return found


@pytest.fixture(scope="module")
def default_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("privacy") / "out"
    result = _cli("audit", SAMPLE_EVENTS, "--catalog", SAMPLE_CATALOG, "--no-backtest",
                  "--out", out, "--quiet")
    assert result.exit_code == 0, result.output
    return out


@pytest.fixture(scope="module")
def hashed_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("privacy") / "hashed"
    result = _cli("audit", SAMPLE_EVENTS, "--catalog", SAMPLE_CATALOG, "--no-backtest",
                  "--out", out, "--quiet", "--user-ids", "hashed", env={SALT_ENV: SALT})
    assert result.exit_code == 0, result.output
    return out


def test_default_reports_name_no_user_id_of_the_sample(default_run, sample_users):
    """By default no written file (JSON, text, HTML, CSVs, history) holds any user id of the
    sample log: not the quarantined rows' users, not the implausible account."""
    leaked = {t.decode() for t in _written_tokens(default_run)} & sample_users
    assert leaked == set()
    quarantined = pd.read_csv(default_run / "quarantine.csv", dtype=str)
    assert len(quarantined) > 0 and "user" not in quarantined and "session" not in quarantined
    # File and line still find each row: the raw line holds the item and time shown.
    lines = _sample_lines()
    for row in quarantined.itertuples():
        raw = next(csv.reader([lines[row.file][int(row.line) - 1]]))
        assert (raw[1], raw[2]) == (row.item, row.ts)


def test_default_reports_say_user_ids_were_left_out(default_run):
    """audit.json records the mode (omit) and audit.txt says what was done and how to ask for
    hashes."""
    doc = json.loads((default_run / "audit.json").read_text(encoding="utf-8"))
    assert doc["privacy"]["user_ids"] == "omit" and doc["privacy"]["method"] is None
    assert doc["privacy"]["columns"] == ["user", "session"]
    text = " ".join((default_run / "audit.txt").read_text(encoding="utf-8").split())
    assert "quarantine.csv leaves out the user and session columns (--user-ids omit)" in text
    assert "--user-ids hashed --salt TEXT" in text


def test_hashed_mode_shows_the_hmac_of_each_quarantined_user(hashed_run, sample_users):
    """--user-ids hashed: each quarantined row's user is HMAC-SHA256(salt, raw id)[:16] as
    the stdlib hmac computes it from the raw line; no raw id and not the salt is written."""
    quarantined = pd.read_csv(hashed_run / "quarantine.csv", dtype=str, keep_default_na=False)
    lines = _sample_lines()
    checked = 0
    for row in quarantined.itertuples():
        raw = next(csv.reader([lines[row.file][int(row.line) - 1]]))
        want = raw[0] and hmac.new(SALT.encode(), raw[0].encode(), hashlib.sha256).hexdigest()
        assert row.user == want[:16]
        checked += bool(raw[0])
    assert checked > 0
    tokens = {t.decode() for t in _written_tokens(hashed_run)}
    assert tokens & sample_users == set()
    for p in hashed_run.iterdir():
        assert SALT.encode() not in p.read_bytes(), p.name
    doc = json.loads((hashed_run / "audit.json").read_text(encoding="utf-8"))
    assert doc["privacy"]["user_ids"] == "hashed" and "salt" not in doc["privacy"]


def test_hashed_without_a_salt_exits_2_saying_how_to_give_one(tmp_path):
    """--user-ids hashed with no --salt and no ADVISOR_ID_SALT is exit 2 before any work."""
    out = tmp_path / "out"
    result = _cli("audit", SAMPLE_EVENTS, "--no-backtest", "--out", out, "--user-ids",
                  "hashed", env={SALT_ENV: None})
    assert result.exit_code == 2, result.output
    message = result.stderr.strip()
    assert message.startswith("error: --user-ids hashed needs a salt")
    assert "--salt TEXT" in message and SALT_ENV in message and "\n" not in message
    assert not out.exists()


def test_user_ids_option_refuses_a_misspelled_mode(tmp_path):
    """A mode other than omit or hashed is a usage error (exit 2) listing the choices."""
    result = _cli("audit", SAMPLE_EVENTS, "--out", tmp_path, "--user-ids", "raw")
    assert result.exit_code == 2 and "'omit', 'hashed'" in result.output


@pytest.mark.parametrize("value", ["u000341", "00123", "\u00fcser 7", str(2**64 + 1), ""])
def test_hash_id_is_hmac_sha256_of_the_salt_truncated_to_16_hex(value):
    """hash_id equals the stdlib hmac HMAC-SHA256 (RFC 2104), first 16 hex digits."""
    want = hmac.new(b"pepper", value.encode("utf-8"), hashlib.sha256).hexdigest()[:16]
    assert hash_id(value, "pepper") == want
    assert hash_id(value, "salt") != want


def test_protect_ids_drops_or_hashes_only_the_id_columns():
    """omit drops user and session; hashed replaces them and keeps missing ids missing."""
    df = pd.DataFrame({"user": ["u1", None, "u1"], "item": ["a", "b", "c"],
                       "session": ["s", "s", None], "_line": [2, 3, 4]})
    assert list(protect_ids(df, IdPolicy()).columns) == ["item", "_line"]
    h = protect_ids(df, IdPolicy("hashed", "k"))
    assert h["user"].iloc[0] == h["user"].iloc[2] == hash_id("u1", "k")
    assert h["user"].isna().tolist() == [False, True, False]
    assert list(h["item"]) == ["a", "b", "c"] and list(df["user"])[0] == "u1"  # a copy


def test_id_policy_takes_the_salt_from_the_option_before_the_environment():
    """An explicit salt wins over ADVISOR_ID_SALT; omit never keeps a salt."""
    assert id_policy("hashed", "given", environ={SALT_ENV: "env"}).salt == "given"
    assert id_policy("hashed", None, environ={SALT_ENV: "env"}).salt == "env"
    assert id_policy("omit", "given").salt is None
    with pytest.raises(ConfigError, match="needs a salt"):
        id_policy("hashed", None, environ={})


# --------------------------------------------------------------- config and rules are data

CODE = "__import__('os').system('touch {marker}')"


def test_code_in_rules_and_config_strings_is_inert_text(tmp_path, monkeypatch):
    """Python code in a rules file's texts and a config file's strings is never run: the
    marker file it would create does not appear, and the text comes back verbatim."""
    marker = tmp_path / "ran"
    code = CODE.format(marker=marker)
    rules = tmp_path / "rules.toml"
    rules.write_text(f'[[rule]]\nid = "np.interactions"\nrationale = "{code}"\n'
                     f'source = "{code}"\nfix = "{code}"\n', encoding="utf-8")
    config = tmp_path / "config.toml"
    config.write_text(f'[events."{code}"]\ncounts = true\n\n[audit]\nas_of = "2026-03-30"\n',
                      encoding="utf-8")
    log = tmp_path / "log.csv"
    log.write_text("user_id,item_id,timestamp,event\n" + "".join(
        f"u{k % 5},i{k % 7},2026-03-{1 + k % 28:02d}T10:00:00Z,{code if k % 2 else 'play'}\n"
        for k in range(30)), encoding="utf-8")
    cwd = tmp_path / "cwd"
    cwd.mkdir()
    monkeypatch.chdir(cwd)
    out = tmp_path / "out"
    result = _cli("audit", log, "--rules", rules, "--config", config, "--no-backtest",
                  "--no-history", "--out", out, "--quiet")
    assert result.exit_code == 0, result.output
    assert not marker.exists()
    doc = json.loads((out / "audit.json").read_text(encoding="utf-8"))
    rule = next(r for t in doc["verdict"]["tiers"] for r in t["rules"]
                if r["rule"] == "np.interactions")
    assert rule["rationale"] == code
    assert any(e["name"] == code for e in doc["run"]["config"]["events"])
    # Nothing was written outside --out: the working folder and tmp_path hold what they did.
    assert list(cwd.iterdir()) == []
    assert {p.name for p in tmp_path.iterdir()} == {"rules.toml", "config.toml", "log.csv",
                                                     "cwd", "out"}


def test_an_expression_where_a_number_belongs_is_refused_not_computed(tmp_path):
    """threshold = "400 + 100" is a string, not arithmetic: exit 2 naming rule and key."""
    rules = tmp_path / "rules.toml"
    rules.write_text('[[rule]]\nid = "np.interactions"\nthreshold = "400 + 100"\n')
    result = _cli("rules", "--rules", rules)
    assert result.exit_code == 2
    assert "rule 'np.interactions': 'threshold' must be a number, got str '400 + 100'" in (
        result.stderr)


#: Every [audit] key, by what its value is. None names a place to write: the output folder
#: and the history database are chosen on the command line only (--out, --history).
AUDIT_KEYS_BY_KIND = {
    "number or switch": {"unmapped_events_count", "history_cap", "confidence",
                         "min_pair_users", "exclude_implausible", "implausible_quantile",
                         "implausible_factor", "max_events_per_hour", "seed", "backtest",
                         "backtest_users", "backtest_sample_users", "threads",
                         "engine_memory_gib"},
    "date": {"as_of"},
    "file that is read": {"rules_file"},
    "engine name": {"engine"},
    # Where Spark runs the counting (local[n], spark://host:port, yarn); nothing is written
    # there by the audit, the aggregates come back to this process.
    "cluster address": {"spark_master"},
}


def test_config_audit_keys_hold_no_write_path(tmp_path):
    """The [audit] keys are exactly the known ones, none a place to write; a new key must be
    classified here (and any write path confined to the output folder) before it ships. The
    one path, rules_file, is only read: a missing file is an error, never created."""
    known = set().union(*AUDIT_KEYS_BY_KIND.values())
    assert set(_AUDIT_KEYS) == known
    assert set(_AUDIT_KEYS) <= set(AuditConfig.__slots__)
    target = tmp_path / "elsewhere" / "rules.toml"
    config = tmp_path / "config.toml"
    config.write_text(f'[audit]\nrules_file = "{target}"\n', encoding="utf-8")
    result = _cli("audit", SAMPLE_EVENTS, "--config", config, "--out", tmp_path / "out")
    assert result.exit_code == 2 and f"rules file {target} not found" in result.stderr
    assert not target.parent.exists() and not (tmp_path / "out").exists()
