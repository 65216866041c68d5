"""Is the model itself the problem? Ranking quality and warning signs on the labelled cases.

A threshold can hide a useless model: best-F1 on a model that ranks anomalies
as *more* normal than normal cases ends up flagging everything (recall 1,
precision = the anomaly share), and "no misses" then reads like success.
These checks look at the ranking itself:

* **ROC AUC** of the score ``-log_density`` for "is anomaly" (0.5 = no
  better than chance, < 0.5 = ranks anomalies as more normal), and
  **average precision** (the area under the precision-recall curve; its
  chance level is the anomaly share), by scikit-learn's definitions
  (:mod:`afterlook.core.ranking`, compared with ``roc_auc_score`` and
  ``average_precision_score`` in a test); cases with a NaN log-density
  (unscored) are left out and counted;
* the share of labelled normal cases the threshold flags (a warning above one
  half);
* **values never seen in normal operation**: a column constant over the
  normal training rows (the model must leave it out: zero variance) that
  takes another value on some cases is evidence of its own, reported with
  how many anomalies and how many normal cases differ.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .thresholds import flagged_rate

FLAGS_TOO_MANY_NORMALS = 0.5  # share of labelled normal cases flagged above which fit and misses warn


@dataclass(frozen=True)
class RankingQuality:
    roc_auc: float | None  # None when one class is missing among the scored cases
    average_precision: float | None
    anomaly_share: float  # chance level of the average precision
    normal_flagged_share: float
    unscored: int

    def warnings(self) -> list[str]:
        out = []
        if self.roc_auc is not None and self.roc_auc < 0.5:
            out.append(f"the model ranks the labelled anomalies as more normal than the normal cases "
                       f"(ROC AUC {self.roc_auc:.2f} < 0.5): no threshold can make it useful; look at the "
                       "features and the labels before tuning anything")
        if self.normal_flagged_share > FLAGS_TOO_MANY_NORMALS:
            out.append(f"the threshold flags {self.normal_flagged_share:.0%} of the labelled normal cases: "
                       "'no misses' here means 'everything is an alarm'")
        return out

    def to_dict(self) -> dict:
        return {"roc_auc": self.roc_auc, "average_precision": self.average_precision,
                "anomaly_share": self.anomaly_share, "normal_flagged_share": self.normal_flagged_share,
                "unscored": self.unscored}


def ranking_quality(log_density: np.ndarray, is_anomaly: np.ndarray, threshold: float) -> RankingQuality:
    from .ranking import average_precision as average_precision_score, roc_auc as roc_auc_score

    ld = np.asarray(log_density, dtype=np.float64)
    y = np.asarray(is_anomaly, dtype=bool)
    ok = ~np.isnan(ld)  # -inf (outside a feature's domain) ranks as the most anomalous; NaN is unscored
    flagged_share = flagged_rate(ld, threshold, y)
    share = float(y.mean()) if y.size else math.nan
    if not (y[ok].any() and (~y[ok]).any()):
        return RankingQuality(None, None, share, flagged_share, int((~ok).sum()))
    # -inf (outside a domain) ranks below every finite score: both metrics depend on the order only
    finite = ld[np.isfinite(ld)]
    ranked = np.where(np.isneginf(ld), (finite.min() - 1.0) if finite.size else -1.0, ld)
    score = -ranked[ok]
    return RankingQuality(float(roc_auc_score(y[ok], score)), float(average_precision_score(y[ok], score)),
                          share, flagged_share, int((~ok).sum()))


@dataclass(frozen=True)
class UnseenValue:
    """A column constant over the normal training rows that differs on some cases."""

    column: str
    normal_value: float
    anomalies_differ: int
    anomalies: int
    normal_cases_differ: int
    normal_cases: int

    def describe(self) -> str:
        return (f"'{self.column}' is always {self.normal_value:g} in normal operation but differs in "
                f"{self.anomalies_differ} of {self.anomalies} labelled anomalies and "
                f"{self.normal_cases_differ} of {self.normal_cases} normal cases (a value never seen in normal "
                "operation)")

    def to_dict(self) -> dict:
        return {"column": self.column, "normal_value": self.normal_value, "anomalies_differ": self.anomalies_differ,
                "anomalies": self.anomalies, "normal_cases_differ": self.normal_cases_differ,
                "normal_cases": self.normal_cases}


def unseen_values(train: dict[str, np.ndarray], cases: dict[str, np.ndarray],
                  is_anomaly: np.ndarray) -> list[UnseenValue]:
    """Columns constant (over their finite values) in ``train`` whose case values differ somewhere."""
    y = np.asarray(is_anomaly, dtype=bool)
    out = []
    for name, values in train.items():
        v = np.asarray(values, dtype=np.float64)
        v = v[np.isfinite(v)]
        if v.size == 0 or name not in cases or np.ptp(v) != 0:
            continue
        c = np.asarray(cases[name], dtype=np.float64)
        differs = np.isfinite(c) & (c != v[0])
        if differs.any():
            out.append(UnseenValue(name, float(v[0]), int((differs & y).sum()), int(y.sum()),
                                   int((differs & ~y).sum()), int((~y).sum())))
    out.sort(key=lambda u: (-u.anomalies_differ, u.normal_cases_differ, u.column))
    return out
