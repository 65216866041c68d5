"""A transform judged by detection: does the column alone separate more labelled anomalies after it?

Looking more Gaussian is not the goal of a transform; flagging failures is. A
transform that makes the normal rows look Gaussian can pull the anomalies in
with them (a log compresses exactly the large readings a failure produces).
"""

from __future__ import annotations

import numpy as np

from .recipe import apply_transform
from .shaping import ShapeResult

SEPARATION_RATE = 0.01  # the false-alarm rate at which a column alone separates anomalies (common practice: 1%)


def separation(normal: np.ndarray, anomalies: np.ndarray, rate: float = SEPARATION_RATE) -> float | None:
    """Share of ``anomalies`` a Gaussian on ``normal`` alone flags at a ``rate`` false-alarm budget.

    The column as the model sees it: a normal density fitted to the normal
    values (mean, variance), the threshold its log-density takes at the
    ``rate`` quantile of the normal values (so ``rate`` of them are flagged),
    anomalies flagged below it. Non-finite values are left out; None when
    there is nothing to compare.
    """
    x = np.asarray(normal, dtype=np.float64)
    x = x[np.isfinite(x)]
    a = np.asarray(anomalies, dtype=np.float64)
    a = a[np.isfinite(a)]
    if x.size < 2 or a.size == 0 or not x.std() > 0:
        return None
    mu, sd = x.mean(), x.std()
    z_normal, z_anom = np.abs((x - mu) / sd), np.abs((a - mu) / sd)
    cut = np.quantile(z_normal, 1.0 - rate)  # same ordering as the log-density of a one-column Gaussian
    return float(np.mean(z_anom > cut))


def judge_by_detection(result: ShapeResult, normal: np.ndarray, anomalies: np.ndarray) -> ShapeResult:
    """Fill the separation before/after; hold the transform back when it separates fewer anomalies."""
    if result.transform is None:
        result.separation_before = result.separation_after = separation(normal, anomalies)
        return result
    after_normal = apply_transform(result.transform, result.name, np.asarray(normal, dtype=np.float64))
    after_anom = apply_transform(result.transform, result.name, np.asarray(anomalies, dtype=np.float64))
    result.separation_before = separation(normal, anomalies)
    result.separation_after = separation(after_normal, after_anom)
    b, a = result.separation_before, result.separation_after
    if b is not None and a is not None and a < b:
        result.held_back = (f"not recommended: by this column alone it separates fewer labelled anomalies "
                            f"({a:.0%} vs {b:.0%} at a {SEPARATION_RATE:.0%} false-alarm rate)")
    return result
