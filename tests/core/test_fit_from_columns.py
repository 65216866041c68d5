"""The fit reads the training columns where they are: no (n, d) copy, the quantile grid sorted beside it.

Reference: scikit-learn's bundled Wisconsin diagnostic breast cancer table (569 x 30),
numpy.quantile(method="linear") (Hyndman and Fan 1996, definition 7) and numpy.cov; and
the matrix path of the same functions, which these must equal to the bit.
"""

from __future__ import annotations

import threading
import time

import numpy as np
import pandas as pd
import pytest

import afterlook
from afterlook.analysis import fitting
from afterlook.core.density_rows import RowMoments
from afterlook.core.errors import AfterlookError
from afterlook.core.explain import grid_of_columns, quantile_grid
from afterlook.core.gaussian import GaussianModel

POINTS = np.linspace(0.0, 1.0, 1001)


@pytest.fixture(scope="module")
def cancer() -> pd.DataFrame:
    from sklearn.datasets import load_breast_cancer

    frame = load_breast_cancer(as_frame=True).frame.drop(columns="target")
    frame.columns = [f"f{j:02d}" for j in range(frame.shape[1])]  # plain names for expressions
    return frame


def test_grid_of_columns_equals_numpy_quantile_to_the_bit(cancer):
    X = cancer.to_numpy()
    expected = np.quantile(X, POINTS, axis=0, method="linear")
    assert np.array_equal(grid_of_columns([cancer[c].to_numpy() for c in cancer.columns]), expected)
    assert np.array_equal(grid_of_columns([X[:, j] for j in range(X.shape[1])]), expected)  # strided views
    assert np.array_equal(grid_of_columns([X[:, j] for j in range(X.shape[1])]), quantile_grid(X))


@pytest.mark.parametrize("full", [True, False])
def test_moments_of_columns_equal_the_matrix_path_to_the_bit(cancer, full):
    X = np.asfortranarray(cancer.to_numpy())
    a = RowMoments.of(X, full)
    b = RowMoments.of([np.ascontiguousarray(X[:, j]) for j in range(X.shape[1])], full)
    for name in ("mean", "minimum", "maximum", "scatter"):
        assert np.array_equal(getattr(a, name), getattr(b, name)), name
    assert a.n == b.n == X.shape[0]
    if full:
        np.testing.assert_allclose(b.scatter / b.n, np.cov(X, rowvar=False, bias=True), rtol=1e-12, atol=0)


@pytest.mark.parametrize("options", [{"kind": "full"}, {"kind": "independent"}, {"kind": "full", "shrinkage": 0.2},
                                     {"kind": "full", "shrinkage": "ledoit-wolf"}])
def test_a_density_fitted_from_columns_equals_one_fitted_from_the_matrix(cancer, options):
    X = np.asfortranarray(cancer.to_numpy())
    cols = [np.ascontiguousarray(X[:, j]) for j in range(X.shape[1])]
    full = options["kind"] == "full"
    a = GaussianModel(**options).fit(X, list(cancer.columns), moments=RowMoments.of(X, full))
    b = GaussianModel(**options).fit(cols, list(cancer.columns), moments=RowMoments.of(cols, full))
    assert np.array_equal(a.mean_, b.mean_) and np.array_equal(a.covariance_, b.covariance_)


def test_the_fit_leaves_the_table_alone_and_holds_the_grid_when_it_returns(cancer):
    before = cancer.copy()
    threads = threading.active_count()
    model = afterlook.fit(cancer, kind="full", transform={"f03": "log(f03)"})
    assert threading.active_count() == threads  # the grid's thread ended with the call
    pd.testing.assert_frame_equal(cancer, before)  # its columns were sorted in copies, never in place
    features = cancer.assign(f03=np.log(cancer["f03"])).to_numpy()
    assert np.array_equal(model.quantiles, np.quantile(features, POINTS, axis=0, method="linear"))
    np.testing.assert_allclose(model.density.covariance_, np.cov(features, rowvar=False, bias=True),
                               rtol=1e-10, atol=0)


def test_a_failing_grid_fails_the_fit_and_a_failing_fit_waits_for_the_grid(cancer, monkeypatch):
    def broken(columns):
        raise AfterlookError("the grid broke")

    monkeypatch.setattr(fitting, "grid_of_columns", broken)
    with pytest.raises(AfterlookError, match="the grid broke"):
        afterlook.fit(cancer, kind="full")
    monkeypatch.undo()
    finished = []
    real = fitting.grid_of_columns

    def slow(columns):
        time.sleep(0.3)  # still sorting when the fit's own error comes
        finished.append(1)
        return real(columns)

    monkeypatch.setattr(fitting, "grid_of_columns", slow)
    with pytest.raises(AfterlookError, match="singular"):
        afterlook.fit(cancer.assign(twice=2.0 * cancer["f00"]), kind="full")  # a singular covariance
    assert finished == [1]  # the error came after the grid's thread was waited for
