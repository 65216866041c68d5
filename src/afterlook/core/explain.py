"""Per-feature evidence for one case.

For a case ``x`` under a fitted :class:`~afterlook.core.gaussian.GaussianModel`
with mean ``mu``, covariance ``S`` and precision ``P = S^-1``:

* ``z_j = (x_j - mu_j) / sqrt(S_jj)``: distance from the normal population
  on that feature alone;
* ``percentile_j``: share (in %) of normal rows with a value ``<= x_j``,
  read from the quantile grid stored with the model (1001 points);
* ``contribution_j = -1/2 (x_j - mu_j) [P (x - mu)]_j``: the feature's share
  of the log-density below its peak. The contributions add up exactly to
  ``log p(x) - log p(mu)``; for the independent model it is ``-z_j^2 / 2``.
  Cross terms can make a feature's share positive in the full model: that
  feature moved *with* its partners and made the case look more normal;
* ``conditional_z_j = (x_j - E[x_j | rest]) / sd(x_j | rest)`` (full model
  only), which for a Gaussian equals ``[P (x - mu)]_j / sqrt(P_jj)``
  because ``E[x_j | rest] = mu_j - sum_{k != j} P_jk (x_k - mu_k) / P_jj`` and
  ``var(x_j | rest) = 1 / P_jj`` (e.g. Rue and Held, *Gaussian Markov Random
  Fields*, Chapman & Hall 2005, Thm 2.3, cited from memory). A large conditional z with a small
  plain z is the signature of a broken relation ("current high for this
  flow").
"""

from __future__ import annotations

from dataclasses import dataclass

import math

import numpy as np

from .gaussian import GaussianModel
from .numbers import finite_or_none

QUANTILE_POINTS = 1001


def quantile_grid(X: np.ndarray, points: int = QUANTILE_POINTS) -> np.ndarray:
    """Per-column quantiles at ``linspace(0, 1, points)``; shape (points, d).

    The same numbers as ``np.quantile(X, probs, axis=0, method="linear")``
    (Hyndman and Fan's definition 7; a test checks equality to the bit), from
    one in-place sort per column instead of a partition at 2,002 positions of
    the strided columns: about 10x faster at 200,000 x 40. Columns holding
    NaN go through ``np.quantile`` itself.
    """
    X = np.asarray(X, dtype=np.float64)
    probs = np.linspace(0.0, 1.0, points)
    if X.ndim != 2 or X.shape[0] < 2 or not np.isfinite(X).all():
        return np.quantile(X, probs, axis=0, method="linear")
    columns = np.ascontiguousarray(X.T)  # a copy: each column's values contiguous
    columns.sort(axis=1)
    return grid_of_sorted_columns(columns, points)


def grid_of_columns(columns, points: int = QUANTILE_POINTS) -> np.ndarray:
    """:func:`quantile_grid` of d finite columns of equal length (1-D arrays, e.g. views of a DataFrame's
    columns), to the bit: each is copied into one reused buffer and sorted there, so neither the
    columns nor an (n, d) copy of them is touched or made."""
    columns = [np.asarray(c, dtype=np.float64) for c in columns]
    n = len(columns[0]) if columns else 0
    if n < 2:
        return quantile_grid(np.column_stack(columns) if columns else np.empty((n, 0)), points)
    buffer = np.empty((1, n))
    grid = np.empty((points, len(columns)))
    for j, column in enumerate(columns):
        np.copyto(buffer[0], column)
        buffer.sort(axis=1)
        grid[:, j] = grid_of_sorted_columns(buffer, points)[:, 0]
    return grid


def grid_of_sorted_columns(columns: np.ndarray, points: int = QUANTILE_POINTS) -> np.ndarray:
    """:func:`quantile_grid` of finite columns already sorted, given as the rows of ``columns`` (d, n)."""
    n = columns.shape[1]
    probs = np.linspace(0.0, 1.0, points)
    # numpy's steps for method="linear": virtual index (n - 1) q, its floor and
    # the next index (both the last index at q = 1), gamma from the floor so set.
    virtual = (n - 1) * probs
    previous = np.floor(virtual)
    following = previous + 1
    top = virtual >= n - 1
    previous[top] = -1
    following[top] = -1
    previous, following = previous.astype(np.intp), following.astype(np.intp)
    gamma = (virtual - previous)[None, :]
    a, b = columns[:, previous], columns[:, following]
    diff = b - a
    grid = a + diff * gamma
    np.subtract(b, diff * (1 - gamma), out=grid, where=np.broadcast_to(gamma >= 0.5, grid.shape))
    return np.ascontiguousarray(grid.T)


def percentile_from_grid(grid_column: np.ndarray, value: float) -> float:
    """Empirical percentile (0-100) of ``value`` from a column's quantile grid.

    Below the minimum gives 0, above the maximum 100; in between the grid is
    inverted by linear interpolation (for tied grid values, the highest
    probability, matching "share of rows <= value").
    """
    g = np.asarray(grid_column, dtype=np.float64)
    if not np.isfinite(value):
        return float("nan")
    if value < g[0]:
        return 0.0
    if value >= g[-1]:
        return 100.0
    probs = np.linspace(0.0, 1.0, g.size)
    hi = int(np.searchsorted(g, value, side="right"))  # first grid point > value
    lo = hi - 1
    if g[hi] == g[lo]:  # pragma: no cover - hi is strictly greater by construction
        return float(100.0 * probs[hi])
    frac = (value - g[lo]) / (g[hi] - g[lo])
    return float(100.0 * (probs[lo] + frac * (probs[hi] - probs[lo])))


@dataclass(frozen=True)
class FeatureEvidence:
    """The evidence of one feature for one case (see the module docstring for each number).

    ``value``, ``z`` and ``percentile`` are on the model's scale (after the
    recipe's transform). ``reading`` is the value before the transform, and
    ``direction`` is -1 when the transform reverses order at this reading
    (e.g. ``x ** -0.5``), so that ``z_reading`` and ``percentile_reading``
    say how high or low the *reading* is: a high reading never reads "low".
    """
    name: str
    value: float
    z: float
    percentile: float
    contribution: float
    conditional_z: float | None
    reading: float | None = None
    direction: int = 1

    @property
    def z_reading(self) -> float:
        return self.direction * self.z

    @property
    def percentile_reading(self) -> float:
        return self.percentile if self.direction > 0 else 100.0 - self.percentile

    @property
    def conditional_z_reading(self) -> float | None:
        return None if self.conditional_z is None else self.direction * self.conditional_z

    def to_dict(self) -> dict:
        doc = {
            "name": self.name,
            "value": finite_or_none(self.value),
            "z": finite_or_none(self.z),
            "percentile": finite_or_none(self.percentile),
            "contribution": finite_or_none(self.contribution),
            "conditional_z": None if self.conditional_z is None else finite_or_none(self.conditional_z),
        }
        if self.reading is not None:
            doc.update(reading=finite_or_none(self.reading), order_reversed=self.direction < 0,
                       z_reading=finite_or_none(self.z_reading),
                       percentile_reading=finite_or_none(self.percentile_reading))
        return doc


def transform_direction(transform_of, reading: float) -> int:
    """+1 when ``transform_of`` (a function of one reading) increases at ``reading``, -1 when it decreases.

    Judged by a small step on each side of the reading; +1 when undecided
    (a non-finite reading or a flat transform).
    """
    if reading is None or not math.isfinite(reading):
        return 1
    h = max(abs(reading), 1.0) * 1e-6
    lo, hi = transform_of(np.array([reading - h, reading + h]))
    if not (math.isfinite(lo) and math.isfinite(hi)):
        lo, hi = transform_of(np.array([reading, reading + h]))
    return -1 if math.isfinite(lo) and math.isfinite(hi) and hi < lo else 1


def evidence(model: GaussianModel, x: np.ndarray, grid: np.ndarray | None = None) -> list[FeatureEvidence]:
    """Evidence for every feature of one case (feature vector ``x``).

    Parameters
    ----------
    model : fitted GaussianModel
    x : ndarray of shape (d,)
    grid : ndarray of shape (points, d), optional
        Quantile grid of the normal population; percentiles are NaN without it.
    """
    x = np.asarray(x, dtype=np.float64)
    mu = model.mean_
    sd = np.sqrt(model.var_)
    dev = x - mu
    z = dev / sd
    if model.kind == "independent":
        contribution = -0.5 * z**2
        cond = [None] * len(x)
    else:
        P = model.precision()
        Pdev = P @ dev
        contribution = -0.5 * dev * Pdev
        cond = list(Pdev / np.sqrt(np.diag(P)))
    out = []
    for j, name in enumerate(model.names):
        pct = percentile_from_grid(grid[:, j], x[j]) if grid is not None else float("nan")
        out.append(FeatureEvidence(name, float(x[j]), float(z[j]), pct, float(contribution[j]),
                                   None if cond[j] is None else float(cond[j])))
    return out



