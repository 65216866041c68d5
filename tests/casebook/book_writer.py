"""Writer process for the durability test: upsert + save in a loop until it is killed.

    python book_writer.py BOOK

Before every ``os.fsync`` and around every ``os.replace`` (the points where a
save changes what is on disk) the writer prints ``at NAME`` and waits for a
line on stdin, so the test decides exactly where each kill lands, whatever the
machine's speed.

Step ``k`` upserts :func:`step_entry` ``(k)``; the book after step ``k`` is
therefore a function of ``k`` alone (:func:`expected_document`). The writer
starts from the step found in the book on disk, so every run also opens the
file the previous kill left behind. After each save it prints ``saved K``.

Only :mod:`afterlook.store.casebook_file` is loaded, without the package's
``afterlook.store.__init__`` (which imports pandas and pyarrow for the table
reader and costs about a second per start): the module under test is the same
file, and 50+ starts stay quick.
"""

from __future__ import annotations

import os
import sys
import types
from pathlib import Path

STORE = Path(__file__).resolve().parents[2] / "src" / "afterlook" / "store"


def load_store():
    if "afterlook.store" not in sys.modules:
        import afterlook  # noqa: F401 - the bare package (its __init__ imports nothing)

        pkg = types.ModuleType("afterlook.store")
        pkg.__path__ = [str(STORE)]
        sys.modules["afterlook.store"] = pkg
    import afterlook.store.casebook_file as store

    return store


def step_entry(k: int) -> dict:
    statuses = ("open", "explained", "needs-signal", "label-disputed", "accepted-risk")
    # Sizes vary so that some saves are long (more chances to be killed mid-write).
    return {"case": f"unit-{k % 5}", "status": statuses[k % 5], "step": k,
            "note": f"step {k} " + "x" * ((k * 7919) % 6000), "values": [k * 0.5, -k]}


def expected_document(k: int, store) -> dict | None:
    """The document after step ``k`` (None for k = 0: no file yet)."""
    if k == 0:
        return None
    book = store.Casebook("unused.json")
    for step in range(1, k + 1):
        book.upsert(step_entry(step))
    return book.to_document()


def last_step(book) -> int:
    return max((int(e.get("step", 0)) for e in book.entries.values()), default=0)


def _checkpoint(name: str) -> None:
    """Tell the test where the save is, then wait for its go-ahead (or its kill)."""
    print(f"at {name}", flush=True)
    if not sys.stdin.readline():  # the test closed our stdin: stop quietly
        raise SystemExit(0)


def install_checkpoints() -> None:
    """Wrap the two calls through which a save changes the disk (the atomic writer uses both via ``os``)."""
    real_fsync, real_replace = os.fsync, os.replace

    def fsync(fd):
        _checkpoint("fsync")
        real_fsync(fd)

    def replace(src, dst, **kwargs):
        name = Path(dst).name
        _checkpoint(f"replace {name}")
        real_replace(src, dst, **kwargs)
        _checkpoint(f"replaced {name}")

    os.fsync, os.replace = fsync, replace


def main(path: str) -> None:
    store = load_store()
    install_checkpoints()
    book = store.Casebook.open(path)
    k = last_step(book)
    print(f"ready {k}", flush=True)
    while True:
        k += 1
        book.upsert(step_entry(k))
        book.save()
        print(f"saved {k}", flush=True)


if __name__ == "__main__":
    main(sys.argv[1])
