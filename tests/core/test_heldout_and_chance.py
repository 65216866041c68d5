"""Held-out F1 estimates and the chance guard for many targets.

Outside references: scikit-learn (``StratifiedKFold``, ``f1_score``,
``precision_recall_curve``) for a deliberately naive K-fold estimate written
here; scipy.stats (``binomtest``, ``binom``) and a direct sum of binomial
terms (``math.comb``) for the count test; the Wisconsin diagnostic breast
cancer table bundled with scikit-learn as real labelled data.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_breast_cancer
from sklearn.metrics import f1_score, precision_recall_curve
from sklearn.model_selection import StratifiedKFold

from afterlook.core.chance import binomial_upper_tail, chance_verdict
from afterlook.core.errors import AfterlookError
from afterlook.core.heldout import holdout_gain, kfold_gain, stratified_folds
from afterlook.core.thresholds import ThresholdPolicy

F1 = ThresholdPolicy("f1", None)


def _naive_best_f1_flags(train_ld, train_y, test_ld):
    """Threshold from scikit-learn's precision-recall curve of the score -log_density, applied to test."""
    precision, recall, cuts = precision_recall_curve(train_y, -train_ld)
    f1 = np.where(precision + recall > 0, 2 * precision * recall / np.maximum(precision + recall, 1e-300), 0)[:-1]
    best = cuts[int(np.argmax(f1))]
    return -test_ld >= best


def _naive_kfold_f1(ld, y, k, seed):
    """Pooled held-out F1: predictions of every held-out fold concatenated, then one f1_score."""
    pred = np.zeros(y.size, dtype=bool)
    for fit, test in StratifiedKFold(k, shuffle=True, random_state=seed).split(np.zeros(y.size), y):
        pred[test] = _naive_best_f1_flags(ld[fit], y[fit], ld[test])
    return f1_score(y, pred)


@pytest.fixture(scope="module")
def cancer_scores():
    """A Gaussian log-density on two cancer features, fitted on half the benign rows; cases = the rest."""
    data = load_breast_cancer()
    X, malignant = data.data[:, [0, 1]], data.target == 0
    rng = np.random.default_rng(3)
    benign = np.flatnonzero(~malignant)
    fit_rows = rng.choice(benign, size=benign.size // 2, replace=False)
    case_rows = np.setdiff1d(np.arange(len(X)), fit_rows)

    def log_density(cols):
        Z = X[:, cols]
        mu, cov = Z[fit_rows].mean(0), np.atleast_2d(np.cov(Z[fit_rows], rowvar=False))
        return stats.multivariate_normal(mu, cov).logpdf(Z[case_rows])

    y = malignant[case_rows]
    return log_density([0]), log_density([0, 1]), y


def test_kfold_f1_matches_a_naive_scikit_learn_estimate(cancer_scores):
    before, after, y = cancer_scores
    h = kfold_gain(before, after, y, F1, false_alarm_rate=0.05, k=5, seed=11)
    assert h.method == "kfold" and h.folds == 5
    assert h.f1_before == pytest.approx(_naive_kfold_f1(before, y, 5, 11), abs=1e-12)
    assert h.f1_after == pytest.approx(_naive_kfold_f1(after, y, 5, 11), abs=1e-12)
    assert h.gain == pytest.approx(h.f1_after - h.f1_before)
    assert h.gain_low <= h.gain_high and len(h.fold_gains) == 5
    assert h.before.tp + h.before.fp + h.before.fn + h.before.tn == y.size  # every case held out exactly once


def test_changed_calls_and_their_mcnemar_tail_match_a_naive_count(cancer_scores):
    before, after, y = cancer_scores
    h = kfold_gain(before, after, y, F1, false_alarm_rate=0.05, k=5, seed=11)
    calls = {}
    for name, ld in (("before", before), ("after", after)):
        pred = np.zeros(y.size, dtype=bool)
        for fit, test in StratifiedKFold(5, shuffle=True, random_state=11).split(np.zeros(y.size), y):
            pred[test] = _naive_best_f1_flags(ld[fit], y[fit], ld[test])
        calls[name] = pred == y
    improved = int(np.sum(~calls["before"] & calls["after"]))
    worsened = int(np.sum(calls["before"] & ~calls["after"]))
    assert (h.improved, h.worsened) == (improved, worsened)
    if improved:  # exact one-sided McNemar: binomial tail at one half (scipy.stats.binomtest)
        assert h.change_tail == pytest.approx(
            stats.binomtest(improved, improved + worsened, 0.5, alternative="greater").pvalue, rel=1e-9)


def test_kfold_recall_at_rate_matches_a_naive_count(cancer_scores):
    before, after, y = cancer_scores
    rate = 0.1
    h = kfold_gain(before, after, y, F1, false_alarm_rate=rate, k=4, seed=2)
    for ld, got in ((before, h.recall_before_at_rate), (after, h.recall_after_at_rate)):
        caught = 0
        for fit, test in StratifiedKFold(4, shuffle=True, random_state=2).split(np.zeros(y.size), y):
            normals = np.sort(ld[fit][~y[fit]])
            cut = normals[int(math.floor(rate * normals.size + 1e-9))]  # flags at most `rate` of them
            caught += int(np.sum((ld[test] < cut) & y[test]))
        assert got == pytest.approx(caught / y.sum())


def test_no_change_is_no_gain_and_a_perfect_feature_reaches_one(cancer_scores):
    before, _, y = cancer_scores
    same = kfold_gain(before, before, y, F1, false_alarm_rate=0.05)
    assert same.gain == 0 and same.fold_gains == (0.0,) * same.folds
    perfect = np.where(y, -100.0, 0.0) + np.random.default_rng(1).normal(0, 0.01, y.size)
    h = kfold_gain(before, perfect, y, F1, false_alarm_rate=0.05)
    assert h.f1_after == 1.0 and h.gain > 0 and h.gain_low > 0 and not h.straddles_a_loss


def test_holdout_table_matches_scikit_learn(cancer_scores):
    before, after, y = cancer_scores
    half = np.arange(y.size) % 2 == 0
    h = holdout_gain(before[half], after[half], y[half], before[~half], after[~half], y[~half], F1,
                     false_alarm_rate=0.05)
    for ld, got in ((before, h.f1_before), (after, h.f1_after)):
        expected = f1_score(y[~half], _naive_best_f1_flags(ld[half], y[half], ld[~half]))
        assert got == pytest.approx(expected, abs=1e-12)
    assert h.method == "holdout" and h.gain_low == h.gain == h.gain_high


def test_folds_are_stratified_and_too_few_anomalies_is_one_clear_error():
    y = np.r_[np.ones(7, bool), np.zeros(93, bool)]
    folds = stratified_folds(y, 5, 0)
    assert sorted(np.bincount(folds[y])) == [1, 1, 1, 2, 2]
    three = np.r_[np.ones(3, bool), np.zeros(50, bool)]
    assert int(stratified_folds(three, 5, 0).max()) + 1 == 3  # never more folds than anomalies
    with pytest.raises(AfterlookError, match="at least two labelled anomalies"):
        stratified_folds(np.r_[True, np.zeros(20, bool)])


# --- the chance guard ---------------------------------------------------------


@pytest.mark.parametrize("count,n,p", [(0, 10, 0.05), (1, 10, 0.05), (3, 40, 0.05), (12, 40, 0.05), (40, 40, 0.05),
                                       (5, 300, 0.01)])
def test_binomial_upper_tail_matches_scipy_binomtest_and_a_direct_sum(count, n, p):
    direct = sum(math.comb(n, j) * p**j * (1 - p) ** (n - j) for j in range(count, n + 1))
    assert binomial_upper_tail(count, n, p) == pytest.approx(direct, rel=1e-9, abs=1e-300)
    if count > 0:
        assert binomial_upper_tail(count, n, p) == pytest.approx(
            stats.binomtest(count, n, p, alternative="greater").pvalue, rel=1e-9)


@pytest.mark.parametrize("count,n,p", [(57, 57, 1e-6), (30, 1000, 1e-3), (1, 1, 0.5), (1, 5000, 1e-9),
                                       (2500, 5000, 0.5), (4000, 5000, 0.5), (3, 3000, 1e-4)])
def test_binomial_upper_tail_matches_scipys_binomial_survival_function_in_the_far_tail(count, n, p):
    # Reference: scipy.stats.binom.sf(count - 1, n, p) (its own Boost binomial), down to tails near 1e-300
    expected = stats.binom.sf(count - 1, n, p)
    assert binomial_upper_tail(count, n, p) == pytest.approx(expected, rel=1e-9, abs=1e-300)


def test_more_than_n_successes_cannot_happen():
    assert binomial_upper_tail(6, 5, 0.9) == 0.0 == stats.binom.sf(5, 5, 0.9)


def test_one_target_keeps_the_single_target_guard():
    v = chance_verdict(np.array([1e-4]), n_tried=200)
    assert v.adjusted_tail == pytest.approx(0.02) and v.method == "single" and v.beyond_chance()
    assert not chance_verdict(np.array([1e-3]), n_tried=200).beyond_chance()


def _add_one_tails(normal_sample, values):
    """Two-sided add-one empirical tails around the median (the estimator the search uses)."""
    med = np.median(normal_sample)
    dev = np.sort(np.abs(normal_sample - med))
    n = dev.size
    return (1 + n - np.searchsorted(dev, np.abs(values - med), side="left")) / (n + 1)


def test_a_mechanism_shared_by_many_misses_is_found_only_by_the_count():
    rng = np.random.default_rng(20261202)
    normal = rng.normal(size=3000)
    misses = rng.normal(loc=2.2, scale=0.4, size=60) * rng.choice([-1, 1], size=60)  # each a little unusual
    tails = _add_one_tails(normal, misses)
    v = chance_verdict(tails, n_tried=250)
    old_guard = min(1.0, tails.min() * 250 * tails.size)  # the best target, Bonferroni over candidates x targets
    assert old_guard >= 0.05, "the single best target alone is not beyond chance"
    assert v.beyond_chance() and v.method == "count" and v.targets_exposed > 30


def test_many_misses_and_unrelated_candidates_claim_nothing():
    rng = np.random.default_rng(7)
    n_tried, claims = 250, 0
    for _ in range(n_tried):  # every candidate unrelated: the misses look like normal rows on it
        normal = rng.standard_t(df=rng.choice([3, 30]), size=2000)
        misses = rng.choice(normal, size=120) + rng.normal(0, 1e-9, 120)
        claims += chance_verdict(_add_one_tails(normal, misses), n_tried=n_tried).beyond_chance()
    assert claims == 0


@pytest.mark.parametrize("seed", [0, 1, 7])
@pytest.mark.parametrize("n_anomalies,n_normals,first", [(7, 93, True), (3, 50, False), (40, 2960, False),
                                                        (300, 2700, True), (2, 2, False)])
def test_numpy_folds_are_scikit_learns_stratified_kfold(seed, n_anomalies, n_normals, first):
    # Reference: scikit-learn's StratifiedKFold(shuffle=True, random_state=seed); the labels are
    # shuffled so that either class may come first (its class numbering follows first appearance).
    rng = np.random.default_rng(seed + 100)
    y = rng.permutation(np.r_[np.ones(n_anomalies, bool), np.zeros(n_normals, bool)])
    j = int(np.flatnonzero(y == first)[0])
    y[0], y[j] = y[j], y[0]  # a case of the class `first` leads, the counts stay
    splits = min(5, int(y.sum()), int((~y).sum()))
    expected = np.empty(y.size, dtype=np.int64)
    for f, (_, test) in enumerate(StratifiedKFold(splits, shuffle=True, random_state=seed).split(np.zeros(y.size), y)):
        expected[test] = f
    np.testing.assert_array_equal(stratified_folds(y, 5, seed), expected)


@pytest.mark.parametrize("count,n", [(1, 1), (1, 2), (3, 5), (6, 10), (12, 20), (40, 60), (700, 1300),
                                     (1100, 2100), (2600, 5000), (5000, 5000)])
def test_half_binomial_tail_matches_scipy_binom(count, n):
    from afterlook.core.heldout import half_binomial_upper_tail

    # Reference: scipy.stats.binom.sf(count - 1, n, 0.5)
    assert half_binomial_upper_tail(count, n) == pytest.approx(float(stats.binom.sf(count - 1, n, 0.5)),
                                                               rel=1e-9, abs=1e-300)
