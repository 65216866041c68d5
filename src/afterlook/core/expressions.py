"""The expression language of derived features and transforms.

Grammar (a strict subset of Python's expression syntax):

* numbers, column names, backtick-quoted column names (```flow rate```);
* ``+ - * / **``, unary ``-`` and ``+``, parentheses;
* functions ``log log1p sqrt abs exp`` (one argument), ``min max`` (two or
  more, element-wise) and ``clip(x, lo, hi)``.

The text is parsed with :mod:`ast` and every node is checked against a
whitelist before anything is evaluated; nothing is ever passed to ``eval``.
Evaluation is vectorised numpy on float64 arrays. Division by zero, log or
sqrt of values outside the domain, and overflow give NaN rather than an
exception or an infinity: callers count the NaN rows and report them.
"""

from __future__ import annotations

import ast
import keyword
import warnings
import difflib
import re
from dataclasses import dataclass, field
from typing import Callable, Mapping

import numpy as np

from .errors import AfterlookError

MAX_LENGTH = 2000  # characters; a derived feature is a formula, not a program
MAX_DEPTH = 60  # nesting depth of the syntax tree

_UNARY_FUNCTIONS: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "log": np.log,
    "log1p": np.log1p,
    "sqrt": np.sqrt,
    "abs": np.abs,
    "exp": np.exp,
}
_VARIADIC_FUNCTIONS = {"min": np.minimum, "max": np.maximum}  # NaN propagates
FUNCTIONS = tuple(sorted([*_UNARY_FUNCTIONS, *_VARIADIC_FUNCTIONS, "clip"]))

_BINARY_OPS = {
    ast.Add: np.add,
    ast.Sub: np.subtract,
    ast.Mult: np.multiply,
    ast.Div: np.divide,
    ast.Pow: np.power,
}
_BINARY_SYMBOLS = {ast.Add: "+", ast.Sub: "-", ast.Mult: "*", ast.Div: "/", ast.Pow: "**"}
_PRECEDENCE = {ast.Add: 1, ast.Sub: 1, ast.Mult: 2, ast.Div: 2, ast.Pow: 4}

_BACKTICK = re.compile(r"`([^`]*)`")
_IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


@dataclass(frozen=True)
class Expression:
    """A parsed, whitelisted expression.

    Attributes
    ----------
    text : str
        The source as the user wrote it.
    columns : tuple of str
        Column names the expression reads, in order of first use.
    """

    text: str
    columns: tuple[str, ...]
    _tree: ast.AST = field(repr=False, compare=False)
    _names: Mapping[str, str] = field(repr=False, compare=False)  # placeholder -> column

    def evaluate(self, columns: Mapping[str, np.ndarray]) -> np.ndarray:
        """Evaluate on a mapping of column name -> 1-D array.

        Returns a float64 array; non-finite results are NaN.
        """
        missing = [c for c in self.columns if c not in columns]
        if missing:
            raise AfterlookError(
                f"expression '{self.text}' uses unknown column {_quote(missing[0])}"
                + _did_you_mean(missing[0], list(columns))
            )
        env = {ph: np.asarray(columns[col], dtype=np.float64) for ph, col in self._names.items()}
        n = _common_length(env.values())
        if n is None:  # no column used: one value per row of the table
            n = getattr(columns, "n_rows", None)
            if n is None and len(columns):
                n = len(np.asarray(columns[next(iter(columns))]))
        with np.errstate(all="ignore"):
            out = _Evaluator(env).visit(self._tree)
            out = np.asarray(out, dtype=np.float64)
            if out.ndim == 0:
                out = np.full(n if n is not None else 1, float(out))
            out = np.where(np.isfinite(out), out, np.nan)
        return out

    def rename_text(self) -> str:
        """Canonical text (backticks only where needed)."""
        return unparse(self)


def parse(text: str, known_columns: list[str] | tuple[str, ...] | None = None) -> Expression:
    """Parse and whitelist ``text``.

    Parameters
    ----------
    text : str
        The expression.
    known_columns : sequence of str, optional
        When given, every column the expression names must be among them.

    Raises
    ------
    AfterlookError
        For a syntax error, anything outside the whitelist, or an unknown
        column; the message is one line and names the problem.
    """
    if not isinstance(text, str):
        raise AfterlookError("an expression must be text")
    source = text.strip()
    if not source:
        raise AfterlookError("empty expression")
    if len(source) > MAX_LENGTH:
        raise AfterlookError(f"expression is longer than {MAX_LENGTH} characters")

    # Backtick-quoted names become placeholders so that names with spaces parse.
    names: dict[str, str] = {}
    quoted: dict[str, str] = {}

    def _sub(m: re.Match) -> str:
        col = m.group(1)
        if not col.strip():
            raise AfterlookError(f"empty backtick name in expression '{source}'")
        if col not in quoted:
            quoted[col] = f"__col{len(quoted)}__"
        return f" {quoted[col]} "

    if source.count("`") % 2:
        raise AfterlookError(f"unbalanced backtick in expression '{source}'")
    prepared = _BACKTICK.sub(_sub, source)
    try:
        with warnings.catch_warnings():
            # e.g. "1if x else 2" warns about the literal; the whitelist below decides, silently.
            warnings.simplefilter("ignore")
            tree = ast.parse(prepared.strip(), mode="eval")
    except (SyntaxError, ValueError, RecursionError, MemoryError, OverflowError) as exc:
        detail = getattr(exc, "msg", None) or type(exc).__name__
        raise AfterlookError(f"cannot parse expression '{_short(source)}': {detail}") from None
    back = {ph: col for col, ph in quoted.items()}
    ordered: list[str] = []
    _Checker(back, names, ordered, source).check(tree.body, 0)
    expr = Expression(text=source, columns=tuple(ordered), _tree=tree.body, _names=names)
    if known_columns is not None:
        known = list(known_columns)
        for col in expr.columns:
            if col not in known:
                raise AfterlookError(
                    f"expression '{_short(source)}' uses unknown column {_quote(col)}"
                    + _did_you_mean(col, known)
                )
    return expr


def evaluate(text: str, columns: Mapping[str, np.ndarray]) -> tuple[np.ndarray, int]:
    """Parse and evaluate ``text``; return the values and the count of NaN rows."""
    values = parse(text, list(columns)).evaluate(columns)
    return values, int(np.isnan(values).sum())


def quote_name(name: str) -> str:
    """A column name as it must be written in an expression.

    Bare only when the parser reads it back as that column: an ASCII
    identifier that is not a function, a Python keyword (``class``,
    ``None``, ``True``), a soft keyword, or a name starting with ``_`` (the
    parser's placeholders and dunder names). Everything else is backticked.
    """
    if (_IDENTIFIER.match(name) and name not in FUNCTIONS and not keyword.iskeyword(name)
            and not keyword.issoftkeyword(name) and not name.startswith("_")):
        return name
    if "`" in name:
        raise AfterlookError(f"column name {name!r} contains a backtick and cannot be used in expressions")
    return f"`{name}`"


def unparse(expr: Expression) -> str:
    """Canonical text of an expression, with backticks where needed."""
    return _unparse(expr._tree, expr._names)


# --------------------------------------------------------------------------
# Internals
# --------------------------------------------------------------------------


class _Checker:
    def __init__(self, back: dict[str, str], names: dict[str, str], ordered: list[str], source: str):
        self.back, self.names, self.ordered, self.source = back, names, ordered, source

    def fail(self, what: str) -> None:
        raise AfterlookError(f"expression '{_short(self.source)}': {what} is not allowed")

    def check(self, node: ast.AST, depth: int) -> None:
        if depth > MAX_DEPTH:
            raise AfterlookError(f"expression '{_short(self.source)}' is nested too deeply")
        if isinstance(node, ast.BinOp):
            if type(node.op) not in _BINARY_OPS:
                self.fail(f"operator '{type(node.op).__name__}'")
            self.check(node.left, depth + 1)
            self.check(node.right, depth + 1)
        elif isinstance(node, ast.UnaryOp):
            if not isinstance(node.op, (ast.USub, ast.UAdd)):
                self.fail(f"operator '{type(node.op).__name__}'")
            self.check(node.operand, depth + 1)
        elif isinstance(node, ast.Constant):
            if isinstance(node.value, bool) or not isinstance(node.value, (int, float)):
                self.fail(f"the constant {node.value!r}")
            try:
                finite = np.isfinite(float(node.value))
            except OverflowError:
                finite = False
            if not finite:
                raise AfterlookError(f"expression '{_short(self.source)}': the number {_short(str(node.value), 20)} is too large")
        elif isinstance(node, ast.Name):
            if not isinstance(node.ctx, ast.Load):
                self.fail("assignment")
            col = self.back.get(node.id, node.id)
            if node.id in FUNCTIONS and node.id not in self.back:
                self.fail(f"using function '{node.id}' without calling it")
            if node.id.startswith("__") and node.id not in self.back:
                self.fail(f"the name '{node.id}'")
            if node.id not in self.names:
                self.names[node.id] = col
                if col not in self.ordered:
                    self.ordered.append(col)
        elif isinstance(node, ast.Call):
            if not isinstance(node.func, ast.Name) or node.func.id not in FUNCTIONS or node.func.id in self.back:
                what = node.func.id if isinstance(node.func, ast.Name) else "this call"
                self.fail(f"calling '{what}' (functions: {', '.join(FUNCTIONS)})")
            if node.keywords:
                self.fail("a keyword argument")
            name = node.func.id
            n = len(node.args)
            if name in _UNARY_FUNCTIONS and n != 1:
                raise AfterlookError(f"expression '{_short(self.source)}': {name}() takes one argument, got {n}")
            if name in _VARIADIC_FUNCTIONS and n < 2:
                raise AfterlookError(f"expression '{_short(self.source)}': {name}() takes two or more arguments")
            if name == "clip" and n != 3:
                raise AfterlookError(f"expression '{_short(self.source)}': clip() takes (x, lo, hi)")
            for arg in node.args:
                if isinstance(arg, ast.Starred):
                    self.fail("'*' unpacking")
                self.check(arg, depth + 1)
        else:
            label = {
                ast.Compare: "a comparison",
                ast.BoolOp: "'and'/'or'",
                ast.Attribute: "attribute access ('.')",
                ast.Subscript: "indexing ('[]')",
                ast.Lambda: "lambda",
                ast.IfExp: "'if' expressions",
            }.get(type(node), f"'{type(node).__name__}'")
            self.fail(label)


class _Evaluator(ast.NodeVisitor):
    """Evaluates a checked tree; every intermediate non-finite value becomes NaN,
    so ``1 / (x / 0)`` stays NaN instead of quietly turning into 0."""

    def __init__(self, env: Mapping[str, np.ndarray]):
        self.env = env

    def visit(self, node):
        value = super().visit(node)
        return np.where(np.isfinite(value), value, np.nan)

    def visit_BinOp(self, node: ast.BinOp):
        return _BINARY_OPS[type(node.op)](self.visit(node.left), self.visit(node.right))

    def visit_UnaryOp(self, node: ast.UnaryOp):
        value = self.visit(node.operand)
        return np.negative(value) if isinstance(node.op, ast.USub) else value

    def visit_Constant(self, node: ast.Constant):
        # Constants are float64 from the start: an integer power tower can
        # never turn into an arbitrarily large Python int.
        try:
            return np.float64(node.value)
        except OverflowError:
            return np.float64(np.inf if node.value > 0 else -np.inf)

    def visit_Name(self, node: ast.Name):
        return self.env[node.id]

    def visit_Call(self, node: ast.Call):
        name = node.func.id
        args = [self.visit(a) for a in node.args]
        if name in _UNARY_FUNCTIONS:
            return _UNARY_FUNCTIONS[name](np.asarray(args[0], dtype=np.float64))
        if name in _VARIADIC_FUNCTIONS:
            fn = _VARIADIC_FUNCTIONS[name]
            out = args[0]
            for a in args[1:]:
                out = fn(out, a)
            return out
        x, lo, hi = args
        return np.minimum(np.maximum(x, lo), hi)

    def generic_visit(self, node):  # pragma: no cover - the checker forbids it
        raise AfterlookError(f"'{type(node).__name__}' is not allowed")


def _unparse(node: ast.AST, names: Mapping[str, str], parent_prec: int = 0, right: bool = False) -> str:
    if isinstance(node, ast.Name):
        return quote_name(names.get(node.id, node.id))
    if isinstance(node, ast.Constant):
        return repr(node.value)
    if isinstance(node, ast.UnaryOp):
        inner = _unparse(node.operand, names, 3)
        text = ("-" if isinstance(node.op, ast.USub) else "+") + inner
        return f"({text})" if parent_prec > 3 else text
    if isinstance(node, ast.Call):
        return f"{node.func.id}(" + ", ".join(_unparse(a, names) for a in node.args) + ")"
    if isinstance(node, ast.BinOp):
        prec = _PRECEDENCE[type(node.op)]
        pow_ = isinstance(node.op, ast.Pow)
        left = _unparse(node.left, names, prec + (1 if pow_ else 0))
        right_text = _unparse(node.right, names, prec + (0 if pow_ else 1), True)
        text = f"{left} {_BINARY_SYMBOLS[type(node.op)]} {right_text}"
        return f"({text})" if prec < parent_prec else text
    raise AfterlookError(f"cannot print '{type(node).__name__}'")  # pragma: no cover


def _common_length(arrays) -> int | None:
    n = None
    for a in arrays:
        if a.ndim != 1:
            raise AfterlookError("expression columns must be one-dimensional")
        if n is None:
            n = a.shape[0]
        elif a.shape[0] != n:
            raise AfterlookError("expression columns differ in length")
    return n


def _quote(name: str) -> str:
    return f"'{name}'"


def _short(text: str, limit: int = 80) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _did_you_mean(name: str, known: list[str]) -> str:
    close = difflib.get_close_matches(name, known, n=1)
    return f" (did you mean '{close[0]}'?)" if close else ""
