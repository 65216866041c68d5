"""tails.Deviations gives exactly the numbers of robust_z, tail_probability and np.quantile on the same values.

Reference: the one-question functions of afterlook.core.tails (checked against scipy in
tests/reference) and numpy's quantile; values: the Wisconsin diagnostic breast-cancer table
bundled with scikit-learn.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer

from afterlook.core.tails import Deviations, robust_z, tail_probability


@pytest.mark.parametrize("column", [0, 3, 7, 19, 29])
def test_deviations_answer_as_the_single_functions(column):
    v = load_breast_cancer().data[:, column]
    targets = np.r_[np.quantile(v, [0.0, 0.01, 0.5, 0.9, 0.999]), v.max() * 3, v.min() - np.ptp(v)]
    d = Deviations(v)
    np.testing.assert_array_equal(d.robust_z(targets), robust_z(v, targets))
    for t in targets:
        assert d.tail(float(t)) == tail_probability(v, float(t))
    assert d.quantile(0.99) == np.quantile(np.abs(v - np.median(v)), 0.99)


def test_a_constant_majority_falls_back_to_the_sd_as_robust_z_does():
    v = np.r_[np.zeros(90), np.linspace(1, 5, 10)]
    np.testing.assert_array_equal(Deviations(v).robust_z(np.array([2.0, 7.0])), robust_z(v, np.array([2.0, 7.0])))


@pytest.mark.parametrize("n", [30, 31, 100, 101, 4999, 5000, 50_000])
@pytest.mark.parametrize("q", [0.99, 0.5, 0.9, 0.999, 0.995])
def test_one_partition_gives_numpys_median_and_quantile_exactly(n, q):
    # Reference: numpy's median and quantile (default linear method) of the same deviations,
    # on resampled breast-cancer values (real values, many ties among them)
    rng = np.random.default_rng(n)
    v = load_breast_cancer().data[rng.integers(0, 569, n), 3]
    d = Deviations(v).prepare(q)
    dev = np.abs(v - np.median(v))
    assert d.quantile(q) == np.quantile(dev, q)
    np.testing.assert_array_equal(d.robust_z(v[:5]), (v[:5] - np.median(v)) / (1.4826 * np.median(dev)))
