"""How a failed worker is put into words for a notification."""

from __future__ import annotations


def internal_error(exc: Exception) -> str:
    """An unexpected exception (a bug of afterlook), in one line."""
    return f"internal error: {type(exc).__name__}: {exc} (please report it)"


def describe(exc: Exception) -> str:
    """Any exception's message, in one line."""
    text = getattr(exc, "message", None) or str(exc) or type(exc).__name__
    return " ".join(str(text).split())
