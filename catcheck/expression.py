"""The rule expression language: parse, check against a whitelist, compile to numpy.

A rule pack may write a rule as two expressions and a message template::

    when = "phase in ('RGB', 'AGB')"
    require = "teff < 5800"
    message = "{phase} star at {teff:.0f} K is hotter than the red giant branch allows"

An expression is parsed with :func:`ast.parse` (``mode="eval"``), every node is checked
against a whitelist, and the tree is compiled into a small tree of node objects that call
numpy functions.  Nothing is ever handed to ``eval``, ``exec`` or a bytecode compiler, so a
rule pack from a stranger cannot run code: an expression can only do the operations below,
on the arrays the engine passes in.

The language
------------
- numbers (``5800``, ``1e-3``) and the quantity names the caller allows (``teff``, ``logg``);
- arithmetic ``+ - * / **`` and unary ``-``;
- comparisons ``< <= > >= == !=``, chains such as ``3 < logg < 5``;
- ``and``, ``or``, ``not`` between conditions;
- ``x in (1, 2)`` and ``x not in (1, 2)`` with numbers;
- ``phase == 'MS'``, ``phase != 'WD'``, ``phase in ('RGB', 'AGB')``: text appears only as
  phase codes (:data:`catcheck.quantities.PHASE_CODES`), checked when the rule is compiled;
- the functions ``log10``, ``sqrt``, ``abs`` and ``isnan``, called by name with one argument.

Values are float64 arrays and comparisons follow numpy: any comparison with NaN is False
(so ``!=`` with NaN is True, as in numpy).  The engine skips rows where a referenced
quantity is NaN before it applies a rule, so this rarely matters.

Limits
------
- at most :data:`MAX_LENGTH` characters, :data:`MAX_NODES` expression nodes and
  :data:`MAX_DEPTH` levels of nesting (checked before anything is compiled, so a hostile
  expression cannot exhaust the stack or the memory);
- the exponent of ``**`` must be a constant (a number, or arithmetic on numbers, folded when
  the rule is compiled) with ``|p| <= MAX_EXPONENT``.  An exponent that depends on a quantity
  (``10 ** logg``) is rejected, not clipped: clipping would silently compute a wrong number.

Message templates
-----------------
``str.format``-style templates with bare quantity names and optional format specs
(``"{phase} star at {teff:.0f} K"``).  They are parsed here, not by ``str.format``: no
attribute access, indexing, conversions (``!r``) or nested fields, and widths and
precisions are bounded.  Phase codes render as their code (``RGB``), a missing phase as
``none``, and NaN as ``nan``.
"""

from __future__ import annotations

import ast
import difflib
import re
from collections import deque
from collections.abc import Collection, Iterator, Mapping
from dataclasses import dataclass, field
from functools import reduce
from typing import Any, ClassVar, NoReturn

import numpy as np

from catcheck.quantities import NO_PHASE, PHASE_CODES, PHASE_INDEX, QUANTITIES

MAX_LENGTH = 2000
"""Longest expression or message template, in characters."""

MAX_NODES = 200
"""Most expression nodes (names, numbers, operators, calls) one expression may have."""

MAX_DEPTH = 100
"""Deepest nesting of expression nodes (parentheses alone do not count; a chain
such as ``a + b + c`` nests one level per operator)."""

MAX_EXPONENT = 10.0
"""Largest absolute value of the (constant) exponent of ``**``."""

MAX_FORMAT_NUMBER = 50
"""Largest width or precision in a message format spec."""

MAX_FORMAT_SPEC = 20
"""Longest format spec in a message template, in characters."""

MAX_SHOWN = 76
"""Widest excerpt of an expression shown above the caret of an error."""

# The kind of value a node yields; checked when the expression is compiled.
NUMBER = "number"
CONDITION = "condition"
PHASE = "phase"
TEXT = "text"  # text quantities such as spectral_type (messages only)

FUNCTIONS: dict[str, tuple[np.ufunc, str]] = {
    "abs": (np.absolute, NUMBER),
    "isnan": (np.isnan, CONDITION),
    "log10": (np.log10, NUMBER),
    "sqrt": (np.sqrt, NUMBER),
}
"""The functions an expression may call: name -> (numpy ufunc, kind of result)."""

_BINARY: dict[type[ast.operator], np.ufunc] = {
    ast.Add: np.add,
    ast.Sub: np.subtract,
    ast.Mult: np.multiply,
    ast.Div: np.true_divide,
    ast.Pow: np.power,
}
_COMPARISONS: dict[type[ast.cmpop], np.ufunc] = {
    ast.Lt: np.less,
    ast.LtE: np.less_equal,
    ast.Gt: np.greater,
    ast.GtE: np.greater_equal,
    ast.Eq: np.equal,
    ast.NotEq: np.not_equal,
}
_MEMBERSHIP = (ast.In, ast.NotIn)
_UNARY = (ast.USub, ast.UAdd, ast.Not)
_BOOLEAN = {ast.And: np.logical_and, ast.Or: np.logical_or}

# Node types an expression may contain at all; the compiler checks how they are combined.
_ALLOWED_NODES = (
    ast.BoolOp,
    ast.BinOp,
    ast.UnaryOp,
    ast.Compare,
    ast.Call,
    ast.Name,
    ast.Constant,
    ast.Tuple,
    ast.List,
)
# Nodes checked through their parent (operators and load/store markers have no position).
_CHECKED_BY_PARENT = (ast.expr_context, ast.operator, ast.unaryop, ast.boolop, ast.cmpop)

_FORBIDDEN = {
    ast.Attribute: "attribute access is not allowed",
    ast.Subscript: "subscripts (indexing) are not allowed",
    ast.Slice: "slices are not allowed",
    ast.Lambda: "lambda is not allowed",
    ast.ListComp: "comprehensions are not allowed",
    ast.SetComp: "comprehensions are not allowed",
    ast.DictComp: "comprehensions are not allowed",
    ast.GeneratorExp: "comprehensions are not allowed",
    ast.JoinedStr: "f-strings are not allowed",
    ast.FormattedValue: "f-strings are not allowed",
    ast.NamedExpr: "assignment expressions (:=) are not allowed",
    ast.Starred: "starred arguments (*x) are not allowed",
    ast.keyword: "keyword arguments are not allowed",
    ast.IfExp: "conditional expressions (a if c else b) are not allowed",
    ast.Dict: "dicts are not allowed",
    ast.Set: "sets are not allowed; write values after 'in' in parentheses",
    ast.Await: "await is not allowed",
    ast.Yield: "yield is not allowed",
    ast.YieldFrom: "yield is not allowed",
}
_OPERATOR_SYMBOLS = {
    ast.Mod: "%",
    ast.FloorDiv: "//",
    ast.MatMult: "@",
    ast.LShift: "<<",
    ast.RShift: ">>",
    ast.BitOr: "|",
    ast.BitXor: "^",
    ast.BitAnd: "&",
    ast.Invert: "~",
    ast.Is: "is",
    ast.IsNot: "is",
}
_OPERATORS_HELP = "operators: + - * / ** < <= > >= == != and or not in"
_PHASE_HELP = (
    "phase can only be compared with phase codes, as in phase == 'MS' or "
    "phase in ('RGB', 'AGB')"
)


class ExpressionError(ValueError):
    """A rule expression or message template that cannot be compiled.

    ``text`` is the expression, ``offset`` the 0-based position of the offending part in it
    and ``reason`` what is wrong.  ``str(err)`` shows the line, a caret under the offending
    part, then the reason::

        teff < 5800 and phase.__class__
                             ^
        attribute access is not allowed
    """

    def __init__(self, text: str, offset: int, reason: str) -> None:
        super().__init__(text, offset, reason)
        self.text = text
        self.offset = max(0, min(offset, len(text)))
        self.reason = reason

    def __str__(self) -> str:
        line, caret = self.excerpt()
        return f"{line}\n{caret}\n{self.reason}"

    def excerpt(self, width: int = MAX_SHOWN) -> tuple[str, str]:
        """The line holding the offending part and a caret line pointing at it.

        A line longer than ``width`` characters is cut to a window around the caret, with
        ``...`` where text is left out; characters that are not printable show as ``?``,
        so a rule pack cannot send control sequences to the terminal.
        """
        start = self.text.rfind("\n", 0, self.offset) + 1
        end = self.text.find("\n", self.offset)
        line = self.text[start:] if end < 0 else self.text[start:end]
        column = self.offset - start
        if len(line) > width:
            first = max(0, min(column - width // 2, len(line) - width))
            before = "..." if first else ""
            after = "..." if first + width < len(line) else ""
            line = before + line[first : first + width] + after
            column += len(before) - first
        line = "".join(char if char.isprintable() or char == "\t" else "?" for char in line)
        # Keep tabs so the caret lines up under a line that contains them.
        pad = "".join("\t" if char == "\t" else " " for char in line[:column])
        return line, pad + "^"


# --- compiled nodes -----------------------------------------------------------------------
# Each node's evaluate(env) returns a numpy array (or a numpy scalar for constants).


@dataclass(frozen=True)
class _Constant:
    value: float | bool

    @property
    def kind(self) -> str:
        return CONDITION if isinstance(self.value, bool) else NUMBER

    def evaluate(self, env: Mapping[str, np.ndarray]) -> np.generic:
        return np.bool_(self.value) if isinstance(self.value, bool) else np.float64(self.value)


@dataclass(frozen=True)
class _Quantity:
    name: str
    kind: ClassVar[str] = NUMBER

    def evaluate(self, env: Mapping[str, np.ndarray]) -> np.ndarray:
        return np.asarray(env[self.name], dtype=np.float64)


@dataclass(frozen=True)
class _Phase:
    kind: ClassVar[str] = PHASE

    def evaluate(self, env: Mapping[str, np.ndarray]) -> np.ndarray:
        return np.asarray(env["phase"])


@dataclass(frozen=True)
class _Apply:
    """A numpy ufunc applied to the values of its argument nodes."""

    func: np.ufunc
    args: tuple[_Node, ...]
    kind: str

    def evaluate(self, env: Mapping[str, np.ndarray]) -> np.ndarray:
        return self.func(*(arg.evaluate(env) for arg in self.args))


@dataclass(frozen=True)
class _IsIn:
    """``operand in values`` (or ``not in`` when negate is set)."""

    operand: _Node
    values: tuple[float, ...]
    negate: bool
    kind: ClassVar[str] = CONDITION

    def evaluate(self, env: Mapping[str, np.ndarray]) -> np.ndarray:
        found = np.isin(self.operand.evaluate(env), np.array(self.values))
        return np.logical_not(found) if self.negate else found


_Node = _Constant | _Quantity | _Phase | _Apply | _IsIn


@dataclass(frozen=True)
class Expression:
    """A compiled rule expression.

    ``names`` are the quantities it references (``phase`` included when used); ``boolean``
    tells a condition (``teff < 5800``) from a number (``teff / 1000``); ``required`` are the
    names used outside ``isnan(...)``.
    """

    text: str
    names: frozenset[str]
    boolean: bool
    _root: _Node = field(repr=False, compare=False)
    #: the names used outside ``isnan(...)``: a row missing one of them cannot be judged
    required: frozenset[str] = frozenset()

    def evaluate(self, env: Mapping[str, np.ndarray], *, size: int | None = None) -> np.ndarray:
        """Evaluate over all rows at once.

        ``env`` maps each referenced quantity to a float64 array (``phase`` to an int8 code
        array, :data:`~catcheck.quantities.NO_PHASE` for none); all arrays have one length.
        ``size`` gives the row count when ``env`` is empty (a constant expression).
        Returns a bool array for a condition, a float64 array otherwise, of that length,
        even when the expression is a constant.  Floating-point warnings are suppressed.
        """
        missing = self.names - env.keys()
        if missing:
            raise KeyError(f"no values given for {', '.join(sorted(missing))}")
        lengths = {len(env[name]) for name in (self.names or env)}
        if size is not None:
            lengths.add(size)
        if len(lengths) != 1:
            raise ValueError(
                f"cannot tell the row count: arrays of lengths {sorted(lengths)}"
                if lengths
                else "cannot tell the row count of an empty env; pass size="
            )
        (rows,) = lengths
        with np.errstate(all="ignore"):
            result = np.asarray(self._root.evaluate(env), dtype=bool if self.boolean else float)
        if result.shape != (rows,):
            result = np.full(rows, result, dtype=result.dtype)
        return result


def compile_expression(text: str, allowed_names: Collection[str]) -> Expression:
    """Parse, check and compile one rule expression.

    ``allowed_names`` are the quantity names the expression may use.  Raises
    :class:`ExpressionError` (with the position and the reason) for anything outside the
    language, an unknown name or phase code, a wrong kind of operand (``teff and logg``) or
    an expression over the size limits.
    """
    if not isinstance(text, str):
        raise ExpressionError(repr(text), 0, f"expected an expression, got {type(text).__name__}")
    source = _Source(text)
    if not text.strip():
        raise source.error(0, "the expression is empty")
    if len(text) > MAX_LENGTH:
        raise source.error(
            MAX_LENGTH, f"the expression is {len(text)} characters long; the limit is {MAX_LENGTH}"
        )
    try:
        tree = ast.parse(text[source.start :], mode="eval")
    except SyntaxError as err:
        raise source.syntax_error(err) from None
    except (RecursionError, MemoryError):
        raise source.error(0, "the expression is nested too deeply") from None
    except ValueError as err:  # e.g. null bytes, on some Python versions
        raise source.error(0, str(err)) from None
    _check_nodes(tree, source)
    compiler = _Compiler(source, frozenset(allowed_names))
    try:
        root = compiler.compile(tree.body)
    except RecursionError:
        raise source.error(0, "the expression is nested too deeply") from None
    if root.kind == PHASE:
        raise source.error(0, _PHASE_HELP)
    return Expression(text, frozenset(compiler.names), root.kind == CONDITION, root,
                      frozenset(compiler.required))


# --- parsing helpers ----------------------------------------------------------------------


class _Source:
    """The expression text, and conversion of ``ast`` positions into offsets into it.

    Leading whitespace (from a multi-line TOML string, say) is skipped before parsing;
    ``ast`` columns count UTF-8 bytes, offsets here count characters.
    """

    def __init__(self, text: str) -> None:
        self.text = text
        self.start = len(text) - len(text.lstrip())
        self.line_starts = [self.start] + [
            i + 1 for i, char in enumerate(text) if char == "\n" and i >= self.start
        ]

    def line_start(self, lineno: int) -> int:
        return self.line_starts[min(max(lineno, 1), len(self.line_starts)) - 1]

    def offset(self, lineno: int, byte_col: int) -> int:
        start = self.line_start(lineno)
        end = self.text.find("\n", start)
        line = self.text[start:] if end < 0 else self.text[start:end]
        return start + len(line.encode()[:byte_col].decode(errors="ignore"))

    def start_of(self, node: ast.AST) -> int:
        if not hasattr(node, "lineno"):
            return 0
        return self.offset(node.lineno, node.col_offset)

    def end_of(self, node: ast.AST) -> int:
        return self.offset(node.end_lineno, node.end_col_offset)

    def find(self, symbol: str, after: ast.AST) -> int:
        """Offset of the first ``symbol`` after a node (an operator, a dot, a bracket)."""
        position = self.text.find(symbol, self.end_of(after))
        return position if position >= 0 else self.end_of(after)

    def error(self, where: int | ast.AST, reason: str) -> ExpressionError:
        offset = where if isinstance(where, int) else self.start_of(where)
        return ExpressionError(self.text, offset, reason)

    def syntax_error(self, err: SyntaxError) -> ExpressionError:
        # SyntaxError columns are 1-based characters; 0 or None means "at the end".
        if err.lineno and err.offset and err.offset > 0:
            offset = self.line_start(err.lineno) + err.offset - 1
        else:
            offset = len(self.text)
        return self.error(offset, f"syntax error: {err.msg}")


def _check_nodes(tree: ast.Expression, source: _Source) -> None:
    """Reject any node type outside the whitelist, dunder names, and oversized trees."""
    count = 0
    too_deep: ast.AST | None = None  # reported once every node has passed the other checks
    for node, depth in _breadth_first(tree.body):  # outer nodes before inner ones
        if isinstance(node, _CHECKED_BY_PARENT):
            continue
        if not isinstance(node, _ALLOWED_NODES):
            reason = _FORBIDDEN.get(type(node), f"{type(node).__name__} is not allowed")
            if isinstance(node, ast.Attribute):
                raise source.error(source.find(".", node.value), reason)
            if isinstance(node, ast.Subscript):
                raise source.error(source.find("[", node.value), reason)
            raise source.error(node, reason)
        count += 1
        if count > MAX_NODES:
            raise source.error(node, f"the expression has more than {MAX_NODES} parts")
        if depth > MAX_DEPTH and too_deep is None:
            too_deep = node
        if isinstance(node, ast.Name) and node.id.startswith("__"):
            raise source.error(node, "names starting with '__' are not allowed")
        if isinstance(node, ast.BinOp) and type(node.op) not in _BINARY:
            _reject_operator(node.op, node.left, source)
        if isinstance(node, ast.UnaryOp) and not isinstance(node.op, _UNARY):
            _reject_operator(node.op, node, source)
        if isinstance(node, ast.Compare):
            for op, left in zip(node.ops, [node.left, *node.comparators], strict=False):
                if type(op) not in _COMPARISONS and not isinstance(op, _MEMBERSHIP):
                    _reject_operator(op, left, source)
    if too_deep is not None:
        raise source.error(
            too_deep, f"the expression is nested too deeply (more than {MAX_DEPTH} levels)"
        )


def _breadth_first(root: ast.AST) -> Iterator[tuple[ast.AST, int]]:
    """Every node under ``root`` (itself included) with its depth, outer nodes first."""
    queue = deque([(root, 1)])
    while queue:
        node, depth = queue.popleft()
        yield node, depth
        queue.extend((child, depth + 1) for child in ast.iter_child_nodes(node))


def _reject_operator(op: ast.AST, before: ast.expr, source: _Source) -> NoReturn:
    symbol = _OPERATOR_SYMBOLS.get(type(op), "")
    where = source.start_of(before) if isinstance(op, ast.unaryop) else source.find(symbol, before)
    hint = "; use ** for powers" if isinstance(op, ast.BitXor) else ""
    raise source.error(where, f"operator '{symbol}' is not allowed ({_OPERATORS_HELP}){hint}")


def _suggest(word: str, choices: Collection[str]) -> str:
    """' (did you mean 'x'?)' for a near miss, '' otherwise."""
    close = difflib.get_close_matches(word, sorted(choices), n=3)
    if not close:
        return ""
    return " (did you mean " + " or ".join(repr(c) for c in close) + "?)"


class _Compiler:
    """Turns a whitelisted ``ast`` tree into compiled nodes, checking kinds as it goes."""

    def __init__(self, source: _Source, allowed: frozenset[str]) -> None:
        self.source = source
        self.allowed = allowed
        self.names: set[str] = set()
        self.required: set[str] = set()  # names used outside isnan(...)
        self.testing_nan = 0

    def compile(self, node: ast.expr) -> _Node:
        match node:
            case ast.Constant():
                return self._constant(node)
            case ast.Name():
                return self._name(node)
            case ast.UnaryOp():
                return self._unary(node)
            case ast.BinOp():
                return self._binary(node)
            case ast.BoolOp():
                return self._boolean(node)
            case ast.Compare():
                return self._compare(node)
            case ast.Call():
                return self._call(node)
            case ast.Tuple() | ast.List():
                raise self.source.error(node, "a list of values is only allowed after 'in'")
        raise self.source.error(node, f"{type(node).__name__} is not allowed")

    def expect(self, node: ast.expr, kind: str) -> _Node:
        """Compile ``node`` and check it yields ``kind`` (a number or a condition)."""
        compiled = self.compile(node)
        if compiled.kind == kind:
            return compiled
        if compiled.kind == PHASE:
            raise self.source.error(node, _PHASE_HELP)
        if kind == NUMBER:
            raise self.source.error(node, "expected a number here, not a condition")
        raise self.source.error(
            node, "expected a condition here (a comparison such as teff < 5800), not a number"
        )

    def _constant(self, node: ast.Constant) -> _Constant:
        value = node.value
        if isinstance(value, str):
            raise self.source.error(node, "text is only allowed as a phase code: " + _PHASE_HELP)
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.source.error(node, f"{value!r} is not allowed; only numbers are")
        try:
            return _Constant(float(value))
        except OverflowError:
            raise self.source.error(node, "the number is too large") from None

    def _name(self, node: ast.Name) -> _Quantity | _Phase:
        name = node.id
        if name not in self.allowed:
            if name in FUNCTIONS:
                raise self.source.error(node, f"{name} is a function; call it as {name}(...)")
            known = ", ".join(sorted(self.allowed)) or "none"
            reason = f"unknown quantity '{name}'{_suggest(name, self.allowed)}"
            raise self.source.error(node, f"{reason}; quantities: {known}")
        if name != "phase" and name in QUANTITIES and not QUANTITIES[name].numeric:
            raise self.source.error(node, f"{name} is text; expressions use numbers and phase")
        self.names.add(name)
        if not self.testing_nan:
            self.required.add(name)
        return _Phase() if name == "phase" else _Quantity(name)

    def _unary(self, node: ast.UnaryOp) -> _Node:
        if isinstance(node.op, ast.Not):
            return _apply(np.logical_not, (self.expect(node.operand, CONDITION),), CONDITION)
        operand = self.expect(node.operand, NUMBER)
        return _apply(np.negative, (operand,), NUMBER) if isinstance(node.op, ast.USub) else operand

    def _binary(self, node: ast.BinOp) -> _Node:
        left = self.expect(node.left, NUMBER)
        right = self.expect(node.right, NUMBER)
        if isinstance(node.op, ast.Pow):
            self._check_exponent(node.right, right)
        return _apply(_BINARY[type(node.op)], (left, right), NUMBER)

    def _check_exponent(self, node: ast.expr, exponent: _Node) -> None:
        if not isinstance(exponent, _Constant):
            raise self.source.error(
                node, "the exponent of ** must be a constant number, as in x ** 2"
            )
        if not abs(exponent.value) <= MAX_EXPONENT:  # also catches NaN
            raise self.source.error(
                node,
                f"the exponent must be between -{MAX_EXPONENT:g} and {MAX_EXPONENT:g}; "
                f"got {exponent.value:g}",
            )

    def _boolean(self, node: ast.BoolOp) -> _Node:
        func = _BOOLEAN[type(node.op)]
        values = [self.expect(value, CONDITION) for value in node.values]
        return reduce(lambda a, b: _apply(func, (a, b), CONDITION), values)

    def _compare(self, node: ast.Compare) -> _Node:
        operands = [node.left, *node.comparators]
        if len(node.ops) == 1:
            (op,), (left, right) = node.ops, operands
            if isinstance(op, _MEMBERSHIP):
                return self._membership(left, right, negate=isinstance(op, ast.NotIn))
            if isinstance(op, ast.Eq | ast.NotEq) and _is_phase(right) and not _is_phase(left):
                left, right = right, left  # 'MS' == phase
            if isinstance(op, ast.Eq | ast.NotEq) and _is_phase(left):
                if not isinstance(right, ast.Constant):
                    raise self.source.error(right, _PHASE_HELP)
                return self._membership(left, right, negate=isinstance(op, ast.NotEq))
        for op, left in zip(node.ops, operands, strict=False):
            if isinstance(op, _MEMBERSHIP):
                raise self.source.error(
                    self.source.find("in", left), "'in' cannot be part of a comparison chain"
                )
        compiled = [self.expect(operand, NUMBER) for operand in operands]
        terms = [
            _apply(_COMPARISONS[type(op)], (compiled[i], compiled[i + 1]), CONDITION)
            for i, op in enumerate(node.ops)
        ]
        return reduce(lambda a, b: _apply(np.logical_and, (a, b), CONDITION), terms)

    def _membership(self, left: ast.expr, right: ast.expr, *, negate: bool) -> _Node:
        operand = self.compile(left)
        if isinstance(right, ast.Tuple | ast.List):
            items = right.elts
        elif isinstance(right, ast.Constant):
            items = [right]  # phase in ('RGB') is a string in parentheses, not a tuple
        else:
            raise self.source.error(
                right, "expected values in parentheses after 'in', as in phase in ('RGB', 'AGB')"
            )
        if operand.kind == PHASE:
            values = tuple(float(self._phase_code(item)) for item in items)
        elif operand.kind == NUMBER:
            values = tuple(self._number_value(item) for item in items)
        else:
            raise self.source.error(left, "expected a number or phase before 'in'")
        found = _IsIn(operand, values, negate)
        if isinstance(operand, _Constant):
            return _Constant(bool(found.evaluate({})))
        return found

    def _phase_code(self, node: ast.expr) -> int:
        if not (isinstance(node, ast.Constant) and isinstance(node.value, str)):
            raise self.source.error(node, "expected a phase code such as 'MS'")
        code = node.value
        if code not in PHASE_INDEX:
            upper = code.upper()
            hint = f" (did you mean {upper!r}?)" if upper in PHASE_INDEX else ""
            hint = hint or _suggest(upper, PHASE_CODES)
            valid = ", ".join(PHASE_CODES)
            raise self.source.error(node, f"unknown phase code {code!r}{hint}; codes: {valid}")
        return PHASE_INDEX[code]

    def _number_value(self, node: ast.expr) -> float:
        value = self.compile(node)
        if not (isinstance(value, _Constant) and value.kind == NUMBER):
            raise self.source.error(node, "the values after 'in' must be numbers")
        return value.value

    def _call(self, node: ast.Call) -> _Node:
        functions = ", ".join(sorted(FUNCTIONS))
        if not isinstance(node.func, ast.Name):
            raise self.source.error(node, f"only these functions can be called: {functions}")
        name = node.func.id
        if name not in FUNCTIONS:
            reason = f"unknown function '{name}'{_suggest(name, FUNCTIONS)}"
            raise self.source.error(node.func, f"{reason}; functions: {functions}")
        if len(node.args) != 1:
            raise self.source.error(node, f"{name}() takes exactly one argument")
        func, kind = FUNCTIONS[name]
        self.testing_nan += name == "isnan"
        try:
            return _apply(func, (self.expect(node.args[0], NUMBER),), kind)
        finally:
            self.testing_nan -= name == "isnan"


def _is_phase(node: ast.expr) -> bool:
    return isinstance(node, ast.Name) and node.id == "phase"


def _apply(func: np.ufunc, args: tuple[_Node, ...], kind: str) -> _Node:
    """A node applying ``func``; folded into a constant when every argument is constant."""
    if all(isinstance(arg, _Constant) for arg in args):
        with np.errstate(all="ignore"):
            return _Constant(np.asarray(func(*(arg.value for arg in args))).item())
    return _Apply(func, args, kind)


# --- message templates --------------------------------------------------------------------


@dataclass(frozen=True)
class _Field:
    """One ``{name:spec}`` field of a message template."""

    name: str
    spec: str
    kind: str  # NUMBER, PHASE or TEXT

    def format_column(self, column: Any, rows: np.ndarray) -> list[str]:
        values = np.asarray(column)[rows]
        if self.kind == PHASE:
            return [format(_phase_label(code), self.spec) for code in values.tolist()]
        if self.kind == TEXT:
            return [format(str(value), self.spec) for value in values.tolist()]
        numbers = values.astype(np.float64).tolist()
        return ["nan" if value != value else format(value, self.spec) for value in numbers]


def _phase_label(code: int) -> str:
    return "none" if code == NO_PHASE else PHASE_CODES[code]


@dataclass(frozen=True)
class MessageTemplate:
    """A compiled message template; ``names`` are the quantities it shows."""

    text: str
    names: frozenset[str]
    _parts: tuple[str | _Field, ...] = field(repr=False, compare=False)

    def render(self, values: Mapping[str, np.ndarray], rows: np.ndarray) -> list[str]:
        """One message for each row index in ``rows`` (a boolean mask also works).

        ``values`` maps each name in :attr:`names` to its full-length array, ``phase`` as
        int8 codes.
        """
        rows = np.asarray(rows)
        if rows.dtype == bool:
            rows = np.flatnonzero(rows)
        rows = rows.astype(np.intp, copy=False)
        columns = [[""] * len(rows)]
        for part in self._parts:
            if isinstance(part, str):
                columns.append([part] * len(rows))
            else:
                columns.append(part.format_column(values[part.name], rows))
        return ["".join(pieces) for pieces in zip(*columns, strict=True)]


def compile_message(template: str, allowed_names: Collection[str]) -> MessageTemplate:
    """Parse and check a message template such as ``"{phase} star at {teff:.0f} K"``.

    Fields are bare names from ``allowed_names`` with an optional format spec; ``{{`` and
    ``}}`` are literal braces.  Raises :class:`ExpressionError` for anything else.
    """
    if not isinstance(template, str):
        what = type(template).__name__
        raise ExpressionError(repr(template), 0, f"expected a message, got {what}")
    if len(template) > MAX_LENGTH:
        raise ExpressionError(
            template,
            MAX_LENGTH,
            f"the message is {len(template)} characters long; the limit is {MAX_LENGTH}",
        )
    allowed = frozenset(allowed_names)
    parts: list[str | _Field] = []
    literal: list[str] = []
    i = 0
    while i < len(template):
        char = template[i]
        if char in "{}" and template[i + 1 : i + 2] == char:  # '{{' or '}}'
            literal.append(char)
            i += 2
        elif char == "}":
            raise ExpressionError(template, i, "single '}'; write '}}' for a literal brace")
        elif char == "{":
            end = template.find("}", i)
            if end < 0:
                raise ExpressionError(template, i, "'{' is never closed; write '{{' for a brace")
            if literal:
                parts.append("".join(literal))
                literal = []
            parts.append(_parse_field(template, i + 1, end, allowed))
            i = end + 1
        else:
            literal.append(char)
            i += 1
    if literal:
        parts.append("".join(literal))
    names = frozenset(part.name for part in parts if isinstance(part, _Field))
    return MessageTemplate(template, names, tuple(parts))


def _parse_field(template: str, start: int, end: int, allowed: frozenset[str]) -> _Field:
    """Check the field ``template[start:end]`` (between its braces)."""

    def error(offset: int, reason: str) -> ExpressionError:
        return ExpressionError(template, start + offset, reason)

    body = template[start:end]
    if "{" in body:
        raise error(body.index("{"), "nested {} fields are not allowed")
    name = re.split(r"[!:]", body, maxsplit=1)[0]
    for symbol, reason in ((".", "attribute access"), ("[", "indexing")):
        if symbol in name:
            raise error(name.index(symbol), f"{reason} is not allowed in messages")
    if body[len(name) : len(name) + 1] == "!":
        raise error(len(name), "conversions (!r, !s, !a) are not allowed in messages")
    spec = body[len(name) + 1 :]
    if not name or name.isdigit():
        raise error(0, "name a quantity in each field, as in {teff}")
    if name.startswith("__"):
        raise error(0, "names starting with '__' are not allowed")
    if name not in allowed:
        raise error(0, f"unknown quantity '{name}'{_suggest(name, allowed)}")
    kind = PHASE if name == "phase" else NUMBER
    if name in QUANTITIES and not QUANTITIES[name].numeric and name != "phase":
        kind = TEXT
    spec_offset = len(name) + 1
    if len(spec) > MAX_FORMAT_SPEC:
        raise error(spec_offset, f"the format spec is longer than {MAX_FORMAT_SPEC} characters")
    if any(int(number) > MAX_FORMAT_NUMBER for number in re.findall(r"\d+", spec)):
        raise error(spec_offset, f"widths and precisions are limited to {MAX_FORMAT_NUMBER}")
    try:
        format(1.0 if kind == NUMBER else "RGB", spec)
    except (ValueError, TypeError) as err:
        raise error(spec_offset, f"bad format spec {spec!r} for {name}: {err}") from None
    return _Field(name, spec, kind)
