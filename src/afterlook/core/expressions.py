"""The expression language of derived features and transforms.

Grammar (a strict subset of Python's expression syntax):

* numbers, column names, backtick-quoted column names (```flow rate```);
* ``+ - * / **``, unary ``-`` and ``+``, parentheses;
* functions ``log log1p sqrt abs exp`` (one argument), ``min max`` (two or
  more, element-wise) and ``clip(x, lo, hi)``;
* ``boxcox(x, p)`` and ``yeojohnson(x, p)`` with ``p`` a number, and
  ``zscore(x)``, whose mean and sd are frozen from the normal rows by an
  explicit fit (:meth:`Expression.fit`; see :mod:`afterlook.core.frozen`).
  Evaluating ``zscore`` without frozen statistics is an error, never a
  silent standardisation by the rows being evaluated.

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
from dataclasses import dataclass, field, replace
from typing import Mapping

import numpy as np

from . import frozen as frozen_calls
from . import units as unit_stats
from .errors import AfterlookError
from .expression_eval import (BINARY_OPS, UNARY_FUNCTIONS, VARIADIC_FUNCTIONS, Evaluator, number_of, row_context,
                              short)

MAX_LENGTH = 2000  # characters; a derived feature is a formula, not a program
MAX_DEPTH = 60  # nesting depth of the syntax tree

FUNCTIONS = tuple(sorted([*UNARY_FUNCTIONS, *VARIADIC_FUNCTIONS, "clip", *frozen_calls.STATEFUL,
                          *frozen_calls.NAMED, *unit_stats.RECENT]))

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
    calls : tuple of str
        Keys of the calls whose statistics are frozen at fit
        (``zscore(boxcox(x, 0.5))``), inner calls first.
    frozen : mapping of key -> statistics
        The frozen statistics this expression evaluates with (see :meth:`fit`,
        :meth:`with_frozen`).
    """

    text: str
    columns: tuple[str, ...]
    _tree: ast.AST = field(repr=False, compare=False)
    _names: Mapping[str, str] = field(repr=False, compare=False)  # placeholder -> column
    calls: tuple[str, ...] = ()
    _call_nodes: Mapping[str, ast.Call] = field(default_factory=dict, repr=False, compare=False)
    _call_keys: Mapping[int, str] = field(default_factory=dict, repr=False, compare=False)  # id(node) -> key
    frozen: Mapping[str, dict] = field(default_factory=dict, repr=False, compare=False)
    history: int = 0  # earlier readings of the unit a row needs (lag k, rolling n - 1; summed: an upper bound)

    @property
    def is_fitted(self) -> bool:
        """Whether every stateful call has its frozen statistics (always true without one)."""
        return all(k in self.frozen for k in self.calls)

    def with_frozen(self, frozen: Mapping[str, dict]) -> "Expression":
        """This expression evaluating with the statistics of ``frozen`` (keys it does not use are ignored)."""
        if not self.calls:
            return self
        return replace(self, frozen={k: frozen[k] for k in self.calls if k in frozen})

    def fit(self, normal: Mapping[str, np.ndarray], memo: dict | None = None) -> "Expression":
        """Freeze the statistics of every stateful call on ``normal`` (rows of the normal population).

        Inner calls are fitted first; each on the finite values of its
        argument. Returns a new expression (``self`` when there is no such call).
        ``memo``: a dict the caller keeps for one ``normal`` (the same rows, unchanged)
        across many expressions: a call's statistics depend only on its text and those
        rows, so a call fitted for one expression is read from it, not fitted again.
        """
        if not self.calls:
            return self
        if memo is not None and all(k in memo for k in self.calls):
            return replace(self, frozen={k: memo[k] for k in self.calls})
        env, n = self._env(normal)
        context = row_context(normal)
        done: dict[str, dict] = {}
        with np.errstate(all="ignore"):
            for key in self.calls:
                if memo is not None and key in memo:
                    done[key] = memo[key]
                    continue
                node = self._call_nodes[key]
                try:
                    values = Evaluator(env, done, self._call_keys, self.text, context).visit(node.args[0])
                    values = np.broadcast_to(np.asarray(values, dtype=np.float64), (n if n is not None else 1,))
                    done[key] = frozen_calls.fit_call(node.func.id, key[len(node.func.id) + 1:-1], values,
                                                      context[0])
                except AfterlookError as exc:
                    raise AfterlookError(f"expression '{short(self.text)}': {exc.message}") from None
                if memo is not None:
                    memo[key] = done[key]
        return replace(self, frozen=done)

    def _env(self, columns: Mapping[str, np.ndarray]) -> tuple[dict, int | None]:
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
        return env, n

    def evaluate(self, columns: Mapping[str, np.ndarray]) -> np.ndarray:
        """Evaluate on a mapping of column name -> 1-D array.

        Returns a float64 array; non-finite results are NaN. A stateful call
        uses the frozen statistics (:meth:`fit`); without them it is an error.
        """
        env, n = self._env(columns)
        with np.errstate(all="ignore"):
            out = Evaluator(env, self.frozen, self._call_keys, self.text,
                             row_context(columns, self._names)).visit(self._tree)
            out = np.asarray(out, dtype=np.float64)
            if out.ndim == 0:
                out = np.full(n if n is not None else 1, float(out))
            # _Evaluator.visit has already made every non-finite value NaN; only a caller's own column
            # (the expression ``x``) comes back as it went in, and the caller gets a copy of it
            if any(out is a for a in env.values()):
                out = out.copy()
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
    expr = _PARSED.get(source)
    if expr is None:
        expr = _parsed(source)
        if len(_PARSED) >= _PARSED_SIZE:
            _PARSED.pop(next(iter(_PARSED)))
        _PARSED[source] = expr
    if known_columns is not None:
        known = list(known_columns)
        for col in expr.columns:
            if col not in known:
                raise AfterlookError(
                    f"expression '{short(source)}' uses unknown column {_quote(col)}"
                    + _did_you_mean(col, known)
                )
    return expr


#: Expressions parsed before, by their text: an Expression never changes (fitting makes a new one), and
#: the candidate search parses the same few hundred texts in its screen, its passes and every new search.
_PARSED: dict[str, Expression] = {}
_PARSED_SIZE = 8192


def _parsed(source: str) -> Expression:
    """The checked tree of ``source`` (stripped, at most MAX_LENGTH characters) as an Expression."""
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
        raise AfterlookError(f"cannot parse expression '{short(source)}': {detail}") from None
    back = {ph: col for col, ph in quoted.items()}
    ordered: list[str] = []
    checker = _Checker(back, names, ordered, source)
    checker.check(tree.body, 0)
    call_nodes: dict[str, ast.Call] = {}
    call_keys: dict[int, str] = {}
    for node in checker.stateful:  # post-order: inner calls first
        key = frozen_calls.call_key(node.func.id, _unparse(node.args[0], names))
        call_keys[id(node)] = key
        call_nodes.setdefault(key, node)
    return Expression(text=source, columns=tuple(ordered), _tree=tree.body, _names=names,
                      calls=tuple(call_nodes), _call_nodes=call_nodes, _call_keys=call_keys, history=checker.history)


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
        self.stateful: list[ast.Call] = []
        self.history = 0

    def fail(self, what: str) -> None:
        raise AfterlookError(f"expression '{short(self.source)}': {what} is not allowed")

    def check(self, node: ast.AST, depth: int) -> None:
        if depth > MAX_DEPTH:
            raise AfterlookError(f"expression '{short(self.source)}' is nested too deeply")
        if isinstance(node, ast.BinOp):
            if type(node.op) not in BINARY_OPS:
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
                raise AfterlookError(f"expression '{short(self.source)}': the number {short(str(node.value), 20)} is too large")
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
            if name in UNARY_FUNCTIONS and n != 1:
                raise AfterlookError(f"expression '{short(self.source)}': {name}() takes one argument, got {n}")
            if name in VARIADIC_FUNCTIONS and n < 2:
                raise AfterlookError(f"expression '{short(self.source)}': {name}() takes two or more arguments")
            if name == "clip" and n != 3:
                raise AfterlookError(f"expression '{short(self.source)}': clip() takes (x, lo, hi)")
            if name in frozen_calls.STATEFUL and n != frozen_calls.STATEFUL[name]:
                raise AfterlookError(f"expression '{short(self.source)}': {name}() takes one argument, got {n}")
            if name in frozen_calls.NAMED:
                if n != 2:
                    raise AfterlookError(f"expression '{short(self.source)}': {name}() takes (x, p), got {n} "
                                         "argument(s)")
                if number_of(node.args[1]) is None:
                    raise AfterlookError(f"expression '{short(self.source)}': the power p of {name}(x, p) must "
                                         "be a number")
            if name in unit_stats.RECENT:
                what = unit_stats.RECENT[name]
                count = number_of(node.args[1]) if n == 2 else None
                if n != 2 or count is None or count != int(count) or count < 1 or count > 100_000:
                    raise AfterlookError(f"expression '{short(self.source)}': {name}() takes (x, {what}) with {what} "
                                         "a whole number of readings, at least 1")
                self.history += int(count) - (1 if name == "rolling_median" else 0)
            for arg in node.args:
                if isinstance(arg, ast.Starred):
                    self.fail("'*' unpacking")
                self.check(arg, depth + 1)
            if name in frozen_calls.STATEFUL:
                self.stateful.append(node)
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


def _did_you_mean(name: str, known: list[str]) -> str:
    close = difflib.get_close_matches(name, known, n=1)
    return f" (did you mean '{close[0]}'?)" if close else ""
