"""How extreme is a value among normal ones: robust z and the two-sided tail, with a Pareto tail beyond the data.

The chance guard of the candidate search (:mod:`afterlook.core.candidates`)
rests on these: the empirical add-one tail inside the data's range, and a
generalized Pareto tail fitted by probability-weighted moments (Hosking and
Wallis, "Parameter and quantile estimation for the generalized Pareto
distribution", Technometrics 29(3), 1987, 339-349) beyond it, its shape
clamped at >= 0.
"""

from __future__ import annotations

import math

import numpy as np

from . import order_stats

MAD_TO_SD = 1.4826  # consistency constant of the MAD for a normal distribution
MIN_TAIL_COUNT = 1  # any normal row as extreme as the target: no extrapolation
#: Targets up to which :meth:`Deviations.tails` scans the deviations once per target (a sort of 8,192
#: deviations costs about as much as 13 scans of them).
SCAN_TARGETS = 16
TAIL_FRACTION = 0.05  # share of rows in the generalized Pareto tail fit
MIN_EXCESSES = 50  # at least this many excesses in the tail fit

__all__ = ["gpd_pwm", "gpd_tail", "ParetoTail", "tail_probability", "robust_z", "Deviations", "MAD_TO_SD",
           "MIN_TAIL_COUNT", "TAIL_FRACTION", "MIN_EXCESSES"]


def gpd_pwm(excess: np.ndarray) -> tuple[float, float]:
    """Shape ``xi`` and scale ``sigma`` of a generalized Pareto fit to excesses.

    Probability-weighted moments (Hosking and Wallis 1987): with the sorted
    excesses ``y_(1) <= ... <= y_(n)`` and plotting positions
    ``p_j = (j - 0.35) / n``, ``a0 = mean(y)``, ``a1 = mean((1 - p_j) y_(j))``,
    their shape ``k = a0 / (a0 - 2 a1) - 2`` and scale
    ``alpha = 2 a0 a1 / (a0 - 2 a1)``; here ``xi = -k`` (scipy's ``c``).
    """
    y = np.sort(np.asarray(excess, dtype=np.float64))
    n = y.size
    if n < 5 or not np.any(y > 0):
        return 0.0, float(max(y.mean() if n else 1.0, 1e-12))
    p = (np.arange(1, n + 1) - 0.35) / n
    a0 = y.mean()
    a1 = np.mean((1.0 - p) * y)
    denom = a0 - 2.0 * a1
    if denom <= 0:
        return 0.0, float(a0)
    k = a0 / denom - 2.0
    alpha = 2.0 * a0 * a1 / denom
    return float(-k), float(alpha)


def _tail_size(n: int, fraction: float = TAIL_FRACTION) -> int:
    """Deviations in the generalized Pareto fit: ``fraction`` of them, at least MIN_EXCESSES, below n."""
    return min(max(MIN_EXCESSES, int(math.ceil(fraction * n))), n - 1)


class ParetoTail:
    """A generalized Pareto tail fitted once to the largest absolute deviations; :meth:`probability`
    answers for any target (the fit does not depend on it)."""

    @classmethod
    def fit(cls, abs_dev: np.ndarray, fraction: float = TAIL_FRACTION) -> "ParetoTail":
        d = np.asarray(abs_dev, dtype=np.float64).ravel()
        n = d.size
        n_tail = _tail_size(n, fraction)
        # only the largest n_tail + 1 deviations are read, in order: one partition and a sort of those
        return cls(np.sort(np.partition(d, n - n_tail - 1)[n - n_tail - 1:]), n)

    def __init__(self, top: np.ndarray, n: int):
        """``top``: the largest ``_tail_size(n) + 1`` deviations of ``n``, in ascending order."""
        self.n, self.n_tail = n, top.size - 1
        self.u = top[0]
        excess = top[1:] - self.u
        self.xi, self.sigma = gpd_pwm(excess)
        self.excess_mean = excess.mean()

    def probability(self, target_dev: float) -> float:
        """P(|V - med| >= target_dev), the shape clamped at >= 0."""
        xi, sigma = self.xi, self.sigma
        if sigma <= 0:
            return 1.0 / (self.n + 1)
        x = max(target_dev - self.u, 0.0)
        if xi < 1e-9:
            xi, sigma = 0.0, float(self.excess_mean) if self.excess_mean > 0 else sigma
            sf = math.exp(-x / sigma)
        else:
            sf = (1.0 + xi * x / sigma) ** (-1.0 / xi)
        return float((self.n_tail / self.n) * sf)


def gpd_tail(abs_dev: np.ndarray, target_dev: float, fraction: float = TAIL_FRACTION) -> float:
    """P(|V - med| >= target_dev) extrapolated with a generalized Pareto tail.

    The shape is clamped at ``>= 0`` (an exponential tail at the thinnest),
    so light tails are never extrapolated as bounded.
    """
    return ParetoTail.fit(abs_dev, fraction).probability(target_dev)


def tail_probability(values: np.ndarray, target: float) -> tuple[float, str, int]:
    """Two-sided tail of ``target`` among normal ``values`` (see module docstring).

    Returns ``(tail, method, count)`` with ``count`` the normal rows at least
    as extreme.
    """
    med = np.median(values)
    dev = np.abs(values - med)
    t = abs(target - med)
    count = int(np.sum(dev >= t))
    n = values.size
    if count >= MIN_TAIL_COUNT:
        return (count + 1) / (n + 1), "empirical", count
    return gpd_tail(dev, t), "pareto tail", count


class Deviations:
    """The median of normal ``values`` and their absolute deviations from it, computed once for many questions.

    :meth:`robust_z`, :meth:`tail` and :meth:`quantile` give exactly what
    :func:`robust_z`, :func:`tail_probability` and ``np.quantile(|v - med|, q)``
    give on the same values (a test checks it), without a median per question; the
    order statistics come from :mod:`afterlook.core.order_stats` (one-position partitions).
    """

    def __init__(self, values: np.ndarray):
        self.values = values
        self.median = order_stats.median(values)
        self.dev = np.abs(values - self.median)
        self._mad: float | None = None
        self._quantiles: dict[float, float] = {}
        self._pareto: ParetoTail | None = None  # fitted on the first target beyond every value

    def prepare(self, q: float) -> "Deviations":
        """Compute the ``q``-quantile of the deviations now (it will be asked for)."""
        self.quantile(q)
        return self

    def robust_z(self, target: np.ndarray | float) -> np.ndarray:
        if self._mad is None:
            self._mad = order_stats.median(self.dev)
        mad = MAD_TO_SD * self._mad
        if not mad > 0:
            mad = self.values.std()
        if not mad > 0:
            return np.full(np.shape(target), np.nan)
        return (np.asarray(target) - self.median) / mad

    def tail(self, target: float) -> tuple[float, str, int]:
        t = abs(target - self.median)
        count = int(np.count_nonzero(self.dev >= t))
        n = self.values.size
        if count >= MIN_TAIL_COUNT:
            return (count + 1) / (n + 1), "empirical", count
        return self._beyond(t), "pareto tail", count

    def tails(self, targets) -> list[tuple[float, str, int]]:
        """:meth:`tail` of every target, the same answers in the same order. Up to :data:`SCAN_TARGETS`
        targets each scans the deviations; more, and the counts come from one sorted copy of them (the
        count at or above ``t`` is the number of sorted values from the first that is not below ``t``), so
        1,700 targets cost one sort instead of 1,700 scans."""
        targets = np.asarray(targets, dtype=np.float64)
        if targets.size <= SCAN_TARGETS:
            return [self.tail(float(t)) for t in targets]
        t = np.abs(targets - self.median)
        counts = self.dev.size - np.searchsorted(np.sort(self.dev), t, side="left")
        n = self.values.size
        # (count + 1) / (n + 1): small whole numbers are exact in float64 and one division rounds as
        # Python's does, so the same probabilities as tail()'s
        probs = ((counts + 1) / (n + 1)).tolist()
        methods = ["empirical"] * len(probs)
        for j in np.flatnonzero(counts < MIN_TAIL_COUNT).tolist():
            probs[j], methods[j] = self._beyond(float(t[j])), "pareto tail"
        return list(zip(probs, methods, counts.tolist()))

    def _beyond(self, t: float) -> float:
        """The Pareto tail's probability for a deviation ``t`` no normal row reaches (one fit for every
        target: it depends on the deviations only)."""
        if self._pareto is None:
            self._pareto = ParetoTail.fit(self.dev)
        return self._pareto.probability(t)

    def quantile(self, q: float) -> float:
        if q not in self._quantiles:
            self._quantiles[q] = order_stats.quantile(self.dev, q)
        return self._quantiles[q]


def robust_z(values: np.ndarray, target: np.ndarray | float) -> np.ndarray:
    """``(t - median) / (1.4826 MAD)``; falls back to the sd when the MAD is 0."""
    med = np.median(values)
    mad = MAD_TO_SD * np.median(np.abs(values - med))
    if not mad > 0:
        mad = values.std()
    if not mad > 0:
        return np.full(np.shape(target), np.nan)
    return (np.asarray(target) - med) / mad
