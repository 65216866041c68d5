"""The candidate search's numpy shaping path against scipy.stats and against the exact per-column search.

References (named beside each check):

* scipy.stats ``normaltest``, ``skewtest``, ``kurtosistest``, ``boxcox_normmax``,
  ``boxcox_llf``, ``yeojohnson_normmax``, ``chi2``;
* real columns: the Wisconsin diagnostic breast-cancer table bundled with
  scikit-learn (``sklearn.datasets.load_breast_cancer``, 569 x 30), the wine
  table bundled with scikit-learn (``load_wine``, 178 x 13) and the stack-loss
  data bundled with statsmodels (``statsmodels.datasets.stackloss``, 21 x 4);
* :func:`afterlook.core.shaping.chosen_transform`, the exact (scipy-based)
  search the ``shape`` command uses.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_breast_cancer, load_wine
from statsmodels import datasets as sm_datasets

from afterlook.core import shaping, shaping_fast
from afterlook.core.normality import _CRITICAL_5PCT


def _tables() -> dict[str, np.ndarray]:
    cancer = load_breast_cancer()
    wine = load_wine()
    stack = sm_datasets.stackloss.load_pandas().data
    out = {}
    for prefix, names, X in (("cancer", cancer.feature_names, cancer.data), ("wine", wine.feature_names, wine.data),
                             ("stackloss", list(stack.columns), stack.to_numpy(dtype=float))):
        for k, name in enumerate(names):
            out[f"{prefix}:{name}"] = np.asarray(X[:, k], dtype=np.float64)
    return out


TABLES = _tables()


def test_critical_value_is_scipys_chi2_point():
    # Reference: scipy.stats.chi2.ppf(0.95, 2), the value normality.py writes out
    assert _CRITICAL_5PCT["dagostino"] == float(stats.chi2.ppf(0.95, 2))


@pytest.mark.parametrize("table", ["cancer", "wine", "stackloss"])
def test_k2_matches_scipy_normaltest_skewtest_kurtosistest(table):
    cols = [v for n, v in TABLES.items() if n.startswith(table + ":")]
    V = np.column_stack(cols)
    k2, skew = shaping_fast.k2_statistics(V)
    # Reference: scipy.stats.normaltest / skewtest / kurtosistest / skew, column by column
    expected = stats.normaltest(V, axis=0).statistic
    np.testing.assert_allclose(k2, expected, rtol=1e-9)
    zs, zk = stats.skewtest(V, axis=0).statistic, stats.kurtosistest(V, axis=0).statistic
    np.testing.assert_allclose(k2, zs**2 + zk**2, rtol=1e-9)
    np.testing.assert_allclose(skew, stats.skew(V, axis=0), rtol=1e-9, atol=1e-12)


def _fitted_by_table(keep, transform):
    """(name, values, lambda, found) of the kept columns, power_mle run once per table (one length each)."""
    for table in ("cancer", "wine", "stackloss"):
        cols = {n: v for n, v in TABLES.items() if n.startswith(table + ":") and keep(v)}
        if cols:
            lam, ok = shaping_fast.power_mle(np.column_stack([transform(v) for v in cols.values()]))
            yield from zip(cols, cols.values(), lam, ok)


def test_boxcox_lambda_matches_scipy_boxcox_normmax():
    checked = 0
    for name, v, got, found in _fitted_by_table(lambda v: v.min() > 0 and np.ptp(v) > 0, np.log):
        ref = float(stats.boxcox_normmax(v, method="mle"))  # Reference: scipy.stats.boxcox_normmax
        if not found:  # only a lambda near zero or far out is left to the exact path
            assert abs(ref) < 2e-3 or abs(ref) > 3, name
            continue
        checked += 1
        # scipy's Brent search resolves lambda to about 1e-7 on a flat likelihood (sqrt of the
        # machine epsilon relative to the curvature), so agreement is checked at 1e-6
        assert got == pytest.approx(ref, rel=1e-6, abs=1e-6), name
        # and it is at least as good a maximum of scipy.stats.boxcox_llf
        assert stats.boxcox_llf(got, v) >= stats.boxcox_llf(ref, v) - 1e-9 * abs(stats.boxcox_llf(ref, v)), name
    assert checked >= 25


def test_yeojohnson_lambda_of_a_non_negative_column_matches_scipy():
    checked = 0
    for name, v, got, found in _fitted_by_table(lambda v: v.min() >= 0 and np.ptp(v) > 0, np.log1p):
        ref = float(stats.yeojohnson_normmax(v))  # Reference: scipy.stats.yeojohnson_normmax
        if not found:
            assert abs(ref) < 2e-3 or abs(ref) > 3, name
            continue
        checked += 1
        # Reference: scipy.stats.yeojohnson_llf. scipy's bounded search (fminbound) stops earlier on a flat
        # likelihood (21 stack-loss rows): there the numpy lambda must be the better maximum, and close.
        better = stats.yeojohnson_llf(got, v) >= stats.yeojohnson_llf(ref, v) - 1e-12 * abs(stats.yeojohnson_llf(ref, v))
        assert got == pytest.approx(ref, rel=1e-6, abs=1e-6) or (better and abs(got - ref) < 1e-4), name
        assert stats.yeojohnson_llf(got, v) >= stats.yeojohnson_llf(ref, v) - 1e-9 * abs(stats.yeojohnson_llf(ref, v))
    assert checked >= 25


def _same_choice(fast, exact) -> bool:
    if fast is None or exact is None:
        return fast is exact
    if fast.kind != exact.kind:
        return False
    if fast.kind == "expression":
        return fast.expression == exact.expression
    return math.isclose(fast.lmbda, exact.lmbda, rel_tol=1e-6, abs_tol=1e-6)


@pytest.mark.parametrize("table", ["cancer", "wine", "stackloss"])
def test_fast_choices_equal_the_exact_search_on_real_columns(table):
    cols = {n: v for n, v in TABLES.items() if n.startswith(table + ":")}
    fast = shaping_fast.chosen_transforms(cols)
    transformed = 0
    for name, values in cols.items():
        exact = shaping.chosen_transform(values, name=name)  # Reference: the exact per-column search
        assert _same_choice(fast[name], exact), (name, fast[name], exact)
        transformed += exact is not None
    if table == "cancer":
        assert transformed >= 15  # the check covers real transforms, not only columns left alone


def test_fast_choices_on_a_sample_of_the_rows_equal_the_exact_search():
    # more rows than the shaping sample: the seeded 5000-row sample is drawn the same way
    cancer = {n: v for n, v in TABLES.items() if n.startswith("cancer:")}
    rng = np.random.default_rng(0)  # resampled rows of the real columns (a bootstrap, not invented values)
    rows = rng.integers(0, 569, 12_000)
    cols = {n: v[rows] for n, v in cancer.items()}
    fast = shaping_fast.chosen_transforms(cols, sample_size=5000, random_state=3)
    for name, values in cols.items():
        exact = shaping.chosen_transform(values, name=name, sample_size=5000, random_state=3)
        assert _same_choice(fast[name], exact), (name, fast[name], exact)


def test_columns_the_fast_path_cannot_take_go_the_exact_way():
    cancer = {n: v for n, v in TABLES.items() if n.startswith("cancer:")}
    names = list(cancer)[:4]
    cols = {names[0]: cancer[names[0]] - np.median(cancer[names[0]]),  # negative values (Yeo-Johnson)
            names[1]: np.where(np.arange(569) == 3, np.nan, cancer[names[1]]),  # a missing value
            names[2]: cancer[names[2]][:300],  # another length
            names[3]: cancer[names[3]]}
    fast = shaping_fast.chosen_transforms(cols)
    for name, values in cols.items():
        assert _same_choice(fast[name], shaping.chosen_transform(values, name=name)), name
