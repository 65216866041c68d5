"""Small number rules every layer shares."""

from __future__ import annotations

import math

__all__ = ["finite_or_none"]


def finite_or_none(x) -> float | None:
    """``float(x)``, or None for None, NaN and infinities (JSON has no NaN)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None
