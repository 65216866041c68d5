"""The first afterlook operation of a process leaves glibc's malloc keeping freed blocks for reuse.

Reference: glibc's documented malloc behaviour (mallopt(3), mallinfo2(3); the manual
pages, from memory): a block above M_MMAP_THRESHOLD (128 KiB at the start of a
process) is mapped on its own and given back to the kernel when freed; freeing such a
block raises the threshold to its size (up to 32 MiB) unless the user set the
threshold; ``mallinfo2().fordblks`` is the free memory the heap keeps.
"""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pytest

from afterlook.core import blas, heap
from malloc_probe import FREED_BLOCK_KEPT_MIB

glibc = pytest.mark.skipif(not (hasattr(os, "confstr") and os.confstr("CS_GNU_LIBC_VERSION")),
                           reason="glibc's malloc only")

_PROBE = """
import sys
from afterlook.core import heap
if sys.argv[1] == "settle":
    heap.settle()
""" + FREED_BLOCK_KEPT_MIB


def _kept_mib(mode: str, **env) -> int:
    environ = {k: v for k, v in os.environ.items() if not k.startswith(("MALLOC_", "GLIBC_TUNABLES"))}
    environ.update(env)
    out = subprocess.run([sys.executable, "-c", _PROBE, mode], capture_output=True, text=True, env=environ,
                         check=True, timeout=120).stdout
    return int(out.split()[-1])


@glibc
def test_after_settling_a_freed_block_stays_with_the_process():
    assert _kept_mib("settle") >= 20  # from the heap, kept when freed
    assert _kept_mib("plain") < 20  # glibc's start: mapped on its own and given back


@glibc
def test_a_users_own_threshold_is_left_in_charge():
    # a threshold the user set switches glibc's dynamic rule off: the block is mapped and given back as before
    assert _kept_mib("settle", MALLOC_MMAP_THRESHOLD_="131072") < 20


def test_every_operation_settles_the_heap_once(monkeypatch):
    calls = []
    monkeypatch.setattr(blas, "settle", lambda: calls.append(1))
    op = blas.with_limited_blas(lambda x: x + 1)
    assert op(1) == 2 and op(2) == 3 and calls == [1, 1]  # the decorator asks every time...
    blocks = []
    real_empty = np.empty
    monkeypatch.setattr(np, "empty", lambda n, *a, **k: blocks.append(n) or real_empty(1))
    monkeypatch.setattr(heap, "_settled", False)
    heap.settle()
    heap.settle()
    assert blocks == [heap.BLOCK // 8]  # ...and settle itself allocates once per process
