"""The CLI's two outputs besides Rich tables: the ``--json`` document and warnings.

``--json`` prints exactly one document on stdout (strict JSON: NaN and
infinities are refused, so every number was made ``None`` upstream);
warnings go to stderr, one line each, so they never mix with the document.
Warnings and errors often quote data (a column name, a case id): they are
made printable, so a control character in a file never reaches the terminal.
"""

from __future__ import annotations

import json
import sys
from typing import Iterable

from ..core.printable import printable

__all__ = ["emit_json", "warn", "error_line"]

PREFIX = "afterlook"


def emit_json(doc) -> None:
    """Write ``doc`` as the command's one JSON document on stdout."""
    sys.stdout.write(json.dumps(doc, indent=2, allow_nan=False) + "\n")


def warn(messages: Iterable[str]) -> None:
    """One ``afterlook: warning: ...`` line on stderr per message."""
    for m in messages:
        print(f"{PREFIX}: warning: {printable(m)}", file=sys.stderr)


def error_line(message: str, kind: str = "error") -> None:
    """The one stderr line of a failed command (``kind``: error, internal error, ...)."""
    print(f"{PREFIX}: {kind}: {printable(message)}", file=sys.stderr)
