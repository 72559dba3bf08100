"""A rule pack from a stranger cannot run code, exhaust the machine or garble the terminal.

Each escape is written into a TOML rule pack in ``tmp_path`` and run through the command
line (``catcheck check ... --rules rules.toml``), as a CI job would.  Every attempt must
end with exit code 2, a one-line reason naming the pack, the rule and the key (then at
most the expression excerpt and a caret line), no traceback, no report, and no canary
file: the attempts that would create ``pwned`` if any of their text were run as Python
do create it when handed to ``eval`` (the control test below), and do not here.

The expression language is parsed against a whitelist (:mod:`catcheck.expression`); these
tests exercise that from the outside, through the pack loader and the CLI.
"""

from __future__ import annotations

import ast
import builtins
import json
from pathlib import Path

import numpy as np
import pytest
from factory import forbid_running_text, sun_like, write_catalogue

import catcheck
from catcheck.cli import main
from catcheck.errors import EXIT_USAGE
from catcheck.packs import load_rules

CANARY = "pwned"

# name -> (key, text); CANARY in the text is replaced by the canary file's path
ESCAPES: dict[str, tuple[str, str]] = {
    "import-os-system": ("require", "__import__('os').system('touch CANARY')"),
    "import-in-when": ("when", "__import__('os').system('touch CANARY') or teff > 0"),
    "class-bases": ("require", "().__class__.__bases__[0].__subclasses__()"),
    "attribute-on-quantity": ("require", "teff.__class__.__init__.__globals__"),
    "attribute-on-function": ("require", "log10.__self__"),
    "open": ("require", "open('CANARY', 'w')"),
    "open-after-valid-part": ("require", "teff < 1e6 or open('CANARY', 'w')"),
    "list-comprehension": ("require", "[open('CANARY', 'w') for _ in (1,)]"),
    "generator": ("require", "sqrt(open('CANARY', 'w') for _ in (1,)) > 0"),
    "set-comprehension": ("require", "{open('CANARY', 'w') for _ in (1,)}"),
    "lambda": ("require", "(lambda: open('CANARY', 'w'))() is None"),
    "eval": ("require", "eval(\"open('CANARY', 'w')\")"),
    "exec": ("when", "exec(\"open('CANARY', 'w')\")"),
    "getattr": ("require", "getattr(teff, '__class__')"),
    "f-string": ("require", "f\"{open('CANARY', 'w')}\" == 'x'"),
    "walrus": ("require", "(f := open('CANARY', 'w'))"),
    "conditional": ("require", "teff if open('CANARY', 'w') else logg"),
    "keyword-argument": ("require", "log10(teff, out=open('CANARY', 'w')) > 0"),
    "starred-argument": ("require", "log10(*open('CANARY', 'w')) > 0"),
    "subscript": ("require", "teff[0] < 1"),
    "dunder-name": ("when", "__builtins__"),
    "string-as-code": ("require", "phase == \"__import__('os').system('touch CANARY')\""),
    "string-in-membership": ("require", "phase in ('MS', \"open('CANARY', 'w')\")"),
    "huge-exponent": ("require", "10 ** 1e9 > teff"),
    "power-tower": ("require", "2 ** 2 ** 2 ** 2 ** 2 > teff"),
    "exponent-from-data": ("require", "10 ** teff > 1"),
    "huge-integer": ("require", "teff < " + "9" * 5000),
    "deep-parentheses": ("require", "(" * 300 + "teff" + ")" * 300 + " > 1"),
    "deep-nesting": ("require", "-" * 150 + "teff < 1"),
    "deep-calls": ("require", "abs(" * 120 + "teff" + ")" * 120 + " > 1"),
    "megabyte-expression": ("require", "teff + " * 150_000 + "1 > 0"),
    "null-byte": ("require", "teff < 1\x00 or open('CANARY', 'w')"),
    "terminal-escape": ("require", "teff < \x1b[2J\x1b[31m 1"),
    "message-attribute": ("message", "{teff.__class__}"),
    "message-globals": ("message", "{0.__globals__}"),
    "message-index": ("message", "{teff[0]}"),
    "message-conversion": ("message", "{teff!r}"),
    "message-nested-field": ("message", "{teff:{teff}}"),
    "message-huge-width": ("message", "{teff:>999999999}"),
    "message-huge-precision": ("message", "{teff:.99999f}"),
    "message-dunder": ("message", "{__import__}"),
    "message-positional": ("message", "{0}"),
    "message-unknown-name": ("message", "{os}"),
    "message-megabyte": ("message", "x" * 1_000_000),
}


def pack_text(key: str, text: str) -> str:
    """A pack with one expression rule whose ``key`` is ``text`` (the others valid)."""
    entry = {"when": "teff > 0", "require": "teff < 1e9", "message": "{teff:.0f} K", key: text}
    lines = ["[[rule]]", 'id = "escape"', 'summary = "an escape attempt"']
    lines += [f"{name} = {json.dumps(value)}" for name, value in entry.items()]
    return "\n".join(lines) + "\n"  # JSON strings are valid TOML basic strings


@pytest.fixture
def catalogue(tmp_path: Path) -> Path:
    return write_catalogue(tmp_path, sun_like(20))


@pytest.mark.parametrize(("key", "text"), ESCAPES.values(), ids=ESCAPES.keys())
def test_escape_through_a_rule_pack_is_refused_and_nothing_runs(
        key: str, text: str, tmp_path: Path, catalogue: Path,
        capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("CATCHECK_DEBUG", raising=False)
    monkeypatch.chdir(tmp_path)  # a relative canary path would land here too
    canary = tmp_path / CANARY
    pack = tmp_path / "rules.toml"
    pack.write_text(pack_text(key, text.replace("CANARY", str(canary))), encoding="utf-8")
    out = tmp_path / "report"
    with pytest.raises(SystemExit) as exited:
        main(["check", str(catalogue), "--profile", str(tmp_path / "profile.toml"),
              "--rules", "core", "--rules", str(pack), "--out", str(out)])
    err = capsys.readouterr().err
    assert exited.value.code == EXIT_USAGE, err
    assert not canary.exists() and not out.exists()
    lines = err.splitlines()
    assert 1 <= len(lines) <= 3, err[:2000]
    assert lines[0].startswith("catcheck: error: ") and "Traceback" not in err
    assert f"{pack}: [[rule]] id='escape', {key}: invalid" in lines[0]
    assert all(len(line) <= 400 for line in lines), [len(line) for line in lines]
    assert all(char.isprintable() for char in err.replace("\n", "")), repr(err[:400])


def test_the_canary_would_catch_code_that_runs(tmp_path: Path) -> None:
    """Control: handed to Python, the attempts do create the canary file."""
    for name in ("import-os-system", "open", "list-comprehension"):
        canary = tmp_path / f"{CANARY}-{name}"
        result = builtins.eval(ESCAPES[name][1].replace("CANARY", str(canary)))
        for handle in (result if isinstance(result, list) else [result]):
            if hasattr(handle, "close"):
                handle.close()
        assert canary.exists(), name


def test_a_valid_expression_pack_loads_and_runs_without_eval_exec_or_bytecode(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Loading a pack compiles expressions without eval, exec or a bytecode compiler."""
    pack = tmp_path / "rules.toml"
    pack.write_text(pack_text("require", "3 < log10(teff) < 4.5 and phase in ('MS', 'RGB')"),
                    encoding="utf-8")
    forbid_running_text(monkeypatch)
    (rule,) = load_rules([pack])
    monkeypatch.undo()
    frame = sun_like(12)
    frame.loc[[0, 1], "Teff"] = [50_000.0, 900.0]  # log10 outside (3, 4.5)
    write_catalogue(tmp_path, frame)
    result = catcheck.check_frame(frame, tmp_path / "profile.toml", [pack], fail_on="none")
    flagged = result.flags.loc[result.flags["rule"] == rule.id, "row"]
    expected = frame.index[~((np.log10(frame["Teff"]) > 3) & (np.log10(frame["Teff"]) < 4.5))]
    assert sorted(flagged) == sorted(expected) and {0, 1} <= set(flagged)


def test_no_catcheck_module_runs_text_as_code() -> None:
    """No module calls eval, exec, compile or __import__: there is no path from pack text
    to the interpreter."""
    banned = {"eval", "exec", "compile", "__import__"}
    for path in sorted(Path(catcheck.__file__).parent.rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
                assert node.func.id not in banned, f"{path}:{node.lineno} {node.func.id}"

