"""What the candidate search starts from: its seeded sample of the normal rows, the fit it re-fits from,
and the cross-covariances of many added columns with the fitted ones.

Used by :func:`afterlook.analysis.discovery.suggest`; numpy only.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np

from .density_rows import as_columns
from .gaussian import GaussianModel
from .numbers import sample_rows

__all__ = ["finite_sample", "seeded_subset", "as_columns", "column_means", "same_fit", "centred_cross"]


def finite_sample(raw: Mapping[str, np.ndarray], names: list[str], size: int, random_state,
                  known_finite: frozenset = frozenset()) -> np.ndarray:
    """The search's seeded sample of the rows of ``raw`` (columns ``names``) whose every value is finite.

    The rows of ``sample_rows`` over the finite rows, as before, but only the sampled
    rows are copied, into a column-major matrix (each column contiguous). ``known_finite``:
    columns the caller knows to be finite on every row (not looked at again).
    """
    n_rows = len(raw[names[0]])
    check = [n for n in names if n not in known_finite]
    if check:
        ok = np.ones(n_rows, dtype=bool)
        for n in check:
            ok &= np.isfinite(raw[n])
        rows = np.flatnonzero(ok)
    else:
        rows = np.arange(n_rows)
    rows = rows[sample_rows(rows.size, size, random_state)]
    A = np.empty((rows.size, len(names)), dtype=np.float64, order="F")
    for k, n in enumerate(names):
        col = raw[n]
        if isinstance(col, np.ndarray) and col.dtype == np.float64:
            # straight into the column (mode "clip" is numpy's unbuffered one; every row index is in range)
            np.take(col, rows, out=A[:, k], mode="clip")
        else:
            A[:, k] = col[rows]
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


def column_means(X) -> np.ndarray:
    """The mean of every column of an (n, d) array or of a sequence of d columns."""
    return np.array([float(c.mean()) for c in as_columns(X)])


def same_fit(density: GaussianModel, X, mean: np.ndarray) -> GaussianModel | None:
    """The model's own density when it is the classical fit on exactly these rows, else None.

    ``X``: the rows as an (n, d) array or as d columns. A classical (not robust,
    unshrunk) fit is the rows' mean and covariance; when the rows' mean (``mean``)
    and variances equal the model's to 1e-12, the model was fitted on these rows
    and refitting would give the same numbers (to rounding). The variances are
    summed column by column (or, for an array, a block of rows at a time), so no
    centred copy of the rows is made.
    """
    if density.robust or density.shrinkage_ or density.mean_ is None or density.mean_.shape != (len(mean),):
        return None
    if not np.allclose(mean, density.mean_, rtol=1e-12, atol=0.0):
        return None
    if isinstance(X, np.ndarray) and X.ndim == 2:
        n = X.shape[0]
        var = np.zeros(X.shape[1])
        for start in range(0, n, 8192):
            block = X[start:start + 8192] - mean
            var += np.einsum("ij,ij->j", block, block)
    else:
        cols = as_columns(X)
        n = len(cols[0])
        var = np.empty(len(cols))
        for j, c in enumerate(cols):
            centred = c - mean[j]
            var[j] = centred @ centred
    var /= n
    if density.covariance_ is None or not np.allclose(var, np.diag(density.covariance_), rtol=1e-12, atol=0.0):
        return None
    return density


def centred_cross(X, Y, block: int = 8192, x_means: np.ndarray | None = None) -> np.ndarray:
    """``(X - X.mean(axis=0))^T (Y - Y.mean(axis=0)) / n`` (d x k) for many columns ``Y`` at once.

    ``X`` and ``Y`` are (n, d) and (n, k) arrays or sequences of columns. Both are
    centred a block of rows at a time into two small column-major buffers that stay
    in cache, so no centred (or stacked) copy of the rows is made; the means are
    taken per column, as :func:`afterlook.core.added_column.added_column` takes them (``x_means``:
    :func:`column_means` of ``X``, when the caller already has them).
    """
    xs, ys = as_columns(X), as_columns(Y)
    n, d, k = len(xs[0]), len(xs), len(ys)
    mx = column_means(xs) if x_means is None else x_means
    my = column_means(ys)
    out = np.zeros((d, k))
    bx = np.empty((min(block, n), d), order="F")
    by = np.empty((min(block, n), k), order="F")
    for start in range(0, n, block):
        stop = min(start + block, n)
        m = stop - start
        for j, c in enumerate(xs):
            np.subtract(c[start:stop], mx[j], out=bx[:m, j])
        for j, c in enumerate(ys):
            np.subtract(c[start:stop], my[j], out=by[:m, j])
        out += bx[:m].T @ by[:m]
    return out / n
