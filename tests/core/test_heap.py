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


# numpy's huge-page advice (heap.small_pages). Reference: numpy's documented global state
# (NUMPY_MADVISE_HUGEPAGE, and the switch numpy.core.multiarray._set_madvise_hugepage that returns the
# previous value); read here through that switch itself.

def _advice_now() -> bool:
    switch = heap._hugepage_switch()
    before = switch(True)
    switch(before)
    return bool(before)


needs_switch = pytest.mark.skipif(heap._hugepage_switch() is None, reason="this numpy has no huge-page switch")


@needs_switch
def test_an_operation_runs_without_huge_page_advice_and_puts_it_back(monkeypatch):
    monkeypatch.delenv(heap.HUGEPAGE_ENV, raising=False)
    switch = heap._hugepage_switch()
    before = switch(True)
    try:
        seen = []
        blas.with_limited_blas(lambda: seen.append(_advice_now()))()
        assert seen == [False] and _advice_now() is True
        switch(False)  # the user's own "off" comes back as it was too
        blas.with_limited_blas(lambda: None)()
        assert _advice_now() is False
    finally:
        switch(before)


@needs_switch
def test_nested_and_concurrent_blocks_restore_the_advice_once_the_last_ends(monkeypatch):
    import threading

    monkeypatch.delenv(heap.HUGEPAGE_ENV, raising=False)
    switch = heap._hugepage_switch()
    before = switch(True)
    inside, release = threading.Event(), threading.Event()

    def other():
        with heap.small_pages():
            inside.set()
            release.wait(timeout=60)

    try:
        t = threading.Thread(target=other)
        t.start()
        assert inside.wait(timeout=60)
        with heap.small_pages():
            with heap.small_pages():
                assert _advice_now() is False
        assert _advice_now() is False  # the other thread's block still runs
        release.set()
        t.join(timeout=60)
        assert _advice_now() is True
    finally:
        release.set()
        switch(before)


@needs_switch
def test_a_users_own_setting_is_left_in_charge(monkeypatch):
    monkeypatch.setenv(heap.HUGEPAGE_ENV, "1")
    switch = heap._hugepage_switch()
    before = switch(True)
    try:
        with heap.small_pages():
            assert _advice_now() is True
    finally:
        switch(before)


def test_the_command_turns_the_advice_off_before_numpy_loads_unless_the_user_set_it():
    # the console script's process: numpy reads NUMPY_MADVISE_HUGEPAGE when it is imported
    probe = ("import os, sys\n"
             "from afterlook.cli import main\n"
             "main.main = lambda argv=None: 0\n"
             "try:\n    main.entry()\nexcept SystemExit:\n    pass\n"
             "print(os.environ.get('NUMPY_MADVISE_HUGEPAGE'), 'numpy' in sys.modules)\n")
    environ = {k: v for k, v in os.environ.items() if k != heap.HUGEPAGE_ENV}
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, env=environ, check=True,
                         timeout=120).stdout.split()
    assert out == ["0", "False"]
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                         env={**environ, heap.HUGEPAGE_ENV: "1"}, check=True, timeout=120).stdout.split()
    assert out == ["1", "False"]
