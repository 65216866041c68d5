"""'Did you mean': the closest of a set of names (case ids, column names) to one a user typed."""

from __future__ import annotations

import difflib

__all__ = ["closest_name"]

#: Above this many names only those of about the typed length are compared, so that a
#: suggestion for a million case ids stays cheap.
_LARGE_POOL = 20_000


def closest_name(typed: str, pool, cutoff: float = 0.7) -> str | None:
    """The name of ``pool`` that ``typed`` most likely meant, or None.

    The same name but for letter case or surrounding spaces wins outright;
    otherwise the closest by :func:`difflib.get_close_matches` at ``cutoff``.
    """
    names = [str(p) for p in pool]
    folded = typed.strip().casefold()
    for name in names:
        if name.strip().casefold() == folded:
            return name
    if len(names) > _LARGE_POOL:
        names = [n for n in names if abs(len(n) - len(typed)) <= 2][:_LARGE_POOL]
    match = difflib.get_close_matches(typed, names, n=1, cutoff=cutoff)
    return match[0] if match else None
