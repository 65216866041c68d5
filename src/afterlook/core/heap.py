"""How afterlook's operations meet fresh memory: one freed block per process, and no huge-page advice.

:func:`settle` is the first part; :func:`small_pages` (numpy's huge-page advice off
during an operation) the second, described in its own text.

One freed block at the start of the first afterlook operation of a process (what glibc's malloc does with it).

glibc's malloc maps every block above its threshold (128 KiB at the start of a
process; a column of 200,000 values is 1.6 MB) from the kernel on its own and hands
it back when it is freed, so every page of every such temporary costs a page fault
when it is first touched. Its documented dynamic rule (mallopt(3), M_MMAP_THRESHOLD)
raises the threshold to the size of any such block a process frees, up to 32 MiB,
and keeps free memory at the heap's top up to twice that: a process that has once
freed a block of 31 MiB takes later blocks up to that size from its heap and reuses
them. A long-running process gets there by itself, after its first big temporaries;
the first search of a fresh process pays the faults on the way.

:func:`settle` allocates one such block, never touched (it costs no page), and drops
it, once per process, when the first afterlook operation starts
(:func:`afterlook.core.blas.with_limited_blas`). It sets no option: glibc's own rule
answers it as it answers any program freeing such a block, a user's ``MALLOC_*_``
settings switch that rule off as they always do, and another C library only sees one
allocation. The cost: up to 62 MiB of memory freed by the process may stay with it
for reuse instead of going back to the kernel.

Measured (``afterlook.suggest`` on 200,000 x 40, first call of a fresh process, one BLAS
thread, 2-core machine, 2026-12-03): 28,500-32,500 page faults, 0.10-0.13 s of system time
and 0.44-0.47 s in all without it; 12,650 faults, 0.016 s and 0.37 s with it.
"""

from __future__ import annotations

import contextlib
import os
import sys
import threading

#: Bytes of the one block: under glibc's 32 MiB ceiling for the dynamic threshold, with room for the chunk header.
BLOCK = 31 << 20
_settled = False


def settle() -> None:
    """Allocate and free :data:`BLOCK` bytes once in this process (see the module's text)."""
    global _settled
    if _settled:
        return
    _settled = True
    import numpy as np

    np.empty(BLOCK // 8)  # dropped at once: malloc maps it, free gives it back and glibc raises its threshold


# --------------------------------------------------------------------------
# numpy's huge-page advice, off during afterlook's operations
# --------------------------------------------------------------------------

#: numpy's own switch (read when numpy is imported): a user who set it is left in charge.
HUGEPAGE_ENV = "NUMPY_MADVISE_HUGEPAGE"
_page_lock = threading.Lock()
_page_depth = 0
_page_before: bool | None = None


def _hugepage_switch():
    """numpy's ``_set_madvise_hugepage`` (enabled) -> previous value, or None where this numpy has none."""
    np = sys.modules.get("numpy")
    if np is None:
        return None
    core = getattr(np, "_core", None) or getattr(np, "core", None)
    return getattr(getattr(core, "multiarray", None), "_set_madvise_hugepage", None)


@contextlib.contextmanager
def small_pages(environ=None):
    """Run the block with numpy's huge-page advice off, then restore it.

    numpy asks Linux for transparent huge pages (``madvise(MADV_HUGEPAGE)``) on
    every array of 4 MiB and more. The first touch of such memory fills a whole
    2 MiB page; on the 2-core virtual machine afterlook is benchmarked on, that
    fault was bimodal: the first search of a fresh process (200,000 x 40) took
    0.33 s in 5 of 12 processes and 0.64-0.73 s, nearly all of it system time,
    in the other 7, against 0.33-0.37 s in 12 of 12 with the advice off
    (2026-12-03; ``/proc/vmstat`` showed no compaction stalls, so the cost is in
    serving the pages). Warm calls, the fit and ``Model.score`` timed the same
    either way. Only the advice changes (numpy's documented global state,
    ``NUMPY_MADVISE_HUGEPAGE``); nothing else about the arrays does.

    Blocks nest and may run in several threads at once: the advice goes off when the
    first starts and comes back when the last ends. Nothing changes when the user set
    ``NUMPY_MADVISE_HUGEPAGE`` (``environ``: the environment to look in; default
    ``os.environ``), before numpy is imported (the CLI then sets that variable
    itself), or where numpy has no such switch.
    """
    global _page_depth, _page_before
    environ = os.environ if environ is None else environ
    switch = None if HUGEPAGE_ENV in environ else _hugepage_switch()
    if switch is None:
        yield
        return
    with _page_lock:
        if _page_depth == 0:
            _page_before = bool(switch(False))
        _page_depth += 1
    try:
        yield
    finally:
        with _page_lock:
            _page_depth -= 1
            if _page_depth == 0:
                switch(_page_before)
