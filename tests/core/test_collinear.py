"""Candidates that a full-covariance model cannot take.

Outside references: ``numpy.linalg.matrix_rank`` of the centred augmented
matrix and ``numpy.linalg.cond`` of its covariance (a linear combination makes
the covariance singular); the Wisconsin diagnostic breast cancer table shipped
with scikit-learn as real features.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer

from afterlook.core.collinear import LinearSpan, is_linear_combination, unexplained_share


def test_a_standardized_difference_is_a_linear_combination_and_a_ratio_is_not():
    X = load_breast_cancer().data[:, :4]
    mean, sd = X.mean(0), X.std(0)
    std_diff = (X[:, 0] - mean[0]) / sd[0] - (X[:, 2] - mean[2]) / sd[2]
    ratio = X[:, 0] / X[:, 3]
    for candidate, singular in ((std_diff, True), (ratio, False)):
        augmented = np.column_stack([X, candidate])
        centred = augmented - augmented.mean(0)
        rank = np.linalg.matrix_rank(centred)
        assert (rank < augmented.shape[1]) == singular  # numpy's rank is the reference
        assert is_linear_combination(candidate, X) == singular
        assert (np.linalg.cond(np.cov(augmented, rowvar=False)) > 1e12) == singular


def test_nan_rows_are_left_out_and_edge_cases_are_defined():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(200, 3))
    c = 2 * X[:, 0] - X[:, 1] + 5
    c[::7] = np.nan
    assert is_linear_combination(c, X)
    assert not is_linear_combination(X[:, 0] ** 2, X)
    assert unexplained_share(np.ones(50), X[:50]) == 0.0
    assert unexplained_share(X[:2, 0], X[:2]) == 1.0


def test_the_factored_span_agrees_with_the_direct_fit():
    X = load_breast_cancer().data[:, :6]
    span = LinearSpan(X)
    rng = np.random.default_rng(2)
    for candidate in (X[:, 0] / X[:, 1], X @ rng.normal(size=6) + 3, X[:, 2] ** 2, np.where(X[:, 0] > 15, np.nan, X[:, 1])):
        assert span.unexplained_share(candidate) == pytest.approx(unexplained_share(candidate, X), abs=1e-10)
    assert span.contains(X @ rng.normal(size=6)) and not span.contains(X[:, 0] * X[:, 1])
