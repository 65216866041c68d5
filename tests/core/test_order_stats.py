"""order_stats gives numpy's median, quantile and percentile bit for bit.

Reference: numpy itself (``np.median``, ``np.quantile`` and ``np.percentile`` with the
default linear method, the 7th definition of Hyndman and Fan). Values: the Wisconsin
diagnostic breast-cancer table bundled with scikit-learn (real values with many ties),
and property tests (hypothesis) over small arrays full of ties, NaN, infinities and
values near overflow, where numpy's rules for the mean of two values and for its
linear interpolation show.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.datasets import load_breast_cancer

from afterlook.core import order_stats


def _same(got, want) -> None:
    assert type(got) is type(want)
    assert np.array_equal(got, want, equal_nan=True), (got, want)


@pytest.mark.parametrize("n", [2, 3, 30, 31, 4999, 5000, 50_000])
@pytest.mark.parametrize("column", [0, 3, 23])
def test_breast_cancer_columns(n, column):
    rng = np.random.default_rng(n + column)
    v = load_breast_cancer().data[rng.integers(0, 569, n), column]
    _same(order_stats.median(v), np.median(v))
    for q in (0.0, 0.25, 0.5, 0.75, 0.9, 0.99, 0.995, 0.999, 1.0):
        _same(order_stats.quantile(v, q), np.quantile(v, q))
    for p in (25, 75, 99.5):
        _same(order_stats.percentile(v, p), np.percentile(v, p))


def test_the_input_is_left_unchanged():
    v = load_breast_cancer().data[:, 7].copy()
    before = v.copy()
    order_stats.median(v)
    order_stats.quantile(v, 0.99)
    np.testing.assert_array_equal(v, before)


_values = st.lists(
    st.one_of(st.integers(-4, 4).map(float), st.sampled_from([np.nan, np.inf, -np.inf, 1e308, -1e308, 0.1, 5e-324])),
    min_size=1, max_size=40)


@settings(max_examples=400, deadline=None)
@given(_values, st.one_of(st.sampled_from([0.0, 0.25, 0.5, 0.75, 0.99, 1.0]), st.floats(0.0, 1.0)))
def test_ties_nan_infinities_and_overflow(values, q):
    v = np.array(values)
    with np.errstate(all="ignore"):
        _same(order_stats.median(v), np.median(v))
        _same(order_stats.quantile(v, q), np.quantile(v, q))
        _same(order_stats.percentile(v, q * 100), np.percentile(v, q * 100))


@pytest.mark.parametrize("n", [2, 3, 31, 5000, 50_000])
@pytest.mark.parametrize("column", [0, 23])
def test_a_pair_of_percentiles_from_one_copy_is_numpys_pair(n, column):
    rng = np.random.default_rng(n + column)
    v = load_breast_cancer().data[rng.integers(0, 569, n), column]
    before = v.copy()
    for high, low in ((75, 25), (99.5, 0.5), (50, 50), (100, 0), (25, 25), (90, 89.99)):
        got = order_stats.percentile_pair(v, high, low)
        _same(got[0], np.percentile(v, high))
        _same(got[1], np.percentile(v, low))
    np.testing.assert_array_equal(v, before)


@settings(max_examples=400, deadline=None)
@given(_values, st.floats(0.0, 100.0), st.floats(0.0, 100.0))
def test_a_pair_of_percentiles_with_ties_nan_and_infinities(values, p, r):
    v = np.array(values)
    high, low = max(p, r), min(p, r)
    with np.errstate(all="ignore"):
        got = order_stats.percentile_pair(v, high, low)
        _same(got[0], np.percentile(v, high))
        _same(got[1], np.percentile(v, low))
