"""External checks of afterlook.core.thresholds.

References: scikit-learn's ``precision_recall_curve`` and its
``precision_score`` / ``recall_score`` / ``f1_score`` (``zero_division=0``),
and a plain numpy / exact-fraction count for the false-alarm budget. The
seeded scores are input data only; expected values are what the reference
computes on them.
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from sklearn import metrics

from afterlook.core.errors import AfterlookError
from afterlook.core.thresholds import (
    ThresholdPolicy,
    best_f1_threshold,
    confusion,
    flag,
    parse_policy,
    rate_threshold,
)

F1_TOL = 1e-12  # F1 values are ratios of small integers


def score_sets():
    """Seeded (log_density, is_anomaly) sets: continuous, heavily tied, overlapping, tiny."""
    out = []
    for seed in range(8):
        rng = np.random.default_rng(seed)
        n_norm, n_anom = int(rng.integers(20, 300)), int(rng.integers(1, 40))
        normal = rng.normal(-10, 3, n_norm)
        anomal = rng.normal(-10 - rng.uniform(0, 8), 4, n_anom)
        ld = np.r_[normal, anomal]
        y = np.r_[np.zeros(n_norm, bool), np.ones(n_anom, bool)]
        if seed % 2:  # ties: round to a coarse grid so many scores coincide
            ld = np.round(ld / 2.0) * 2.0
        perm = rng.permutation(len(ld))
        out.append(pytest.param(ld[perm], y[perm], id=f"seed{seed}{'-ties' if seed % 2 else ''}"))
    # All scores tied; a single anomaly; anomalies scoring *higher* than normals.
    out.append(pytest.param(np.full(10, -5.0), np.r_[np.ones(3, bool), np.zeros(7, bool)], id="all-tied"))
    out.append(pytest.param(np.array([-3.0, -1.0, -2.0, -7.0]), np.array([False, False, False, True]), id="one"))
    out.append(pytest.param(np.r_[np.full(5, -1.0), np.full(5, -9.0)], np.r_[np.ones(5, bool), np.zeros(5, bool)], id="inverted"))
    return out


@pytest.mark.parametrize("ld,y", score_sets())
def test_best_f1_reaches_the_best_f1_of_sklearn_precision_recall_curve(ld, y):
    threshold, conf = best_f1_threshold(ld, y)
    # Reference: scikit-learn's precision-recall curve for the score -log_density.
    precision, recall, _ = metrics.precision_recall_curve(y, -ld)
    with np.errstate(invalid="ignore", divide="ignore"):
        f1_curve = np.where(precision + recall > 0, 2 * precision * recall / (precision + recall), 0.0)
    best_reference = float(f1_curve.max())
    flagged = flag(ld, threshold)
    achieved = metrics.f1_score(y, flagged, zero_division=0)
    assert achieved == pytest.approx(best_reference, abs=F1_TOL)
    assert conf.f1 == pytest.approx(best_reference, abs=F1_TOL)
    # The reported confusion is the one the threshold really produces.
    assert conf == confusion(flagged, y)


@pytest.mark.parametrize("ld,y", score_sets())
def test_best_f1_threshold_sits_strictly_between_scores(ld, y):
    threshold, _ = best_f1_threshold(ld, y)
    # Half-way placement: no score equals the threshold, so round-off cannot flip a case.
    assert not np.any(ld == threshold)


@pytest.mark.parametrize("seed", range(6))
def test_confusion_metrics_equal_sklearn(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(5, 200))
    y = rng.random(n) < rng.uniform(0.05, 0.6)
    flagged = rng.random(n) < rng.uniform(0.0, 0.7)
    if seed == 0:
        flagged[:] = False  # nothing flagged: precision 0 by the zero_division=0 convention
    if seed == 1:
        y[:] = False  # no anomalies: recall 0
    c = confusion(flagged, y)
    # Reference: sklearn.metrics.confusion_matrix and the zero_division=0 scores.
    tn, fp, fn, tp = metrics.confusion_matrix(y, flagged, labels=[False, True]).ravel()
    assert (c.tp, c.fp, c.fn, c.tn) == (tp, fp, fn, tn)
    assert c.precision == pytest.approx(metrics.precision_score(y, flagged, zero_division=0), abs=1e-15)
    assert c.recall == pytest.approx(metrics.recall_score(y, flagged, zero_division=0), abs=1e-15)
    assert c.f1 == pytest.approx(metrics.f1_score(y, flagged, zero_division=0), abs=1e-15)


def test_best_f1_needs_an_anomaly():
    with pytest.raises(AfterlookError):
        best_f1_threshold(np.array([-1.0, -2.0]), np.array([False, False]))


# --------------------------------------------------------------------------
# false-alarm budget
# --------------------------------------------------------------------------


def _budget(rate_text: str, n: int) -> int:
    # Exact floor(R * n) with R taken as the decimal the user typed.
    return math.floor(Fraction(rate_text) * n)


@pytest.mark.parametrize("rate_text", ["0.01", "0.07", "0.1", "0.29", "0.5", "0.57", "0.999"])
@pytest.mark.parametrize("n,ties", [(100, False), (1000, False), (37, False), (200, True), (3, False)])
def test_rate_threshold_flags_at_most_the_budget_and_is_the_largest(rate_text, n, ties):
    rng = np.random.default_rng(n)
    ld = rng.normal(-20, 5, n)
    if ties:
        ld = np.round(ld)
    rate = float(rate_text)
    k = _budget(rate_text, n)
    threshold = rate_threshold(ld, rate)
    n_flagged = int(np.sum(ld < threshold))
    assert n_flagged <= k
    # Largest such threshold: any higher value flags more than the budget.
    assert int(np.sum(ld < np.nextafter(threshold, np.inf))) > k
    if not ties:
        assert n_flagged == k  # distinct scores: the budget is used exactly
    # numpy reference: the (k+1)-th smallest score.
    assert threshold == np.sort(ld)[k]


def test_rate_threshold_ignores_nan_rows():
    rng = np.random.default_rng(3)
    ld = rng.normal(size=100)
    with_nan = np.r_[ld, np.full(20, np.nan)]
    assert rate_threshold(with_nan, 0.05) == rate_threshold(ld, 0.05)


# --------------------------------------------------------------------------
# policy text
# --------------------------------------------------------------------------


@pytest.mark.parametrize(
    "text,expected",
    [
        ("f1", ThresholdPolicy("f1")),
        ("F1", ThresholdPolicy("f1")),
        ("rate:0.01", ThresholdPolicy("rate", 0.01)),
        (" rate:0.25 ", ThresholdPolicy("rate", 0.25)),
        ("value:-3.5", ThresholdPolicy("value", -3.5)),
        ("value:12", ThresholdPolicy("value", 12.0)),
    ],
)
def test_parse_policy_accepts(text, expected):
    assert parse_policy(text) == expected


@pytest.mark.parametrize(
    "text",
    ["rate:2", "rate:0", "rate:1", "rate:-0.1", "rate:x", "rate:", "bogus", "value:nan", "value:inf", "value:", "f2", "rate", ""],
)
def test_parse_policy_rejects(text):
    with pytest.raises(AfterlookError) as info:
        parse_policy(text)
    assert "\n" not in info.value.message
