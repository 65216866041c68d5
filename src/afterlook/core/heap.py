"""One freed block at the start of the first afterlook operation of a process (what glibc's malloc does with it).

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
