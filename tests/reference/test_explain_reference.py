"""External checks of the per-feature evidence in afterlook.core.explain.

References:

* conditional z: a naive computation written here from the partitioned
  covariance (Schur complement), the textbook conditional of a multivariate
  normal: ``E[x_j | rest] = mu_j + S_jr S_rr^-1 (x_r - mu_r)`` and
  ``var(x_j | rest) = S_jj - S_jr S_rr^-1 S_rj``. It shares no code with the
  precision-matrix shortcut afterlook uses;
* contributions: they must add up to ``log p(x) - log p(mu)`` where both
  log-densities come from ``scipy.stats.multivariate_normal``;
* percentile: ``scipy.stats.percentileofscore(kind="weak")`` (share of rows
  ``<=`` the value);
* z: ``(x - mean) / std`` with numpy (ddof=0, the model's convention).

The seeded rows are input only.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from afterlook.core.explain import evidence, percentile_from_grid, quantile_grid
from afterlook.core.gaussian import GaussianModel

NAMES = ["flow", "current", "pressure_rise", "vibration", "bearing_temp"]


def pump_like_rows(n: int, seed: int) -> np.ndarray:
    """Correlated rows with a strong flow-current relation (input data only)."""
    rng = np.random.default_rng(seed)
    flow = rng.normal(100, 15, n)
    current = 0.4 * flow + rng.normal(0, 2, n)
    pressure = 50 - 0.1 * flow + rng.normal(0, 1.5, n)
    vibration = rng.gamma(4.0, 0.5, n)
    temp = 40 + 0.05 * current + 0.3 * vibration + rng.normal(0, 1, n)
    return np.column_stack([flow, current, pressure, vibration, temp])


def naive_conditional_z(x: np.ndarray, mu: np.ndarray, S: np.ndarray) -> np.ndarray:
    """Conditional z of every feature via the partitioned covariance (Schur complement)."""
    d = len(x)
    out = np.empty(d)
    for j in range(d):
        r = [k for k in range(d) if k != j]
        S_jr = S[j, r]
        S_rr = S[np.ix_(r, r)]
        w = np.linalg.solve(S_rr, x[r] - mu[r])
        cond_mean = mu[j] + S_jr @ w
        cond_var = S[j, j] - S_jr @ np.linalg.solve(S_rr, S[r, j])
        out[j] = (x[j] - cond_mean) / np.sqrt(cond_var)
    return out


@pytest.fixture(scope="module")
def fitted():
    X = pump_like_rows(5000, seed=1)
    return X, GaussianModel(kind="full").fit(X, NAMES), quantile_grid(X)


def query_cases(X: np.ndarray) -> np.ndarray:
    rng = np.random.default_rng(2)
    broken = X.mean(axis=0).copy()
    broken[1] += 3 * 2.0  # current high for this flow: small plain z, large conditional z
    return np.vstack([X[:5], pump_like_rows(5, seed=3) * 1.1, broken, X.mean(axis=0) + rng.normal(0, 5, 5)])


def test_conditional_z_equals_schur_complement_reference(fitted):
    X, model, grid = fitted
    S = np.cov(X, rowvar=False, bias=True)
    mu = X.mean(axis=0)
    for x in query_cases(X):
        ev = evidence(model, x, grid)
        got = np.array([e.conditional_z for e in ev])
        np.testing.assert_allclose(got, naive_conditional_z(x, mu, S), rtol=1e-8, atol=1e-10)


def test_broken_relation_shows_in_conditional_z_not_plain_z(fitted):
    X, model, grid = fitted
    x = query_cases(X)[10]  # the "current high for this flow" case
    ev = {e.name: e for e in evidence(model, x, grid)}
    ref = naive_conditional_z(x, X.mean(axis=0), np.cov(X, rowvar=False, bias=True))
    assert abs(ev["current"].z) < 1.5
    assert abs(ev["current"].conditional_z) > 2.5
    assert ev["current"].conditional_z == pytest.approx(ref[1], rel=1e-8)


def test_contributions_sum_to_log_density_below_the_peak(fitted):
    X, model, grid = fitted
    # Reference log-densities: scipy.stats.multivariate_normal with the ML covariance.
    mvn = stats.multivariate_normal(mean=X.mean(axis=0), cov=np.cov(X, rowvar=False, bias=True))
    peak = mvn.logpdf(X.mean(axis=0))
    for x in query_cases(X):
        total = sum(e.contribution for e in evidence(model, x, grid))
        assert total == pytest.approx(mvn.logpdf(x) - peak, rel=1e-9, abs=1e-9)


def test_independent_model_contributions_and_no_conditional_z(fitted):
    X, _, grid = fitted
    model = GaussianModel(kind="independent").fit(X, NAMES)
    mu, sd = X.mean(axis=0), X.std(axis=0)
    for x in query_cases(X):
        ev = evidence(model, x, grid)
        assert all(e.conditional_z is None for e in ev)
        ref_peak = stats.norm.logpdf(mu, mu, sd).sum()
        ref = stats.norm.logpdf(x, mu, sd).sum() - ref_peak  # scipy reference
        assert sum(e.contribution for e in ev) == pytest.approx(ref, rel=1e-9, abs=1e-9)


def test_z_equals_numpy_standardisation(fitted):
    X, model, grid = fitted
    mu, sd = X.mean(axis=0), X.std(axis=0, ddof=0)
    for x in query_cases(X):
        got = np.array([e.z for e in evidence(model, x, grid)])
        np.testing.assert_allclose(got, (x - mu) / sd, rtol=1e-10, atol=1e-12)


def test_percentile_from_grid_matches_scipy_percentileofscore(fitted):
    # Tolerance 0.1 percentage points: the grid has 1001 points (0.1 pp apart)
    # and n = 5000 rows on continuous data.
    X, _, grid = fitted
    assert grid.shape == (1001, X.shape[1])
    rng = np.random.default_rng(4)
    for j in range(X.shape[1]):
        col = X[:, j]
        values = np.r_[rng.choice(col, 150), rng.uniform(col.min(), col.max(), 150),
                       np.quantile(col, [0.001, 0.01, 0.5, 0.99, 0.999])]
        for v in values:
            ref = stats.percentileofscore(col, v, kind="weak")
            assert percentile_from_grid(grid[:, j], v) == pytest.approx(ref, abs=0.1), (j, v)
        # Outside the observed range: 0 below the minimum, 100 at/above the maximum.
        assert percentile_from_grid(grid[:, j], col.min() - 1) == stats.percentileofscore(col, col.min() - 1, kind="weak") == 0
        assert percentile_from_grid(grid[:, j], col.max() + 1) == stats.percentileofscore(col, col.max() + 1, kind="weak") == 100


def test_percentile_of_nan_is_nan(fitted):
    _, _, grid = fitted
    assert np.isnan(percentile_from_grid(grid[:, 0], float("nan")))
