"""The exact re-fit reuses the model's own density only when it is the classical fit on the same rows.

Reference: a fresh :class:`afterlook.core.gaussian.GaussianModel` fit on the rows (itself checked
against numpy / scikit-learn in tests/reference), on the Wisconsin diagnostic breast-cancer table
bundled with scikit-learn.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer

import afterlook
from afterlook.core.search_inputs import same_fit as _same_fit
from afterlook.core.gaussian import GaussianModel


@pytest.fixture(scope="module")
def table():
    data = load_breast_cancer()
    return pd.DataFrame(data.data[:, :8], columns=[n.replace(" ", "_") for n in data.feature_names[:8]])


@pytest.mark.parametrize("kind,shrinkage", [("full", None), ("independent", None), ("full", 0.0)])
def test_the_models_density_is_reused_for_its_own_rows_and_equals_a_fresh_fit(table, kind, shrinkage):
    model = afterlook.fit(table, kind=kind, shrinkage=shrinkage)
    X = table.to_numpy(dtype=float)
    reused = _same_fit(model.density, X, X.mean(axis=0))
    assert reused is model.density
    fresh = GaussianModel(kind=kind, shrinkage=shrinkage).fit(X)
    np.testing.assert_allclose(reused.mean_, fresh.mean_, rtol=1e-13)
    np.testing.assert_allclose(reused.covariance_, fresh.covariance_, rtol=1e-12)


@pytest.mark.parametrize("rows", [slice(0, 400), slice(1, None)])
def test_other_rows_or_a_shrunk_fit_are_refitted(table, rows):
    X = table.to_numpy(dtype=float)
    model = afterlook.fit(table.iloc[rows], kind="full")
    assert _same_fit(model.density, X, X.mean(axis=0)) is None
    shrunk = afterlook.fit(table, kind="full", shrinkage=0.2)
    assert _same_fit(shrunk.density, X, X.mean(axis=0)) is None


def test_the_finite_sample_is_the_sample_of_the_stacked_finite_rows(table):
    # Reference: the plain way (stack every column, drop rows with a NaN, take numbers.sample_rows of them)
    from afterlook.core.numbers import sample_rows
    from afterlook.core.search_inputs import finite_sample

    X = np.tile(table.to_numpy(dtype=float), (4, 1))
    X[::7, 2] = np.nan
    X[3::11, 5] = np.inf
    raw = {n: X[:, k] for k, n in enumerate(table.columns)}
    names = list(table.columns)
    finite = X[np.all(np.isfinite(X), axis=1)]
    for size, seed in ((500, 0), (1000, 3), (10_000, 0)):
        expected = finite[sample_rows(finite.shape[0], size, seed)]
        np.testing.assert_array_equal(finite_sample(raw, names, size, seed), expected)
