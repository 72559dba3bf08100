"""Rule packs: TOML files of rules, built-in by name or given by path.

Several packs may be loaded in order.  A later pack may override an earlier rule by id,
changing its ``severity`` or ``params`` or disabling it with ``enabled = false``; giving a
new ``check`` or expression for an existing id is an error.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from catcheck import toml as tomllib
from catcheck.canonical import StarBatch
from catcheck.checks import CHECKS
from catcheck.checks.base import Check, Documentation, Outcome, Params
from catcheck.errors import RulePackError
from catcheck.profile import did_you_mean
from catcheck.quantities import QUANTITIES

SEVERITIES = ("error", "warning", "info")
SEVERITY_RANK = {"info": 0, "warning": 1, "error": 2}
DEFAULT_PACKS = ("core", "evolution", "clusters", "units")

_RULE_ID = re.compile(r"^[a-z][a-z0-9]*(-[a-z0-9]+)*$")
_PACK_KEYS = ("name", "description")
_DOC_KEYS = ("why", "caveats", "example", "references")
_RULE_KEYS = ("id", "check", "severity", "summary", "params", "enabled", "when", "require",
              "message", *_DOC_KEYS)


@dataclass(frozen=True)
class Rule:
    """A configured check: id, severity, one-line summary and params."""

    id: str
    check: Check
    severity: str
    summary: str
    params: dict[str, Any] = field(default_factory=dict)
    pack: str = ""
    enabled: bool = True

    @property
    def needs(self) -> tuple[str, ...]:
        """The canonical quantities this rule reads (the profile must map them)."""
        return self.check.needs(self.params)

    @property
    def row_needs(self) -> tuple[str, ...]:
        """The quantities a row must have for the rule to judge it; others are skipped."""
        if self.check.row_needs is None:
            return self.needs
        return self.check.row_needs(self.params)


def builtin_pack_dir() -> Path:
    """Where the built-in packs live: inside the installed package, or the source tree."""
    installed = Path(__file__).parent / "packs"
    return installed if installed.is_dir() else Path(__file__).parent.parent / "rules"


def builtin_packs() -> dict[str, Path]:
    """Built-in pack names and their files."""
    return {p.stem: p for p in sorted(builtin_pack_dir().glob("*.toml"))}


def load_rules(packs: Sequence[str | Path] = DEFAULT_PACKS, enabled_only: bool = True
               ) -> list[Rule]:
    """Load packs in order, apply overrides, and return the (enabled) rules."""
    rules: dict[str, Rule] = {}
    for pack in packs:
        path = _pack_path(pack)
        for entry in _read_pack(path):
            _add_entry(rules, entry, path)
    return [rule for rule in rules.values() if rule.enabled or not enabled_only]


def find_rule(rule_id: str, packs: Sequence[str | Path]) -> Rule:
    """The rule with this id in the given packs (each pack read on its own)."""
    known: dict[str, Rule] = {}
    for pack in packs:
        for rule in load_rules([pack], enabled_only=False):
            known.setdefault(rule.id, rule)
    if rule_id not in known:
        raise RulePackError(f"no rule {rule_id!r}", fix=did_you_mean(rule_id, known)
                            or "run 'catcheck rules' to list them")
    return known[rule_id]


def _pack_path(pack: str | Path) -> Path:
    known = builtin_packs()
    if str(pack) in known:
        return known[str(pack)]
    path = Path(pack)
    if path.suffix == ".toml" or path.exists():
        if not path.is_file():
            raise RulePackError("rule pack file not found", where=str(path),
                                fix=f"built-in packs are: {', '.join(known)}")
        return path
    hint = did_you_mean(str(pack), known)
    raise RulePackError(f"unknown rule pack {str(pack)!r}",
                        fix=hint or f"built-in packs are: {', '.join(known)}; or give a path")


def _read_pack(path: Path) -> list[dict[str, Any]]:
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise RulePackError(f"cannot read the rule pack: {exc}", where=str(path)) from None
    except tomllib.TOMLDecodeError as exc:
        raise RulePackError(f"not valid TOML: {exc}", where=str(path)) from None
    for key in data:
        if key not in ("pack", "rule"):
            raise RulePackError(f"unknown top-level key {key!r}", where=str(path),
                                fix=did_you_mean(key, ("pack", "rule"))
                                or "a pack has [pack] and [[rule]] entries")
    header = data.get("pack", {})
    if not isinstance(header, Mapping):
        raise RulePackError("[pack] must be a table", where=str(path))
    for key in header:
        if key not in _PACK_KEYS:
            raise RulePackError(f"unknown key {key!r} in [pack]", where=str(path),
                                fix=did_you_mean(key, _PACK_KEYS) or "use name, description")
    entries = data.get("rule", [])
    if not isinstance(entries, list) or not all(isinstance(e, Mapping) for e in entries):
        raise RulePackError("rules must be [[rule]] tables", where=str(path))
    name = str(header.get("name", path.stem))
    return [dict(entry, _pack=name) for entry in entries]


def _add_entry(rules: dict[str, Rule], entry: dict[str, Any], path: Path) -> None:
    rule_id = entry.get("id")
    where = f"{path}: [[rule]] id={rule_id!r}"
    if not isinstance(rule_id, str) or not _RULE_ID.match(rule_id):
        raise RulePackError(f"rule id {rule_id!r} is missing or not kebab-case", where=where,
                            fix='write id = "lower-case-words-with-dashes"')
    for key in entry:
        if key not in _RULE_KEYS and key != "_pack":
            raise RulePackError(f"unknown key {key!r}", where=where,
                                fix=did_you_mean(key, _RULE_KEYS)
                                or f"rule keys are: {', '.join(_RULE_KEYS)}")
    defines = any(k in entry for k in ("check", "when", "require"))
    if rule_id in rules:
        extra = [k for k in entry if k not in ("id", "severity", "params", "enabled", "_pack")]
        if extra and not defines:
            raise RulePackError(f"an override can change severity, params or enabled only, "
                                f"not {', '.join(extra)}", where=where,
                                fix="define a new rule with its own id instead")
        if defines:
            raise RulePackError(
                f"rule {rule_id!r} is already defined by pack {rules[rule_id].pack!r}",
                where=where, fix="to change it give only severity, params or enabled")
        rules[rule_id] = _override(rules[rule_id], entry, where)
        return
    if not defines:
        home = next((name for name in builtin_packs() if name != path.stem and any(
            e.get("id") == rule_id for e in _read_pack(builtin_packs()[name]))), None)
        fix = (f"it is a rule of the built-in pack {home!r}: name that pack before this file, "
               f"e.g. --rules {home} --rules {path}" if home
               else did_you_mean(rule_id, rules)
               or 'give check = "..." or when/require expressions to define it')
        raise RulePackError(f"rule {rule_id!r} is not defined by an earlier pack", where=where,
                            fix=fix)
    rules[rule_id] = _define(rule_id, entry, where)


def _define(rule_id: str, entry: Mapping[str, Any], where: str) -> Rule:
    summary = entry.get("summary")
    if not isinstance(summary, str) or not summary:
        raise RulePackError("every rule needs a one-line summary", where=where,
                            fix='add summary = "what the rule checks"')
    if "check" in entry:
        name = entry["check"]
        if name not in CHECKS:
            raise RulePackError(f"unknown check {name!r}", where=where,
                                fix=did_you_mean(str(name), CHECKS)
                                or f"checks are: {', '.join(CHECKS)}")
        if any(k in entry for k in ("when", "require", "message")):
            raise RulePackError("a rule has either check or when/require, not both",
                                where=where, fix="remove one")
        check = CHECKS[name]
    else:
        check = _expression_check(entry, where)
    rule = Rule(rule_id, check, "error", summary, dict(check.defaults), str(entry["_pack"]))
    return _override(rule, entry, where)


def _override(rule: Rule, entry: Mapping[str, Any], where: str) -> Rule:
    severity = entry.get("severity", rule.severity)
    if severity not in SEVERITIES:
        raise RulePackError(f"severity {severity!r} is not one of {', '.join(SEVERITIES)}",
                            where=where, fix=did_you_mean(str(severity), SEVERITIES)
                            or 'write severity = "error"')
    enabled = entry.get("enabled", rule.enabled)
    if not isinstance(enabled, bool):
        raise RulePackError("enabled must be true or false", where=where)
    params = entry.get("params", {})
    if not isinstance(params, Mapping):
        raise RulePackError("params must be a table", where=where, fix="write [rule.params]")
    merged = dict(rule.params)
    for key, value in params.items():
        if key not in merged:
            raise RulePackError(f"unknown param {key!r} for check {rule.check.name!r}",
                                where=where, fix=did_you_mean(key, merged)
                                or f"params are: {', '.join(merged) or 'none'}")
        merged[key] = _param_value(key, value, merged[key], where)
    missing = [k for k, v in merged.items() if isinstance(v, type)]
    if missing:
        raise RulePackError(f"missing params: {', '.join(missing)}", where=where,
                            fix="add them under [rule.params]")
    needs = rule.check.needs(merged)
    unknown = [q for q in needs if q not in QUANTITIES]
    if unknown:
        raise RulePackError(f"unknown quantity {unknown[0]!r}", where=where,
                            fix=did_you_mean(unknown[0], QUANTITIES) or "see catcheck.quantities")
    return replace(rule, severity=severity, enabled=enabled, params=merged)


def _param_value(key: str, value: Any, default: Any, where: str) -> Any:
    """``value`` checked against the type of ``default`` (a type itself when required)."""
    kind = default if isinstance(default, type) else type(default)
    if kind in (int, float):
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise RulePackError(f"param {key!r} must be a number, got {value!r}", where=where)
        return float(value)
    if not isinstance(value, kind):
        raise RulePackError(f"param {key!r} must be {kind.__name__}, got {value!r}",
                            where=where)
    return value


def _references(value: Any, where: str) -> tuple[str, ...]:
    """A pack's ``references``: one string or a list of strings."""
    if isinstance(value, str):
        return (value,)
    if isinstance(value, list) and all(isinstance(v, str) for v in value):
        return tuple(value)
    raise RulePackError("references must be a string or a list of strings", where=where)


def _expression_check(entry: Mapping[str, Any], where: str) -> Check:
    """A check built from a rule's ``when``/``require``/``message`` expressions."""
    from catcheck.expression import ExpressionError, compile_expression, compile_message

    names = [n for n in QUANTITIES if n != "spectral_type"]
    if "require" not in entry:
        raise RulePackError("an expression rule needs require = \"...\"", where=where,
                            fix='e.g. require = "teff < 5800"')
    default_message = f"row fails: {entry['require']}".replace("{", "{{").replace("}", "}}")
    compiled: dict[str, Any] = {}
    for key, compile_text, default in (("when", compile_expression, "1 == 1"),
                                       ("require", compile_expression, None),
                                       ("message", compile_message, default_message)):
        try:
            compiled[key] = compile_text(entry.get(key, default), names)
        except ExpressionError as exc:  # the reason on the line, the text and a caret below
            kind = "message template" if key == "message" else "expression"
            raise RulePackError(f"invalid {kind}: {exc.reason}", where=f"{where}, {key}",
                                detail="\n".join(exc.excerpt())) from None
    when, require, message = compiled["when"], compiled["require"], compiled["message"]
    for key, expression in (("when", when), ("require", require)):
        if not expression.boolean:
            raise RulePackError(f"{key} = {expression.text!r} is a number, not a condition",
                                where=f"{where}, {key}",
                                fix=f"compare it, e.g. {key} = \"teff < 5800\"")
    needed = tuple(sorted(when.names | require.names | message.names))
    # a value tested with isnan() may be missing; so may one shown only in the message
    judged = tuple(sorted(when.required | require.required))

    def evaluate(batch: StarBatch, params: Params) -> Outcome:
        env = batch.environment()
        with np.errstate(all="ignore"):
            applies = when.evaluate(env, size=batch.size)
            failed = applies & ~require.evaluate(env, size=batch.size)
        return Outcome(failed, lambda rows: message.render(env, rows), applies=applies)

    doc = Documentation(
        what=f"Rows where `{entry.get('when', 'always')}` must satisfy `{entry['require']}`.",
        why=str(entry.get("why", "(not documented by the pack)")),
        formula=f"when: {entry.get('when', 'always')}\nrequire: {entry['require']}",
        caveats=str(entry.get("caveats", "(not documented by the pack)")),
        example=str(entry.get("example", "(none given)")),
        references=_references(entry.get("references", []), where),
    )
    return Check("expression", lambda params: needed, evaluate, doc, {}, uses_errors=False,
                 row_needs=lambda params: judged)
