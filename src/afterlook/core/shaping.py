"""Transform search for a skewed column ("shaping").

A Gaussian-density model scores each feature against a bell curve. A
right-skewed column such as hours since service puts healthy units with a
long run time far out in the tail, so they cost log-density for nothing,
while a real fault in the crowded low end has little room to stand out.
:func:`search_transform` tries the usual variance-stabilising transforms on
one column and keeps the one under which the column looks most Gaussian:

* none (the identity);
* ``log(x + c)`` over a small grid of shifts ``c >= 0`` (see :func:`shift_grid`);
* powers ``x ** p`` for ``p`` in :data:`POWERS` (``-1 <= p < 1``, small
  powers included), where the column's domain allows them, written
  ``-(x ** p)`` for ``p < 0`` so that every proposal keeps the order of the
  readings (the fitted Box-Cox form ``(x ** p - 1) / p`` is increasing too);
* Box-Cox (positive columns) and Yeo-Johnson (any column), with lambda the
  maximum-likelihood value of ``scipy.stats.boxcox`` /
  ``scipy.stats.yeojohnson`` on the sample.

Every candidate is a :class:`~afterlook.core.recipe.Transform` whose text
``fit --transform COL=TEXT`` accepts as it is, and every transformed value
is computed through :func:`~afterlook.core.recipe.apply_transform`, so the
numbers shown here are the numbers the model will see.

Normality statistics (lower = more Gaussian)
-------------------------------------------
``"dagostino"`` (default)
    D'Agostino-Pearson omnibus K^2 = Z(skewness)^2 + Z(kurtosis)^2,
    ``scipy.stats.normaltest``. About chi-squared with 2 degrees of freedom
    for a Gaussian sample. R. B. D'Agostino (1971), Biometrika 58(2),
    341-348; R. B. D'Agostino and E. S. Pearson (1973), Biometrika 60(3),
    613-622.
``"anderson"``
    Anderson-Darling A^2 against a normal with estimated mean and variance,
    ``scipy.stats.anderson``. T. W. Anderson and D. A. Darling (1954), JASA
    49(268), 765-769; M. A. Stephens (1974), JASA 69(347), 730-737.

Both statistics grow with the sample size for any fixed departure from
normality, so they are computed on a seeded sample of at most
``sample_size`` finite values; candidates are compared with each other on
that same sample.

Selection rule
--------------
1. A column with fewer than :data:`MIN_VALUES` finite values, or a constant
   one, is *left alone* (``transform is None``, statistics NaN, ``note``
   says why); this is a result, not an error, so that a table with one
   constant column can still be shaped.
2. A column that is already near-Gaussian keeps no transform: ``|skewness|
   < 0.5`` (common practice for "roughly symmetric"; no single source) and
   the K^2 p-value at least :data:`NEAR_GAUSSIAN_P`.
3. Near-ties prefer simpler transforms: among candidates whose statistic is
   within ``max(TIE_REL * best, TIE_FLOOR_FRACTION * critical value)`` of
   the best, the lowest :attr:`TransformTried.complexity` wins (the identity;
   then ``log(x)``, ``log(x + 1)`` for counts or a listed power; then
   another shifted log; then a fitted Box-Cox / Yeo-Johnson), then the
   lowest statistic.
4. The candidate so chosen must beat the identity by a clear margin: its
   statistic must be at most half the identity's (a drop of at least
   :data:`CLEAR_GAIN` of the identity's statistic) *and* lower by at
   least the statistic's 5 % critical value under normality (K^2: the
   chi-squared(2) 95 % point, 5.99; A^2: 0.752, the large-sample 5 % value
   for estimated mean and variance tabulated by ``scipy.stats.anderson``
   from R. B. D'Agostino (1986), "Tests for the normal distribution", in
   D'Agostino and Stephens (eds.), Goodness-of-Fit Techniques, Dekker). A
   gain smaller than what a Gaussian sample produces by chance is not
   worth a transform. Otherwise the column keeps no transform.

The margins are our choice, stated here so that a reviewer can argue with
them.
"""

from __future__ import annotations

import math
import warnings
from typing import Iterable, Mapping, Sequence

import numpy as np

from .errors import AfterlookError
from .numbers import sample_rows
from .expressions import quote_name
from .normality import (  # noqa: F401 - STATISTICS, STATISTIC_LABELS and normality are part of this interface
    _CRITICAL_5PCT,
    STATISTIC_LABELS,
    STATISTICS,
    _check_statistic,
    _k2_pvalue,
    _skew,
    normality,
)
from .recipe import Transform, apply_transform, parse_transform
from .shape_result import ShapeResult, TransformTried  # noqa: F401 - part of this interface

__all__ = [
    "STATISTICS",
    "POWERS",
    "ShapeResult",
    "search_transform",
    "shape_columns",
    "normality",
    "shift_grid",
]

#: Powers tried as ``x ** p`` (1 is the identity and is tried as "none").
POWERS = (-1.0, -0.5, -0.33, -0.25, -0.1, -0.05, 0.05, 0.1, 0.2, 0.25, 0.33, 0.5, 0.75)
#: Shifts of ``log(x + c)``: ``c = max(0, -min(x)) + q * spread`` for these ``q``.
SHIFT_FRACTIONS = (0.001, 0.01, 0.1, 1.0)

#: ``scipy.stats.normaltest`` needs at least 8 values (its skewness test does).
MIN_VALUES = 8
#: |skewness| below this reads as roughly symmetric (common practice).
SYMMETRIC_SKEW = 0.5
#: K^2 p-value at or above which a roughly symmetric column counts as near-Gaussian.
NEAR_GAUSSIAN_P = 1e-3
#: A transform must lower the statistic by at least this fraction of the identity's value.
#: Half: on a few thousand rows, mixtures of units (stations, sizes) keep K^2
#: far above its Gaussian value whatever the transform, and a smaller gain is
#: then mostly a transform trading tail shape for skew on a symmetric column.
CLEAR_GAIN = 0.5
#: Near-tie width relative to the best statistic ...
TIE_REL = 0.05
#: ... and in units of the statistic's 5 % critical value under normality.
TIE_FLOOR_FRACTION = 1.0 / 3.0



# --------------------------------------------------------------------------
# candidates
# --------------------------------------------------------------------------


def _number_text(x: float, digits: int = 6) -> str:
    """A short, exact-enough decimal literal the expression parser accepts."""
    text = f"{x:.{digits}g}"
    if "e" in text or "E" in text:
        text = np.format_float_positional(float(text), trim="-")
    return text


def shift_grid(x_min: float, spread: float, is_count: bool) -> list[tuple[float, str]]:
    """Shifts ``c`` for ``log(x + c)``, each with its literal text.

    ``spread`` is the interquartile range (the standard deviation if that
    is zero), ``q`` runs over :data:`SHIFT_FRACTIONS`, and ``c = 1`` is
    added for counts (whole numbers ``>= 0``).

    * ``min(x) > 0``: ``c = 0`` and ``c = q * spread`` (weaker logs). Shifts
      below zero are not tried: they would make the transform undefined for
      a future value under the training minimum.
    * ``min(x) <= 0``: ``c = -min(x) + q * spread``, the least shift that
      keeps every value in the log's domain, plus a margin. A future value
      below ``min(x) - q * spread`` gives NaN, which the model reports.

    Each ``c`` is rounded to a short literal, with more digits when rounding
    would put ``min(x) + c`` below half of ``q * spread``, so ``x + c > 0``
    holds for every value of the column.
    """
    out: list[tuple[float, str]] = []
    seen: set[str] = set()

    def add(c: float, text: str) -> None:
        if text not in seen and x_min + c > 0:
            seen.add(text)
            out.append((c, text))

    if x_min > 0:
        add(0.0, "0")
    if is_count:
        add(1.0, "1")
    if spread > 0 and math.isfinite(spread):
        base = 0.0 if x_min > 0 else -x_min
        for q in SHIFT_FRACTIONS:
            gap = q * spread
            for digits in range(3, 18):
                text = _number_text(base + gap, digits)
                c = float(text)
                if x_min + c >= 0.5 * gap:
                    break
            else:  # pragma: no cover - float formatting always converges by 17 digits
                continue
            add(c, text)
    return out


def _log_text(col: str, c: float, c_text: str) -> str:
    if c == 0:
        return f"log({col})"
    if c < 0:
        return f"log({col} - {c_text.lstrip('-')})"
    return f"log({col} + {c_text})"


def _power_text(col: str, p: float) -> str:
    """``col ** p``, negated for ``p < 0`` so that every proposed power keeps the readings' order
    (a higher reading stays higher after the transform; an affine change, so the
    normality statistics are those of ``col ** p``)."""
    if p < 0:
        return f"-({col} ** {_number_text(p)})"
    return f"{col} ** {_number_text(p)}"


def _expression_candidates(name: str, x_min: float, spread: float, is_count: bool) -> list[tuple[str, int]]:
    """(text, complexity) of the log and power candidates valid on the whole column."""
    return [(text, complexity) for text, complexity, _, _ in candidate_specs(name, x_min, spread, is_count)]


def candidate_specs(name: str, x_min: float, spread: float,
                    is_count: bool) -> list[tuple[str, int, str, float]]:
    """(text, complexity, family, parameter) of the log and power candidates valid on the whole column:
    family "log" with the shift ``c`` of ``log(x + c)``, or "power" with ``p`` of ``x ** p``
    (what :mod:`afterlook.core.shaping_fast` computes without the expression engine)."""
    col = quote_name(name)
    out: list[tuple[str, int, str, float]] = []
    for c, c_text in shift_grid(x_min, spread, is_count):
        simple = c == 0 or (is_count and c == 1)
        out.append((_log_text(col, c, c_text), 1 if simple else 2, "log", c))
    for p in POWERS:
        if (p < 0 and x_min > 0) or (p > 0 and x_min >= 0):
            out.append((_power_text(col, p), 1, "power", p))
    return out


# --------------------------------------------------------------------------
# search
# --------------------------------------------------------------------------


def _sample(x: np.ndarray, sample_size: int, random_state) -> np.ndarray:
    return x[sample_rows(x.size, sample_size, random_state)]


def _left_alone(name: str, statistic: str, x: np.ndarray, n_nonfinite: int, note: str) -> ShapeResult:
    return ShapeResult(
        name=name, transform=None, description="none", skew_before=math.nan, skew_after=math.nan,
        normality_before=math.nan, normality_after=math.nan, statistic=statistic,
        sample_before=x.copy(), sample_after=x.copy(), verdict=f"{note}: left alone",
        n_values=int(x.size), n_nonfinite=n_nonfinite, note=note,
    )


def search_transform(
    values,
    *,
    name: str = "x",
    sample_size: int = 5000,
    random_state=0,
    statistic: str = "dagostino",
) -> ShapeResult:
    """Search the transform under which one column looks most Gaussian.

    Parameters
    ----------
    values : array_like, shape (n,)
        The column. NaN and infinite values are left out (and counted).
    name : str
        The column name the transform expressions are written over.
    sample_size : int
        At most this many finite values (a seeded sample without
        replacement, in table order) are used for lambdas and statistics.
    random_state : int or numpy Generator
        Seed of that sample.
    statistic : {"dagostino", "anderson"}
        Normality statistic used to choose (lower = more Gaussian).

    Returns
    -------
    ShapeResult

    Notes
    -----
    Shifts and the domain of powers are checked against the *whole*
    column's minimum, so the chosen transform is finite on every finite
    value of the column, not only on the sample. Box-Cox and Yeo-Johnson
    lambdas are the maximum-likelihood values on the sample
    (``scipy.stats.boxcox(sample)[1]``), written into the transform text so
    that ``fit`` applies exactly this lambda. The selection rule is in the
    module docstring.
    """
    prepared = _prepare(values, name, sample_size, random_state, statistic)
    if isinstance(prepared, ShapeResult):
        return prepared
    statistic, x_all, n_nonfinite, sample, identity_stat = prepared
    tried, after_by_text = _try_transforms(name, x_all, sample, statistic, identity_stat)
    choice, reason = _choose(tried, sample, statistic)
    after = after_by_text[choice.description]
    skew_after = _skew(after)
    if choice.transform is not None and abs(skew_after) >= SYMMETRIC_SKEW:
        reason += " (still skewed)"
    return ShapeResult(
        name=name,
        transform=choice.transform,
        description=choice.description,
        skew_before=_skew(sample),
        skew_after=skew_after,
        normality_before=identity_stat,
        normality_after=choice.statistic,
        statistic=statistic,
        pvalue_before=_k2_pvalue(sample),
        pvalue_after=_k2_pvalue(after),
        sample_before=sample,
        sample_after=after,
        tried=[(c.description, c.statistic) for c in tried],
        verdict=reason,
        n_values=int(x_all.size),
        n_nonfinite=n_nonfinite,
    )


def _prepare(values, name: str, sample_size, random_state, statistic: str):
    """The checks and the sample every search starts from, or the ShapeResult of a column left alone."""
    statistic = _check_statistic(statistic)
    if isinstance(sample_size, bool) or not isinstance(sample_size, (int, np.integer)) or sample_size < MIN_VALUES:
        raise AfterlookError(f"sample size must be a whole number of at least {MIN_VALUES}, got {sample_size!r}")
    x_all, n_nonfinite = _finite_values(values, name)
    if x_all.size < MIN_VALUES:
        return _left_alone(name, statistic, x_all, n_nonfinite,
                           f"only {x_all.size} finite value(s), need {MIN_VALUES}")
    if np.ptp(x_all) == 0:
        return _left_alone(name, statistic, x_all, n_nonfinite, "constant column")
    sample = _sample(x_all, int(sample_size), random_state)
    if np.ptp(sample) == 0:  # a nearly constant column whose sample happens to be constant
        return _left_alone(name, statistic, x_all, n_nonfinite, "constant on the sample")
    identity_stat = _score(sample, sample, statistic)
    if identity_stat is None:  # pragma: no cover - a varying finite sample always scores
        return _left_alone(name, statistic, x_all, n_nonfinite, "no normality statistic")

    return statistic, x_all, n_nonfinite, sample, identity_stat


def chosen_transform(values, *, name: str = "x", sample_size: int = 5000, random_state=0,
                     statistic: str = "dagostino") -> Transform | None:
    """``search_transform(...).transform``, skipping the search for a near-Gaussian column (rule 2 leaves
    it alone whatever the other candidates score; a test checks the two agree)."""
    prepared = _prepare(values, name, sample_size, random_state, statistic)
    if isinstance(prepared, ShapeResult):
        return prepared.transform
    statistic, x_all, n_nonfinite, sample, identity_stat = prepared
    if _near_gaussian(sample):
        return None
    tried, _ = _try_transforms(name, x_all, sample, statistic, identity_stat)
    return _choose(tried, sample, statistic)[0].transform


def _near_gaussian(sample: np.ndarray) -> bool:  # selection rule 2
    return abs(_skew(sample)) < SYMMETRIC_SKEW and _k2_pvalue(sample) >= NEAR_GAUSSIAN_P


def _finite_values(values, name: str) -> tuple[np.ndarray, int]:
    """The finite values of a column, and how many were not finite."""
    try:
        raw = np.asarray(values, dtype=np.float64).ravel()
    except (TypeError, ValueError):
        raise AfterlookError(f"column '{name}' must be numeric to be shaped") from None
    x_all = raw[np.isfinite(raw)]
    return x_all, int(raw.size - x_all.size)


def _score(after: np.ndarray, sample: np.ndarray, statistic: str) -> float | None:
    """The normality statistic of transformed values, or None when they are unusable."""
    if after.shape != sample.shape or not np.all(np.isfinite(after)) or np.ptp(after) == 0:
        return None
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")  # precision-loss warnings on extreme transforms
        s = normality(after, statistic)
    return s if math.isfinite(s) else None


def _fitted_powers(sample: np.ndarray, x_min: float) -> list[tuple[str, int]]:
    """Box-Cox (positive columns) and Yeo-Johnson with their maximum-likelihood lambdas on the sample."""
    from scipy import stats  # here, not at the top: scipy.stats costs ~0.6 s to import

    kinds = (["boxcox"] if x_min > 0 else []) + ["yeojohnson"]
    out = []
    for kind in kinds:
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                lam = float(stats.boxcox(sample)[1] if kind == "boxcox" else stats.yeojohnson(sample)[1])
            except (ValueError, FloatingPointError, OverflowError):
                continue
        if math.isfinite(lam):
            out.append((f"{kind}({lam!r})", 3))
    return out


def _try_transforms(name: str, x_all: np.ndarray, sample: np.ndarray, statistic: str,
                    identity_stat: float) -> tuple[list[TransformTried], dict[str, np.ndarray]]:
    """Every transform valid on the whole column, scored on the sample (the identity first)."""
    x_min = float(x_all.min())
    q75, q25 = np.percentile(x_all, [75, 25])
    spread = float(q75 - q25) or float(np.std(x_all))
    is_count = bool(x_min >= 0 and np.all(x_all == np.round(x_all)))
    tried = [TransformTried("none", None, 0, identity_stat)]
    after_by_text: dict[str, np.ndarray] = {"none": sample}
    for text, complexity in _expression_candidates(name, x_min, spread, is_count) + _fitted_powers(sample, x_min):
        t = parse_transform(name, text)
        with np.errstate(all="ignore"):
            after = apply_transform(t, name, sample)
        s = _score(after, sample, statistic)
        if s is None:
            continue
        tried.append(TransformTried(text, t, complexity, s))
        after_by_text[text] = after
    return tried, after_by_text


def _choose(tried: list[TransformTried], sample: np.ndarray, statistic: str) -> tuple[TransformTried, str]:
    """The selection rule of the module docstring: the simplest near-best, unless the gain is not clear."""
    identity = tried[0]
    critical = _CRITICAL_5PCT[statistic]
    choice = rule_choice(tried, critical)
    skew_before = _skew(sample)
    if _near_gaussian(sample):
        return identity, "near-Gaussian: left alone"
    if choice.transform is None:
        return choice, "no clear gain: left alone"
    side = "right-skewed" if skew_before > 0 else "left-skewed"
    if abs(skew_before) < SYMMETRIC_SKEW:
        side = "tails not Gaussian"
    return choice, f"{side}: transformed"


def near_best(tried: list[TransformTried], critical: float) -> list[TransformTried]:
    """Rule 3's near-ties: the candidates within the tie width of the best statistic."""
    best = min(tried, key=lambda c: c.statistic)
    tie = max(TIE_REL * best.statistic, TIE_FLOOR_FRACTION * critical)
    return [c for c in tried if c.statistic <= best.statistic + tie]


def rule_choice(tried: list[TransformTried], critical: float) -> TransformTried:
    """Rules 3 and 4 for a column that is not near-Gaussian: the simplest near-best candidate if it beats
    the identity (``tried[0]``) by a clear margin, else the identity (shared with the fast path)."""
    identity = tried[0]
    choice = min(near_best(tried, critical), key=lambda c: (c.complexity, c.statistic))
    if choice.transform is not None and (
        identity.statistic - choice.statistic < max(CLEAR_GAIN * identity.statistic, critical)
    ):
        return identity
    return choice


def shape_columns(
    columns: Mapping[str, np.ndarray],
    names: Sequence[str] | Iterable[str] | None = None,
    *,
    sample_size: int = 5000,
    random_state=0,
    statistic: str = "dagostino",
) -> list[ShapeResult]:
    """:func:`search_transform` for several columns (all of ``columns`` by default), in order."""
    names = list(columns) if names is None else list(names)
    missing = [n for n in names if n not in columns]
    if missing:
        raise AfterlookError(f"no column '{missing[0]}' to shape")
    return [
        search_transform(columns[n], name=n, sample_size=sample_size, random_state=random_state,
                         statistic=statistic)
        for n in names
    ]
