"""A folder of small results remembered between processes (best effort, never an error).

What is kept: choices that depend only on input values and on afterlook's own
code, keyed by a digest of both, so a stale entry can never be read for other
values or by another release. Today that is the shaping choice per column of
the search's sample (``analysis.shaping_choices``): the first ``suggest`` on a
training table pays for the shaping search, later processes read one small
JSON file per column.

Where: ``$AFTERLOOK_CACHE_DIR`` when set (empty, ``off``, ``0`` or ``no``:
nothing is read or written), else ``$XDG_CACHE_HOME/afterlook``, else
``~/.cache/afterlook``. Deleting the folder at any time is safe. A folder
that cannot be made or written, or an entry that cannot be read or parsed,
is treated as "not remembered": the work is done again and nothing is said.
Each kind of entry keeps about :data:`MAX_ENTRIES` files at most: once per process,
past that many, the oldest are removed down to three quarters of it.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

from ..core.errors import AfterlookError
from .atomic import atomic_file

__all__ = ["ENV", "MAX_ENTRIES", "folder", "entry_key", "read", "write"]

ENV = "AFTERLOOK_CACHE_DIR"
#: Files kept per kind; past it the oldest (by modification time) are removed, once per process.
MAX_ENTRIES = 20_000
_OFF = {"", "off", "0", "no", "none"}


def folder(environ=None) -> Path | None:
    """The cache folder (not created here), or None when the cache is switched off."""
    env = os.environ if environ is None else environ
    if ENV in env:
        raw = env[ENV].strip()
        return None if raw.lower() in _OFF else Path(raw).expanduser()
    base = env.get("XDG_CACHE_HOME", "").strip()
    return (Path(base) if base else Path.home() / ".cache") / "afterlook"


def entry_key(*parts: bytes | str) -> str:
    """A file-name-safe digest of ``parts`` (each length-prefixed, so no two lists of parts collide)."""
    h = hashlib.sha256()
    for p in parts:
        b = p.encode("utf-8") if isinstance(p, str) else bytes(p)
        h.update(len(b).to_bytes(8, "little"))
        h.update(b)
    return h.hexdigest()


def _path(kind: str, key: str) -> Path | None:
    base = folder()
    return None if base is None else base / kind / f"{key}.json"


def read(kind: str, key: str):
    """The JSON value stored under ``kind``/``key``, or None when there is none (or it is unreadable)."""
    p = _path(kind, key)
    if p is None:
        return None
    try:
        with open(p, "rb") as fh:
            doc = json.loads(fh.read())
    except (OSError, ValueError):
        return None
    if not isinstance(doc, dict) or doc.get("key") != key:
        return None
    return doc.get("value")


def write(kind: str, key: str, value) -> bool:
    """Store a JSON-able ``value``; True when it was written. Never raises for a folder or disk problem."""
    p = _path(kind, key)
    if p is None:
        return False
    # store.atomic's writer without its fsyncs: an entry lost in a crash is only work done again,
    # and 40 fsyncs would cost the first call more than the cache saves.
    try:
        p.parent.mkdir(parents=True, exist_ok=True)
        with atomic_file(p, durable=False) as fh:
            fh.write(json.dumps({"key": key, "value": value}).encode("utf-8"))
    except (OSError, AfterlookError):
        return False
    _prune(p.parent)
    return True


def _prune(kind_folder: Path) -> None:
    """Past MAX_ENTRIES files, remove the oldest down to three quarters of it. Looked at once per
    process and kind: a scan of a full folder costs tens of milliseconds (every write scanning it
    made 40 writes take 2.7 s), and a process writes a few hundred entries at most."""
    if kind_folder in _looked_at:
        return
    _looked_at.add(kind_folder)
    try:
        entries = [e for e in os.scandir(kind_folder) if e.name.endswith(".json")]
        if len(entries) <= MAX_ENTRIES:
            return
        entries.sort(key=lambda e: e.stat().st_mtime)
        for e in entries[:len(entries) - MAX_ENTRIES * 3 // 4]:
            os.unlink(e.path)
    except OSError:
        pass


_looked_at: set[Path] = set()
