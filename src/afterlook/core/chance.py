"""The chance guard for one target and for many.

With ``m`` candidates tried, one of them will separate a single case by luck.
For **one target** the guard is as before: the candidate's tail probability
for the target, Bonferroni-corrected over the ``m`` candidates tried.

For **several targets** the old guard multiplied the best target's tail by
``m`` times the number of targets, which asks "is the single best-exposed
target beyond chance?". With 80 or 300 misses that correction is so large
that nothing is ever beyond chance, although a mechanism shared by many
misses moves many of them a little. The question for many targets is *how
many* of them the candidate exposes:

* each target counts as exposed when its tail is at most ``per_target``
  (default 0.05: beyond the normal rows' 5% two-sided tail);
* under chance (the candidate's value on a miss is distributed like on the
  normal rows) the count of exposed targets is Binomial(n, per_target), so
  the combined tail is the upper binomial tail ``P(X >= count)``
  (``scipy.stats.binomtest(count, n, per_target, alternative="greater")``);
* the guard takes the better of this count test and the single best target
  (Bonferroni over the targets), doubles it for having looked twice, and
  corrects over the ``m`` candidates tried only.

The count test treats the targets as independent given the normal rows; tails
estimated from one shared normal sample are mildly dependent, which the
doubling and the correction over candidates more than absorb in the planted
null tests (``tests/discovery/``). Reference for the binomial count of
significant tests: the "vote counting" combination, e.g. Hedges and Olkin,
Statistical Methods for Meta-Analysis (1985), ch. 4 (cited from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

CHANCE_LEVEL = 0.05
PER_TARGET_LEVEL = 0.05


@dataclass(frozen=True)
class ChanceVerdict:
    """The guard's result for one candidate."""

    adjusted_tail: float  # the tail after every correction; beyond chance when < level
    method: str  # "single" (one target or the best target won) or "count" (the binomial count won)
    targets_exposed: int  # targets whose own tail is at most the per-target level
    targets: int
    count_tail: float | None  # upper binomial tail of the count (None for one target)
    best_tail: float  # the smallest single-target tail

    def beyond_chance(self, level: float = CHANCE_LEVEL) -> bool:
        return self.adjusted_tail < level

    def to_dict(self) -> dict:
        return {"adjusted_tail": self.adjusted_tail, "method": self.method, "targets_exposed": self.targets_exposed,
                "targets": self.targets, "count_tail": self.count_tail, "best_tail": self.best_tail}


def binomial_upper_tail(count: int, n: int, p: float) -> float:
    """``P(X >= count)`` for ``X ~ Binomial(n, p)``: the regularized incomplete beta ``I_p(count, n - count + 1)``
    (the identity behind scipy.stats.binom.sf, which a test compares it with). scipy.special, not
    scipy.stats: the latter's import alone took 0.5 s of a fresh process's search."""
    from scipy.special import betainc

    if count <= 0:
        return 1.0
    if count > n:
        return 0.0
    return float(betainc(count, n - count + 1, p))


def chance_verdict(tails: np.ndarray, n_tried: int, per_target: float = PER_TARGET_LEVEL) -> ChanceVerdict:
    """Guard one candidate given each target's (uncorrected) tail probability.

    ``n_tried`` is the number of candidates tried in the search (the family of
    the correction). With one target this is today's single-target guard.
    """
    t = np.asarray(tails, dtype=np.float64)
    t = np.where(np.isfinite(t), t, 1.0)
    if t.size == 0:
        raise ValueError("chance_verdict needs at least one target")
    m = max(int(n_tried), 1)
    best = float(t.min())
    exposed = int(np.sum(t <= per_target))
    if t.size == 1:
        return ChanceVerdict(min(1.0, best * m), "single", exposed, 1, None, best)
    single = min(1.0, best * t.size)
    count = binomial_upper_tail(exposed, int(t.size), per_target)
    better = min(single, count)
    method = "count" if count < single else "single"
    return ChanceVerdict(min(1.0, 2.0 * better * m), method, exposed, int(t.size), count, best)
