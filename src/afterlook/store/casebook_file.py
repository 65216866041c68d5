"""The casebook file: reviewed misses with their decisions and evidence.

``{"format": "afterlook-casebook", "version": 1, "entries": [...]}``, entries
sorted by case id, written with ``json.dumps(indent=2, sort_keys=True)`` and a
trailing newline so that a diff of two versions reads well.

This layer knows files and the entry's bookkeeping keys (``case``,
``status``, ``history``, ``created``); the evidence inside an entry is built
by :mod:`afterlook.analysis.review` and is stored as it comes.

Decisions worth knowing about
-----------------------------
* **Reading** refuses, with one line naming the file and leaving it
  untouched: a file that is not UTF-8 JSON, another ``format``, a missing or
  non-integer ``version``, a newer version than this afterlook reads, an
  entry without a case id or with an unknown status, a case id listed twice.
* **Writing** never loses a user's casebook:

  1. the new text goes to a temp file in the book's folder, flushed and
     fsynced, then ``os.replace`` puts it in place (a reader sees the old
     file or the new one, never a mix), and the folder is fsynced so the
     rename itself survives a power cut;
  2. before that, the bytes of the file being replaced are written the same
     way to ``BOOK.bak``;
  3. the SHA-256 of the file as it was read is compared with the file on
     disk just before writing. If another program (the workbench, a script,
     an editor, a ``git pull``) changed it meanwhile, nothing is replaced:
     the new state goes to a sibling ``BOOK-STEM.conflict-YYYYmmddTHHMMSSZ.json``
     and :class:`CasebookConflict` names both files. A book deleted since it
     was read, or created by someone else since an empty book was opened,
     counts as changed.

  Writers in afterlook hold an advisory lock on the book's folder
  (``fcntl.flock``, where the platform has it) from the SHA-256 comparison
  to the rename, so two afterlook processes cannot both pass the comparison.
  A process killed mid-write can leave a hidden ``.BOOK.*.tmp`` file behind;
  it is never read and may be deleted.
* ``upsert`` of a case already in the book keeps its ``created`` time and
  pushes the previous entry whole (status, note, reviewer, when, model,
  derived features, scores, metrics and evidence; everything but the case id,
  ``created``, the raw-reading snapshot and its own history) onto
  ``history``, newest last, keeping the last :data:`HISTORY_LIMIT`. A status
  change therefore never loses the feature or the evidence an earlier review
  rested on.
"""

from __future__ import annotations

import contextlib
import copy
import hashlib
import json
import os
from datetime import datetime, timezone
from pathlib import Path
from typing import Iterator

from ..core.errors import AfterlookError
from .atomic import _write_atomic, write_bytes_atomic  # noqa: F401 (re-exported)
from ..core.printable import printable
from ..core.names import closest_name
from .documents import check_document, first_bad_number

__all__ = [
    "FORMAT",
    "VERSION",
    "STATUSES",
    "HISTORY_LIMIT",
    "Casebook",
    "CasebookConflict",
    "check_status",
    "dumps",
    "write_bytes_atomic",
    "backup_path",
]

FORMAT = "afterlook-casebook"
VERSION = 1
STATUSES = ("open", "explained", "needs-signal", "label-disputed", "accepted-risk")
HISTORY_LIMIT = 10

# What of an entry is NOT copied into its history when the case is reviewed again: the
# case id, its first review time and its own history (bookkeeping), and the snapshot of raw
# readings (the same row every time; the current entry keeps it).
_NOT_IN_HISTORY = ("case", "created", "history", "snapshot")


class CasebookConflict(AfterlookError):
    """The book changed on disk since it was read; the new state went to ``sibling``."""

    def __init__(self, message: str, *, path: Path, sibling: Path):
        super().__init__(message, title="Casebook changed on disk")
        self.path = path
        self.sibling = sibling


def check_status(status: str) -> str:
    """``status`` if it is one of :data:`STATUSES`, else an error listing them."""
    if status not in STATUSES:
        raise AfterlookError(f"unknown status {status!r}; use one of: {', '.join(STATUSES)}", title="Unknown status")
    return status


def dumps(doc: dict) -> str:
    """The file text of a casebook document: stable key order, 2-space indent, trailing newline."""
    try:
        return json.dumps(doc, indent=2, sort_keys=True, allow_nan=False) + "\n"
    except (TypeError, ValueError) as exc:
        # NaN/inf or a non-JSON object in an entry: a bug of the caller, reported plainly.
        raise AfterlookError(f"casebook entry cannot be written as JSON: {exc}") from None


def _sha256(data: bytes | None) -> str | None:
    return None if data is None else hashlib.sha256(data).hexdigest()


class Casebook:
    """A casebook held in memory: ``entries`` maps case id -> entry (a JSON-ready dict).

    Open with :meth:`open`; change with :meth:`upsert`; write with :meth:`save`.
    """

    def __init__(self, path: str | os.PathLike, entries: dict[str, dict] | None = None, *,
                 extra: dict | None = None, _digest: str | None = None):
        self.path = Path(path)
        self.entries: dict[str, dict] = dict(entries or {})
        # Top-level keys other than format/version/entries, kept as they were read.
        self.extra: dict = dict(extra or {})
        self._digest = _digest  # SHA-256 of the bytes read at open; None: there was no file

    def __repr__(self) -> str:  # pragma: no cover - debugging aid
        return f"Casebook({str(self.path)!r}, {len(self.entries)} entries)"

    def __len__(self) -> int:
        return len(self.entries)

    def __contains__(self, case_id) -> bool:
        return str(case_id) in self.entries

    # -- reading ---------------------------------------------------------
    @classmethod
    def open(cls, path: str | os.PathLike, *, create: bool = True) -> "Casebook":
        """Read a casebook; a missing file gives an empty book when ``create`` (nothing is written yet)."""
        p = Path(path)
        if str(path) == "":
            raise AfterlookError("no casebook file given (empty path)")
        if p.is_dir():
            raise AfterlookError(f"casebook path {p} is a folder, not a file")
        try:
            raw = p.read_bytes()
        except FileNotFoundError:
            if not create:
                raise AfterlookError(f"casebook not found: {p}") from None
            return cls(p)
        except PermissionError:
            raise AfterlookError(f"cannot read casebook {p}: permission denied") from None
        except OSError as exc:
            raise AfterlookError(f"cannot read casebook {p}: {exc.strerror or exc}") from None
        entries, extra = parse_document(raw, p)
        return cls(p, entries, extra=extra, _digest=_sha256(raw))

    # -- changing --------------------------------------------------------
    def get(self, case_id) -> dict:
        """The entry of ``case_id`` (error naming the book when it has none)."""
        key = str(case_id)
        if key not in self.entries:
            hint = closest_name(key, list(self.entries))
            extra = f" (did you mean {hint!r}?)" if hint else ""
            raise AfterlookError(f"case {key!r} is not in casebook {self.path}{extra}", title="Unknown case")
        return self.entries[key]

    def upsert(self, entry: dict) -> dict:
        """Add an entry, or update the case's entry, keeping the previous decision in ``history``."""
        if not isinstance(entry, dict):
            raise AfterlookError("a casebook entry must be a mapping")
        case = entry.get("case")
        if not isinstance(case, str) or not case:
            raise AfterlookError("a casebook entry needs a non-empty string 'case' id")
        check_status(entry.get("status"))
        new = copy.deepcopy(entry)
        old = self.entries.get(case)
        history = list(old.get("history") or []) if old else list(new.get("history") or [])
        if old is not None:
            history.append({k: copy.deepcopy(v) for k, v in old.items() if k not in _NOT_IN_HISTORY})
            if old.get("created"):
                new["created"] = old["created"]
        new["history"] = history[-HISTORY_LIMIT:]
        self.entries[case] = new
        return new

    # -- writing ---------------------------------------------------------
    def to_document(self) -> dict:
        doc = dict(self.extra)
        doc.update({
            "format": FORMAT,
            "version": VERSION,
            "entries": [self.entries[k] for k in sorted(self.entries)],
        })
        return doc

    def dumps(self) -> str:
        """The exact text :meth:`save` writes."""
        return dumps(self.to_document())

    def save(self) -> Path:
        """Write the book atomically, keeping the previous file as ``BOOK.bak``.

        Raises :class:`CasebookConflict` (after writing the new state to a
        sibling file) when the file on disk is not the one that was read.
        """
        data = self.dumps().encode("utf-8")
        p = self.path
        folder = p.parent if str(p.parent) else Path(".")
        if not folder.is_dir():
            raise AfterlookError(f"cannot write casebook {p}: folder '{folder}' does not exist")
        if p.is_dir():
            raise AfterlookError(f"cannot write casebook {p}: it is a folder")
        with _folder_lock(folder):
            try:
                current = p.read_bytes()
            except FileNotFoundError:
                current = None
            except OSError as exc:
                raise AfterlookError(f"cannot read casebook {p} before writing it: {exc.strerror or exc}") from None
            if _sha256(current) != self._digest:
                sibling = _conflict_path(p)
                _write_atomic(sibling, data, mode_of=p)
                what = "was deleted" if current is None else "was created" if self._digest is None else "changed"
                raise CasebookConflict(
                    f"casebook {p} {what} on disk since it was read; it was left as it is and the new "
                    f"state was written to {sibling} (merge the two by hand, then delete the sibling)",
                    path=p, sibling=sibling)
            if current is not None:
                _write_atomic(backup_path(p), current, mode_of=p)
            _write_atomic(p, data)
        self._digest = _sha256(data)
        return p


def backup_path(path: str | os.PathLike) -> Path:
    """Where the previous version of a casebook is kept (``NAME.bak`` beside it)."""
    p = Path(path)
    return p.with_name(p.name + ".bak")


def parse_document(raw: bytes, p: Path) -> tuple[dict[str, dict], dict]:
    """Validate the bytes of a casebook file; returns (entries by case id, other top-level keys)."""
    if not raw.strip():
        raise AfterlookError(f"casebook {p} is empty, not a casebook (delete it to start a new book)")
    try:
        doc = json.loads(raw.decode("utf-8"), parse_constant=_no_constant)
    except UnicodeDecodeError:
        raise AfterlookError(f"casebook {p} is not UTF-8 text, so not a casebook; it was left as it is") from None
    except json.JSONDecodeError as exc:
        raise AfterlookError(
            f"casebook {p} is not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg}); "
            f"it was left as it is (a previous version may be in {backup_path(p).name})") from None
    except RecursionError:
        raise AfterlookError(f"casebook {p} is nested too deeply to be a casebook; it was left as it is") from None
    except ValueError as exc:
        raise AfterlookError(f"casebook {p} is not valid JSON ({str(exc)[:100]}); it was left as it is") from None
    bad = first_bad_number(doc)
    if bad is not None:
        raise AfterlookError(f"casebook {p} has a number out of range at {printable(bad)}; it was left as it is")
    check_document(doc, format_name=FORMAT, version=VERSION, kind="casebook", path=p,
                   expected="an afterlook casebook")
    items = doc.get("entries")
    if not isinstance(items, list):
        raise AfterlookError(f"casebook {p} has no \"entries\" list")
    entries: dict[str, dict] = {}
    for k, item in enumerate(items, 1):
        if not isinstance(item, dict):
            raise AfterlookError(f"casebook {p}: entry {k} is not an object")
        case = item.get("case")
        if not isinstance(case, str) or not case:
            raise AfterlookError(f"casebook {p}: entry {k} has no string \"case\" id")
        if item.get("status") not in STATUSES:
            raise AfterlookError(
                f"casebook {p}: case {case!r} has unknown status {item.get('status')!r} "
                f"(known: {', '.join(STATUSES)})")
        if case in entries:
            raise AfterlookError(f"casebook {p}: case {case!r} is listed twice")
        history = item.get("history", [])
        if not isinstance(history, list):
            raise AfterlookError(f"casebook {p}: case {case!r} has a \"history\" that is not a list")
        _check_histogram(item, p, case)
        entries[case] = item
    extra = {k: v for k, v in doc.items() if k not in ("format", "version", "entries")}
    return entries, extra


def _check_histogram(item: dict, p: Path, case: str) -> None:
    """A stored histogram draws: one more edge than counts, edges in ascending order (the schema checked types)."""
    hist = (item.get("deciding_feature") or {}).get("histogram")
    if not hist:
        return
    counts, edges = hist["counts"], hist["edges"]
    if len(edges) != len(counts) + 1 or any(b <= a for a, b in zip(edges, edges[1:])):
        raise AfterlookError(f"casebook {p}: case {printable(repr(case))} has a histogram whose edges do not "
                             "match its counts (one more edge than counts, ascending)")


def _no_constant(name: str):
    # NaN / Infinity are not JSON; a file carrying them was not written by afterlook.
    raise ValueError(f"{name} is not a JSON value")


def _conflict_path(p: Path) -> Path:
    stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    stem = p.name[: -len(".json")] if p.name.endswith(".json") else p.name
    candidate = p.with_name(f"{stem}.conflict-{stamp}.json")
    k = 2
    while candidate.exists():
        candidate = p.with_name(f"{stem}.conflict-{stamp}-{k}.json")
        k += 1
    return candidate


@contextlib.contextmanager
def _folder_lock(folder: Path) -> Iterator[None]:
    """Advisory exclusive lock on the folder between afterlook writers (no-op without fcntl)."""
    try:
        import fcntl
    except ImportError:  # pragma: no cover - Windows: the SHA-256 check alone guards
        yield
        return
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:  # pragma: no cover
        yield
        return
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX)
        except OSError:  # pragma: no cover - filesystems without flock (some network mounts)
            pass
        yield
    finally:
        os.close(fd)  # closing the descriptor releases the lock



