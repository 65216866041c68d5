"""ROC AUC and average precision (afterlook.core.ranking) against scikit-learn.

Reference: ``sklearn.metrics.roc_auc_score`` and
``sklearn.metrics.average_precision_score`` on the same labels and scores,
with ties (rounded scores) and without; and two hand-worked small cases.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import average_precision_score, roc_auc_score

from afterlook.core.ranking import average_precision, roc_auc


@pytest.mark.parametrize("seed", range(20))
def test_equal_to_scikit_learn_with_and_without_ties(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(5, 600))
    y = rng.random(n) < rng.uniform(0.05, 0.9)
    y[0], y[1] = True, False  # both classes present
    score = rng.normal(size=n) + y * rng.uniform(-1.0, 2.0)
    for s in (score, np.round(score, 1)):
        assert roc_auc(y, s) == pytest.approx(roc_auc_score(y, s), abs=1e-12)
        assert average_precision(y, s) == pytest.approx(average_precision_score(y, s), abs=1e-12)


def test_hand_worked_cases():
    # positives at scores 3 and 1, negatives at 2 and 0: 3 of 4 pairs ordered right -> AUC 0.75;
    # thresholds 3, 2, 1: precision 1, 1/2, 2/3 at recall 1/2, 1/2, 1 -> AP = 0.5 * 1 + 0.5 * 2/3.
    y = np.array([True, False, True, False])
    s = np.array([3.0, 2.0, 1.0, 0.0])
    assert roc_auc(y, s) == pytest.approx(0.75)
    assert average_precision(y, s) == pytest.approx(0.5 + 1 / 3)
    # every score tied: AUC one half, AP the positive share
    assert roc_auc(y, np.zeros(4)) == pytest.approx(0.5)
    assert average_precision(y, np.zeros(4)) == pytest.approx(0.5)
