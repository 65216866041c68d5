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
def test_the_order_statistics_are_numpys_median_and_quantile_exactly(n, q):
    # Reference: numpy's median and quantile (default linear method) of the same deviations,
    # on resampled breast-cancer values (real values, many ties among them)
    rng = np.random.default_rng(n)
    v = load_breast_cancer().data[rng.integers(0, 569, n), 3]
    d = Deviations(v).prepare(q)
    dev = np.abs(v - np.median(v))
    assert d.quantile(q) == np.quantile(dev, q)
    np.testing.assert_array_equal(d.robust_z(v[:5]), (v[:5] - np.median(v)) / (1.4826 * np.median(dev)))


@pytest.mark.parametrize("n", [30, 101, 5000, 50_000])
@pytest.mark.parametrize("order", ["tail first", "z first", "quantile first", "quantile after z"])
def test_one_tail_fit_answers_every_target_as_tail_probability_does(n, order):
    # Reference: tail_probability (a median, then its own partition for the Pareto fit, per target)
    # on resampled breast-cancer values; many targets beyond every normal value, so most answers
    # come from the one Pareto fit that Deviations makes on the first of them and keeps.
    rng = np.random.default_rng(n + 7)
    v = load_breast_cancer().data[rng.integers(0, 569, n), 23]
    targets = np.r_[v.max() + np.ptp(v) * np.linspace(0.01, 5, 9), v.min() - np.ptp(v) * np.linspace(0.01, 5, 9),
                    np.quantile(v, [0.5, 0.99])]
    d = Deviations(v)
    if order == "z first":
        d.robust_z(targets)
    elif order == "quantile first":
        d.prepare(0.99)
    elif order == "quantile after z":
        d.robust_z(targets)
        d.prepare(0.995)
    got = [d.tail(float(t)) for t in targets]
    assert got == [tail_probability(v, float(t)) for t in targets]
    dev = np.abs(v - np.median(v))
    beyond = int(np.sum(np.abs(targets - np.median(v)) > dev.max()))
    assert beyond >= 15 and sum(method == "pareto tail" for _, method, _ in got) == beyond
    if order.startswith("quantile"):
        q = 0.99 if order == "quantile first" else 0.995
        assert d.quantile(q) == np.quantile(np.abs(v - np.median(v)), q)


def test_a_single_value_has_a_tail_as_gpd_tail_gives():
    d = Deviations(np.array([3.0]))
    with np.errstate(all="ignore"), pytest.warns(RuntimeWarning):
        assert d.tail(10.0) == tail_probability(np.array([3.0]), 10.0)


@pytest.mark.parametrize("n", [30, 569, 8192])
def test_many_targets_at_once_answer_as_one_at_a_time(n):
    # Reference: tail_probability per target. Above SCAN_TARGETS targets Deviations.tails counts from
    # one sorted copy of the deviations; the targets include every value itself (a target equal to a
    # deviation counts it: ties), values far beyond the normal ones (the Pareto tail) and repeats.
    from afterlook.core.tails import SCAN_TARGETS

    rng = np.random.default_rng(n)
    v = load_breast_cancer().data[rng.integers(0, 569, n), 3]
    med = np.median(v)
    targets = np.r_[v[: min(n, 200)], 2 * med - v[:50], v.max() + np.ptp(v) * np.linspace(0.01, 3, 20), v[:5]]
    assert targets.size > SCAN_TARGETS
    expected = [tail_probability(v, float(t)) for t in targets]
    assert Deviations(v).tails(targets) == expected
    assert Deviations(v).tails(targets[:SCAN_TARGETS]) == expected[:SCAN_TARGETS]  # the scanning path
    assert Deviations(v).tails(np.array([])) == []
