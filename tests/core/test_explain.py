"""The quantile grid behind every percentile (afterlook.core.explain.quantile_grid)."""

from __future__ import annotations

import numpy as np
import pytest

from afterlook.core.explain import quantile_grid

@pytest.mark.parametrize("shape, kind", [((20_011, 9), "lognormal"), ((1_003, 4), "ties"), ((2, 3), "normal"),
                                         ((17, 1), "normal"), ((500, 3), "with_nan")])
def test_quantile_grid_equals_numpy_quantile_to_the_bit(shape, kind):
    # Reference: numpy.quantile(method="linear"), Hyndman and Fan (1996) definition 7.
    rng = np.random.default_rng(sum(shape))
    if kind == "lognormal":
        X = rng.lognormal(size=shape)
    elif kind == "ties":
        X = rng.integers(0, 5, size=shape).astype(float)
    else:
        X = rng.normal(size=shape)
    if kind == "with_nan":
        X[7, 1] = np.nan
    expected = np.quantile(X, np.linspace(0.0, 1.0, 1001), axis=0, method="linear")
    got = quantile_grid(X)
    assert got.shape == expected.shape == (1001, shape[1])
    assert np.array_equal(got, expected, equal_nan=True)
