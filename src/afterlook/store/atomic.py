"""Atomic file writes: the one place afterlook replaces a file on disk.

Temp file in the same folder (mode 0666 minus the umask, or the mode of the
file it replaces), write, fsync, ``os.replace``, fsync the folder. A reader
never sees half a file, and a crash leaves either the old or the new bytes.
A failed write raises :class:`AfterlookError` and leaves the old file alone.
"""

from __future__ import annotations

import contextlib
import os
import secrets
import stat
from pathlib import Path
from typing import BinaryIO, Iterator

from ..core.errors import AfterlookError


def check_writable(path: str | os.PathLike, what: str = "") -> Path:
    """Fail early, with one line, when ``path`` could not be written.

    Callers use it before slow work (a fit, a review) so that nothing is
    computed for an output that cannot be saved. ``what`` names the file in
    the message (e.g. "casebook").
    """
    p = Path(path)
    folder = p.parent if str(p.parent) else Path(".")
    label = f"{what} {p}" if what else str(p)
    if p.is_dir():
        raise AfterlookError(f"cannot write {label}: it is a directory, not a file")
    if not folder.is_dir():
        raise AfterlookError(f"cannot write {label}: folder '{folder}' does not exist")
    if not os.access(folder, os.W_OK | os.X_OK) or (p.exists() and not os.access(p, os.W_OK)):
        raise AfterlookError(f"cannot write {label}: permission denied")
    return p


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (see :func:`_write_atomic`)."""
    _write_atomic(check_writable(path), data)


def _write_atomic(p: Path, data: bytes, *, mode_of: Path | None = None) -> None:
    """Write exact bytes atomically (the casebook's SHA-256 is its conflict check); see :func:`atomic_file`."""
    with atomic_file(p, mode_of=mode_of) as fh:
        fh.write(data)


@contextlib.contextmanager
def atomic_file(p: Path, *, mode_of: Path | None = None, durable: bool = True) -> Iterator[BinaryIO]:
    """A binary file handle whose contents replace ``p`` atomically when the block ends.

    Temp file in the same folder, fsync, ``os.replace``, fsync the folder.
    ``durable=False`` leaves out both fsyncs: still whole-or-nothing for a
    reader, but a crash may lose the new file (the cache folder's entries,
    where a lost entry is only work done again).
    The temp file is created with mode 0666 minus the umask, like any new
    file, and takes the mode of ``mode_of`` (default: the file it replaces)
    when that exists, so a file shared with a team stays readable by it. An
    exception inside the block removes the temp file and leaves ``p`` alone
    (an OSError becomes an :class:`AfterlookError`; anything else propagates).
    """
    p = Path(p)
    folder = p.parent if str(p.parent) else Path(".")
    tmp = None
    try:
        fd = None
        for _ in range(100):
            tmp = folder / f".{p.name}.{secrets.token_hex(6)}.tmp"
            try:
                fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0), 0o666)
                break
            except FileExistsError:
                continue
        if fd is None:  # pragma: no cover - 100 random names all taken
            raise OSError(17, "could not create a temp file")
    except OSError as exc:
        raise AfterlookError(f"cannot write {p}: {_reason(exc)}") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            yield fh
            fh.flush()
            if durable:
                os.fsync(fh.fileno())
        source = mode_of if mode_of is not None else p
        try:
            os.chmod(tmp, stat.S_IMODE(os.stat(source).st_mode))
        except FileNotFoundError:
            pass  # a new file: 0666 minus the umask, as created
        os.replace(tmp, p)
    except BaseException as exc:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        if isinstance(exc, OSError):
            raise AfterlookError(f"cannot write {p}: {_reason(exc)}; the previous file is unchanged") from None
        raise
    if durable:
        _fsync_folder(folder)


def _reason(exc: OSError) -> str:
    return "permission denied" if isinstance(exc, PermissionError) else str(exc.strerror or exc)


def _fsync_folder(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:  # pragma: no cover - e.g. platforms that cannot open a folder
        return
    try:
        os.fsync(fd)
    except OSError:  # pragma: no cover - some filesystems refuse fsync on a folder
        pass
    finally:
        os.close(fd)


