"""Candidate derived features for misses, ranked, with a guard against chance.

Given the normal population (a seeded sample of at most 50,000 rows) and
one or more target misses, every pair ``(a, b)`` of the recipe's columns
yields candidates:

=====================  ==========================================  ==============
kind                   expression                                  needs
=====================  ==========================================  ==============
ratio                  ``a / b`` and ``b / a``                      both positive
log_ratio              ``log(a / b)``                               both positive
standardized_difference ``(a - ma)/sa - (b - mb)/sb`` (``+`` when     -
                       the pair is negatively correlated)
product                ``a * b``                                   -
square_ratio           ``a ** 2 / b`` and ``b ** 2 / a``            divisor positive
shaped_difference      standardized difference of the shaped        a shaping
                       columns (log or power transform)             transform
=====================  ==========================================  ==============

With a unit column (``--unit-col``) the search adds the unit-relative and
change kinds of :mod:`afterlook.core.unit_candidates` (each column against
its unit's own baseline, ``x - unit_median(x)`` and
``(x - unit_median(x)) / unit_scale(x)``; its change since the unit's
previous reading, ``x - lag(x, 1)``, with a time column; and the
standardized difference and ratio of two unit-relative columns). They go
through the same passes, the same chance guard (the candidates tried count
them) and the same ranking:

=============================  ==================================================
kind                           expression
=============================  ==================================================
unit_relative                  ``x - unit_median(x)``
unit_standardized              ``(x - unit_median(x)) / unit_scale(x)``
change                         ``x - lag(x, 1)`` (needs ``--time-col``)
unit_standardized_difference   difference of two unit-standardized columns
unit_ratio                     ``a / unit_median(a) / (b / unit_median(b))``
=============================  ==================================================

**Three passes.**

1. *Moments without materialising anything.* The mean and variance of every
   candidate over the sample follow from a handful of ``d x d`` matrix
   products (``A^T A``, ``(A^2)^T (A^2)``, ``A^T (1/A)``, ...), so thousands of
   candidates cost a few BLAS calls. The first-pass statistic is the plain
   z of the target, ``(t - mean) / sd``; for several targets, the median
   ``|z|``.
2. *Exact, robust statistics for the best few hundred* (and a reserve of
   the best pairs correlated at ``|r| >= min_correlation``, so related pairs
   are always looked at): the columns are built with the expression engine
   (the exact values ``try`` will use), and for each target the robust z
   ``(t - median) / (1.4826 MAD)``, the empirical two-sided tail
   ``(1 + #{|v - med| >= |t - med|}) / (n + 1)`` (the add-one estimate of
   North, Curtis and Sham, Am. J. Hum. Genet. 71, 2002, 439-441) and the
   number of *other* labelled anomalies the candidate separates at the
   false-alarm rate ``alarm_rate`` (beyond the ``1 - alarm_rate`` quantile
   of ``|v - med|`` over normal rows).
3. *Exact re-fit* of the top few (done by :func:`afterlook.analysis.discovery.suggest`,
   which owns files and models): false alarms added when the candidate joins
   the model and the threshold is re-picked.

**Chance guard.** With ``m`` candidates tried, one will separate a single
case by luck. Each candidate's tail is

* the empirical add-one tail whenever at least one normal row is as
  extreme as the target (inside the empirical range nothing is
  extrapolated, so nothing there can look rarer than the data show);
* beyond the empirical range, a generalized Pareto tail fitted to the
  largest 5% (at least 50) of ``|v - med|`` (peaks over threshold; parameters by
  the probability-weighted moments of Hosking and Wallis, Technometrics
  29(3), 1987, 339-349, cited from memory), with the shape clamped at
  ``>= 0`` so that a light tail is extrapolated no thinner than an
  exponential one (conservative for Gaussian-like candidates).

For one target, ``adjusted_tail = min(1, m * tail)`` (Bonferroni over *all*
candidates tried; conservative because the candidates are correlated). For
several targets the guard asks how many targets the candidate exposes, not
only whether the best one is extreme: see :mod:`afterlook.core.chance` (a
binomial count of targets beyond their own 5% tail, or the best target, the
better of the two doubled, corrected over the candidates tried only).
``beyond_chance`` is ``adjusted_tail < 0.05``; ``targets_exposed`` counts the
targets beyond their own 5% tail; ``case_z`` is the median robust z.

**Verdicts** (set by :func:`afterlook.analysis.discovery.suggest` once the
held-out gain of the re-fit is known): ``hurts`` (held-out F1 gain below
zero), ``chance`` (not beyond chance), ``holds-up`` (beyond chance, a
positive held-out gain, no fold with a loss, and more held-out calls turned
right than wrong beyond noise: :attr:`afterlook.core.heldout.HeldOut.holds`),
``exposes-only`` (beyond chance without such a gain). The list is ranked by verdict, then
held-out gain, then exposure (:meth:`Candidate.rank_key`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping

import numpy as np

from . import expressions
from .chance import CHANCE_LEVEL
from .errors import AfterlookError
from .candidate_pairs import difference_and_product_groups, moments, ratio_groups, shaped_groups
from .numbers import finite_or_none
from .measure import EXACT_FIRST, QUICK_ROWS, RobustMeasure, is_whole, measured_whole  # noqa: F401
from .tails import (  # noqa: F401 - part of this module's interface
    Deviations,
    MAD_TO_SD,
    MIN_EXCESSES,
    MIN_TAIL_COUNT,
    TAIL_FRACTION,
    gpd_pwm,
    gpd_tail,
    robust_z,
    tail_probability,
)

KINDS = ("ratio", "log_ratio", "standardized_difference", "product", "square_ratio", "shaped_difference",
         # with a unit column (core/unit_candidates.py)
         "unit_relative", "unit_standardized", "change", "unit_standardized_difference", "unit_ratio")
#: verdicts in ranking order, and what each tells a reviewer
VERDICTS = {
    "holds-up": "beyond chance, and adding it raised F1 on held-out cases, in no fold lower, beyond noise",
    "exposes-only": "beyond chance, but no held-out F1 gain (or a fold lost)",
    "chance": "no more extreme than luck over the candidates tried",
    "hurts": "adding it lowered F1 on held-out cases",
}
GAIN_EPSILON = 1e-12  # a held-out gain this small is no gain
TAIL_TIERS = (1e-6, 1e-3, CHANCE_LEVEL)  # ranking tiers of the adjusted tail


@dataclass(frozen=True)
class Settings:
    """Options of the candidate search (one explicit settings object)."""

    sample_size: int = 50_000
    random_state: int = 0
    min_correlation: float = 0.3
    second_pass: int = 120  # candidates re-scored exactly after the moment pass
    correlated_reserve: int = 40  # extra slots for correlated pairs in the second pass
    alarm_rate: float = 0.01
    chance_level: float = CHANCE_LEVEL

    def check(self) -> "Settings":
        """Raise :class:`AfterlookError` naming the first setting out of its range."""
        def whole(name: str, low: int) -> None:
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < low:
                raise AfterlookError(f"setting {name} must be a whole number of at least {low}, got {v!r}")

        def fraction(name: str, closed: bool) -> None:
            v = getattr(self, name)
            ok = isinstance(v, (int, float, np.floating)) and not isinstance(v, bool) and math.isfinite(v)
            if ok:
                ok = 0 <= v <= 1 if closed else 0 < v < 1
            if not ok:
                where = "between 0 and 1" if closed else "strictly between 0 and 1"
                raise AfterlookError(f"setting {name} must lie {where}, got {v!r}")

        whole("sample_size", 100)
        if self.random_state is not None:  # None: a fresh seed, as numpy's default_rng takes it
            whole("random_state", 0)
        whole("second_pass", 1)
        whole("correlated_reserve", 0)
        fraction("min_correlation", closed=True)
        fraction("alarm_rate", closed=False)
        fraction("chance_level", closed=False)
        return self


@dataclass
class Candidate:
    """One candidate derived feature and its evidence."""

    expression: str
    kind: str
    inputs: tuple[str, ...]  # the pair (a, b); one column for the single-column unit kinds
    r: float  # correlation of the input pair in the normal population
    first_pass_z: float = float("nan")
    case_z: float = float("nan")  # robust z of the target (median over several)
    case_z_by_case: dict = field(default_factory=dict)
    tail: float = float("nan")
    tail_method: str = ""
    tail_by_case: dict = field(default_factory=dict)  # each target's own (uncorrected) tail
    adjusted_tail: float = float("nan")
    beyond_chance: bool = False
    other_anomalies_separated: int = 0
    other_anomalies: int = 0
    other_misses_separated: int = 0
    other_misses: int = 0
    targets_exposed: int = 0
    chance_method: str = ""  # "single" or "count": which test of the guard decided
    count_tail: float | None = None  # binomial tail of the number of targets exposed (several targets)
    false_alarms_added: int | None = None
    catches_targets: int | None = None
    heldout: object | None = None  # afterlook.core.heldout.HeldOut of the re-fit, when it could be estimated
    verdict: str = ""
    # rows of the normal sample the robust statistics were measured on (negative: a seeded subset of that
    # many rows; see second_pass); 0 before the second pass
    rows_used: int = field(default=0, compare=False)
    # the RobustMeasure that measured it (its sample, targets and other anomalies), to measure it whole later
    measured_by: object | None = field(default=None, repr=False, compare=False)
    # the parsed expression, kept from the exact pass so the re-fit does not parse it again
    parsed: expressions.Expression | None = field(default=None, repr=False, compare=False)

    @property
    def name(self) -> str:
        """A derived-feature name for the candidate (identifier-safe)."""
        a, b = (_ident(x) for x in (*self.inputs, "")[:2])
        pattern = {
            "ratio": "{a}_per_{b}", "log_ratio": "log_{a}_per_{b}", "product": "{a}_times_{b}",
            "square_ratio": "{a}_sq_per_{b}", "standardized_difference": "{a}_vs_{b}",
            "shaped_difference": "shaped_{a}_vs_{b}",
            "unit_relative": "{a}_vs_unit", "unit_standardized": "{a}_unit_z", "change": "{a}_change",
            "unit_standardized_difference": "{a}_vs_{b}_in_unit", "unit_ratio": "{a}_per_{b}_in_unit",
        }.get(self.kind, "{a}_{b}")
        if self.kind in ("ratio", "square_ratio"):
            # the orientation is in the expression: numerator first
            first = self.expression.split(" ")[0].strip("`")
            if _ident(first) == b:
                a, b = b, a
        elif self.kind == "log_ratio":
            first = self.expression[4:].split(" ")[0].strip("`")
            if _ident(first) == b:
                a, b = b, a
        return pattern.format(a=a, b=b)[:80]

    def judge(self) -> str:
        """Set and return the verdict from the guard and the held-out gain (see the module notes)."""
        gain = getattr(self.heldout, "gain", None)
        if gain is not None and gain < -GAIN_EPSILON:
            self.verdict = "hurts"
        elif not self.beyond_chance:
            self.verdict = "chance"
        elif gain is not None and self.heldout.holds:
            self.verdict = "holds-up"
        else:
            self.verdict = "exposes-only"
        return self.verdict

    def rank_key(self, min_correlation: float = 0.3):
        """Order of the candidate list.

        0. verdict (holds-up, exposes-only, chance, hurts; not yet judged: after
           exposes-only), then held-out F1 gain (larger first; unknown last);
        1. targets exposed (more first);
        2. how extreme, in tiers of the adjusted tail: < 1e-6, < 1e-3, < 0.05,
           the rest. Tiers rather than the raw value, because once a tail is
           that small its exact size is mostly tail-model noise, and the next
           keys are what a reviewer weighs;
        3. other labelled anomalies separated (more first);
        4. target misses flagged after the exact re-fit (more first);
        5. false alarms added on re-fit (fewer first; unknown last);
        6. pairs correlated at ``|r| >= min_correlation`` first;
        7. the simpler expression (shorter text) first;
        8. larger |robust z|.
        """
        tail = self.adjusted_tail if math.isfinite(self.adjusted_tail) else 1.0
        tier = next((k for k, cut in enumerate(TAIL_TIERS) if tail < cut), len(TAIL_TIERS))
        fa = self.false_alarms_added if self.false_alarms_added is not None else math.inf
        caught = self.catches_targets if self.catches_targets is not None else -1
        order = list(VERDICTS)
        verdict = order.index(self.verdict) if self.verdict in order else 1.5
        gain = getattr(self.heldout, "gain", None)
        return (verdict, -gain if gain is not None else math.inf, -self.targets_exposed, tier, -self.other_anomalies_separated, -caught, fa,
                -(abs(self.r) >= min_correlation), len(self.expression),
                -abs(self.case_z) if math.isfinite(self.case_z) else 0.0)

    def to_dict(self) -> dict:
        return {
            "name": self.name,
            "expression": self.expression,
            "kind": self.kind,
            "inputs": list(self.inputs),
            "pair_correlation": finite_or_none(self.r),
            "case_z": finite_or_none(self.case_z),
            "case_z_by_case": {k: finite_or_none(v) for k, v in self.case_z_by_case.items()},
            "first_pass_z": finite_or_none(self.first_pass_z),
            "tail": finite_or_none(self.tail),
            "tail_method": self.tail_method,
            "tail_by_case": {k: finite_or_none(v) for k, v in self.tail_by_case.items()},
            "adjusted_tail": finite_or_none(self.adjusted_tail),
            "beyond_chance": bool(self.beyond_chance),
            "targets_exposed": int(self.targets_exposed),
            "chance_method": self.chance_method,
            "count_tail": finite_or_none(self.count_tail) if self.count_tail is not None else None,
            "verdict": self.verdict or None,
            "heldout": self.heldout.to_dict() if self.heldout is not None else None,
            "other_anomalies_separated": int(self.other_anomalies_separated),
            "other_anomalies": int(self.other_anomalies),
            "other_misses_separated": int(self.other_misses_separated),
            "other_misses": int(self.other_misses),
            "false_alarms_added": self.false_alarms_added,
            "catches_targets": self.catches_targets,
        }


def _ident(text: str) -> str:
    out = "".join(ch if ch.isalnum() or ch == "_" else "_" for ch in text).strip("_")
    return out if out and not out[0].isdigit() else f"c_{out}"


# --------------------------------------------------------------------------
# Candidate generation and the moment pass
# --------------------------------------------------------------------------


def generate_and_screen(
    names: list[str],
    sample: Mapping[str, np.ndarray],
    targets: np.ndarray,
    shaped: Mapping[str, str] | None = None,
    settings: Settings = Settings(),
    select: bool = False,
    progress=None,
) -> tuple[list[Candidate], int, np.ndarray]:
    """Generate every candidate and compute its first-pass z from moments.

    Parameters
    ----------
    names : column names (raw features of the recipe)
    sample : name -> values over the normal sample (finite)
    targets : (n_targets, d) raw feature values of the target misses
    shaped : name -> expression text of a shaping transform of that column
    select : return only the candidates the second pass will look at (the best
        ``second_pass`` by first-pass z plus the correlated reserve); ``n_tried``
        still counts every candidate generated
    progress : optional callable(fraction done), called between groups (a stale
        search is stopped by raising from it)

    Returns
    -------
    (candidates, n_tried, correlation matrix)
    """
    return Screen(names, sample, targets, progress).finish(shaped, settings, select)


class Screen:
    """:func:`generate_and_screen` in two steps: the candidates that need no shaping choice are made at
    construction, the shaped ones and every candidate's first-pass z by :meth:`finish` (so a caller can
    make the shaping choices meanwhile, :class:`afterlook.core.beside.Beside`). The same candidates, in
    the same order, as the one call."""

    def __init__(self, names: list[str], sample: Mapping[str, np.ndarray], targets: np.ndarray, progress=None):
        self._report = report = progress or (lambda fraction: None)
        self._sample = sample
        self._m = m = moments(names, sample, targets)
        self._groups: list = []
        report(0.1)
        difference_and_product_groups(m, self._groups)
        report(0.2)
        ratio_groups(m, self._groups, tick=lambda: report(0.4))
        report(0.6)

    def finish(self, shaped: Mapping[str, str] | None = None, settings: Settings = Settings(),
               select: bool = False) -> tuple[list[Candidate], int, np.ndarray]:
        """The shaped candidates (``shaped``: name -> expression text) and the first pass of them all."""
        if shaped:
            shaped_groups(self._m, self._sample, shaped, self._groups)
        self._report(0.8)
        return _first_pass(self._m, self._groups, settings, select)


def _first_pass(m, groups: list, settings: Settings, select: bool) -> tuple[list[Candidate], int, np.ndarray]:
    """Every candidate's first-pass z (median over targets); Candidate objects only for the ones kept."""
    R = m.R
    zs, gid, kid = [], [], []
    for g_index, g in enumerate(groups):
        with np.errstate(invalid="ignore", divide="ignore"):
            z = (g.target - g.mean) / np.sqrt(np.clip(g.var, 0, None))
        zmed = np.median(np.abs(z), axis=0)
        zmed[~np.isfinite(zmed)] = np.nan
        zs.append(zmed)
        gid.append(np.full(len(g.i), g_index))
        kid.append(np.arange(len(g.i)))
    if not zs:
        return [], 0, R
    z_all, g_all, k_all = np.concatenate(zs), np.concatenate(gid), np.concatenate(kid)
    r_all = np.concatenate([R[g.i, g.j] for g in groups])
    n_tried = int(len(z_all))
    keep = _select(z_all, r_all, settings) if select else np.arange(n_tried)
    candidates = []
    for idx in keep:
        g = groups[g_all[idx]]
        k = int(k_all[idx])
        candidates.append(Candidate(g.text(k), g.kind, (m.names[g.i[k]], m.names[g.j[k]]),
                                    float(r_all[idx]), first_pass_z=float(z_all[idx])))
    return candidates, n_tried, R


def _select(z: np.ndarray, r: np.ndarray, settings: Settings) -> np.ndarray:
    """Indices of the best ``second_pass`` by first-pass z, plus a reserve of
    the best pairs correlated at ``|r| >= min_correlation``."""
    finite = np.flatnonzero(np.isfinite(z))
    order = finite[np.argsort(-z[finite], kind="stable")]
    top = order[: settings.second_pass]
    rest = order[settings.second_pass:]
    reserve = rest[np.abs(r[rest]) >= settings.min_correlation][: settings.correlated_reserve]
    return np.concatenate([top, reserve])


def second_pass(
    candidates: list[Candidate],
    n_tried: int,
    sample: Mapping[str, np.ndarray],
    targets: Mapping[str, np.ndarray],
    target_ids: list[str],
    other_anomalies: Mapping[str, np.ndarray] | None,
    other_is_miss: np.ndarray | None,
    settings: Settings = Settings(),
    progress=None,
    measure: RobustMeasure | None = None,
    exact_first: int = EXACT_FIRST,
) -> list[Candidate]:
    """Exact robust statistics for the best candidates of the moment pass, ranked.

    ``targets`` and ``other_anomalies`` map column name -> raw values of the
    target misses and of the other labelled anomalies. ``progress`` (optional
    callable(fraction done)) is called every 8 candidates.

    A sample of more than ``2 * QUICK_ROWS`` rows is measured in two steps: every
    chosen candidate on a seeded subset of ``QUICK_ROWS`` rows (enough to rank
    them), then the first ``exact_first`` (at least :data:`EXACT_FIRST`) of that ranking on the
    whole sample, re-ranked until the first ``exact_first`` all are measured whole. The caller
    measures more on demand with :func:`measured_whole`. Every candidate a caller
    lists should be measured whole: :func:`is_whole` says which ones are
    (``rows_used``: a negative value is the size of the subset).
    """
    measure = measure or RobustMeasure(sample, targets, target_ids, other_anomalies, other_is_miss,
                                       n_tried, settings)
    scored = [c for c in candidates if np.isfinite(c.first_pass_z)]
    scored.sort(key=lambda c: -c.first_pass_z)
    chosen = scored[: settings.second_pass]
    seen = {c.expression for c in chosen}
    reserve = [c for c in scored if abs(c.r) >= settings.min_correlation and c.expression not in seen]
    chosen += reserve[: settings.correlated_reserve]
    out = []
    for index, c in enumerate(chosen):
        if progress is not None and index % 8 == 0:
            progress(index / len(chosen))
        if measure.quickly(c):
            out.append(c)
    out.sort(key=lambda c: c.rank_key(settings.min_correlation))
    return measure.exact_prefix(out, max(exact_first, EXACT_FIRST))
