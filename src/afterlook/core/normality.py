"""Normality statistics of a 1-D sample (lower = more Gaussian), for the transform search.

D'Agostino-Pearson K^2 (``scipy.stats.normaltest``; D'Agostino and Pearson,
Biometrika 60, 1973, 613-622) and Anderson-Darling A^2
(``scipy.stats.anderson``; Stephens, JASA 69, 1974, 730-737).
"""

from __future__ import annotations

import warnings

import numpy as np

from .errors import AfterlookError

STATISTICS = ("dagostino", "anderson")
STATISTIC_LABELS = {"dagostino": "D'Agostino-Pearson K^2", "anderson": "Anderson-Darling A^2"}

# 5 % critical values under normality: chi-squared(2) 95 % point for K^2;
# for A^2 (mean and variance estimated) the large-sample value of the table in
# scipy.stats.anderson (D'Agostino 1986), before its small-sample factor.
# The K^2 value is float(scipy.stats.chi2.ppf(0.95, 2)) written out (a test checks it), so that importing
# this module (and the candidate search's shaping fast path) does not import scipy.stats (~0.6 s).
_CRITICAL_5PCT = {"dagostino": 5.991464547107979, "anderson": 0.752}

__all__ = ["STATISTICS", "STATISTIC_LABELS", "normality"]




def _check_statistic(statistic: str) -> str:
    key = str(statistic).strip().lower().replace("-", "").replace("_", "")
    aliases = {"dagostino": "dagostino", "k2": "dagostino", "normaltest": "dagostino",
               "anderson": "anderson", "andersondarling": "anderson", "ad": "anderson"}
    if key not in aliases:
        raise AfterlookError(f"unknown normality statistic {statistic!r}; use one of: {', '.join(STATISTICS)}")
    return aliases[key]


def normality(values: np.ndarray, statistic: str = "dagostino") -> float:
    """The normality statistic of a 1-D sample (lower = more Gaussian).

    ``"dagostino"``: ``scipy.stats.normaltest(values).statistic``;
    ``"anderson"``: ``scipy.stats.anderson(values, dist="norm").statistic``.
    """
    from scipy import stats  # here, not at the top: scipy.stats costs ~0.6 s to import

    statistic = _check_statistic(statistic)
    x = np.asarray(values, dtype=np.float64)
    if statistic == "dagostino":
        return float(stats.normaltest(x).statistic)
    try:  # SciPy >= 1.17 asks for a p-value method; the statistic is the same either way
        return float(stats.anderson(x, dist="norm", method="interpolate").statistic)
    except TypeError:  # older SciPy: no ``method`` argument
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return float(stats.anderson(x, dist="norm").statistic)


def _k2_pvalue(x: np.ndarray) -> float:
    from scipy import stats

    return float(stats.normaltest(x).pvalue)


def _skew(x: np.ndarray) -> float:
    from scipy import stats

    return float(stats.skew(x))
