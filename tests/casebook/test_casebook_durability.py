"""A writer killed (SIGKILL) at random moments never leaves a broken or half-written casebook.

Outside reference: the on-disk file is parsed with the ``json`` module, and
compared with the state the writer was about to replace or had just written.
"""

from __future__ import annotations

import importlib.util
import json
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent
KILLS = 60
SEED = 20260602

pytestmark = pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="needs SIGKILL (POSIX)")


def _writer_module():
    spec = importlib.util.spec_from_file_location("casebook_book_writer", HERE / "book_writer.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _read(path: Path):
    if not path.exists():
        return None
    return json.loads(path.read_bytes().decode("utf-8"))  # json module: independent parser


def test_sigkill_at_random_moments_leaves_old_or_new_state(tmp_path):
    writer = _writer_module()
    store = writer.load_store()
    book = tmp_path / "book.json"
    bak = tmp_path / "book.json.bak"
    rng = random.Random(SEED)
    cache: dict[int, dict | None] = {}

    def state(k):
        if k not in cache:
            cache[k] = writer.expected_document(k, store)
        return cache[k]

    total_steps = 0
    for trial in range(KILLS):
        proc = subprocess.Popen([sys.executable, str(HERE / "book_writer.py"), str(book)],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        first = proc.stdout.readline()
        if not first.startswith("ready "):
            proc.kill()
            pytest.fail(f"trial {trial}: writer did not start: {first!r} {proc.stderr.read()}")
        start = int(first.split()[1])
        # Random moment: sometimes at once, mostly within a few dozen saves.
        delay = rng.choice([0.0, rng.uniform(0.0, 0.01), rng.uniform(0.0, 0.2)])
        if delay:
            time.sleep(delay)
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
        rest = proc.stdout.read().split()
        proc.stdout.close()
        proc.stderr.close()
        saved = [int(rest[i + 1]) for i in range(0, len(rest) - 1, 2) if rest[i] == "saved"]
        last = max(saved, default=start)
        total_steps += last - start

        on_disk = _read(book)
        if on_disk == state(last):
            k = last
        elif on_disk == state(last + 1):
            k = last + 1  # the save in progress completed; only its "saved" line was lost
        else:
            pytest.fail(f"trial {trial}: the book on disk is neither step {last} nor step {last + 1}")
        # The backup holds the state before the book's, or (killed between the two renames) the same one.
        if k >= 2:
            assert _read(bak) in (state(k - 1), state(k)), f"trial {trial}: .bak is not the previous state"
        # Nothing but the book, its backup and hidden temp files of killed saves.
        names = {p.name for p in tmp_path.iterdir()}
        assert names <= {"book.json", "book.json.bak"} | {n for n in names if n.startswith(".book.json.")}

    # The test exercised real writes: the writer advanced well past the first steps.
    assert total_steps >= KILLS, f"only {total_steps} saves in {KILLS} runs"
    final = store.Casebook.open(book)  # still a valid casebook after all the kills
    assert len(final.entries) == 5
