"""Evaluating a checked expression tree on columns (:mod:`afterlook.core.expressions` parses and checks it).

Every intermediate value that is not finite becomes NaN at the node that made it, so
``1 / (x / 0)`` stays NaN instead of quietly turning into 0, and the result of a whole
expression never holds an infinity.
"""

from __future__ import annotations

import ast
import math
from typing import Callable, Mapping

import numpy as np

from . import frozen as frozen_calls
from . import units as unit_stats
from .errors import AfterlookError

UNARY_FUNCTIONS: dict[str, Callable[[np.ndarray], np.ndarray]] = {
    "log": np.log,
    "log1p": np.log1p,
    "sqrt": np.sqrt,
    "abs": np.abs,
    "exp": np.exp,
}
VARIADIC_FUNCTIONS = {"min": np.minimum, "max": np.maximum}  # NaN propagates

BINARY_OPS = {
    ast.Add: np.add,
    ast.Sub: np.subtract,
    ast.Mult: np.multiply,
    ast.Div: np.divide,
    ast.Pow: np.power,
}


class Evaluator(ast.NodeVisitor):
    """Evaluates a checked tree; every intermediate non-finite value becomes NaN,
    so ``1 / (x / 0)`` stays NaN instead of quietly turning into 0."""

    def __init__(self, env: Mapping[str, np.ndarray], frozen: Mapping[str, dict] | None = None,
                 call_keys: Mapping[int, str] | None = None, text: str = "", context=(None, None, None)):
        self.env = env
        self.units, self.times, self.past = context
        self.frozen = frozen or {}
        self.call_keys = call_keys or {}
        self.text = text

    def visit(self, node):
        value = super().visit(node)
        if isinstance(value, np.ndarray) and value.dtype == np.float64 and value.ndim == 1 \
                and math.isfinite(float(np.add.reduce(value))):
            return value  # a finite sum means every value is finite (a NaN or an infinity would carry through)
        return np.where(np.isfinite(value), value, np.nan)

    def visit_BinOp(self, node: ast.BinOp):
        return BINARY_OPS[type(node.op)](self.visit(node.left), self.visit(node.right))

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
        if name in frozen_calls.NAMED:
            return frozen_calls.apply_named(name, self.visit(node.args[0]), number_of(node.args[1]))
        if name in unit_stats.RECENT:
            values = np.asarray(self.visit(node.args[0]), dtype=np.float64)
            if values.ndim == 0:
                values = np.full(len(self.units) if self.units is not None else 1, float(values))
            fn = unit_stats.lag if name == "lag" else unit_stats.rolling_median
            units, times = self.units, self.times
            m = 0
            if self.past is not None and units is not None:  # the units' earlier readings come first
                env, past_units, past_times = self.past
                before = Evaluator(env, self.frozen, self.call_keys, self.text, (past_units, past_times, None))
                earlier = np.broadcast_to(np.asarray(before.visit(node.args[0]), dtype=np.float64), (len(past_units),))
                m = earlier.shape[0]
                values = np.concatenate([earlier, values])
                units, times = unit_stats.with_past(past_units, past_times, units, times)
            return fn(values, int(number_of(node.args[1])), units, times, f"{name}() in '{short(self.text)}'")[m:]
        args = [self.visit(a) for a in node.args]
        if name in frozen_calls.STATEFUL:
            key = self.call_keys[id(node)]
            params = self.frozen.get(key)
            if params is None:
                raise AfterlookError(f"expression '{short(self.text)}': {short(key)} has no statistics frozen "
                                     "from normal rows (fit it on the normal population first)")
            return frozen_calls.apply_call(name, args[0], params, self.units)
        if name in UNARY_FUNCTIONS:
            return UNARY_FUNCTIONS[name](np.asarray(args[0], dtype=np.float64))
        if name in VARIADIC_FUNCTIONS:
            fn = VARIADIC_FUNCTIONS[name]
            out = args[0]
            for a in args[1:]:
                out = fn(out, a)
            return out
        x, lo, hi = args
        return np.minimum(np.maximum(x, lo), hi)

    def generic_visit(self, node):  # pragma: no cover - the checker forbids it
        raise AfterlookError(f"'{type(node).__name__}' is not allowed")


def row_context(columns: Mapping, names: Mapping[str, str] | None = None) -> tuple:
    """The rows' unit labels and time keys, when the layer that read the table put them in ``columns``,
    and the preceding readings (``--context``) as (placeholder env, units, times) or None."""
    try:
        units = columns[unit_stats.UNITS] if unit_stats.UNITS in columns else None
        times = columns[unit_stats.TIMES] if unit_stats.TIMES in columns else None
        past = columns[unit_stats.PAST] if unit_stats.PAST in columns else None
    except KeyError:
        return None, None, None
    if past is None or names is None or not len(past.get(unit_stats.UNITS, ())):
        return units, times, None
    m = len(past[unit_stats.UNITS])
    env = {ph: (np.asarray(past[col], dtype=np.float64) if col in past else np.full(m, np.nan))
           for ph, col in names.items()}
    return units, times, (env, past[unit_stats.UNITS], past[unit_stats.TIMES])


def number_of(node: ast.AST) -> float | None:
    """The value of a number written in the expression (``0.5``, ``-0.05``), else None."""
    sign = 1.0
    while isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        sign = -sign if isinstance(node.op, ast.USub) else sign
        node = node.operand
    if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)) and not isinstance(node.value, bool):
        try:
            value = sign * float(node.value)
        except OverflowError:
            return None
        return value if np.isfinite(value) else None
    return None



def short(text: str, limit: int = 80) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."
