"""What the candidate search starts from: its seeded sample of the normal rows, the fit it re-fits from,
and the cross-covariances of many added columns with the fitted ones.

Used by :func:`afterlook.analysis.discovery.suggest`; numpy only.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np

from .gaussian import GaussianModel
from .numbers import sample_rows

__all__ = ["finite_sample", "seeded_subset", "same_fit", "centred_cross"]


def finite_sample(raw: Mapping[str, np.ndarray], names: list[str], size: int, random_state) -> np.ndarray:
    """The search's seeded sample of the rows of ``raw`` (columns ``names``) whose every value is finite.

    The rows of ``sample_rows`` over the finite rows, as before, but only the sampled
    rows are copied, into a column-major matrix (each column contiguous).
    """
    ok = np.ones(len(raw[names[0]]), dtype=bool)
    for n in names:
        ok &= np.isfinite(raw[n])
    rows = np.flatnonzero(ok)
    rows = rows[sample_rows(rows.size, size, random_state)]
    A = np.empty((rows.size, len(names)), dtype=np.float64, order="F")
    for k, n in enumerate(names):
        A[:, k] = raw[n][rows]
    return A


def seeded_subset(sample: Mapping[str, np.ndarray], size: int, random_state) -> Mapping[str, np.ndarray]:
    """``sample`` itself when it has at most ``2 * size`` rows, else its rows at ``sample_rows(n, size,
    random_state)`` (the same rows for every column). Twice, so that a step that works on a subset
    does so only where the subset is much smaller than the whole (the demo's sample is used whole)."""
    n = len(next(iter(sample.values()))) if sample else 0
    if n <= 2 * size:
        return sample
    rows = sample_rows(n, size, random_state)
    return {k: v[rows] for k, v in sample.items()}


def same_fit(density: GaussianModel, X: np.ndarray, mean: np.ndarray) -> GaussianModel | None:
    """The model's own density when it is the classical fit on exactly these rows, else None.

    A classical (not robust, unshrunk) fit is the rows' mean and covariance; when
    the rows' mean (``mean``, ``X.mean(axis=0)``) and variances equal the model's
    to 1e-12, the model was fitted on these rows and refitting would give the
    same numbers (to rounding). The variances are summed a block of rows at a
    time, so no centred copy of ``X`` is made.
    """
    if density.robust or density.shrinkage_ or density.mean_ is None or density.mean_.shape != (X.shape[1],):
        return None
    if not np.allclose(mean, density.mean_, rtol=1e-12, atol=0.0):
        return None
    var = np.zeros(X.shape[1])
    for start in range(0, X.shape[0], 8192):
        block = X[start:start + 8192] - mean
        var += np.einsum("ij,ij->j", block, block)
    var /= X.shape[0]
    if density.covariance_ is None or not np.allclose(var, np.diag(density.covariance_), rtol=1e-12, atol=0.0):
        return None
    return density


def centred_cross(X: np.ndarray, Y: np.ndarray, block: int = 8192) -> np.ndarray:
    """``(X - X.mean(axis=0))^T (Y - Y.mean(axis=0)) / n`` (d x k) for many columns ``Y`` (n x k) at once,
    centring ``X`` a block of rows at a time (no centred copy of ``X``); the means of ``Y`` are taken per
    column as :func:`added_column` takes them."""
    n = X.shape[0]
    mean = X.mean(axis=0)
    Yc = np.column_stack([Y[:, k] - float(Y[:, k].mean()) for k in range(Y.shape[1])])
    out = np.zeros((X.shape[1], Y.shape[1]))
    for start in range(0, n, block):
        out += (X[start:start + block] - mean).T @ Yc[start:start + block]
    return out / n
