"""Compare files that hold numbers the way numbers should be compared.

Two machines running the same analysis agree on every number up to the last
bits (another BLAS, thread count or library patch release sums in another
order), so checked-in artefacts are never compared byte for byte:

* JSON documents are parsed (``json`` module) and walked together: the same
  keys, the same list lengths, equal strings, booleans and nulls, and floats
  equal within a relative tolerance (:data:`REL_TOL`, with :data:`ABS_TOL` for
  values that are zero in exact arithmetic);
* text (a Markdown report) is split into numbers and the words between them:
  the words must be equal, whole numbers (counts, dates) must be equal, and
  each pair of decimals must agree to the digits the text displays (within
  one unit of the last shown decimal place, so a value printed right at a
  rounding boundary may show either neighbour).

Both return a list of differences (empty when the files agree), each naming
where it is, so a failing test says what drifted.
"""

from __future__ import annotations

import json
import math
import re

#: relative tolerance for floats in JSON; last-bit differences are ~1e-16, a real change is far larger
REL_TOL = 1e-9
#: absolute floor for values that are zero in exact arithmetic (e.g. a fitted mean of exactly centred data)
ABS_TOL = 1e-12


def json_differences(expected, actual, where: str = "$", limit: int = 20) -> list[str]:
    out: list[str] = []
    _walk(expected, actual, where, out, limit)
    return out


def _walk(a, b, where, out, limit) -> None:
    if len(out) >= limit:
        return
    if isinstance(a, bool) or isinstance(b, bool) or a is None or b is None or isinstance(a, str):
        if a != b or type(a) is not type(b):
            out.append(f"{where}: {a!r} != {b!r}")
        return
    if isinstance(a, (int, float)) and isinstance(b, (int, float)):
        if isinstance(a, int) and isinstance(b, int):
            if a != b:
                out.append(f"{where}: {a} != {b}")
        elif not math.isclose(a, b, rel_tol=REL_TOL, abs_tol=ABS_TOL):
            out.append(f"{where}: {a!r} != {b!r} (relative tolerance {REL_TOL:g})")
        return
    if isinstance(a, dict) and isinstance(b, dict):
        if a.keys() != b.keys():
            out.append(f"{where}: keys differ: only expected {sorted(a.keys() - b.keys())}, "
                       f"only actual {sorted(b.keys() - a.keys())}")
            return
        for k in a:
            _walk(a[k], b[k], f"{where}.{k}", out, limit)
        return
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            out.append(f"{where}: {len(a)} items != {len(b)} items")
            return
        for i, (x, y) in enumerate(zip(a, b)):
            _walk(x, y, f"{where}[{i}]", out, limit)
        return
    out.append(f"{where}: {type(a).__name__} {a!r} != {type(b).__name__} {b!r}")


def json_text_differences(expected: str, actual: str) -> list[str]:
    return json_differences(json.loads(expected), json.loads(actual))


# a decimal number as a report prints it: sign, digits, optional decimals, optional exponent
_NUMBER = re.compile(r"(?<![\w.])[-+−]?\d+(?:\.\d+)?(?:[eE][-+]?\d+)?(?![\w])")


def _shown_step(token: str) -> float:
    """One unit of the last decimal place the token displays (1 for an integer)."""
    mantissa, _, exponent = token.lower().partition("e")
    decimals = len(mantissa.split(".")[1]) if "." in mantissa else 0
    return 10.0 ** (-decimals + (int(exponent) if exponent else 0))


def _value(token: str) -> float:
    return float(token.replace("−", "-"))


def text_differences(expected: str, actual: str, limit: int = 20) -> list[str]:
    """Differences between two texts after normalising numbers to the digits they display."""
    out: list[str] = []
    exp_lines, act_lines = expected.splitlines(), actual.splitlines()
    if len(exp_lines) != len(act_lines):
        out.append(f"{len(exp_lines)} lines != {len(act_lines)} lines")
    for n, (e, a) in enumerate(zip(exp_lines, act_lines), start=1):
        if len(out) >= limit:
            break
        if _NUMBER.sub("#", e) != _NUMBER.sub("#", a):
            out.append(f"line {n}: words differ:\n  - {e}\n  + {a}")
            continue
        for te, ta in zip(_NUMBER.findall(e), _NUMBER.findall(a)):
            if not any(c in te + ta for c in ".eE"):  # counts, years, ids: exact
                if te != ta:
                    out.append(f"line {n}: {te} != {ta}")
                continue
            step = max(_shown_step(te), _shown_step(ta))
            if abs(_value(te) - _value(ta)) > step * (1 + 1e-9):
                out.append(f"line {n}: {te} != {ta} (more than one unit of the last shown digit apart)")
    return out
