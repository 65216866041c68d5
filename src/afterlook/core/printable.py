"""Strings from files made safe to show on a terminal.

A case id, a column name, a note or a context value comes from a file the
user may not have written. Shown raw, its control characters act on the
terminal: ESC starts CSI/OSC sequences (colours, the window title, links,
clipboard writes), BEL rings, C1 controls (U+0080-U+009F) are 8-bit
escapes, and bidirectional overrides reorder what the reader sees.
:func:`printable` shows each such character as a Python-style escape
(``\\x1b``, ``\\u202e``) and leaves every other character alone, so names
in any script stay readable. ``--json`` output is never passed through it:
JSON escapes control characters itself and must stay exact.
"""

from __future__ import annotations

import unicodedata

__all__ = ["printable", "printable_lines"]

# Format characters that reorder or hide text (Trojan-source style); other Cf
# characters (soft hyphen, zero-width joiner in emoji) are left alone.
_BIDI = frozenset("\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069")
_SEPARATORS = frozenset("\u2028\u2029\x85")


def _escape(ch: str) -> str:
    code = ord(ch)
    if code < 0x100:
        return {"\n": "\\n", "\r": "\\r", "\t": "\\t"}.get(ch, f"\\x{code:02x}")
    if code < 0x10000:
        return f"\\u{code:04x}"
    return f"\\U{code:08x}"


def _unsafe(ch: str) -> bool:
    if ch in _BIDI or ch in _SEPARATORS:
        return True
    return unicodedata.category(ch) in ("Cc", "Cs")


def printable(value, *, keep_newlines: bool = False) -> str:
    """``str(value)`` with every control character escaped (``keep_newlines`` keeps ``\\n``)."""
    text = value if isinstance(value, str) else str(value)
    if text.isprintable():
        # fast path: nothing to escape. isprintable() is False for every Cc, Cs, Zl and Zp character and for
        # every format character (Cf), which every character of _BIDI is; a test checks that against
        # unicodedata. (A second look for _BIDI here, a Python loop over the characters, was a third of
        # the time of listing 1,717 cases in the workbench.)
        return text
    out = []
    for ch in text:
        if keep_newlines and ch == "\n":
            out.append(ch)
        elif _unsafe(ch):
            out.append(_escape(ch))
        else:
            out.append(ch)
    return "".join(out)


def printable_lines(text: str) -> str:
    """Text of several lines (a report, a note) made printable, its line breaks kept."""
    return printable(text.replace("\r\n", "\n"), keep_newlines=True)
