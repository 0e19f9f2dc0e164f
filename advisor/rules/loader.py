"""Read the shipped rules file and a user's overrides, checking every key."""

from __future__ import annotations

import sys
from importlib import resources
from pathlib import Path

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

from advisor.errors import RulesError
from advisor.rules.model import MISSING, OPS, SEVERITIES, Rule, RuleSet, Surface, Tier

_RULE_KEYS = {"id", "scope", "metric", "op", "threshold", "borderline", "severity", "missing",
              "rationale", "source", "fix"}
_REQUIRED = ("id", "scope", "metric", "op", "threshold", "severity", "rationale", "source")
_TIER_KEYS = {"id", "name", "summary"}
_SURFACE_KEYS = {"id", "name", "tier"}
_TOP_KEYS = {"schema", "tier", "surface", "rule"}
SCHEMA = 1


def shipped_rules_text() -> str:
    """The text of the rules file shipped with the package."""
    return resources.files("advisor.rules").joinpath("default_rules.toml").read_text("utf-8")


def load_rules(user_file: str | Path | None = None) -> RuleSet:
    """The shipped rules, with a user's rules file applied on top.

    A user rule with a shipped id replaces the given fields of that rule; a new id adds a
    rule. Tiers cannot be added by a user file (their order is part of the tool); surfaces can.

    Raises
    ------
    RulesError
        Naming the file, the rule and the key at fault.
    """
    shipped = _parse(shipped_rules_text(), "shipped rules", origin="shipped", partial=False)
    if user_file is None:
        return shipped
    path = Path(user_file)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise RulesError(f"rules file {path} not found; check the path given to --rules") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise RulesError(f"rules file {path} cannot be read ({exc}); save it as UTF-8") from None
    return merge(shipped, text, str(path))


def merge(base: RuleSet, text: str, where: str) -> RuleSet:
    """Apply the rules TOML ``text`` (from ``where``) on top of ``base``."""
    data = _toml(text, where)
    _keys(data, _TOP_KEYS, where, "the top level")
    if "tier" in data:
        raise RulesError(f"{where}: [[tier]] tables cannot be changed by a rules file; the tier "
                         "ladder is fixed. Remove the [[tier]] tables.")
    rules = {r.id: r for r in base.rules}
    given = set()
    for i, raw in enumerate(_list(data, "rule", where)):
        rid = raw.get("id")
        if not isinstance(rid, str) or not rid:
            raise RulesError(f"{where}: rule #{i + 1} has no 'id'; every rule needs a string id")
        _keys(raw, _RULE_KEYS, where, f"rule '{rid}'")
        if rid in given:
            raise RulesError(f"{where}: rule id '{rid}' appears twice; keep one [[rule]] table "
                             "per id")
        given.add(rid)
        if rid in rules:
            old = rules[rid].to_dict()
            old.update(raw)
            old["origin"] = where
            rules[rid] = _rule(old, where)
        else:
            rules[rid] = _rule({**raw, "origin": where}, where)
    surfaces = {s.id: s for s in base.surfaces}
    for raw in _list(data, "surface", where):
        s = _surface(raw, where)
        surfaces[s.id] = s
    out = RuleSet(base.tiers, tuple(surfaces.values()), tuple(rules.values()))
    _check_scopes(out, where)
    return out


def _parse(text: str, where: str, *, origin: str, partial: bool) -> RuleSet:
    data = _toml(text, where)
    _keys(data, _TOP_KEYS, where, "the top level")
    if data.get("schema") != SCHEMA:
        raise RulesError(f"{where}: schema is {data.get('schema')!r}; expected {SCHEMA}")
    tiers = []
    for raw in _list(data, "tier", where):
        _keys(raw, _TIER_KEYS, where, f"tier '{raw.get('id')}'")
        for k in _TIER_KEYS:
            if not isinstance(raw.get(k), str):
                raise RulesError(f"{where}: tier '{raw.get('id')}': '{k}' must be a string")
        tiers.append(Tier(raw["id"], raw["name"], raw["summary"]))
    surfaces = [_surface(raw, where) for raw in _list(data, "surface", where)]
    rules = []
    for raw in _list(data, "rule", where):
        _keys(raw, _RULE_KEYS, where, f"rule '{raw.get('id')}'")
        rules.append(_rule({**raw, "origin": origin}, where))
    seen = set()
    for r in rules:
        if r.id in seen:
            raise RulesError(f"{where}: rule id '{r.id}' appears twice; ids must be unique")
        seen.add(r.id)
    out = RuleSet(tuple(tiers), tuple(surfaces), tuple(rules))
    _check_scopes(out, where)
    return out


def _toml(text: str, where: str) -> dict:
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise RulesError(f"{where}: not valid TOML ({exc}); fix the syntax") from None


def _list(data: dict, key: str, where: str) -> list[dict]:
    val = data.get(key, [])
    if not isinstance(val, list) or not all(isinstance(v, dict) for v in val):
        raise RulesError(f"{where}: '{key}' must be an array of tables, written [[{key}]]")
    return val


def _keys(table: dict, allowed: set[str], where: str, what: str) -> None:
    for key in table:
        if key not in allowed:
            raise RulesError(f"{where}: {what}: unknown key '{key}'; expected one of: "
                             f"{', '.join(sorted(allowed))}. Fix the spelling or remove it.")


def _surface(raw: dict, where: str) -> Surface:
    _keys(raw, _SURFACE_KEYS, where, f"surface '{raw.get('id')}'")
    for k in _SURFACE_KEYS:
        if not isinstance(raw.get(k), str):
            raise RulesError(f"{where}: surface '{raw.get('id')}': '{k}' must be a string")
    return Surface(raw["id"], raw["name"], raw["tier"])


def _rule(raw: dict, where: str) -> Rule:
    rid = raw.get("id")
    for k in _REQUIRED:
        if raw.get(k) is None:
            raise RulesError(f"{where}: rule '{rid}': missing key '{k}'")
    for k in ("id", "scope", "metric", "rationale", "source"):
        if not isinstance(raw[k], str):
            raise RulesError(f"{where}: rule '{rid}': '{k}' must be a string, got "
                             f"{type(raw[k]).__name__} {raw[k]!r}")
    if raw["op"] not in OPS:
        raise RulesError(f"{where}: rule '{rid}': 'op' is {raw['op']!r}; expected one of "
                         f"{', '.join(OPS)}")
    if raw["severity"] not in SEVERITIES:
        raise RulesError(f"{where}: rule '{rid}': 'severity' is {raw['severity']!r}; expected "
                         f"one of {', '.join(SEVERITIES)}")
    missing = raw.get("missing", "fail")
    if missing not in MISSING:
        raise RulesError(f"{where}: rule '{rid}': 'missing' is {missing!r}; expected one of "
                         f"{', '.join(MISSING)}")
    nums = {}
    for k in ("threshold", "borderline"):
        v = raw.get(k)
        if v is None:
            nums[k] = None
            continue
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise RulesError(f"{where}: rule '{rid}': '{k}' must be a number, got "
                             f"{type(v).__name__} {v!r}")
        nums[k] = float(v)
    t, b = nums["threshold"], nums["borderline"]
    if b is not None and ((raw["op"] in (">=", ">") and b > t) or
                          (raw["op"] in ("<=", "<") and b < t)):
        raise RulesError(f"{where}: rule '{rid}': 'borderline' {b} lies on the passing side of "
                         f"'threshold' {t}; it must be easier to reach than the threshold")
    fix = raw.get("fix", "")
    if not isinstance(fix, str):
        raise RulesError(f"{where}: rule '{rid}': 'fix' must be a string")
    return Rule(rid, raw["scope"], raw["metric"], raw["op"], t, b, raw["severity"], missing,
                raw["rationale"], raw["source"], fix, raw["origin"])


def _check_scopes(rs: RuleSet, where: str) -> None:
    tiers = {t.id for t in rs.tiers}
    scopes = tiers | {s.id for s in rs.surfaces}
    for s in rs.surfaces:
        if s.tier not in tiers:
            raise RulesError(f"{where}: surface '{s.id}': 'tier' is '{s.tier}'; expected one of "
                             f"{', '.join(t.id for t in rs.tiers)}")
    for r in rs.rules:
        if r.scope not in scopes:
            raise RulesError(f"{where}: rule '{r.id}': 'scope' is '{r.scope}'; expected a tier or "
                             f"surface id: {', '.join(sorted(scopes))}")


__all__ = ["load_rules", "merge", "shipped_rules_text"]
