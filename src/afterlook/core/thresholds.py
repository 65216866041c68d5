"""Threshold policies and confusion metrics.

A case is *flagged* when its log-density is strictly below the threshold.
Three policies:

* ``f1``: the threshold that maximises F1 on labelled cases;
* ``rate:R``: a false-alarm budget: at most a share ``R`` of the normal rows
  (labelled-normal cases when there are labels, else the training rows) is
  flagged;
* ``value:V``: a fixed log-density.

Precision is 0 when nothing is flagged and recall is 0 when there are no
anomalies (scikit-learn's ``zero_division=0`` convention).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import AfterlookError

POLICY_HELP = "f1, rate:R (0 < R < 1) or value:V"


@dataclass(frozen=True)
class ThresholdPolicy:
    """How a threshold is chosen: ``kind`` in {"f1", "rate", "value"}."""

    kind: str
    parameter: float | None = None

    def __str__(self) -> str:
        if self.kind == "f1":
            return "f1"
        return f"{self.kind}:{self.parameter:g}"

    def describe(self) -> str:
        if self.kind == "f1":
            return "best F1 on labelled cases"
        if self.kind == "rate":
            return f"false-alarm budget {self.parameter:g}"
        return f"fixed value {self.parameter:g}"


def parse_policy(text: str) -> ThresholdPolicy:
    """Parse ``f1``, ``rate:0.01`` or ``value:-42.5``."""
    raw = str(text).strip().lower()
    if raw == "f1":
        return ThresholdPolicy("f1")
    kind, sep, value = raw.partition(":")
    if sep and kind in ("rate", "value"):
        try:
            number = float(value)
        except ValueError:
            number = math.nan
        if not math.isfinite(number):
            raise AfterlookError(f"bad threshold '{text}': '{value}' is not a finite number ({POLICY_HELP})")
        if kind == "rate" and not 0.0 < number < 1.0:
            raise AfterlookError(f"bad threshold '{text}': a rate must lie strictly between 0 and 1")
        return ThresholdPolicy(kind, number)
    raise AfterlookError(f"bad threshold '{text}' (use {POLICY_HELP})")


@dataclass(frozen=True)
class Confusion:
    """Confusion counts and the metrics derived from them."""

    tp: int
    fp: int
    fn: int
    tn: int

    @property
    def precision(self) -> float:
        return self.tp / (self.tp + self.fp) if self.tp + self.fp else 0.0

    @property
    def recall(self) -> float:
        return self.tp / (self.tp + self.fn) if self.tp + self.fn else 0.0

    @property
    def f1(self) -> float:
        denom = 2 * self.tp + self.fp + self.fn
        return 2 * self.tp / denom if denom else 0.0

    def to_dict(self) -> dict:
        return {
            "tp": self.tp, "fp": self.fp, "fn": self.fn, "tn": self.tn,
            "precision": self.precision, "recall": self.recall, "f1": self.f1,
        }


#: what a case gets when a feature is undefined although its readings are finite
#: (a zero divisor, a log of a non-positive value): "flag" scores it -inf, i.e.
#: outside the feature's domain, flagged; "skip" leaves it unscored (NaN).
UNDEFINED_POLICIES = ("flag", "skip")


def outside_domain(log_density: np.ndarray, inputs_finite: np.ndarray) -> np.ndarray:
    """Cases whose log-density is undefined although every reading the recipe uses is finite."""
    ld = np.asarray(log_density, dtype=np.float64)
    return np.isnan(ld) & np.asarray(inputs_finite, dtype=bool)


def apply_undefined_policy(log_density: np.ndarray, inputs_finite: np.ndarray, policy: str) -> np.ndarray:
    """``log_density`` with cases outside a feature's domain at -inf (policy "flag") or left NaN ("skip")."""
    if policy not in UNDEFINED_POLICIES:
        raise AfterlookError(f"unknown undefined-value policy {policy!r} (choose: {', '.join(UNDEFINED_POLICIES)})")
    ld = np.asarray(log_density, dtype=np.float64)
    if policy == "skip":
        return ld
    return np.where(outside_domain(ld, inputs_finite), -np.inf, ld)


def flag(log_density: np.ndarray, threshold: float) -> np.ndarray:
    """Flagged = log-density strictly below the threshold (NaN: not flagged)."""
    with np.errstate(invalid="ignore"):
        return np.asarray(log_density) < threshold


def flagged_rate(log_density: np.ndarray, threshold: float, is_anomaly: np.ndarray) -> float:
    """Share of labelled normal cases flagged at ``threshold`` (the model's false-alarm rate)."""
    y = np.asarray(is_anomaly, dtype=bool)
    normals = np.asarray(log_density)[~y]
    return float(np.mean(flag(normals, threshold))) if normals.size else 0.0


def confusion(flagged: np.ndarray, is_anomaly: np.ndarray) -> Confusion:
    """Counts and rates of ``flagged`` against the labels ``is_anomaly`` (True = anomaly)."""
    flagged = np.asarray(flagged, dtype=bool)
    is_anomaly = np.asarray(is_anomaly, dtype=bool)
    tp = int(np.sum(flagged & is_anomaly))
    fp = int(np.sum(flagged & ~is_anomaly))
    fn = int(np.sum(~flagged & is_anomaly))
    tn = int(np.sum(~flagged & ~is_anomaly))
    return Confusion(tp, fp, fn, tn)


def best_f1_threshold(log_density: np.ndarray, is_anomaly: np.ndarray) -> tuple[float, Confusion]:
    """Threshold maximising F1 when flagging ``log_density < threshold``.

    Every distinct score is a candidate cut; the returned threshold sits
    halfway between the last flagged score and the next distinct one, so it
    is stable under round-off. Ties in F1 go to the higher threshold (more
    recall). Rows with NaN log-density are never flagged.

    This is the best F1 on scikit-learn's ``precision_recall_curve`` for the
    score ``-log_density`` (tests check it).
    """
    threshold = _best_f1_cut(log_density, is_anomaly)
    ld = np.asarray(log_density, dtype=np.float64)
    return threshold, confusion(flag(ld, threshold), np.asarray(is_anomaly, dtype=bool))


def _best_f1_cut(log_density: np.ndarray, is_anomaly: np.ndarray) -> float:
    """The threshold of :func:`best_f1_threshold` alone (what a policy needs, without the counts)."""
    ld = np.asarray(log_density, dtype=np.float64)
    y = np.asarray(is_anomaly, dtype=bool)
    ok = np.isfinite(ld)
    n_pos = int(y.sum())
    if n_pos == 0:
        raise AfterlookError("best-F1 threshold needs labelled anomalies among the cases; none are labelled anomaly")
    if not ok.any():
        raise AfterlookError("no case has a finite log-density")
    # Cases at -inf (outside a feature's domain) are flagged by every threshold.
    always = np.isneginf(ld)
    tp0, fp0 = int((always & y).sum()), int((always & ~y).sum())
    s, yy = ld[ok], y[ok]
    # any sort will do: a cut is made only after the last of a run of equal scores, where the counts
    # include the whole run whatever its order (numpy's default sort, vectorised, is ~5x a stable one)
    order = np.argsort(s)
    s, yy = s[order], yy[order]
    # Cut after position k (flag s[0..k]); only where the next score differs.
    last_of_run = np.r_[s[1:] != s[:-1], True]
    tp = np.cumsum(yy)[last_of_run] + tp0
    fp = np.cumsum(~yy)[last_of_run] + fp0
    f1 = 2 * tp / (n_pos + tp + fp)  # fn = n_pos - tp, so 2tp + fp + fn = n_pos + tp + fp
    best = int(np.flatnonzero(f1 == f1.max())[-1])
    cuts = s[last_of_run]
    if best + 1 < len(cuts):
        threshold = float(cuts[best] + (cuts[best + 1] - cuts[best]) / 2.0)
        if not threshold > cuts[best]:  # adjacent floats: fall back to the next one
            threshold = float(np.nextafter(cuts[best], np.inf))
    else:
        threshold = float(np.nextafter(cuts[best], np.inf))
    return threshold


def rate_threshold(normal_log_density: np.ndarray, rate: float) -> float:
    """Largest threshold that flags at most ``rate`` of the normal rows.

    With ``k = floor(rate * n)``, the threshold is the (k+1)-th smallest
    normal log-density: exactly the k lowest are strictly below it (fewer
    when scores tie). Normal rows at -inf (outside a feature's domain) are
    flagged by any threshold and count against the budget; NaN rows do not.
    """
    ld = np.asarray(normal_log_density, dtype=np.float64)
    always = int(np.isneginf(ld).sum())  # outside a feature's domain: flagged whatever the threshold
    n_scored = int((~np.isnan(ld)).sum())
    ld = ld[np.isfinite(ld)]
    if ld.size == 0:
        raise AfterlookError("false-alarm budget needs normal rows with a finite log-density")
    k = max(int(math.floor(rate * n_scored + 1e-9)) - always, 0)
    if k >= ld.size:
        return float(np.nextafter(ld.max(), np.inf))
    return float(np.partition(ld, k)[k])  # the (k+1)-th smallest: one position, no sort


def choose_threshold(
    policy: ThresholdPolicy,
    *,
    case_log_density: np.ndarray | None = None,
    case_is_anomaly: np.ndarray | None = None,
    normal_log_density: np.ndarray | None = None,
) -> float:
    """Apply a policy. ``rate`` uses labelled-normal cases when given, else ``normal_log_density``."""
    if policy.kind == "value":
        return float(policy.parameter)
    if policy.kind == "f1":
        if case_log_density is None or case_is_anomaly is None:
            raise AfterlookError("the f1 threshold needs labelled cases (--cases with a label column); or use --threshold rate:R")
        return _best_f1_cut(case_log_density, case_is_anomaly)
    if case_log_density is not None and case_is_anomaly is not None and np.any(~np.asarray(case_is_anomaly, bool)):
        normals = np.asarray(case_log_density)[~np.asarray(case_is_anomaly, bool)]
    elif normal_log_density is not None:
        normals = normal_log_density
    else:
        raise AfterlookError("a false-alarm budget needs normal rows")
    return rate_threshold(normals, float(policy.parameter))
