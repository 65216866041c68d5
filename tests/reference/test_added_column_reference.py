"""The one-added-column refit in afterlook.core.added_column against a naive full refit.

Reference: a deliberately naive refit written here. It stacks the new
column onto the training matrix, takes the maximum-likelihood mean and
covariance with numpy (``mean``, ``cov(..., bias=True)``), shrinks towards
``trace(S) / d`` by hand where asked, and scores with
``scipy.stats.multivariate_normal.logpdf`` (or, for the independent model, a
sum of ``scipy.stats.norm.logpdf``). Nothing of afterlook's own linear
algebra is used for the expected values.

Random data is input only.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from afterlook.core.added_column import added_column, with_added_column
from afterlook.core.gaussian import GaussianModel

RTOL = 1e-8  # relative tolerance of log-densities (Cholesky vs scipy's eigendecomposition)
ATOL = 1e-8


def rows(n: int, d: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Correlated training rows and an added column related to them (input data only)."""
    rng = np.random.default_rng(seed)
    A = rng.normal(size=(d, d))
    X = rng.normal(size=(n, d)) @ A.T * rng.uniform(0.5, 10.0, size=d) + rng.uniform(-50, 50, size=d)
    y = X @ rng.normal(size=d) * 0.1 + rng.normal(scale=2.0, size=n) + 7.0
    return X, y


def naive_full_log_density(train: np.ndarray, rows_: np.ndarray, shrinkage: float = 0.0) -> np.ndarray:
    """Refit the whole Gaussian on ``train`` (ML covariance, optional fixed shrinkage) and score ``rows_``."""
    mean = train.mean(axis=0)
    cov = np.cov(train, rowvar=False, bias=True)
    if shrinkage:
        d = cov.shape[0]
        cov = (1 - shrinkage) * cov + shrinkage * np.trace(cov) / d * np.eye(d)
    return stats.multivariate_normal(mean=mean, cov=cov).logpdf(rows_)


@pytest.mark.parametrize("as_columns", [False, True], ids=["matrix", "columns"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_full_model_plus_conditional_equals_the_naive_refit(seed, as_columns):
    X, y = rows(400, 4, seed)
    Xn, yn = rows(50, 4, seed + 100)
    model = GaussianModel(kind="full").fit(X)
    # the rows as a matrix, or as d separate columns (how suggest's re-fit reads the training features)
    fit_rows = [X[:, j].copy() for j in range(X.shape[1])] if as_columns else X
    new_rows = [Xn[:, j].copy() for j in range(Xn.shape[1])] if as_columns else Xn
    column = added_column(model, fit_rows, y)
    assert column is not None
    got = model.log_density(Xn) + column.conditional_log_density(new_rows, yn)
    expected = naive_full_log_density(np.column_stack([X, y]), np.column_stack([Xn, yn]))
    np.testing.assert_allclose(got, expected, rtol=RTOL, atol=ATOL)


def test_independent_model_adds_a_univariate_normal():
    X, y = rows(300, 3, 7)
    Xn, yn = rows(40, 3, 8)
    model = GaussianModel(kind="independent").fit(X)
    column = added_column(model, X, y)
    got = model.log_density(Xn) + column.conditional_log_density(Xn, yn)
    aug, aug_new = np.column_stack([X, y]), np.column_stack([Xn, yn])
    expected = sum(stats.norm(aug[:, j].mean(), aug[:, j].std()).logpdf(aug_new[:, j]) for j in range(aug.shape[1]))
    np.testing.assert_allclose(got, expected, rtol=RTOL, atol=ATOL)


@pytest.mark.parametrize("shrinkage", [0.1, 0.5])
def test_fixed_shrinkage_rebuilds_the_shrunk_covariance(shrinkage):
    X, y = rows(300, 3, 11)
    Xn, yn = rows(30, 3, 12)
    model = GaussianModel(kind="full", shrinkage=shrinkage).fit(X)
    new = with_added_column(model, X, y)
    assert new is not None
    got = new.log_density(np.column_stack([Xn, yn]))
    expected = naive_full_log_density(np.column_stack([X, y]), np.column_stack([Xn, yn]), shrinkage)
    np.testing.assert_allclose(got, expected, rtol=RTOL, atol=ATOL)


def test_constant_or_collinear_column_is_declined_as_the_full_refit_would():
    X, _ = rows(200, 3, 3)
    model = GaussianModel(kind="full").fit(X)
    assert added_column(model, X, np.full(200, 4.0)) is None  # zero variance
    assert added_column(model, X, 2.0 * X[:, 0] - X[:, 2] + 1.0) is None  # exact linear combination
    # and the naive refit agrees that the augmented covariance is singular
    cov = np.cov(np.column_stack([X, 2.0 * X[:, 0] - X[:, 2] + 1.0]), rowvar=False, bias=True)
    assert np.linalg.matrix_rank(cov) == 3
