"""One more column for a fitted Gaussian without refitting the rest: the conditional update that
suggest's exact re-fit uses (:class:`afterlook.analysis.added_refit.AddedFeatureRefit`).

Checked against full re-fits and scipy in tests/reference/test_added_column_reference.py.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import AfterlookError
from .gaussian import COLLINEAR_TOL, LOG_2PI, GaussianModel, shrink_towards_diagonal

__all__ = ["AddedColumn", "added_column", "with_added_column"]


@dataclass(frozen=True)
class AddedColumn:
    """The conditional Gaussian of an added column ``y`` given the fitted columns ``x``.

    For the maximum-likelihood Gaussian of ``(x, y)`` fitted on the same rows
    as the model of ``x``, the joint log-density factorises exactly::

        log p(x, y) = log p(x) + log N(y; m + (x - mu)^T beta, s2)

    with ``beta = S_xx^-1 s_xy`` (the least-squares regression of ``y`` on
    ``x``) and ``s2 = var(y) - s_xy^T beta`` (the Schur complement), so
    the other columns' parameters never need refitting. The independent
    model has ``beta = 0`` and ``s2 = var(y)``.
    """

    mean: float  # m, the column's mean
    variance: float  # s2, its conditional variance
    beta: np.ndarray | None  # (d,) regression on the fitted columns; None for the independent model
    x_mean: np.ndarray  # (d,) mu, the fitted columns' means

    def conditional_log_density(self, X: np.ndarray, y: np.ndarray) -> np.ndarray:
        """``log N(y_i; E[y | x_i], var(y | x_i))`` for rows ``X`` ((n, d), or d columns) and values ``y`` (n,)."""
        if self.beta is None:
            mean = self.mean
        elif isinstance(X, (list, tuple)):  # column by column: no (n, d) temporary
            mean = np.full(len(y), float(self.mean))
            for j, c in enumerate(X):
                mean += self.beta[j] * (c - self.x_mean[j])
        else:
            mean = self.mean + (X - self.x_mean) @ self.beta
        with np.errstate(invalid="ignore"):
            return -0.5 * (LOG_2PI + np.log(self.variance) + (y - mean) ** 2 / self.variance)


def added_column(model: "GaussianModel", X: np.ndarray, y: np.ndarray, *,
                 precision: np.ndarray | None = None, cross: np.ndarray | None = None) -> AddedColumn | None:
    """The conditional Gaussian of a column ``y`` added to ``model``, fitted on the rows ``X`` ((n, d), or d columns).

    ``model`` must be the classical (not robust, not shrunk) maximum-
    likelihood fit on ``X``; ``precision`` may pass ``model.precision()``
    when it is reused for many columns, ``cross`` ``(X - X.mean(axis=0))^T (y - y.mean()) / n``
    when computed beforehand for many columns. Returns None when ``y`` is constant
    or (full model) collinear with the fitted columns: a full re-fit would
    refuse the singular covariance.
    """
    columns = isinstance(X, (list, tuple))
    n = len(X[0]) if columns else X.shape[0]
    my = float(y.mean())
    yc = y - my
    vy = float(yc @ yc / n)
    if not vy > 0:
        return None
    if model.kind == "independent":
        return AddedColumn(my, vy, None, model.mean_)
    if cross is not None:
        cxy = cross
    elif columns:
        from .search_inputs import centred_cross

        cxy = centred_cross(X, [y])[:, 0]
    else:
        cxy = (X - X.mean(axis=0)).T @ yc / n
    P = model.precision() if precision is None else precision
    beta = P @ cxy
    s2 = vy - float(cxy @ beta)
    if not s2 / vy >= COLLINEAR_TOL:
        return None
    return AddedColumn(my, s2, beta, model.mean_)


def with_added_column(model: "GaussianModel", X: np.ndarray, y: np.ndarray,
                      name: str = "added") -> "GaussianModel | None":
    """The full model with fixed shrinkage refitted on ``[X, y]``, or None when singular.

    Fixed shrinkage pulls towards ``trace(S) / d``, which changes with the
    new column, so the factorisation of :func:`added_column` does not hold:
    the shrunk covariance is rebuilt from the raw scatter instead.
    """
    n = X.shape[0]
    Xc = X - X.mean(axis=0)
    my = float(y.mean())
    yc = y - my
    raw_cov = (Xc.T @ Xc) / n
    cxy = Xc.T @ yc / n
    cov = np.block([[raw_cov, cxy[:, None]], [cxy[None, :], np.array([[float(yc @ yc / n)]])]])
    cov = shrink_towards_diagonal(cov, model.shrinkage_)
    new = GaussianModel(kind="full", shrinkage=model.shrinkage, names=list(model.names) + [name])
    new.mean_ = np.append(model.mean_, my)
    new.shrinkage_ = model.shrinkage_
    try:
        new.chol_ = new.cholesky_factor(cov)
    except AfterlookError:
        return None
    new.covariance_ = cov
    return new
