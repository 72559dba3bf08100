"""Tests of the rule expression language (catcheck/expression.py).

Two halves: the language does what a rule author expects (arithmetic, comparisons, phase
codes, NaN, messages), and it cannot be used to run code (each escape attempt is rejected
when the rule is compiled, and a canary file proves nothing ran).
"""

from __future__ import annotations

import ast
import builtins
import pickle
import sys
import warnings
from pathlib import Path

import numpy as np
import pytest
from factory import forbid_running_text

import catcheck.expression as expression
from catcheck.expression import (
    MAX_DEPTH,
    MAX_LENGTH,
    MAX_NODES,
    Expression,
    ExpressionError,
    compile_expression,
    compile_message,
)
from catcheck.quantities import NO_PHASE, NUMERIC_QUANTITIES, PHASE_CODES, PHASE_INDEX

NAMES = (*NUMERIC_QUANTITIES, "phase")


def code(*labels: str | None) -> np.ndarray:
    """Phase code array as the engine passes it: int8, NO_PHASE for None."""
    return np.array([NO_PHASE if x is None else PHASE_INDEX[x] for x in labels], dtype=np.int8)


ENV = {
    "teff": np.array([5000.0, 6000.0, np.nan, 3500.0]),
    "logg": np.array([2.5, 4.4, 3.0, 0.8]),
    "radius": np.array([10.0, 1.0, 4.0, 400.0]),
    "phase": code("RGB", "MS", None, "AGB"),
}


def run(text: str, env: dict[str, np.ndarray] = ENV) -> np.ndarray:
    return compile_expression(text, NAMES).evaluate(env)


def rejected(text: str, names=NAMES) -> ExpressionError:
    with pytest.raises(ExpressionError) as info:
        compile_expression(text, names)
    return info.value


# --- the language -------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("teff + 1", [5001.0, 6001.0, np.nan, 3501.0]),
        ("teff - 2 * logg", [4995.0, 5991.2, np.nan, 3498.4]),
        ("teff / 1000", [5.0, 6.0, np.nan, 3.5]),
        ("-logg", [-2.5, -4.4, -3.0, -0.8]),
        ("+logg", [2.5, 4.4, 3.0, 0.8]),
        ("radius ** 2", [100.0, 1.0, 16.0, 160000.0]),
        ("radius ** -1", [0.1, 1.0, 0.25, 0.0025]),
        ("radius ** (1 / 2)", [10**0.5, 1.0, 2.0, 20.0]),
        ("2 ** 3 ** 2 + 0 * logg", [512.0] * 4),  # ** is right-associative
        ("-radius ** 2", [-100.0, -1.0, -16.0, -160000.0]),  # as in Python: -(r ** 2)
        ("(1 + 2) * logg", [7.5, 13.2, 9.0, 2.4]),
    ],
)
def test_arithmetic(text: str, expected: list[float]) -> None:
    result = run(text)
    assert result.dtype == np.float64
    np.testing.assert_allclose(result, expected, rtol=1e-12)


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("teff < 5800", [True, False, False, True]),
        ("teff <= 5000", [True, False, False, True]),
        ("teff > 5000", [False, True, False, False]),
        ("teff >= 5000", [True, True, False, False]),
        ("teff == 6000", [False, True, False, False]),
        ("teff != 6000", [True, False, True, True]),  # NaN != x is True, as in numpy
        ("3 < logg < 5", [False, True, False, False]),
        ("2.5 <= logg <= 3.0", [True, False, True, False]),
        ("3000 < teff < 5500 < 6000", [True, False, False, True]),
        ("logg * 1000 < teff", [True, True, False, True]),
    ],
)
def test_comparisons_and_chains(text: str, expected: list[bool]) -> None:
    result = run(text)
    assert result.dtype == bool
    assert result.tolist() == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("teff < 5800 and logg < 3", [True, False, False, True]),
        ("teff > 5800 or logg < 1", [False, True, False, True]),
        ("not teff < 5800", [False, True, True, False]),
        ("not (logg > 2 and radius < 5)", [True, False, False, True]),
        ("teff < 4000 or logg > 4 and radius < 2", [False, True, False, True]),  # and first
        ("logg > 1 and logg < 4 and radius > 5", [True, False, False, False]),
    ],
)
def test_boolean_logic(text: str, expected: list[bool]) -> None:
    assert run(text).tolist() == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("phase in ('RGB', 'AGB')", [True, False, False, True]),
        ("phase not in ('RGB', 'AGB')", [False, True, True, False]),
        ("phase in ['MS']", [False, True, False, False]),
        ("phase in ('MS')", [False, True, False, False]),  # a string in parentheses
        ("phase in ()", [False] * 4),
        ("phase == 'MS'", [False, True, False, False]),
        ("'MS' == phase", [False, True, False, False]),
        ("phase != 'MS'", [True, False, True, True]),  # no phase is not 'MS'
        ("phase in ('RGB', 'AGB') and teff < 4000", [False, False, False, True]),
        ("teff in (5000, 3500)", [True, False, False, True]),
        ("teff not in (5000, 3500)", [False, True, True, False]),
        ("logg in (2.5, -1 + 5.4)", [True, True, False, False]),
    ],
)
def test_membership_and_phase_codes(text: str, expected: list[bool]) -> None:
    assert run(text).tolist() == expected


def test_every_phase_code_compiles_to_its_index() -> None:
    env = {"phase": np.arange(len(PHASE_CODES), dtype=np.int8)}
    for index, label in enumerate(PHASE_CODES):
        assert np.flatnonzero(run(f"phase == '{label}'", env)).tolist() == [index]


def test_unknown_phase_code_lists_the_valid_codes() -> None:
    err = rejected("phase in ('RGB', 'rgb')")
    assert err.offset == 17
    assert "unknown phase code 'rgb' (did you mean 'RGB'?)" in err.reason
    assert ", ".join(PHASE_CODES) in err.reason


def test_functions() -> None:
    np.testing.assert_allclose(run("log10(radius)"), [1.0, 0.0, np.log10(4.0), np.log10(400.0)])
    np.testing.assert_allclose(run("sqrt(radius)"), [10**0.5, 1.0, 2.0, 20.0])
    np.testing.assert_allclose(run("abs(logg - 3)"), [0.5, 1.4, 0.0, 2.2])
    assert run("isnan(teff)").tolist() == [False, False, True, False]
    assert run("not isnan(teff) and log10(teff) > 3.6").tolist() == [True, True, False, False]


def test_nan_compares_false_and_warnings_are_suppressed() -> None:
    env = {"teff": np.array([np.nan, 0.0, -1.0]), "logg": np.array([1.0, 0.0, 2.0])}
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # any numpy RuntimeWarning would fail the test
        assert run("teff < 1 or teff > 1 or teff == 1", env).tolist() == [False, True, True]
        assert np.isnan(run("log10(teff)", env)[[0, 2]]).all()
        assert run("log10(teff)", env)[1] == -np.inf
        assert run("1 / teff", env)[1] == np.inf
        assert np.isnan(run("sqrt(teff)", env)[2])


@pytest.mark.parametrize(
    ("text", "dtype", "value"),
    [
        ("1 < 2", bool, True),
        ("not 1 < 2", bool, False),
        ("2 ** 3 + 1", np.float64, 9.0),
        ("log10(1000)", np.float64, 3.0),
        ("1 in (1, 2)", bool, True),
    ],
)
def test_constant_expressions_broadcast_to_the_row_count(text, dtype, value) -> None:
    expr = compile_expression(text, NAMES)
    assert expr.names == frozenset()
    result = expr.evaluate(ENV)
    assert result.dtype == dtype
    assert result.shape == (4,)
    assert (result == value).all()
    result[0] = not value  # a fresh writable array, not a broadcast view
    assert expr.evaluate({}, size=3).shape == (3,)


def test_expression_attributes() -> None:
    expr = compile_expression("teff < 5800 and phase in ('RGB',)", NAMES)
    assert isinstance(expr, Expression)
    assert expr.names == frozenset({"teff", "phase"})
    assert expr.boolean
    assert not compile_expression("log10(teff) - logg", NAMES).boolean
    assert compile_expression("log10(teff) - logg", NAMES).names == {"teff", "logg"}
    assert pickle.loads(pickle.dumps(expr)).evaluate(ENV).tolist() == [True, False, False, False]


def test_leading_whitespace_and_newlines_inside_parentheses() -> None:
    assert run("\n    teff < 5800\n").tolist() == [True, False, False, True]
    assert run("(teff < 5800\n and logg < 3)").tolist() == [True, False, False, True]


def test_evaluate_checks_its_input() -> None:
    expr = compile_expression("teff < logg", NAMES)
    with pytest.raises(KeyError, match="logg"):
        expr.evaluate({"teff": np.zeros(2)})
    with pytest.raises(ValueError, match="row count"):
        expr.evaluate({"teff": np.zeros(2), "logg": np.zeros(3)})
    with pytest.raises(ValueError, match="row count"):
        compile_expression("1 < 2", NAMES).evaluate({})


@pytest.mark.parametrize(
    ("text", "offset", "reason"),
    [
        ("teff and logg", 0, "expected a condition"),
        ("not teff", 4, "expected a condition"),
        ("teff + (logg > 3)", 8, "expected a number"),
        ("isnan(teff) < 3", 0, "expected a number"),
        ("phase + 1", 0, "phase can only be compared with phase codes"),
        ("phase", 0, "phase can only be compared with phase codes"),
        ("phase == logg", 9, "phase can only be compared with phase codes"),
        ("phase == ('MS', 'RGB')", 9, "phase can only be compared with phase codes"),
        ("phase == 3", 9, "expected a phase code"),
        ("teff == 'MS'", 8, "text is only allowed as a phase code"),
        ("teff in ('MS',)", 9, "text is only allowed as a phase code"),
        ("teff in (logg, 1)", 9, "values after 'in' must be numbers"),
        ("teff in logg", 8, "expected values in parentheses"),
        ("1 < teff in (1, 2)", 9, "'in' cannot be part of a comparison chain"),
        ("teff < True", 7, "True is not allowed"),
        ("teff < None", 7, "None is not allowed"),
        ("teff < 1j", 7, "only numbers"),
        ("teff < 1" + "0" * 400, 7, "too large"),
        ("(teff, logg)", 0, "only allowed after 'in'"),
        ("tef < 5800", 0, "unknown quantity 'tef' (did you mean 'teff'?)"),
        ("spectral_type == 'G2V'", 0, "spectral_type is text"),
        ("sqrt < 2", 0, "sqrt is a function"),
        ("lg10(teff)", 0, "unknown function 'lg10' (did you mean 'log10'?)"),
        ("teff(3)", 0, "unknown function 'teff'"),
        ("log10(teff, 10)", 0, "takes exactly one argument"),
        ("sqrt()", 0, "takes exactly one argument"),
        ("teff % 2", 5, "operator '%' is not allowed"),
        ("teff // 2", 5, "operator '//' is not allowed"),
        ("teff ^ 2", 5, "use ** for powers"),
        ("~teff", 0, "operator '~' is not allowed"),
        ("teff is 1", 5, "operator 'is' is not allowed"),
        ("teff < ", 7, "syntax error"),
        ("   ", 0, "empty"),
    ],
)
def test_compile_errors(text: str, offset: int, reason: str) -> None:
    names = (*NAMES, "spectral_type")
    err = rejected(text, names)
    assert (err.offset, err.text) == (offset, text)
    assert reason in err.reason


def test_error_rendering_puts_the_caret_under_the_problem() -> None:
    err = rejected("teff < 5800 and phase.__class__")
    assert str(err) == (
        "teff < 5800 and phase.__class__\n"
        "                     ^\n"
        "attribute access is not allowed"
    )
    err = rejected("logg < 3 and tef > 5")
    assert str(err).splitlines()[:2] == ["logg < 3 and tef > 5", "             ^"]
    # Offsets count characters, though ast counts UTF-8 bytes.
    err = rejected("'é' == 'é' or teff.real")
    assert str(err).splitlines()[1] == " " * 18 + "^"
    # On a second line, the caret is under that line.
    err = rejected("(teff < 5800 and\n logg ** 11)")
    assert str(err).splitlines()[:2] == [" logg ** 11)", "         ^"]
    assert isinstance(err, ValueError)
    assert pickle.loads(pickle.dumps(err)).offset == err.offset


# --- limits -------------------------------------------------------------------------------


def test_exponents_must_be_small_constants() -> None:
    assert run("radius ** 10")[1] == 1.0
    assert run("radius ** -10")[1] == 1.0
    assert rejected("radius ** 10.5").offset == 10
    assert "between -10 and 10; got 1e+06" in rejected("teff ** 1000000").reason
    assert rejected("teff ** -11").offset == 8
    err = rejected("teff ** logg")
    assert err.offset == 8
    assert err.reason == "the exponent of ** must be a constant number, as in x ** 2"
    assert "must be a constant" in rejected("2 ** (teff * 0)").reason
    err = rejected("9**9**9")  # the inner 9**9 is fine and folds to 387420489
    assert err.offset == 3
    assert "got 3.87420e+08" in err.reason or "got 3.8742e+08" in err.reason


def test_size_limits() -> None:
    assert "the limit is 2000" in rejected("teff + " * 300 + "1").reason
    compile_expression(" " * (MAX_LENGTH - 4) + "teff", NAMES)  # exactly at the limit
    assert f"more than {MAX_NODES} parts" in rejected("1 + " * 150 + "teff").reason
    compile_expression(" + ".join(["teff"] * 100), NAMES)  # 199 nodes
    assert f"more than {MAX_NODES} parts" in rejected(" + ".join(["teff"] * 101)).reason


@pytest.mark.parametrize(
    "text",
    [
        "(" * 900 + "teff" + ")" * 900,
        "[" * 900 + "teff" + "]" * 900,
        "-" * 1995 + "teff",
        "not " * 495 + "teff",
        "log10(" * 280 + "teff" + ")" * 280,
    ],
    ids=["parentheses", "brackets", "minus", "not", "calls"],
)
def test_deep_nesting_is_an_expression_error(text: str) -> None:
    assert len(text) <= MAX_LENGTH
    rejected(text)


def test_recursion_error_in_the_parser_becomes_an_expression_error(monkeypatch) -> None:
    def overflow(*args, **kwargs):
        raise RecursionError("maximum recursion depth exceeded")

    monkeypatch.setattr(expression.ast, "parse", overflow)
    assert rejected("teff").reason == "the expression is nested too deeply"


def test_recursion_error_in_the_compiler_becomes_an_expression_error() -> None:
    depth = 0
    frame = sys._getframe()
    while frame is not None:
        depth, frame = depth + 1, frame.f_back
    limit = sys.getrecursionlimit()
    sys.setrecursionlimit(depth + 100)  # far fewer frames than 99 nested minus signs need
    try:
        err = rejected("-" * (MAX_DEPTH - 1) + "teff")  # within MAX_DEPTH: reaches the compiler
    finally:
        sys.setrecursionlimit(limit)
    assert err.reason == "the expression is nested too deeply"


# --- escape attempts: rejected at compile time, and nothing ran ---------------------------

ESCAPES = {
    "import-os-system": "__import__('os').system('touch FILE')",
    "open": "open('FILE', 'w')",
    "open-in-logic": "teff < 1 or open('FILE', 'w')",
    "subclasses": "().__class__.__bases__[0].__subclasses__()",
    "subclasses-open": "[c for c in ().__class__.__base__.__subclasses__()][0]('FILE', 'w')",
    "lambda": "(lambda: open('FILE', 'w'))()",
    "list-comprehension": "[open('FILE', 'w') for _ in (1,)]",
    "generator": "sqrt(open('FILE', 'w') for _ in (1,))",
    "attribute-on-name": "teff.__class__",
    "attribute-chain": "log10.__globals__['__builtins__']['open']('FILE', 'w')",
    "subscript": "teff[0]",
    "keyword-args": "log10(teff, out=open('FILE', 'w'))",
    "starred": "log10(*open('FILE', 'w'))",
    "double-starred": "log10(**{'x': open('FILE', 'w')})",
    "f-string": "f\"{open('FILE', 'w')}\"",
    "walrus": "(f := open('FILE', 'w'))",
    "conditional": "teff if open('FILE', 'w') else logg",
    "set": "{open('FILE', 'w')}",
    "dict": "{1: open('FILE', 'w')}",
    "eval": "eval(\"open('FILE', 'w')\")",
    "exec": "exec(\"open('FILE', 'w')\")",
    "getattr": "getattr(teff, '__class__')",
    "dunder-name": "__builtins__",
    "power-tower": "9**9**9",
    "huge-exponent": "10 ** 100000000",
    "very-long": "teff + " * 400 + "len(open('FILE', 'w').name)",
    "deep-parentheses": "(" * 500 + "open('FILE', 'w')" + ")" * 500,
    "deep-minus": "-" * 1700 + "open('FILE', 'w')",
}


@pytest.mark.parametrize("attempt", ESCAPES.values(), ids=ESCAPES.keys())
def test_escape_attempts_are_rejected_and_nothing_runs(attempt: str, tmp_path: Path) -> None:
    canary = tmp_path / "pwned"
    with pytest.raises(ExpressionError):
        expr = compile_expression(attempt.replace("FILE", str(canary)), NAMES)
        expr.evaluate(ENV)  # never reached; here so that a leak would also run
    assert not canary.exists()


def test_the_canary_would_catch_code_that_runs(tmp_path: Path) -> None:
    """Control: the same text handed to Python's eval does create the file."""
    canary = tmp_path / "pwned"
    builtins.eval(ESCAPES["open"].replace("FILE", str(canary))).close()
    assert canary.exists()


def test_compiling_and_evaluating_never_calls_eval_exec_or_a_bytecode_compiler(
    monkeypatch,
) -> None:
    forbid_running_text(monkeypatch)
    expr = compile_expression("3 < logg < 5 and phase in ('MS',) or sqrt(teff) > 75", NAMES)
    assert expr.evaluate(ENV).tolist() == [False, True, False, False]
    message = compile_message("{phase} at {teff:.0f} K", NAMES)
    assert message.render(ENV, np.array([1])) == ["MS at 6000 K"]


def test_the_module_holds_no_dynamic_code_execution() -> None:
    tree = ast.parse(Path(expression.__file__).read_text())
    banned = {"eval", "exec", "compile", "__import__", "getattr", "setattr", "globals", "vars"}
    for node in ast.walk(tree):
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
            assert node.func.id not in banned, node.func.id
        if isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute):
            assert node.func.attr not in {"format", "format_map"}, "str.format on user text"


# --- message templates --------------------------------------------------------------------


def test_message_rendering() -> None:
    message = compile_message(
        "{phase} star at {teff:.0f} K is hotter than the red giant branch allows", NAMES
    )
    assert message.names == frozenset({"phase", "teff"})
    assert message.render(ENV, np.array([0, 3])) == [
        "RGB star at 5000 K is hotter than the red giant branch allows",
        "AGB star at 3500 K is hotter than the red giant branch allows",
    ]


def test_message_nan_missing_phase_specs_and_braces() -> None:
    message = compile_message("{{{phase:>4}}} teff={teff:,.1f} logg={logg} R={radius:.2e}", NAMES)
    assert message.render(ENV, np.array([2, 1])) == [
        "{none} teff=nan logg=3.0 R=4.00e+00",
        "{  MS} teff=6,000.0 logg=4.4 R=1.00e+00",
    ]
    mask = np.array([False, True, False, False])
    assert message.render(ENV, mask) == message.render(ENV, np.array([1]))
    assert message.render(ENV, np.array([], dtype=int)) == []
    assert compile_message("", NAMES).render(ENV, np.array([0, 1])) == ["", ""]
    plain = compile_message("no fields", NAMES)
    assert plain.names == frozenset()
    assert plain.render(ENV, np.array([0])) == ["no fields"]


def test_message_text_quantities_render_as_text() -> None:
    message = compile_message("type {spectral_type:<5}|", ("spectral_type",))
    values = {"spectral_type": np.array(["G2V", "K1III"], dtype=object)}
    assert message.render(values, np.array([1, 0])) == ["type K1III|", "type G2V  |"]


@pytest.mark.parametrize(
    ("template", "offset", "reason"),
    [
        ("{teff.__class__}", 5, "attribute access is not allowed"),
        ("at {teff[0]}", 8, "indexing is not allowed"),
        ("{teff!r}", 5, "conversions (!r, !s, !a) are not allowed"),
        ("{teff!s:>10}", 5, "conversions"),
        ("{teff:{width}}", 6, "nested {} fields are not allowed"),
        ("{teff:>{width}.2f}", 7, "nested {} fields are not allowed"),
        ("{0}", 1, "name a quantity"),
        ("{}", 1, "name a quantity"),
        ("{__class__}", 1, "names starting with '__'"),
        ("{tef} K", 1, "unknown quantity 'tef' (did you mean 'teff'?)"),
        ("{teff:.0d}", 6, "bad format spec '.0d' for teff"),
        ("{phase:.0f}", 7, "bad format spec '.0f' for phase"),
        ("{teff:1000000000}", 6, "limited to 50"),
        ("{teff:.999999999f}", 6, "limited to 50"),
        ("{teff:" + ">" * 30 + "}", 6, "longer than 20"),
        ("ends }", 5, "single '}'"),
        ("{teff", 0, "never closed"),
        ("x" * (MAX_LENGTH + 1), MAX_LENGTH, "the limit is 2000"),
    ],
)
def test_message_errors(template: str, offset: int, reason: str) -> None:
    with pytest.raises(ExpressionError) as info:
        compile_message(template, NAMES)
    assert info.value.offset == offset
    assert reason in info.value.reason


def test_message_error_rendering() -> None:
    with pytest.raises(ExpressionError) as info:
        compile_message("{phase} star at {teff.__class__}", NAMES)
    assert str(info.value) == (
        "{phase} star at {teff.__class__}\n"
        "                     ^\n"
        "attribute access is not allowed in messages"
    )
