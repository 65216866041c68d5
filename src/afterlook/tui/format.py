"""Number formatting for the workbench: text only, no arithmetic on statistics.

Every number passed in comes from :mod:`afterlook.analysis.workbench` or the API;
these helpers only decide how many digits to show and what to write when a
value is missing (``n/a``), so a NaN never reaches the screen as ``nan``.
"""

from __future__ import annotations

import math

from ..core.printable import printable

MISSING = "n/a"


def plain(text) -> str:
    """Data (a case id, a name, a note) made printable for the screen: control characters escaped."""
    return printable("" if text is None else text)


def _bad(x) -> bool:
    return x is None or (isinstance(x, float) and not math.isfinite(x))


def num(x, digits: int = 3) -> str:
    """Fixed decimals, scientific notation for very large or very small magnitudes; -inf as is (overflow)."""
    if isinstance(x, float) and x == -math.inf:
        return "-inf"
    if _bad(x):
        return MISSING
    if isinstance(x, float):
        if x != 0 and (abs(x) >= 1e6 or abs(x) < 10 ** -digits):
            return f"{x:.{max(digits - 1, 1)}e}"
        return f"{x:.{digits}f}"
    return str(x)


def signed(x, digits: int = 2) -> str:
    """Always with its sign, so the direction is readable without colour."""
    if _bad(x):
        return MISSING
    return f"{x:+.{digits}f}"


def short(x) -> str:
    """A raw reading: four significant digits."""
    if _bad(x):
        return MISSING
    return f"{x:.4g}" if abs(x) < 1e6 else f"{x:.3e}"


def percent(x, digits: int = 1) -> str:
    if _bad(x):
        return MISSING
    return f"{x:.{digits}f}%"


def tail(p) -> str:
    """A probability that may be tiny."""
    if _bad(p):
        return MISSING
    return f"{p:.2g}"


def count_change(n) -> str:
    if n is None:
        return MISSING
    return f"{n:+d}"


def clip(text: str, width: int) -> str:
    """``text`` made printable (:func:`plain`), cut to ``width`` characters with an ellipsis."""
    text = plain(text)
    if width <= 0:
        return ""
    return text if len(text) <= width else text[: max(width - 1, 0)] + "…"


_NAME = __import__("re").compile(r"`[^`]*`|[A-Za-z_][A-Za-z0-9_]*")


def squeeze(text: str, width: int, keep: tuple[str, ...] = ()) -> str:
    """An expression cut to ``width`` by shortening its longest column names first, so that rows that
    differ in a later name (``motor_cur… / hydraulic…`` vs ``motor_cur… / flow_m3h``) stay apart;
    names in ``keep`` (the language's functions) are never cut. Falls back to :func:`clip`."""
    text = plain(text)
    if len(text) <= width:
        return text
    parts, last = [], 0
    for m in _NAME.finditer(text):
        parts += [text[last:m.start()], m.group(0)]
        last = m.end()
    parts.append(text[last:])
    names = [k for k in range(1, len(parts), 2) if parts[k] not in keep]
    floor = 4  # a name keeps at least three letters and the ellipsis
    while sum(map(len, parts)) > width:
        longest = max(names, key=lambda k: len(parts[k]), default=None)
        if longest is None or len(parts[longest]) <= floor:
            break
        parts[longest] = parts[longest][:-2] + "…"  # one character shorter, ellipsis kept
    return clip("".join(parts), width)


_PATH = __import__("re").compile(r"(?:[A-Za-z]:)?[\\/](?:[^\s\\/()]+[\\/])+([^\s\\/()]+)")


def short_paths(text: str) -> str:
    """File paths inside a sentence cut to their file name (the screen has no room for folders)."""
    return _PATH.sub(lambda m: m.group(1), str(text))
