"""Unit-relative and change candidates: the search's candidates when the model knows each row's unit.

A fleet's units each have their own normal; a reading can sit inside the
fleet's spread and far outside its own unit's. With a unit column the search
(:func:`afterlook.analysis.discovery.suggest`, through
:mod:`afterlook.analysis.fleet_search`) adds, for every column ``x`` (and every
pair ``a``, ``b``):

=============================  ===================================================  ==================
kind                           expression                                           needs
=============================  ===================================================  ==================
unit_relative                  ``x - unit_median(x)``                               -
unit_standardized              ``(x - unit_median(x)) / unit_scale(x)``             -
change                         ``x - lag(x, 1)``                                    a time column
unit_standardized_difference   ``ua - ub`` (``+`` when negatively correlated), with  -
                               ``ua = (a - unit_median(a)) / unit_scale(a)``
unit_ratio                     ``a / unit_median(a) / (b / unit_median(b))`` and     both positive
                               the other way round
=============================  ===================================================  ==================

**Baselines** (``unit_median``, ``unit_scale``) are frozen once per column from
the normal training rows ``try`` and the model file freeze them on (the rows
whose recipe inputs are all finite, as :func:`afterlook.analysis.fitting.fit`
picks them), so the numbers the search shows are the numbers ``try`` gets.
Each candidate carries its frozen expression (:attr:`Candidate.parsed`); the
exact pass reuses it instead of fitting on the sample.

**Time order.** A random sample of rows does not hold a unit's previous
reading, so every mapping the search evaluates on (the normal sample, the
targets, the other anomalies) carries the rest of its table as the units'
past (:data:`afterlook.core.units.PAST`, the mechanism of ``--context``):
``lag`` then reads, for each row, the unit's previous reading in the whole
table, as ``try`` does on the whole table (:func:`with_past`).

**First pass.** The candidates are few (``2d`` or ``3d`` columns plus
``d (d - 1) / 2`` differences and up to ``d (d - 1)`` ratios), so the
single-column ones are evaluated exactly on the sample; the pair kinds take
their mean and variance from the covariance (differences) or two matrix
products (ratios, ``E[a/b]`` and ``E[(a/b)^2]``) of the materialised
unit-relative columns. The first-pass statistic is the same as for the other
candidates: the median over the targets of ``|t - mean| / sd``.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np

from . import expressions
from .candidates import Candidate
from .errors import AfterlookError
from .units import PAST, TIMES, UNITS

__all__ = ["UNIT_KINDS", "baselines", "with_past", "screen", "unit_relative_texts"]

UNIT_KINDS = ("unit_relative", "unit_standardized", "change", "unit_standardized_difference", "unit_ratio")


def unit_relative_texts(name: str) -> dict[str, str]:
    """Expression text of each single-column unit kind for column ``name``."""
    q = expressions.quote_name(name)
    return {
        "unit_relative": f"{q} - unit_median({q})",
        "unit_standardized": f"({q} - unit_median({q})) / unit_scale({q})",
        "change": f"{q} - lag({q}, 1)",
    }


def _normalised_text(name: str) -> str:
    q = expressions.quote_name(name)
    return f"{q} / unit_median({q})"


def baselines(names: list[str], normal: Mapping[str, np.ndarray]) -> dict[str, dict]:
    """Frozen ``unit_median(x)`` and ``unit_scale(x)`` of every column (keys as expressions write them).

    A column whose baseline cannot be frozen (fewer than 2 finite values, a fleet
    MAD of 0 for the scale) gets no entry: its candidates needing it are not made.
    """
    out: dict[str, dict] = {}
    for name in names:
        q = expressions.quote_name(name)
        for call in (f"unit_median({q})", f"unit_scale({q})"):
            try:
                out.update(expressions.parse(call).fit(normal).frozen)
            except AfterlookError:
                continue
    return out


def with_past(columns: Mapping[str, np.ndarray], rows: np.ndarray, names: list[str]) -> dict:
    """The rows ``rows`` of ``columns`` (names, units, times), with every other row as the units' past.

    ``columns`` holds :data:`UNITS` (and :data:`TIMES`) for every row and maybe its own
    :data:`PAST` (readings before the table, ``--context``), which stays part of the past.
    Without a time column nothing is past: only the rows are returned.
    """
    rows = np.asarray(rows, dtype=np.int64)
    out = {n: np.asarray(columns[n], dtype=np.float64)[rows] for n in names}
    if UNITS not in columns:
        return out
    out[UNITS] = np.asarray(columns[UNITS], dtype=object)[rows]
    if TIMES not in columns:
        return out
    times = np.asarray(columns[TIMES])
    out[TIMES] = times[rows]
    rest = np.ones(len(times), dtype=bool)
    rest[rows] = False
    past = {n: np.asarray(columns[n], dtype=np.float64)[rest] for n in names}
    past[UNITS] = np.asarray(columns[UNITS], dtype=object)[rest]
    past[TIMES] = times[rest]
    before = columns.get(PAST) if hasattr(columns, "get") else None
    if before is not None and len(before.get(UNITS, ())):
        m = len(before[UNITS])
        for n in names:
            earlier = np.asarray(before[n], dtype=np.float64) if n in before else np.full(m, np.nan)
            past[n] = np.concatenate([earlier, past[n]])
        past[UNITS] = np.concatenate([np.asarray(before[UNITS], dtype=object), past[UNITS]])
        past[TIMES] = np.concatenate([np.asarray(before[TIMES]), past[TIMES]])
    out[PAST] = past
    return out


def _z(values: np.ndarray, targets: np.ndarray) -> float:
    """Median over the targets of ``|t - mean| / sd`` over the finite normal values (NaN when undefined)."""
    v = values[np.isfinite(values)]
    if v.size < 30 or not np.all(np.isfinite(targets)):
        return float("nan")
    sd = float(v.std())
    if not sd > 0:
        return float("nan")
    return float(np.median(np.abs(targets - v.mean()) / sd))


def screen(names: list[str], sample: Mapping[str, np.ndarray], targets: Mapping[str, np.ndarray],
           frozen: Mapping[str, dict], has_time: bool) -> tuple[list[Candidate], int]:
    """Every unit-relative and change candidate with its first-pass z; ``(candidates, number generated)``.

    ``sample`` and ``targets`` are mappings as :func:`with_past` makes them;
    ``frozen`` the baselines of :func:`baselines`. Each candidate carries its
    frozen expression (``parsed``).
    """
    out: list[Candidate] = []
    standardized, normalised = {}, {}
    for name in names:
        for kind, text in unit_relative_texts(name).items():
            if kind == "change" and not has_time:
                continue
            expr = expressions.parse(text).with_frozen(frozen)
            if not expr.is_fitted:
                continue  # no baseline for this column
            v, t = expr.evaluate(sample), expr.evaluate(targets)
            out.append(Candidate(text, kind, (name,), float("nan"), first_pass_z=_z(v, t), parsed=expr))
            if kind == "unit_standardized":
                standardized[name] = (v, t)
        expr = expressions.parse(_normalised_text(name)).with_frozen(frozen)
        if expr.is_fitted:
            v, t = expr.evaluate(sample), expr.evaluate(targets)
            if np.all(v > 0) and np.all(t > 0):  # NaN compares false: a NaN value leaves the column out
                normalised[name] = (v, t)
    out += _differences(standardized, frozen)
    out += _ratios(normalised, frozen)
    return out, len(out)


def _matrices(columns: dict) -> tuple[list[str], np.ndarray, np.ndarray]:
    keys = list(columns)
    V = np.column_stack([columns[k][0] for k in keys]) if keys else np.empty((0, 0))
    T = np.column_stack([np.atleast_1d(columns[k][1]) for k in keys]) if keys else np.empty((0, 0))
    return keys, V, T


def _differences(standardized: dict, frozen) -> list[Candidate]:
    """Standardized differences of two unit-standardized columns, mean and variance from their covariance."""
    keys, U, T = _matrices(standardized)
    if len(keys) < 2:
        return []
    ok = np.all(np.isfinite(U), axis=1)
    U = U[ok]
    n = U.shape[0]
    mu = U.mean(axis=0)
    Uc = U - mu
    C = Uc.T @ Uc / n
    sd = np.sqrt(np.clip(np.diag(C), 0, None))
    with np.errstate(invalid="ignore", divide="ignore"):
        R = C / np.outer(sd, sd)
    out = []
    texts = {k: f"({expressions.quote_name(k)} - unit_median({expressions.quote_name(k)})) / "
                f"unit_scale({expressions.quote_name(k)})" for k in keys}
    for i, j in zip(*np.triu_indices(len(keys), k=1)):
        r = float(R[i, j])
        s = -1.0 if not r < 0 else 1.0  # as the pair kinds: '-' for a positive (or undefined) correlation
        mean = mu[i] + s * mu[j]
        var = C[i, i] + C[j, j] + 2.0 * s * C[i, j]
        t = T[:, i] + s * T[:, j]
        with np.errstate(invalid="ignore", divide="ignore"):
            z = np.abs(t - mean) / np.sqrt(var) if var > 0 and n >= 30 else np.full(len(t), np.nan)
        text = f"{texts[keys[i]]} {'-' if s < 0 else '+'} {texts[keys[j]]}"
        out.append(Candidate(text, "unit_standardized_difference", (keys[i], keys[j]), r,
                             first_pass_z=float(np.median(z)) if np.all(np.isfinite(z)) else float("nan"),
                             parsed=expressions.parse(text).with_frozen(frozen)))
    return out


def _ratios(normalised: dict, frozen) -> list[Candidate]:
    """Ratios of two columns each over its unit's median (both ways): ``E[a/b]`` and ``E[(a/b)^2]`` from two
    matrix products of the normalised columns."""
    keys, V, T = _matrices(normalised)
    if len(keys) < 2:
        return []
    n = V.shape[0]
    inv = 1.0 / V
    M1 = V.T @ inv / n
    M2 = (V * V).T @ (inv * inv) / n
    with np.errstate(invalid="ignore", divide="ignore"):
        R = np.corrcoef(V, rowvar=False)
    out = []
    for i, j in zip(*np.triu_indices(len(keys), k=1)):
        for a, b in ((i, j), (j, i)):
            var = M2[a, b] - M1[a, b] ** 2
            t = T[:, a] / T[:, b]
            z = np.abs(t - M1[a, b]) / np.sqrt(var) if var > 0 and n >= 30 else np.full(len(t), np.nan)
            text = f"{_normalised_text(keys[a])} / ({_normalised_text(keys[b])})"
            out.append(Candidate(text, "unit_ratio", (keys[a], keys[b]), float(R[a, b]),
                                 first_pass_z=float(np.median(z)) if np.all(np.isfinite(z)) else float("nan"),
                                 parsed=expressions.parse(text).with_frozen(frozen)))
    return out
