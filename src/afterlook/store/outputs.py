"""Which files a command may write: the one guard in front of every ``--out``.

A command never replaces one of its own inputs, nor a file afterlook did not
write for the same purpose (a casebook, a data table, someone's notes), nor
something that is not a regular file (a FIFO, a device). Paths are compared
after resolving symlinks and ``..`` and by inode, so a link or a second
spelling of an input is still that input. Replacing a file of the same kind
(your own model file, a scored table, a report) is a normal wish and needs
``--force``; anything else is refused even with it.

Each refusal is an :class:`AfterlookError` (exit 2) whose one line names the
clash, raised before any slow work so nothing is computed for nothing.
"""

from __future__ import annotations

import csv
import io
import json
import os
import stat
from pathlib import Path
from typing import Iterable

from ..core.errors import AfterlookError
from ..core.printable import printable

__all__ = ["check_output", "refuse_input_as_book", "same_file", "kind_of_file", "OUTPUT_KINDS"]

# What each output is, in words for the messages.
OUTPUT_KINDS = {
    "model": "an afterlook model file",
    "table": "a table scored by afterlook",
    "report": "a casebook report",
    "parameters": "an afterlook parameter document",
    "pipeline": "a scikit-learn pipeline file (.joblib)",
}

_SNIFF_LIMIT = 64 * 1024 * 1024  # a larger JSON file is not parsed to see what it is


def same_file(a: str | os.PathLike, b: str | os.PathLike) -> bool:
    """True when ``a`` and ``b`` name one file (symlinks, ``..`` and hard links resolved)."""
    try:
        if os.path.realpath(a) == os.path.realpath(b):
            return True
        return os.path.exists(a) and os.path.exists(b) and os.path.samefile(a, b)
    except (OSError, ValueError):
        return False


def refuse_input_as_book(book: str | os.PathLike | None, inputs: Iterable[str | os.PathLike | None]) -> None:
    """A casebook path that is one of the command's inputs (the model, a table) is refused in one line."""
    if book is None:
        return
    for inp in inputs:
        if inp is not None and same_file(book, inp):
            raise AfterlookError(f"casebook {printable(str(book))} is the input {printable(str(inp))}; "
                                 "saving reviews there would destroy it: choose another file")


def check_output(path: str | os.PathLike, *, kind: str, inputs: Iterable[str | os.PathLike | None] = (),
                 force: bool = False, option: str = "--out") -> Path:
    """Refuse ``path`` as the output of ``kind`` (see the module docstring); return it as a Path.

    Parameters
    ----------
    path : the output the user named.
    kind : one of :data:`OUTPUT_KINDS`: what the command writes there.
    inputs : every file the command reads (None entries are skipped).
    force : the user's ``--force``: replace an existing file of the same kind.
    option : the option's name, for the message.
    """
    p = Path(path)
    shown = printable(str(p))
    for inp in inputs:
        if inp is None:
            continue
        if same_file(p, inp):
            raise AfterlookError(f"{option} {shown} is the input {printable(str(inp))}; "
                                 "writing there would destroy it: choose another file")
    if os.path.lexists(p) and not os.path.exists(p):
        raise AfterlookError(f"{option} {shown} is a broken symbolic link; choose another file")
    if p.exists():
        try:
            st = os.stat(p)
        except OSError as exc:
            raise AfterlookError(f"cannot write {shown}: {exc.strerror or exc}") from None
        if stat.S_ISDIR(st.st_mode):
            raise AfterlookError(f"cannot write {shown}: it is a directory, not a file")
        if not stat.S_ISREG(st.st_mode):
            raise AfterlookError(f"{option} {shown} is not a regular file (a device, FIFO or socket); "
                                 "choose a file path")
        found = kind_of_file(p)
        if found is not None:
            if found == kind:
                if not force:
                    raise AfterlookError(f"{option} {shown} already exists ({OUTPUT_KINDS[kind]}); "
                                         "add --force to replace it")
            else:
                raise AfterlookError(f"{option} {shown} is {found if found not in OUTPUT_KINDS else OUTPUT_KINDS[found]}, "
                                     f"not {OUTPUT_KINDS[kind]}; afterlook will not overwrite it: "
                                     "choose another file")
    from .atomic import check_writable

    check_writable(p)
    return p


def kind_of_file(p: Path) -> str | None:
    """What an existing regular file is: a key of :data:`OUTPUT_KINDS`, words for another kind, or None if empty."""
    try:
        size = p.stat().st_size
        if size == 0:
            return None  # an empty file (touch, mktemp) holds nothing to lose
        with open(p, "rb") as fh:
            head = fh.read(4096)
    except OSError:
        return "a file afterlook cannot read"
    if head.startswith(b"PAR1"):
        return _table_kind(_parquet_columns(p))
    if head.startswith(b"\x80") and p.suffix == ".joblib":
        return "pipeline"  # a pickle is never opened to look inside: its name and header say what it is
    stripped = head.lstrip()
    if stripped.startswith((b"{", b"[")) and size <= _SNIFF_LIMIT:
        try:
            doc = json.loads(p.read_bytes().decode("utf-8"))
        except (OSError, ValueError, RecursionError):
            doc = None
        if isinstance(doc, dict):
            fmt = doc.get("format")
            if fmt == "afterlook-model":
                return "model"
            if fmt == "afterlook-casebook":
                return "a casebook"
            if fmt == "afterlook-parameters":
                return "parameters"
            if isinstance(fmt, str) and fmt.startswith("afterlook-"):
                return f"an afterlook file ({printable(fmt)})"
        if doc is not None:
            return "a JSON document"
    try:
        text = head.decode("utf-8")
    except UnicodeDecodeError:
        return "a file that is not text"
    if _is_report(p):
        return "report"
    first = text.splitlines()[0] if text.splitlines() else ""
    for delimiter in (",", "\t", ";"):
        if delimiter in first:
            try:
                columns = next(csv.reader(io.StringIO(first), delimiter=delimiter))
            except (csv.Error, StopIteration):
                continue
            return _table_kind(columns)
    return "an existing file"


def _table_kind(columns: list[str] | None) -> str:
    if columns and "log_density" in columns and "flagged" in columns:
        return "table"
    return "a data table"


def _parquet_columns(p: Path) -> list[str] | None:
    try:
        import pyarrow.parquet as pq

        return list(pq.read_schema(p).names)
    except Exception:  # noqa: BLE001 - a damaged Parquet file is still somebody's data
        return None


def _is_report(p: Path) -> bool:
    """A report ends with the caution (Markdown as is, HTML escaped); a small prefix is enough to know it."""
    from ..cautions import CAUTION

    try:
        with open(p, "rb") as fh:
            fh.seek(max(0, p.stat().st_size - 8192))
            tail = fh.read().decode("utf-8", errors="replace")
    except OSError:
        return False
    return CAUTION[:60] in " ".join(tail.split())
