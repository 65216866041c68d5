"""Ranking quality and warning signs on labelled cases.

Outside references: a direct pairwise count for ROC AUC (the Mann-Whitney
form: the share of anomaly/normal pairs in which the anomaly has the lower
log-density, ties counting one half), scipy's ``mannwhitneyu`` statistic, and
the Wisconsin diagnostic breast cancer table shipped with scikit-learn.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from sklearn.datasets import load_breast_cancer

from afterlook.core.quality import ranking_quality, unseen_values


def _pairwise_auc(ld, y):
    a, n = ld[y], ld[~y]
    lower = (a[:, None] < n[None, :]).sum() + 0.5 * (a[:, None] == n[None, :]).sum()
    return lower / (a.size * n.size)


def test_auc_matches_a_pairwise_count_and_mann_whitney_on_real_data():
    data = load_breast_cancer()
    y = data.target == 0  # malignant
    benign = data.data[~y][:, :3]
    ld = stats.multivariate_normal(benign.mean(0), np.cov(benign, rowvar=False)).logpdf(data.data[:, :3])
    q = ranking_quality(ld, y, threshold=float(np.quantile(ld, 0.3)))
    assert q.roc_auc == pytest.approx(_pairwise_auc(ld, y), abs=1e-12)
    u = stats.mannwhitneyu(-ld[y], -ld[~y]).statistic  # U of anomalies scoring higher on -log_density
    assert q.roc_auc == pytest.approx(u / (y.sum() * (~y).sum()), abs=1e-12)
    assert q.roc_auc > 0.8 and q.anomaly_share < q.average_precision <= 1
    assert q.warnings() == []


def test_a_reversed_model_and_a_threshold_that_flags_everything_are_named():
    rng = np.random.default_rng(4)
    y = np.r_[np.ones(20, bool), np.zeros(80, bool)]
    ld = np.where(y, 0.0, -5.0) + rng.normal(0, 1, y.size)  # anomalies look *more* normal
    q = ranking_quality(ld, y, threshold=10.0)  # flags every case
    assert q.roc_auc < 0.5 and q.normal_flagged_share == 1.0
    words = " ".join(q.warnings())
    assert "ROC AUC" in words and "100% of the labelled normal cases" in words


def test_unscored_cases_are_left_out_and_counted():
    y = np.array([True, True, False, False, False])
    q = ranking_quality(np.array([-9.0, np.nan, -1.0, -2.0, np.nan]), y, threshold=-5.0)
    assert q.unscored == 2 and q.roc_auc == 1.0
    assert ranking_quality(np.array([-1.0, -2.0]), np.array([False, False]), -5.0).roc_auc is None


def test_a_value_never_seen_in_normal_operation_is_reported_with_its_counts():
    train = {"valve_state": np.zeros(50), "flow": np.linspace(0, 1, 50)}
    cases = {"valve_state": np.array([0, 1, 1, 0, 2, np.nan]), "flow": np.array([0.1, 0.2, 5, 0.3, 0.4, 0.5])}
    y = np.array([False, True, True, True, False, False])
    (found,) = unseen_values(train, cases, y)
    assert (found.column, found.anomalies_differ, found.anomalies, found.normal_cases_differ, found.normal_cases) == \
        ("valve_state", 2, 3, 1, 3)
    assert "never seen in normal operation" in found.describe()


def test_cases_outside_a_domain_rank_as_the_most_anomalous_without_a_warning(recwarn):
    from sklearn.metrics import average_precision_score, roc_auc_score

    y = np.array([True, True, False, False, False, True])
    ld = np.array([-np.inf, -3.0, -1.0, -2.0, -0.5, -np.inf])
    q = ranking_quality(ld, y, threshold=-2.5)
    stand_in = np.where(np.isneginf(ld), -1e9, ld)  # any value below every finite score gives the same order
    assert q.roc_auc == pytest.approx(roc_auc_score(y, -stand_in))
    assert q.average_precision == pytest.approx(average_precision_score(y, -stand_in))
    assert q.unscored == 0 and not [w for w in recwarn if issubclass(w.category, RuntimeWarning)]
