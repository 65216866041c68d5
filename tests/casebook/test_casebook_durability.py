"""A writer killed (SIGKILL) in the middle of a save never leaves a broken or half-written casebook.

The kills follow a seeded schedule of *progress points*, not of wall-clock
time: the writer (``book_writer.py``) stops before every ``os.fsync`` and
around every ``os.replace`` of a save and waits for the test, which kills it
at the scheduled point. So every run lands exactly where it was meant to, on a
fast machine or a loaded one, and the schedule covers every point of a save.

Outside reference: the on-disk file is parsed with the ``json`` module, and
compared with the state the writer was about to replace or had just written.
"""

from __future__ import annotations

import importlib.util
import json
import random
import signal
import subprocess
import sys
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent
KILLS = 60
SEED = 20260602
#: progress points of one save over an existing book: the backup written
#: (fsync temp, replace, replaced, fsync folder), then the book (same four).
POINTS_PER_SAVE = 8

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


def _schedule(rng: random.Random) -> list[tuple[int, int]]:
    """(saves let through, point of the next save to kill at) for every run.

    The first runs walk every point of a save in order (and one past the last:
    a kill between two saves); the rest are drawn from the seeded generator.
    """
    walk = [(1, p) for p in range(POINTS_PER_SAVE + 1)]
    drawn = [(rng.randint(0, 4), rng.randint(0, POINTS_PER_SAVE)) for _ in range(KILLS - len(walk))]
    return walk + drawn


def _run_until(proc, saves: int, point: int) -> tuple[int, str, list[str]]:
    """Let ``saves`` saves finish, then kill at progress point ``point`` of the next.

    Returns (saves completed, where the kill landed: a point name or "between
    saves", the points the unfinished save reached, the kill point included).
    """
    done = index = 0
    reached: list[str] = []
    while True:
        line = proc.stdout.readline()
        if not line:
            raise AssertionError(f"the writer stopped by itself: {proc.stderr.read()}")
        word, _, rest = line.strip().partition(" ")
        if word == "saved":
            done, index, reached = done + 1, 0, []
            if done > saves:  # the next save has fewer points than scheduled
                where = "between saves"
                break
        elif word == "at":
            reached.append(rest)
            if done == saves and index == point:
                where = rest
                break
            index += 1
            proc.stdin.write("go\n")
            proc.stdin.flush()
        else:
            raise AssertionError(f"unexpected line from the writer: {line!r}")
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    return done, where, reached


def test_sigkill_at_every_point_of_a_save_leaves_old_or_new_state(tmp_path):
    writer = _writer_module()
    store = writer.load_store()
    book = tmp_path / "book.json"
    bak = tmp_path / "book.json.bak"
    cache: dict[int, dict | None] = {}

    def state(k):
        if k not in cache:
            cache[k] = writer.expected_document(k, store)
        return cache[k]

    landed = set()
    for trial, (saves, point) in enumerate(_schedule(random.Random(SEED))):
        proc = subprocess.Popen([sys.executable, str(HERE / "book_writer.py"), str(book)], stdin=subprocess.PIPE,
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        try:
            first = proc.stdout.readline()
            assert first.startswith("ready "), f"trial {trial}: writer did not start: {first!r} {proc.stderr.read()}"
            start = int(first.split()[1])
            done, where, reached = _run_until(proc, saves, point)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()
            for stream in (proc.stdin, proc.stdout, proc.stderr):
                stream.close()
        landed.add(where)
        last = start + done  # the last step whose save completed

        # Exactly the state the kill point implies: the book's own replace is the commit point
        # ("replaced book.json" is reported after that replace has happened).
        expected = last + 1 if "replaced book.json" in reached else last
        on_disk = _read(book)
        assert on_disk == state(expected), (
            f"trial {trial}: killed at {where!r} after {done} saves; the book on disk is not step {expected}")
        # The backup holds the state before the book's, or (killed between the two renames) the same one.
        if expected >= 2:
            assert _read(bak) in (state(expected - 1), state(expected)), f"trial {trial}: .bak is not the previous state"
        # Nothing but the book, its backup and hidden temp files of killed saves.
        names = {p.name for p in tmp_path.iterdir()}
        assert names <= {"book.json", "book.json.bak"} | {n for n in names if n.startswith(".book.json.")}

    # The schedule reached every kind of point of a save (a changed save routine must update it).
    assert landed >= {"fsync", "replace book.json.bak", "replaced book.json.bak", "replace book.json",
                      "replaced book.json", "between saves"}, landed
    final = store.Casebook.open(book)  # still a valid casebook after all the kills
    assert len(final.entries) == 5
