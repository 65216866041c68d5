"""Gaussian log-densities and moments of many rows, in cache-sized blocks (used by :mod:`.gaussian`).

The training and scoring kernels of afterlook: each reads its rows once,
works on blocks that stay in a core's cache, and accepts the rows either as
an (n, d) array in any memory order or as d columns (views of a
DataFrame's columns), so no (n, d) copy is needed to score a table.
Only numpy: ``scipy.linalg`` costs about 0.13 s to import, a fifth of a
whole ``afterlook misses`` command.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

LOG_2PI = float(np.log(2.0 * np.pi))


def triangular_inverse(chol: np.ndarray) -> np.ndarray:
    """``L^-1`` of a lower-triangular factor, lower-triangular itself.

    numpy's LAPACK inverse rather than scipy's triangular solve: importing
    ``scipy.linalg`` costs about 0.13 s, a fifth of a whole ``afterlook
    misses`` command. The inverse of a Cholesky factor of a covariance that
    :meth:`GaussianModel.cholesky_factor` accepted is well conditioned.
    """
    return np.tril(np.linalg.inv(chol))


# Values per block of rows: two (block, d) buffers of 1 MB each stay in a
# core's L2 cache (2 MB here) while BLAS works on them. Measured on 1,000,000 x
# 32: blocks of 1,024 rows were 6% slower (a numpy call per column per block),
# 16,384 rows 60% slower (out of cache).
_BLOCK_VALUES = 131_072


def full_log_density(X, mean: np.ndarray, chol: np.ndarray) -> np.ndarray:
    """Multivariate normal log-density through the lower Cholesky factor.

    ``log p = -1/2 (d log 2 pi + 2 sum log diag L + ||L^-1 (x - mu)||^2)``.

    ``X`` is an (n, d) array in any memory order, or a sequence of d columns
    (1-D arrays of length n; a DataFrame's columns as views, so the (n, d)
    matrix is never built). Rows go through in blocks that stay in cache:
    centred into one buffer, whitened by one matrix product (BLAS gemm with
    the explicit ``L^-T``; ``L`` is well conditioned because fit() refuses or
    shrinks a singular S) into a second, squared and summed in place.
    """
    matrix = X if isinstance(X, np.ndarray) and X.ndim == 2 else None
    columns = None if matrix is not None else as_columns(X)
    n, d = matrix.shape if matrix is not None else (len(columns[0]) if columns else 0, len(columns))
    const = -0.5 * d * LOG_2PI - np.log(np.diag(chol)).sum()
    whiten = np.ascontiguousarray(triangular_inverse(chol).T)
    out = np.empty(n)
    block = max(1, min(n, _BLOCK_VALUES // max(d, 1)))
    centred = np.empty((d, block))  # (d, block): each column's slice is written contiguously
    white = np.empty((block, d))
    for start in range(0, n, block):
        stop = min(n, start + block)
        m = stop - start
        c = centred[:, :m]
        if matrix is not None:  # one call per block (the columns are contiguous when X is Fortran-ordered)
            np.subtract(matrix[start:stop].T, mean[:, None], out=c)
        else:
            for j, col in enumerate(columns):
                np.subtract(col[start:stop], mean[j], out=c[j])
        w = white[:m]
        np.matmul(c.T, whiten, out=w)
        np.einsum("ij,ij->i", w, w, out=out[start:stop])
    out *= -0.5
    out += const
    return out


def as_columns(X) -> list[np.ndarray]:
    """An (n, d) array's columns (views of a float64 one) or a sequence of d 1-D arrays, as a list of float64 arrays."""
    if isinstance(X, np.ndarray) and X.ndim == 2:
        X = X if X.dtype == np.float64 else X.astype(np.float64)
        return [X[:, j] for j in range(X.shape[1])]
    return [np.asarray(c, dtype=np.float64) for c in X]


def _independent_log_density_columns(columns: list[np.ndarray], mean: np.ndarray, var: np.ndarray) -> np.ndarray:
    """:func:`independent_log_density` of d columns, summed column by column (no (n, d) temporaries)."""
    n = len(columns[0]) if columns else 0
    z2 = np.zeros(n)
    tmp = np.empty(n)
    for j, col in enumerate(columns):
        np.subtract(col, mean[j], out=tmp)
        np.multiply(tmp, tmp, out=tmp)
        tmp /= var[j]
        z2 += tmp
    const = -0.5 * (len(columns) * LOG_2PI + np.log(var).sum())
    return const - 0.5 * z2


@dataclass
class RowMoments:
    """What one look at the training rows gives: count, per-column mean, min and max, and the centred scatter."""

    n: int
    mean: np.ndarray
    minimum: np.ndarray
    maximum: np.ndarray
    scatter: np.ndarray

    @classmethod
    def of(cls, X: np.ndarray, full: bool = True, *, mean: np.ndarray | None = None,
           minimum: np.ndarray | None = None, maximum: np.ndarray | None = None) -> "RowMoments":
        """Moments of the rows of ``X`` (n, d), or of d columns (1-D arrays of length n, e.g. views of a
        DataFrame's columns: no (n, d) copy is made); an array is fastest Fortran-ordered.

        The scatter ``sum (x - mean)(x - mean)^T`` is summed over row blocks
        centred in a cache-sized buffer, so no centred copy of ``X`` is made.
        ``full=False`` sums only its diagonal (O(n d), for the independent model).
        ``mean``, ``minimum``, ``maximum``: the columns' own, when the caller
        already has them (read while each column was in cache).
        """
        matrix = None if isinstance(X, (list, tuple)) else X
        if matrix is None:  # d columns: centred a block at a time into the same buffer (the same numbers)
            columns = as_columns(X)
            n, d = (len(columns[0]) if columns else 0), len(columns)
            if mean is None:
                mean = np.array([c.mean() for c in columns])
            if minimum is None or maximum is None:
                minimum, maximum = np.array([c.min() for c in columns]), np.array([c.max() for c in columns])
        else:
            X = matrix = np.asarray(matrix, dtype=np.float64)
            n, d = X.shape
            mean = X.mean(axis=0) if mean is None else mean
        scatter = np.zeros((d, d))
        squares = np.zeros(d)
        block = max(1, min(n, _BLOCK_VALUES // max(d, 1)))
        buf = np.empty((d, block))
        for start in range(0, n, block):
            stop = min(n, start + block)
            c = buf[:, : stop - start]
            if matrix is not None:
                np.subtract(X[start:stop].T, mean[:, None], out=c)
            else:
                for j, col in enumerate(columns):
                    np.subtract(col[start:stop], mean[j], out=c[j])
            if full:
                scatter += c @ c.T
            else:
                squares += np.einsum("ij,ij->i", c, c)
        if not full:
            scatter = np.diag(squares)
        return cls(n, mean, X.min(axis=0) if minimum is None else minimum,
                   X.max(axis=0) if maximum is None else maximum, scatter)

    @property
    def all_finite(self) -> bool:
        # min and max propagate NaN, and an infinite value is the min or the max.
        return bool(np.isfinite(self.minimum).all() and np.isfinite(self.maximum).all())

    def std(self) -> np.ndarray:
        """Per-column standard deviation (divides by n)."""
        return np.sqrt(np.diag(self.scatter) / self.n)
