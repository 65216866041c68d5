"""External checks of the recipe's per-feature transforms (afterlook.core.recipe).

References: ``scipy.stats.boxcox`` and ``scipy.stats.yeojohnson`` (fitted
maximum-likelihood lambda and transformed values) and ``numpy.log1p``. The
seeded skewed samples are input only.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from afterlook.core.recipe import Recipe, Transform, apply_transform, parse_transform

LAMBDA_RTOL = 1e-6
VALUE_RTOL = 1e-10
VALUE_ATOL = 1e-12


def skewed_positive(seed: int, n: int = 400) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.lognormal(mean=1.0, sigma=0.8, size=n)


def skewed_signed(seed: int, n: int = 400) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.gamma(shape=1.5, scale=3.0, size=n) - 2.0  # some negative values


def fitted(recipe: Recipe, column: str, values: np.ndarray) -> tuple[Recipe, np.ndarray]:
    r = recipe.fit({column: values})
    return r, r.apply({column: values}).column(column)


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("spelling", ["boxcox", "Box-Cox", "boxcox()"])
def test_boxcox_lambda_and_values_equal_scipy(seed, spelling):
    x = skewed_positive(seed)
    recipe = Recipe(["hours"], transforms={"hours": parse_transform("hours", spelling)})
    r, out = fitted(recipe, "hours", x)
    # Reference: scipy.stats.boxcox maximum-likelihood lambda and transformed values.
    ref_values, ref_lambda = stats.boxcox(x)
    assert r.transforms["hours"].kind == "boxcox"
    assert r.transforms["hours"].lmbda == pytest.approx(ref_lambda, rel=LAMBDA_RTOL)
    np.testing.assert_allclose(out, ref_values, rtol=VALUE_RTOL, atol=VALUE_ATOL)


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("spelling", ["yeojohnson", "Yeo-Johnson"])
def test_yeojohnson_lambda_and_values_equal_scipy(seed, spelling):
    x = skewed_signed(seed)
    assert (x < 0).any() and (x > 0).any()
    recipe = Recipe(["load"], transforms={"load": parse_transform("load", spelling)})
    r, out = fitted(recipe, "load", x)
    # Reference: scipy.stats.yeojohnson maximum-likelihood lambda and transformed values.
    ref_values, ref_lambda = stats.yeojohnson(x)
    assert r.transforms["load"].kind == "yeojohnson"
    assert r.transforms["load"].lmbda == pytest.approx(ref_lambda, rel=LAMBDA_RTOL)
    np.testing.assert_allclose(out, ref_values, rtol=VALUE_RTOL, atol=VALUE_ATOL)


def test_power_lambdas_are_fitted_on_finite_values_only():
    x = skewed_positive(5)
    dirty = np.r_[x, np.nan, np.inf]
    r = Recipe(["a"], transforms={"a": Transform("boxcox")}).fit({"a": dirty})
    assert r.transforms["a"].lmbda == pytest.approx(stats.boxcox(x)[1], rel=LAMBDA_RTOL)
    out = r.apply({"a": dirty}).column("a")
    assert np.isnan(out[-2])  # NaN in, NaN out
    y = skewed_signed(5)
    r = Recipe(["b"], transforms={"b": Transform("yeojohnson")}).fit({"b": np.r_[y, np.nan]})
    assert r.transforms["b"].lmbda == pytest.approx(stats.yeojohnson(y)[1], rel=LAMBDA_RTOL)


@pytest.mark.parametrize("lam", [0.0, 0.5, -1.0, 2.0])
def test_fixed_lambda_values_equal_scipy(lam):
    x = skewed_positive(9)
    out = apply_transform(parse_transform("x", f"boxcox({lam})"), "x", x)
    np.testing.assert_allclose(out, stats.boxcox(x, lmbda=lam), rtol=VALUE_RTOL, atol=VALUE_ATOL)
    y = skewed_signed(9)
    out = apply_transform(parse_transform("y", f"yeojohnson({lam})"), "y", y)
    np.testing.assert_allclose(out, stats.yeojohnson(y, lmbda=lam), rtol=VALUE_RTOL, atol=VALUE_ATOL)


@pytest.mark.parametrize("kind", ["boxcox", "yeojohnson"])
def test_power_transform_of_infinite_input_is_nan(kind):
    # Mathematically the limit exists, but an infinite reading is a broken
    # sensor value and the data contract says non-finite values become NaN
    # that the model reports, never a number that gets scored.
    out = apply_transform(Transform(kind, lmbda=-0.5), "x", np.array([np.inf, 4.0]))
    assert np.isnan(out[0])
    ref = stats.boxcox(np.array([4.0]), lmbda=-0.5) if kind == "boxcox" else stats.yeojohnson(np.array([4.0]), lmbda=-0.5)
    assert out[1] == pytest.approx(ref[0], rel=VALUE_RTOL)


def test_boxcox_of_non_positive_values_is_nan():
    # Box-Cox is defined for x > 0 only (scipy.stats.boxcox refuses other values).
    out = apply_transform(Transform("boxcox", lmbda=0.5), "x", np.array([-1.0, 0.0, 4.0]))
    assert np.isnan(out[:2]).all()
    assert out[2] == pytest.approx(stats.boxcox(np.array([4.0]), lmbda=0.5)[0], rel=VALUE_RTOL)


def test_expression_transform_log_x_plus_1_equals_numpy_log1p():
    rng = np.random.default_rng(0)
    x = np.r_[rng.exponential(50.0, size=500), 0.0, 1e-12, -0.5]
    recipe = Recipe(["hours_since_service"], transforms={
        "hours_since_service": parse_transform("hours_since_service", "log(hours_since_service + 1)")
    })
    out = recipe.apply({"hours_since_service": x}).column("hours_since_service")
    # Reference: numpy.log1p. (log(x + 1) loses digits for tiny x; the values
    # here are far enough from 0 for a 1e-10 relative match except 1e-12,
    # compared with an absolute tolerance.)
    ref = np.log1p(x)
    np.testing.assert_allclose(out, ref, rtol=1e-10, atol=1e-15)


def test_expression_transform_outside_domain_is_nan():
    x = np.array([-1.0, -2.0, 3.0])
    out = apply_transform(parse_transform("x", "log(x + 1)"), "x", x)
    with np.errstate(all="ignore"):
        ref = np.log1p(x)
    assert np.isnan(out[:2]).all() and not np.isfinite(ref[:2]).any()
    assert out[2] == pytest.approx(ref[2], rel=1e-12)
