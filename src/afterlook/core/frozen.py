"""Expression functions whose statistics are frozen from the normal population.

Every other function of the expression language is a pure element-wise
function of one row. The functions here need a statistic of the normal
(training) population, and that statistic is computed once, by an explicit
fit on normal rows, and then frozen: scoring a table never looks at the
scored table's own mean or spread (which would move with the very anomalies
it should expose).

``zscore(x)``
    ``(x - mean) / sd`` with the mean and standard deviation of ``x`` over
    the normal rows it was fitted on: finite values of ``x`` only, and
    ``sd`` with ``ddof=0`` (maximum likelihood, the project's convention and
    ``scipy.stats.zscore``'s default). A constant ``x`` (sd 0) or fewer than
    two finite values cannot be standardised: the fit is refused with one
    line naming the call.

Named, stateless transforms (no statistics; here so that every power
transform of a column reads as one word):

``boxcox(x, p)``
    ``(x ** p - 1) / p``, ``log(x)`` at ``p = 0`` (G. E. P. Box and D. R.
    Cox (1964), JRSS B 26(2), 211-252), computed by
    ``scipy.special.boxcox``: ``x < 0`` is NaN, and ``x = 0`` is its limit
    ``-1 / p`` for ``p > 0`` and NaN for ``p <= 0``.
``yeojohnson(x, p)``
    The Yeo-Johnson transform with power ``p`` (I.-K. Yeo and R. A. Johnson
    (2000), Biometrika 87(4), 954-959), computed by ``scipy.stats.yeojohnson``
    with ``lmbda=p``; defined for every real ``x``.

``unit_median(x)``, ``unit_scale(x)``
    Each unit's own baseline, frozen per unit (see :mod:`afterlook.core.units`).

``p`` must be a number written in the expression (a power chosen once, not a
column).

A call is identified by its function and the canonical text of its argument
(``zscore(boxcox(motor_current_a, -0.05))``); the frozen statistics of a
recipe are a mapping from that key to a small dict, stored in the model file
under ``recipe.frozen``.
"""

from __future__ import annotations

import math

import numpy as np

from . import units as unit_stats
from .errors import AfterlookError

#: Functions that need statistics frozen at fit, and their number of arguments.
STATEFUL = {"zscore": 1, "unit_median": 1, "unit_scale": 1}
#: Named stateless transforms: (x, p) with p a number.
NAMED = {"boxcox": 2, "yeojohnson": 2}

__all__ = ["STATEFUL", "NAMED", "call_key", "fit_call", "apply_call", "apply_named", "frozen_to_list",
           "frozen_from_list"]


def call_key(function: str, argument: str) -> str:
    """The key of a stateful call: ``function(argument text)``."""
    return f"{function}({argument})"


def fit_call(function: str, argument: str, values: np.ndarray, units=None) -> dict:
    """Statistics of ``function`` frozen from ``values`` (its argument over the normal rows;
    ``units``: each row's unit label, for the per-unit baselines).

    Raises :class:`AfterlookError` when the statistic is undefined (a constant
    argument, fewer than two finite values).
    """
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x)]
    key = call_key(function, argument)
    if function in unit_stats.BASELINES:
        return unit_stats.fit_baseline(function, argument, key, values, units)
    if function == "zscore":
        if x.size < 2:
            raise AfterlookError(f"{key}: {x.size} finite normal value(s); a z-score needs at least 2")
        mean = float(x.mean())
        sd = float(x.std())  # ddof=0
        if not (np.isfinite(sd) and sd > 0):
            raise AfterlookError(f"{key}: the argument is constant on the {x.size} normal rows "
                                 "(sd 0); it cannot be standardised")
        return {"function": function, "argument": argument, "mean": mean, "sd": sd, "rows": int(x.size)}
    raise AfterlookError(f"unknown stateful function '{function}'")  # pragma: no cover - the parser checks


def apply_call(function: str, values: np.ndarray, params: dict, units=None) -> np.ndarray:
    """``function`` of ``values`` with its frozen statistics ``params`` (``units``: each row's unit)."""
    if function in unit_stats.BASELINES:
        n = np.asarray(values).shape[0] if np.ndim(values) else (len(units) if units is not None else 1)
        return unit_stats.apply_baseline(params, units, n, call_key(function, params["argument"]))
    if function == "zscore":
        return (np.asarray(values, dtype=np.float64) - params["mean"]) / params["sd"]
    raise AfterlookError(f"unknown stateful function '{function}'")  # pragma: no cover


def apply_named(function: str, values: np.ndarray, power: float) -> np.ndarray:
    """``boxcox(x, p)`` or ``yeojohnson(x, p)``: NaN outside the domain, never an error.

    numpy only, in the accurate ``expm1``/``log1p`` forms scipy uses (importing
    scipy.special or scipy.stats here cost a candidate search 0.15 s); tests
    compare both with ``scipy.special.boxcox`` and ``scipy.stats.yeojohnson``.
    """
    x = np.asarray(values, dtype=np.float64)
    p = float(power)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        # every value finite (a finite sum says so: a NaN or an infinity would carry through): no copy
        finite = x.size > 0 and math.isfinite(float(np.add.reduce(x, axis=None)))
        if function == "boxcox":
            # scipy.special.boxcox: log(x) at p = 0, expm1(p log x) / p otherwise; x < 0 is NaN
            if not (finite and x.min() >= 0):
                x = np.where(np.isfinite(x) & (x >= 0), x, np.nan)
            logx = np.log(x)
            if p == 0.0:
                return logx
            np.multiply(logx, p, out=logx)
            np.expm1(logx, out=logx)
            logx /= p
            return logx
        if not finite:
            x = np.where(np.isfinite(x), x, np.nan)
        if function == "yeojohnson":
            out = np.full(x.shape, np.nan)
            pos, neg = x >= 0, x < 0
            lp = np.log1p(x[pos])
            out[pos] = lp if p == 0.0 else np.expm1(p * lp) / p
            ln = np.log1p(-x[neg])
            out[neg] = -ln if p == 2.0 else -np.expm1((2.0 - p) * ln) / (2.0 - p)
            return out
    raise AfterlookError(f"unknown function '{function}'")  # pragma: no cover


def frozen_to_list(frozen: dict[str, dict]) -> list[dict]:
    """The frozen statistics as the model file keeps them (a list, in key order)."""
    return [dict(frozen[k]) for k in sorted(frozen)]


def frozen_from_list(items) -> dict[str, dict]:
    """The frozen statistics read from a model file (each entry checked)."""
    out: dict[str, dict] = {}
    if not isinstance(items, list):
        raise AfterlookError("recipe.frozen must be a list")
    for item in items:
        if not isinstance(item, dict):
            raise AfterlookError("recipe.frozen holds an entry that is not an object")
        function, argument = item.get("function"), item.get("argument")
        if function not in STATEFUL or not isinstance(argument, str):
            raise AfterlookError(f"recipe.frozen: unknown function {function!r}")
        if function in unit_stats.BASELINES:
            fleet, per_unit = item.get("fleet"), item.get("units")
            numbers = [fleet, *(per_unit.values() if isinstance(per_unit, dict) else [None])]
            if not all(isinstance(v, (int, float)) and not isinstance(v, bool) and np.isfinite(v) for v in numbers):
                raise AfterlookError(f"recipe.frozen: {call_key(function, argument)} needs a finite fleet value and "
                                     "finite unit values")
        if function == "zscore":
            mean, sd = item.get("mean"), item.get("sd")
            if not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (mean, sd)) \
                    or not np.isfinite(mean) or not (np.isfinite(sd) and sd > 0):
                raise AfterlookError(f"recipe.frozen: {call_key(function, argument)} needs a finite mean and a "
                                     "positive finite sd")
        out[call_key(function, argument)] = dict(item)
    return out
