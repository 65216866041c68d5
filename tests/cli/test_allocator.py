"""The command's process keeps freed memory for reuse (glibc), and leaves a user's own malloc settings alone.

Reference: glibc's documented malloc behaviour (mallopt(3), mallinfo2(3); the manual
pages, from memory): a block above M_MMAP_THRESHOLD is mapped on its own and given back
to the kernel when freed; a block below it comes from the heap, and free memory at the
heap's top is kept up to M_TRIM_THRESHOLD. ``mallinfo2().fordblks`` is the free memory
the heap keeps.
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

import afterlook.cli.main as cli_main
from afterlook.cli import allocator
from malloc_probe import FREED_BLOCK_KEPT_MIB

glibc = pytest.mark.skipif(not (hasattr(os, "confstr") and os.confstr("CS_GNU_LIBC_VERSION")),
                           reason="glibc's malloc only")

_PROBE = """
import sys
from afterlook.cli.allocator import keep_freed_memory
print(int(keep_freed_memory() if sys.argv[1] == "tune" else False))
""" + FREED_BLOCK_KEPT_MIB


def _probe(mode: str, **env) -> tuple[int, int]:
    environ = {k: v for k, v in os.environ.items() if not k.startswith(("MALLOC_", "GLIBC_TUNABLES"))}
    environ.update(env)
    out = subprocess.run([sys.executable, "-c", _PROBE, mode], capture_output=True, text=True, env=environ,
                         check=True, timeout=120).stdout.split()
    return int(out[0]), int(out[1])


@glibc
def test_a_freed_block_stays_with_the_process_for_reuse():
    tuned, kept = _probe("tune")
    assert tuned == 1 and kept >= 20  # the 20 MiB block came from the heap and was kept when freed
    untuned, given_back = _probe("default")
    assert untuned == 0 and given_back < 20  # glibc's default: mapped on its own, given back to the kernel


@glibc
@pytest.mark.parametrize("name", ["MALLOC_TRIM_THRESHOLD_", "GLIBC_TUNABLES"])
def test_a_users_own_malloc_settings_are_left_alone(name):
    assert allocator.keep_freed_memory({name: "131072"}) is False
    tuned, kept = _probe("tune", **{name: "glibc.malloc.check=0" if name == "GLIBC_TUNABLES" else "131072"})
    assert tuned == 0 and kept < 20


def test_the_console_entry_tunes_its_own_process(monkeypatch):
    calls = []
    monkeypatch.setattr(os, "environ", dict(os.environ))  # entry() sets the BLAS variables for its process
    monkeypatch.setattr(cli_main, "keep_freed_memory", lambda: calls.append(1))
    monkeypatch.setattr(sys, "argv", ["afterlook", "--version"])
    with pytest.raises(SystemExit) as done:
        cli_main.entry()
    assert done.value.code == 0 and calls == [1]
