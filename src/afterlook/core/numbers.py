"""Small number rules every layer shares."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["finite_or_none", "sample_rows", "refuse_overflow", "OVERFLOW_MAGNITUDE"]


def finite_or_none(x) -> float | None:
    """``float(x)``, or None for None, NaN and infinities (JSON has no NaN)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def sample_rows(n: int, size: int, random_state) -> np.ndarray:
    """Seeded row indices of a uniform sample without replacement, in row order (every row when n <= size)."""
    if n <= size:
        return np.arange(n)
    rng = np.random.default_rng(random_state)
    return np.sort(rng.choice(n, size=size, replace=False))


# Squares of values beyond about 1.3e154 overflow a float64: a variance, a covariance or a squared
# distance of such a column is infinite. Fitting refuses them by name rather than calling them constant.
OVERFLOW_MAGNITUDE = 1e150


def refuse_overflow(magnitudes, names) -> None:
    """Raise a one-line overflow error naming the columns whose magnitude is OVERFLOW_MAGNITUDE or more (or NaN)."""
    from .errors import AfterlookError

    big = [names[j] for j in np.flatnonzero(~(np.asarray(magnitudes) < OVERFLOW_MAGNITUDE))]
    if big:
        shown = ", ".join(repr(n) for n in big[:5]) + (f" and {len(big) - 5} more" if len(big) > 5 else "")
        raise AfterlookError(
            f"numeric overflow: column(s) {shown} hold values of {OVERFLOW_MAGNITUDE:.0e} or more, whose squares "
            "overflow a float; rescale them (e.g. --transform 'COL=COL / 1e150') or leave them out (--columns)")
