"""The shaping search's reused buffers give the numbers of fresh temporaries, to the last bit.

Reference: the Box-Cox slope and the K^2 moments written out inside this test with a fresh
array for every temporary (what the module did before it reused buffers), on the Wisconsin
diagnostic breast-cancer table bundled with scikit-learn, in row-major and column-major
layouts and on column subsets as the Newton steps take them.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer

from afterlook.core import shaping_fast


def _slope_fresh(lam, D):
    Z = np.exp(D * lam)
    a1 = Z.mean(axis=0)
    Zc = Z - a1
    ZD = Z * D
    v = np.einsum("ij,ij->j", Zc, Zc)
    v1 = 2.0 * np.einsum("ij,ij->j", Zc, ZD)
    ZDc = ZD - ZD.mean(axis=0)
    v2 = 2.0 * np.einsum("ij,ij->j", Zc, ZD * D) + 2.0 * np.einsum("ij,ij->j", ZDc, ZDc)
    return v1 / v - 2.0 / lam, v2 / v - (v1 / v) ** 2 + 2.0 / lam**2


def _moments_fresh(V):
    n = V.shape[0]
    C = V - V.mean(axis=0)
    C2 = C * C
    return C2.mean(axis=0), np.einsum("ij,ij->j", C2, C) / n, np.einsum("ij,ij->j", C2, C2) / n


@pytest.fixture(scope="module")
def logs():
    return np.log(load_breast_cancer().data + 1e-3)


@pytest.mark.parametrize("order", ["C", "F"])
def test_the_slope_with_reused_buffers_is_the_fresh_one(logs, order):
    L = np.asarray(logs, order=order)
    D = L - L.mean(axis=0)
    scratch = shaping_fast._Scratch(D.size, 5)
    lam = np.linspace(-2.2, 2.7, D.shape[1])
    for cols in (np.arange(D.shape[1]), np.array([0, 3, 7, 19, 29]), np.array([5])):
        sub = D[:, cols]  # a Newton step's active columns
        for _ in range(2):  # the same buffers again
            got = shaping_fast._slope(lam[cols], sub, scratch)
            want = _slope_fresh(lam[cols], sub)
            for g, w in zip(got, want):
                np.testing.assert_array_equal(g, w)


@pytest.mark.parametrize("order", ["C", "F"])
def test_k2_with_reused_buffers_is_the_fresh_one(logs, order):
    V = np.asarray(logs, order=order)
    scratch = shaping_fast._Scratch(V.size, 3)
    with_scratch = shaping_fast.k2_statistics(V, scratch)
    without = shaping_fast.k2_statistics(V)
    for a, b in zip(with_scratch, without):
        np.testing.assert_array_equal(a, b)
    # and k2_statistics' own moments are the fresh ones (its temporaries live in the buffers)
    m2, m3, _ = _moments_fresh(V)
    np.testing.assert_array_equal(with_scratch[1], m3 / m2**1.5)


def test_power_mle_is_the_same_in_either_layout_of_its_input(logs):
    # Reference: the row-major input's answer, which takes the column-major copies D[:, active] itself
    lam_c, ok_c = shaping_fast.power_mle(np.ascontiguousarray(logs))
    lam_f, ok_f = shaping_fast.power_mle(np.asfortranarray(logs))
    np.testing.assert_array_equal(ok_c, ok_f)
    np.testing.assert_allclose(lam_c[ok_c], lam_f[ok_f], rtol=1e-9)
