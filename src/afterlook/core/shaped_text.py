"""Readable text of a column under its shaping choice, for the candidates the search writes.

The search standardises columns (shaped or not) on the normal population
and combines them. Written with the sample's constants, such a candidate
was unreadable (``((-(a ** -0.05)) + 0.824271) / 0.0165608 - ...``); written
with functions whose statistics are frozen at fit it reads as what it is:

    zscore(boxcox(motor_current_a, -0.05)) - zscore(boxcox(hydraulic_power, -0.05))

:func:`shaped_text` gives the inner part for one column and its shaping
choice, :func:`standardized_text` wraps it in ``zscore``. A power
``x ** p`` (or ``-(x ** p)`` for ``p < 0``, the order-keeping form the
shaping search proposes) is written ``boxcox(x, p)``: ``(x ** p - 1) / p``
is an increasing affine map of either, so its z-score is the same number.
The z-scores' mean and sd are frozen by an explicit fit on normal rows: in
the search, the same normal sample the moment screen used (so a candidate's
numbers are the screen's numbers); ``try`` and re-fits freeze them again on
the full training rows.
"""

from __future__ import annotations

import ast

from . import expressions
from .errors import AfterlookError

__all__ = ["shaped_text", "standardized_text", "power_text", "unit_relative_text"]


def _number(p: float) -> str:
    return f"{p:.6g}"


def power_text(name: str, kind: str, power: float) -> str:
    """``boxcox(name, p)`` or ``yeojohnson(name, p)`` (``log(name)`` for Box-Cox at p = 0)."""
    q = expressions.quote_name(name)
    if kind == "boxcox" and abs(power) < 1e-12:
        return f"log({q})"
    return f"{kind}({q}, {_number(power)})"


def shaped_text(name: str, transform) -> str:
    """Readable text of column ``name`` under ``transform``.

    ``transform`` is None (the column itself), a text over the column (what
    the shaping search or a recipe transform writes), or an object with
    ``kind`` ("expression", "boxcox", "yeojohnson"), ``expression`` and
    ``lmbda`` (:class:`afterlook.core.recipe.Transform`).
    """
    if transform is None:
        return expressions.quote_name(name)
    if isinstance(transform, str):
        return _readable_power(name, transform)
    if transform.kind == "expression":
        return _readable_power(name, transform.expression)
    if transform.lmbda is None:
        raise AfterlookError(f"the {transform.kind} transform of '{name}' is not fitted")
    return power_text(name, transform.kind, transform.lmbda)


def standardized_text(name: str, transform=None) -> str:
    """``zscore(...)`` of :func:`shaped_text`: the column standardised on the normal population."""
    return f"zscore({shaped_text(name, transform)})"


def _readable_power(name: str, text: str) -> str:
    """``x ** p`` and ``-(x ** p)`` over column ``name`` as ``boxcox(x, p)``; any other text as it is."""
    expr = expressions.parse(text)
    node = expr._tree
    negated = isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub)
    if negated:
        node = node.operand
    if not (isinstance(node, ast.BinOp) and isinstance(node.op, ast.Pow) and isinstance(node.left, ast.Name)):
        return expr.text
    if expr._names.get(node.left.id) != name:
        return expr.text
    power = expressions.number_of(node.right)
    if power is None or power == 0 or (power < 0) != negated:
        return expr.text  # -(x ** 0.5) decreases: it is not an affine map of a Box-Cox transform
    return power_text(name, "boxcox", power)


#: How a reading is set against its unit's baseline (see :mod:`afterlook.core.units`).
UNIT_RELATIONS = ("difference", "ratio", "scaled")


def unit_relative_text(name: str, how: str = "difference") -> str:
    """Column ``name`` against its unit's own normal, as text a search can propose.

    ``difference``: ``x - unit_median(x)``; ``ratio``: ``x / unit_median(x)``;
    ``scaled``: ``(x - unit_median(x)) / unit_scale(x)`` (a robust z against
    the unit's own baseline). The baselines are frozen per unit at fit.
    """
    q = expressions.quote_name(name)
    if how == "difference":
        return f"{q} - unit_median({q})"
    if how == "ratio":
        return f"{q} / unit_median({q})"
    if how == "scaled":
        return f"({q} - unit_median({q})) / unit_scale({q})"
    raise AfterlookError(f"unknown unit relation '{how}' (choose: {', '.join(UNIT_RELATIONS)})")
