"""Model fingerprints that identify a fit across machines and library builds.

A fingerprint is the first 16 hex digits of the SHA-256 of a canonical text:
the recipe (expression text, kinds), the density's kind and options, and every
fitted number rounded to :data:`SIGNIFICANT_DIGITS` significant digits.

Why rounding, and why relative to each array
--------------------------------------------
The same fit on another machine differs in the last bits (another BLAS, thread
count or library patch release sums in another order: ~1e-16 relative was
seen between two installs, more is possible for a full covariance). Hashing
those bits made the same model look like another one. Rounding to
``SIGNIFICANT_DIGITS`` digits keeps any real refit apart (different data moves
means and covariances at the 1e-3 level and beyond) while a last-bit
difference changes a rounded digit only when a value lies within that
difference of a rounding boundary (about 2e-6 per value at 1e-14 relative
noise). Each list of numbers (a mean vector, a covariance row) is rounded on
the scale of its largest entry, so an entry that is zero in exact arithmetic
(an off-diagonal of an independent block, computed as +3e-18 or -2e-18) rounds
to zero on every machine instead of keeping its noise.

The previous scheme (exact JSON of the parameters) is kept as
:func:`exact_fingerprint` so casebook entries recorded with it stay readable.
"""

from __future__ import annotations

import hashlib
import json
import math
from typing import Any

SIGNIFICANT_DIGITS = 8
#: marks the canonical text so a future change of the rules never collides with this one
SCHEME = "afterlook-fingerprint-2"


def _quantum(values: list[float]) -> float | None:
    finite = [abs(v) for v in values if math.isfinite(v)]
    top = max(finite, default=0.0)
    if top == 0.0:
        return None
    return 10.0 ** (math.floor(math.log10(top)) - (SIGNIFICANT_DIGITS - 1))


def _round(value: float, quantum: float | None) -> str:
    """``value`` as an integer count of ``quantum`` steps, written exactly ("123456789e-10")."""
    if not math.isfinite(value):
        return repr(value)  # 'nan', 'inf', '-inf'
    if quantum is None or value == 0.0:
        return "0"
    exponent = round(math.log10(quantum))
    steps = round(value / quantum)
    return "0" if steps == 0 else f"{steps}e{exponent}"


def _is_number(x: Any) -> bool:
    return isinstance(x, float) or (isinstance(x, int) and not isinstance(x, bool))


def canonical(obj: Any) -> Any:
    """``obj`` with every float replaced by its rounded text (lists of numbers rounded on a shared scale)."""
    if isinstance(obj, dict):
        return {str(k): canonical(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        if obj and all(_is_number(v) for v in obj) and any(isinstance(v, float) for v in obj):
            q = _quantum([float(v) for v in obj])
            return [_round(float(v), q) for v in obj]
        return [canonical(v) for v in obj]
    if isinstance(obj, float):
        return _round(obj, _quantum([obj]))
    return obj


def _digest(doc: Any) -> str:
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"), allow_nan=True)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def fingerprint(recipe: dict, density: dict, threshold: float) -> str:
    """Fingerprint of a model from its recipe and density documents and its threshold (see the module notes)."""
    return _digest({"scheme": SCHEME, "recipe": canonical(recipe), "model": canonical(density),
                    "threshold": canonical(float(threshold))})


def exact_fingerprint(recipe: dict, density: dict, threshold: float) -> str:
    """The scheme used before rounding: exact JSON of the same documents (last-bit sensitive)."""
    return _digest({"recipe": recipe, "model": density, "threshold": threshold})
