"""How a number is shown: one rule per kind of quantity, for the CLI, the workbench and the reports.

A threshold printed as ``-125.308`` by one command, ``-125.31`` by another
and ``-125.3`` in a report reads as three different numbers. Every screen and
report formats these quantities through this module, so one number has one
face wherever it appears:

=================  =====================  ==========================================
quantity           rule                   examples
=================  =====================  ==========================================
log-density,       2 decimals             ``-125.31``, ``-21.95``; ``-inf`` outside a
threshold                                 feature's domain; ``-1.235e+07`` when huge
margin             2 decimals, signed     ``+103.35``, ``-0.40``
z, conditional z   2 decimals, signed     ``+0.45``, ``-17.80``
tail probability   2 significant digits   ``0.031``, ``4.1e-12``
percentile         1 decimal              ``68.5``
share (precision,  3 decimals             ``0.462``
recall, F1, AUC)
reading            4 significant digits   ``540.2``, ``1.735``
=================  =====================  ==========================================

A missing value (None, NaN) is ``n/a`` everywhere; never ``nan``.
"""

from __future__ import annotations

import math

__all__ = ["MISSING", "log_density", "threshold", "margin", "z", "tail", "percentile", "share", "share_change", "reading"]

MISSING = "n/a"
_HUGE = 1e6  # from here on a fixed-decimal number is too long to read: e-notation


def _value(x) -> float | None:
    if x is None or isinstance(x, bool):
        return None
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return None if math.isnan(v) else v


def log_density(x) -> str:
    """A log-density or a threshold: two decimals."""
    return _two_decimals(x, "")


threshold = log_density


def margin(x) -> str:
    """A log-density minus a threshold (or any signed difference of log-densities): two decimals, signed."""
    return _signed(x)


def z(x) -> str:
    """A z or conditional z: two decimals, signed (the direction reads without colour)."""
    return _signed(x)


def _signed(x) -> str:
    return _two_decimals(x, "+")


def _two_decimals(x, sign: str) -> str:
    """Two decimals (``sign`` "+" to always show the sign); e-notation when huge; -inf/+inf as such."""
    v = _value(x)
    if v is None:
        return MISSING
    if math.isinf(v):
        return "-inf" if v < 0 else "+inf"
    return f"{v:{sign}.3e}" if abs(v) >= _HUGE else f"{v:{sign}.2f}"


def share_change(x) -> str:
    """A change of a share (F1 after minus before): three decimals, signed."""
    v = _value(x)
    return MISSING if v is None or math.isinf(v) else f"{v:+.3f}"


def tail(p) -> str:
    """A probability that may be tiny: two significant digits."""
    v = _value(p)
    return MISSING if v is None else f"{v:.2g}"


def percentile(x) -> str:
    v = _value(x)
    return MISSING if v is None or math.isinf(v) else f"{v:.1f}"


def share(x) -> str:
    """Precision, recall, F1, ROC AUC, average precision, a false-alarm share: three decimals."""
    v = _value(x)
    return MISSING if v is None or math.isinf(v) else f"{v:.3f}"


def reading(x) -> str:
    """A raw reading or a feature's value: four significant digits."""
    v = _value(x)
    if v is None:
        return MISSING
    if math.isinf(v):
        return "-inf" if v < 0 else "+inf"
    return f"{v:.4g}" if abs(v) < _HUGE else f"{v:.3e}"
