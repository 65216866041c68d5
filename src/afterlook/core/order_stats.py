"""numpy's median and linear quantile of a 1-D array, the same numbers from one-position partitions.

``np.median`` of an even number of values and ``np.quantile`` between two order
statistics ask ``np.partition`` for two positions at once. numpy answers a single
position with its vectorised selection and a list of positions with its generic
introselect, which on 50,000 values was ten times slower on the development machine
(58 us against 645 us; numpy 2.4, AVX-512). Here each answer partitions for its upper
position only and takes the lower one as the largest value left of it (every value
there is no larger), then combines the two exactly as numpy does: the mean of the two
middle values for the median, numpy's ``_lerp`` for the quantile. A test checks both
against numpy bit for bit, ties and NaN included.

Used by the candidate search's robust statistics (:class:`afterlook.core.tails.Deviations`)
and the shaping search's quartiles (:mod:`afterlook.core.shaping_fast`).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["median", "quantile", "percentile", "percentile_pair"]


def _upper_and_lower(v: np.ndarray, hi: int) -> tuple[float, float, bool]:
    """The ``hi``-th and ``(hi - 1)``-th smallest of ``v`` (``hi >= 1``) and whether ``v`` holds a NaN."""
    part = np.partition(v, hi)
    b = part[hi]
    nan = bool(np.isnan(part[hi:]).any())  # numpy sorts NaN last: any NaN lies at or right of hi
    return b, part[:hi].max(), nan


def median(values) -> np.float64:
    """``np.median(values)`` of a 1-D array (NaN when any value is NaN, as numpy gives it)."""
    v = np.asarray(values, dtype=np.float64).ravel()
    n = v.size
    if n < 2:
        return np.median(v)  # numpy's own answer (and warning) for no values; one value is itself
    h = n // 2
    if n % 2:
        part = np.partition(v, h)
        return np.float64(np.nan) if np.isnan(part[h:]).any() else part[h]
    b, a, nan = _upper_and_lower(v, h)
    return np.float64(np.nan) if nan else (a + b) / 2.0  # numpy: the mean of the two middle values


def quantile(values, q: float) -> np.float64:
    """``np.quantile(values, q)`` (numpy's default linear method) of a 1-D array, ``0 <= q <= 1``."""
    v = np.asarray(values, dtype=np.float64).ravel()
    n = v.size
    q = float(q)
    if n < 2 or not 0.0 <= q <= 1.0:
        return np.quantile(v, q)  # numpy's own answer or error
    virtual = (n - 1) * q  # numpy's virtual index for the linear method
    if virtual >= n - 1:  # numpy takes the last value twice, with the weight of index -1
        a = b = v.max()  # (NaN when any value is NaN)
        g = virtual + 1
    else:
        lo = int(math.floor(virtual))
        b, a, nan = _upper_and_lower(v, lo + 1)
        if nan:
            return np.float64(np.nan)
        g = virtual - lo
    return _lerp(a, b, g)


def percentile(values, p: float) -> np.float64:
    """``np.percentile(values, p)``: :func:`quantile` at ``p / 100``, divided as numpy divides it."""
    return quantile(values, float(np.true_divide(p, 100)))


def percentile_pair(values, high: float, low: float) -> tuple[np.float64, np.float64]:
    """``(np.percentile(values, high), np.percentile(values, low))`` for ``low <= high``, from one copy.

    The copy is partitioned for ``high``'s upper position; every value ``low`` needs
    then lies left of it, and only that part is partitioned again (the shaping search
    asks for the quartiles of every column). The same numbers as two :func:`percentile`
    calls; those answer where this shortcut does not apply (fewer than two values, a
    percentile outside 0..100, or one at the last value).
    """
    v = np.asarray(values, dtype=np.float64).ravel()
    n = v.size
    qh, ql = float(np.true_divide(high, 100)), float(np.true_divide(low, 100))
    if n < 2 or not 0.0 <= ql <= qh <= 1.0 or (n - 1) * qh >= n - 1:
        return percentile(v, high), percentile(v, low)
    hi_h = int(math.floor((n - 1) * qh)) + 1
    part = np.partition(v, hi_h)
    if np.isnan(part[hi_h:]).any():  # numpy sorts NaN last: any NaN lies at or right of hi_h
        return np.float64(np.nan), np.float64(np.nan)
    b_h, a_h = part[hi_h], part[:hi_h].max()
    hi_l = int(math.floor((n - 1) * ql)) + 1
    if hi_l == hi_h:
        b_l, a_l = b_h, a_h
    else:  # the hi_h smallest values are left of hi_h: the low position is among them
        left = part[:hi_h]
        left.partition(hi_l)
        b_l, a_l = left[hi_l], left[:hi_l].max()
    vh, vl = (n - 1) * qh, (n - 1) * ql
    return _lerp(a_h, b_h, vh - math.floor(vh)), _lerp(a_l, b_l, vl - math.floor(vl))


def _lerp(a: np.float64, b: np.float64, g: float) -> np.float64:
    """numpy's _lerp, written out for scalars: ``g`` of the way from ``a`` to ``b``."""
    diff = b - a
    return b - diff * (1 - g) if g >= 0.5 else a + diff * g
