"""Held-out estimates of what a feature change does on cases the threshold never saw.

``try`` and ``suggest`` used to re-pick the threshold on the same labelled
cases they report metrics on, which flatters every change (the threshold is
fitted to those cases). Here the threshold is picked by the model's policy on
part of the cases and the metrics are counted on the rest:

* **stratified K-fold** (default): the labelled cases are split into ``k``
  folds with the same share of anomalies (the folds of scikit-learn's
  ``StratifiedKFold``, shuffled with a fixed seed, computed in numpy so a
  search never imports scikit-learn); for each fold the threshold is picked on the other ``k - 1`` folds and applied to this one;
  the confusion counts of the ``k`` held-out folds are summed and F1 is
  computed from the sums (pooling, as recommended for small positive classes
  by Forman and Scholz, SIGKDD Explorations 12(1), 2010, 49-57, cited from
  memory). The *spread* is the lowest and highest per-fold F1 gain;
* **a holdout table**: the threshold is picked on the cases, the metrics are
  counted on the holdout rows.

Before and after use the same folds, so their difference is paired: each case
is held out once, and the cases whose held-out call turned right
(``improved``) or wrong (``worsened``) give an exact one-sided McNemar test of
"the change helps" (the binomial upper tail of ``improved`` out of
``improved + worsened`` at one half; McNemar, Psychometrika 12, 1947,
153-157, cited from memory). Per-fold F1 is noisy with few anomalies, so a
gain counts as a gain only when that test agrees (:data:`GAIN_LEVEL`). Recall at
the model's false-alarm rate (the share of labelled normal cases the model
flags) is reported beside F1: it is what a user who keeps today's alarm load
would gain.

NaN log-densities are never flagged (see :func:`flag`): an unscored case
stays a miss in these counts.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from .errors import AfterlookError
from .thresholds import (  # noqa: F401 - flagged_rate is part of this module's interface
    Confusion, ThresholdPolicy, choose_threshold, confusion, flag, flagged_rate, rate_threshold,
)

DEFAULT_FOLDS = 5
DEFAULT_SEED = 0
GAIN_LEVEL = 0.1  # the McNemar tail below which a held-out gain is more than noise


@dataclass(frozen=True)
class HeldOut:
    """Held-out F1 before and after a change, and its spread over folds."""

    method: str  # "kfold" or "holdout"
    folds: int
    f1_before: float
    f1_after: float
    gain: float
    gain_low: float  # lowest per-fold F1 gain (the gain itself for a holdout table)
    gain_high: float
    false_alarm_rate: float
    recall_before_at_rate: float
    recall_after_at_rate: float
    before: Confusion
    after: Confusion
    fold_gains: tuple[float, ...] = ()
    improved: int = 0  # held-out cases whose call turned right
    worsened: int = 0  # held-out cases whose call turned wrong
    found_in_folds: int | None = None  # filled by suggest's stability check
    extra: dict = field(default_factory=dict)

    stability_folds: int | None = None  # folds searched for the stability count

    def with_stability(self, found: int, searched: int) -> "HeldOut":
        """A copy with ``found_in_folds`` (out of ``searched`` fold searches) filled in."""
        from dataclasses import replace

        return replace(self, found_in_folds=int(found), stability_folds=int(searched))

    @property
    def straddles_a_loss(self) -> bool:
        return self.gain_low < 0.0

    @property
    def change_tail(self) -> float:
        """Exact one-sided McNemar tail of ``improved`` vs ``worsened`` (1.0 when no call changed)."""
        n = self.improved + self.worsened
        return 1.0 if n == 0 or self.improved == 0 else half_binomial_upper_tail(self.improved, n)

    @property
    def holds(self) -> bool:
        """A positive gain, no fold with a loss, and more calls turned right than chance explains."""
        return self.gain > 1e-12 and not self.straddles_a_loss and self.change_tail < GAIN_LEVEL

    def to_dict(self) -> dict:
        def num(x):
            return None if x is None or not math.isfinite(x) else float(x)

        return {
            "method": self.method, "folds": self.folds,
            "f1_before": num(self.f1_before), "f1_after": num(self.f1_after),
            "gain": num(self.gain), "gain_low": num(self.gain_low), "gain_high": num(self.gain_high),
            "fold_gains": [num(g) for g in self.fold_gains],
            "improved": self.improved, "worsened": self.worsened, "change_tail": num(self.change_tail),
            "false_alarm_rate": num(self.false_alarm_rate),
            "recall_before_at_rate": num(self.recall_before_at_rate),
            "recall_after_at_rate": num(self.recall_after_at_rate),
            "before": self.before.to_dict(), "after": self.after.to_dict(),
            "found_in_folds": self.found_in_folds, "stability_folds": self.stability_folds, **self.extra,
        }


def stratified_folds(is_anomaly: np.ndarray, k: int = DEFAULT_FOLDS, seed: int = DEFAULT_SEED) -> np.ndarray:
    """Fold number (0..k'-1) of every case; ``k' = min(k, smaller class size)``.

    The folds of scikit-learn's ``StratifiedKFold(k', shuffle=True,
    random_state=seed)`` (a test checks they are identical), computed here in
    numpy so that a search does not import scikit-learn: each class's cases,
    in table order, get fold numbers dealt round-robin over the sorted labels
    (so every fold holds the same share of each class, give or take one),
    shuffled within the class by ``numpy.random.RandomState(seed)``.

    Raises :class:`AfterlookError` when either class has fewer than two cases
    (nothing can be held out then).
    """
    y = np.asarray(is_anomaly, dtype=bool)
    smaller = int(min(y.sum(), (~y).sum()))
    if smaller < 2:
        raise AfterlookError("a held-out estimate needs at least two labelled anomalies and two labelled normal cases")
    splits = min(int(k), smaller)
    rng = np.random.RandomState(seed)
    # classes numbered by first appearance, as scikit-learn encodes them
    first_is_anomaly = bool(y[0])
    encoded = (y != first_is_anomaly).astype(np.int64)
    order = np.sort(encoded)
    allocation = np.array([np.bincount(order[i::splits], minlength=2) for i in range(splits)])
    folds = np.empty(y.size, dtype=np.int64)
    for c in range(2):
        for_class = np.arange(splits).repeat(allocation[:, c])
        rng.shuffle(for_class)
        folds[encoded == c] = for_class
    return folds


def half_binomial_upper_tail(count: int, n: int) -> float:
    """``P(X >= count)`` for ``X ~ Binomial(n, 1/2)`` (``scipy.stats.binom.sf(count - 1, n, 0.5)``).

    Exact in integers up to n = 2000; beyond, a sum in log space (relative error ~1e-12).
    """
    if count <= 0:
        return 1.0
    if count > n:
        return 0.0
    if n <= 2000:
        return float(Fraction(sum(math.comb(n, j) for j in range(count, n + 1)), 2**n))
    logs = np.array([math.lgamma(n + 1) - math.lgamma(j + 1) - math.lgamma(n - j + 1) for j in range(count, n + 1)])
    top = logs.max()
    return float(min(1.0, math.exp(top - n * math.log(2.0)) * np.exp(logs - top).sum()))


def _counts(c: Confusion) -> np.ndarray:
    return np.array([c.tp, c.fp, c.fn, c.tn], dtype=np.int64)


def _sum(counts: np.ndarray) -> Confusion:
    tp, fp, fn, tn = (int(x) for x in counts)
    return Confusion(tp, fp, fn, tn)


def _pick(policy: ThresholdPolicy, ld: np.ndarray, y: np.ndarray) -> float:
    return choose_threshold(policy, case_log_density=ld, case_is_anomaly=y)


def _rate_cut(ld: np.ndarray, y: np.ndarray, rate: float) -> float:
    normals = ld[~y]
    if rate <= 0.0:
        finite = normals[np.isfinite(normals)]
        return float(finite.min()) if finite.size else -math.inf
    return rate_threshold(normals, min(rate, 1.0 - 1e-12))


def kfold_gain(before: np.ndarray, after: np.ndarray, is_anomaly: np.ndarray, policy: ThresholdPolicy, *,
               false_alarm_rate: float, k: int = DEFAULT_FOLDS, seed: int = DEFAULT_SEED) -> HeldOut:
    """Paired stratified K-fold estimate of the F1 change from ``before`` to ``after`` log-densities.

    The ``before`` side is the same for every candidate of a search: it is computed once per
    (scores, labels, policy, rate, folds) and kept (a few entries, keyed by a digest of the values).
    """
    b, a = np.asarray(before, np.float64), np.asarray(after, np.float64)
    y = np.asarray(is_anomaly, dtype=bool)
    if not (b.shape == a.shape == y.shape):
        raise AfterlookError("held-out estimate: before, after and labels must have one value per case")
    y_digest = _digest(y)
    folds = _FOLDS.get((y_digest, int(k), seed)) if seed is not None else None
    if folds is None:
        folds = stratified_folds(y, k, seed)
        if seed is not None:  # seeded folds are the same every call: kept, read-only, for the next one
            folds.setflags(write=False)
            if len(_FOLDS) >= 8:
                _FOLDS.pop(next(iter(_FOLDS)))
            _FOLDS[(y_digest, int(k), seed)] = folds
    key = (_digest(b), y_digest, policy, float(false_alarm_rate), int(k), seed)
    side_before = _BEFORE.get(key) if seed is not None else None  # no seed: fresh folds every call
    if side_before is None:
        side_before = _one_side(b, y, folds, policy, false_alarm_rate)
        if len(_BEFORE) >= 8:
            _BEFORE.pop(next(iter(_BEFORE)))
        _BEFORE[key] = side_before
    calls_b, total_b, rate_b, f1_b = side_before
    calls_a, total_a, rate_a, f1_a = _one_side(a, y, folds, policy, false_alarm_rate)
    gains = [fa - fb for fa, fb in zip(f1_a, f1_b)]
    cb, ca = _sum(total_b), _sum(total_a)
    right_before, right_after = calls_b == y, calls_a == y
    return HeldOut("kfold", len(gains), cb.f1, ca.f1, ca.f1 - cb.f1, min(gains), max(gains), false_alarm_rate,
                   _sum(rate_b).recall, _sum(rate_a).recall, cb, ca, tuple(gains),
                   improved=int(np.sum(~right_before & right_after)), worsened=int(np.sum(right_before & ~right_after)))


#: The ``before`` side of recent :func:`kfold_gain` calls (a search asks it for every candidate), and the
#: folds of recent labels (seeded folds depend on the labels, the count and the seed only).
_BEFORE: dict = {}
_FOLDS: dict = {}


def _digest(values: np.ndarray) -> bytes:
    import hashlib

    return hashlib.blake2b(np.ascontiguousarray(values).tobytes(), digest_size=16).digest()


def _one_side(ld: np.ndarray, y: np.ndarray, folds: np.ndarray, policy: ThresholdPolicy, rate: float):
    """Per fold: the threshold picked on the other folds, the held-out calls, their counts, and F1."""
    calls = np.zeros(y.size, bool)
    totals, rate_totals = np.zeros(4, np.int64), np.zeros(4, np.int64)
    f1s = []
    for f in range(int(folds.max()) + 1):
        fit, test = folds != f, folds == f
        flagged = flag(ld[test], _pick(policy, ld[fit], y[fit]))
        calls[test] = flagged
        c = confusion(flagged, y[test])
        totals += _counts(c)
        f1s.append(c.f1)
        rate_totals += _counts(confusion(flag(ld[test], _rate_cut(ld[fit], y[fit], rate)), y[test]))
    return calls, totals, rate_totals, f1s


def holdout_gain(before_cases: np.ndarray, after_cases: np.ndarray, is_anomaly_cases: np.ndarray,
                 before_holdout: np.ndarray, after_holdout: np.ndarray, is_anomaly_holdout: np.ndarray,
                 policy: ThresholdPolicy, *, false_alarm_rate: float) -> HeldOut:
    """Threshold picked on the cases by ``policy``; metrics counted on a separate holdout table."""
    yc, yh = np.asarray(is_anomaly_cases, bool), np.asarray(is_anomaly_holdout, bool)
    if not yh.any():
        raise AfterlookError("the holdout table has no labelled anomaly; F1 cannot be estimated on it")
    out, right = {}, {}
    for name, cases, hold in (("before", before_cases, before_holdout), ("after", after_cases, after_holdout)):
        cases, hold = np.asarray(cases, np.float64), np.asarray(hold, np.float64)
        flagged = flag(hold, _pick(policy, cases, yc))
        right[name] = flagged == yh
        out[name] = confusion(flagged, yh)
        out["rate_" + name] = confusion(flag(hold, _rate_cut(cases, yc, false_alarm_rate)), yh)
    gain = out["after"].f1 - out["before"].f1
    return HeldOut("holdout", 1, out["before"].f1, out["after"].f1, gain, gain, gain, false_alarm_rate,
                   out["rate_before"].recall, out["rate_after"].recall, out["before"], out["after"], (gain,),
                   improved=int(np.sum(~right["before"] & right["after"])),
                   worsened=int(np.sum(right["before"] & ~right["after"])))
