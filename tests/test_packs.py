"""Rule packs: built-in and file packs, overrides, validation, shipped rule documentation."""

from __future__ import annotations

import pytest

from catcheck.checks import CHECKS
from catcheck.errors import RulePackError
from catcheck.packs import builtin_packs, find_rule, load_rules


def write(tmp_path, text: str, name: str = "pack.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_builtin_core_pack_is_shipped() -> None:
    assert "core" in builtin_packs()
    ids = [r.id for r in load_rules(["core"])]
    assert "stefan-boltzmann" in ids and "age-range" in ids
    assert len(ids) == len(set(ids))


@pytest.mark.parametrize("rule", load_rules(list(builtin_packs()), enabled_only=False),
                         ids=lambda r: r.id)
def test_every_shipped_rule_is_documented(rule) -> None:
    doc = rule.check.doc
    assert rule.summary and rule.severity in ("error", "warning", "info")
    for text in (doc.what, doc.why, doc.formula, doc.caveats, doc.example):
        assert len(text) > 20
    assert doc.references
    if rule.check.name == "physical_range":
        assert rule.params["min"] < rule.params["max"]
        # a reason for each limit (quoted in messages) and a source (in explain only)
        for key in ("min_reason", "max_reason", "source"):
            assert rule.params[key], key
        assert "from memory" not in rule.params["min_reason"] + rule.params["max_reason"]


def test_override_params_severity_and_disable(tmp_path) -> None:
    pack = write(tmp_path, """
[[rule]]
id = "stefan-boltzmann"
severity = "warning"
[rule.params]
threshold = 8

[[rule]]
id = "age-range"
enabled = false
""")
    rules = {r.id: r for r in load_rules(["core", pack])}
    assert rules["stefan-boltzmann"].severity == "warning"
    assert rules["stefan-boltzmann"].params["threshold"] == 8.0
    assert rules["stefan-boltzmann"].params["floor_dex"] == 0.02  # others keep defaults
    assert "age-range" not in rules


def test_expression_rule_loads(tmp_path) -> None:
    pack = write(tmp_path, """
[pack]
name = "mine"
[[rule]]
id = "hot-red-giant"
severity = "warning"
summary = "red giants are cool"
when = "phase in ('RGB', 'AGB')"
require = "teff < 5800"
message = "{phase} star at {teff:.0f} K"
""")
    (rule,) = load_rules([pack])
    assert rule.pack == "mine" and set(rule.needs) == {"phase", "teff"}


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ('[[rule]]\nid = "x"\ncheck = "stefan_bolzmann"\nsummary = "s"\n',
         "did you mean 'stefan_boltzmann'"),
        ('[[rule]]\nid = "Bad_Id"\ncheck = "stefan_boltzmann"\nsummary = "s"\n', "kebab-case"),
        ('[[rule]]\nid = "x"\ncheck = "stefan_boltzmann"\n', "one-line summary"),
        ('[[rule]]\nid = "x"\ncheck = "stefan_boltzmann"\nsummary = "s"\nseverity = "fatal"\n',
         "severity 'fatal'"),
        ('[[rule]]\nid = "x"\ncheck = "stefan_boltzmann"\nsummary = "s"\n'
         '[rule.params]\nthreshhold = 3\n', "did you mean 'threshold'"),
        ('[[rule]]\nid = "x"\ncheck = "stefan_boltzmann"\nsummary = "s"\n'
         '[rule.params]\nthreshold = "high"\n', "must be a number"),
        ('[[rule]]\nid = "x"\ncheck = "physical_range"\nsummary = "s"\n',
         "missing params"),
        ('[[rule]]\nid = "nothing-before"\nseverity = "warning"\n', "not defined by an earlier"),
        ('[[rule]]\nid = "x"\nsummary = "s"\nrequire = "teff < "\n', "invalid expression"),
        ('[[rule]]\nid = "x"\nsumary = "s"\n', "did you mean 'summary'"),
        ('[rules]\n', "unknown top-level key"),
    ],
)
def test_pack_mistakes(tmp_path, text: str, expected: str) -> None:
    with pytest.raises(RulePackError, match=expected) as info:
        load_rules([write(tmp_path, text)])
    assert info.value.exit_code == 2


def test_redefining_a_rule_is_refused(tmp_path) -> None:
    pack = write(tmp_path, '[[rule]]\nid = "stefan-boltzmann"\ncheck = "stefan_boltzmann"\n'
                 'summary = "again"\n')
    with pytest.raises(RulePackError, match="already defined by pack 'core'"):
        load_rules(["core", pack])


def test_unknown_pack_name() -> None:
    with pytest.raises(RulePackError, match="did you mean 'core'"):
        load_rules(["cor"])


def test_find_rule_suggests() -> None:
    with pytest.raises(RulePackError, match="did you mean 'stefan-boltzmann'"):
        find_rule("stefan-bolzmann", ["core"])


def test_every_check_is_used_by_a_shipped_rule() -> None:
    used = {r.check.name for r in load_rules(list(builtin_packs()), enabled_only=False)}
    assert set(CHECKS) <= used
