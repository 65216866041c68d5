"""Small number rules every layer shares."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["finite_or_none", "sample_rows"]


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
