"""Let the command's own process keep freed memory for reuse (glibc's malloc only).

Every afterlook command is a fresh process, and a fresh glibc process maps every
block of more than 128 KiB (a column of 200,000 values is 1.6 MB) from the kernel
anew and hands it back when it is freed, so each page of each such temporary costs
a page fault on first touch. glibc raises that limit by itself as a process frees
such blocks, so a long-running process (a notebook, the workbench after its first
search) reaches the same state on its own; a command never lives that long.

Measured (``afterlook.suggest`` on 200,000 x 40, first call of a fresh process, one BLAS
thread, 2-core machine, 2026-12-03): 64,600 page faults and 0.14 s of system time in a
0.58 s call with glibc's defaults; 12,500 faults and 0.47 s with the settings below; the
same peak memory (506 MB against 510 MB). Freed memory stays with the process until it
exits (at most :data:`TRIM_THRESHOLD` of it above the heap's top).

Only :func:`afterlook.cli.main.entry` calls this: a library sets no allocator option in a
process it does not own (in any process, the first afterlook operation frees one block so that
glibc's own rule gets most of the way there: :mod:`afterlook.core.heap`). Nothing is changed
when the user set glibc's own tunables (``MALLOC_MMAP_THRESHOLD_``, ``MALLOC_TRIM_THRESHOLD_``, ``MALLOC_TOP_PAD_`` or
``GLIBC_TUNABLES``) or under another C library.
"""

from __future__ import annotations

import os

#: Blocks up to this size come from the heap and are reused when freed (glibc's dynamic limit stops here too).
MMAP_THRESHOLD = 32 << 20
#: Free memory at the top of the heap up to this much is kept rather than given back to the kernel.
TRIM_THRESHOLD = 256 << 20
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3  # mallopt's parameter numbers (glibc's malloc.h)
_USER_SETTINGS = ("MALLOC_MMAP_THRESHOLD_", "MALLOC_TRIM_THRESHOLD_", "MALLOC_TOP_PAD_", "GLIBC_TUNABLES")


def keep_freed_memory(environ=None) -> bool:
    """Set glibc's thresholds for this process; True when they were set."""
    environ = os.environ if environ is None else environ
    if any(k in environ for k in _USER_SETTINGS):
        return False
    try:
        if not os.confstr("CS_GNU_LIBC_VERSION"):
            return False
    except (AttributeError, ValueError, OSError):  # not glibc, or no confstr at all
        return False
    try:
        import ctypes

        mallopt = ctypes.CDLL(None).mallopt
        mallopt.argtypes, mallopt.restype = [ctypes.c_int, ctypes.c_int], ctypes.c_int
        return bool(mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD)) and bool(mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD))
    except (OSError, AttributeError):
        return False
