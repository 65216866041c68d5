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


def test_training_summary_equals_the_column_by_column_statistics():
    # Reference: numpy's own mean / std / min / max of each column, and numpy.quantile.
    from afterlook.analysis.model import training_summary

    rng = np.random.default_rng(1)
    X = rng.lognormal(size=(30_011, 6)) * 1e3
    names = [f"c{j}" for j in range(X.shape[1])]
    stats, grid = training_summary(X, names)
    for j, name in enumerate(names):
        col = X[:, j]
        # mean, min and max to the bit; the std comes from the scatter matrix's
        # diagonal (summed in row blocks), so it agrees with numpy's two-pass std to rounding.
        assert {k: v for k, v in stats[name].items() if k != "std"} == {
            "mean": float(col.mean()), "min": float(col.min()), "max": float(col.max())}
        assert stats[name]["std"] == pytest.approx(float(col.std()), rel=1e-13)
    assert np.array_equal(grid, np.quantile(X, np.linspace(0.0, 1.0, 1001), axis=0))
    assert training_summary(X, names, quantiles=False) == (stats, None)
