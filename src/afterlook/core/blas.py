"""How many threads the BLAS under numpy may use inside afterlook's work.

afterlook's linear algebra is tall and skinny (``X.T @ X`` of 200,000 x 40,
triangular solves of a 40 x 40 factor against many rows). One OpenBLAS thread
does such a product in ~0.02 s. With the default thread count (one per core),
on a machine where other processes are busy, the same product was measured at
0.03 s to 6.2 s, worst in a fresh process, which is what every CLI command is
(numpy 2.4.6, OpenBLAS 0.3.31, 2 cores; ``benchmarks/bench_blas_threads.py``
repeats the measurement). The threads wait for each other at every call
while the cores are taken by someone else.

So afterlook runs its own work with **one BLAS thread** by default and puts
the caller's setting back afterwards (threadpoolctl's ``ThreadpoolController``
changes the limit of the loaded BLAS libraries for the duration of a
``with`` block). ``AFTERLOOK_BLAS_THREADS=N`` chooses another number, and
``AFTERLOOK_BLAS_THREADS=auto`` leaves the BLAS as the process set it.
"""

from __future__ import annotations

import contextlib
import functools
import os

from .errors import AfterlookError

ENV = "AFTERLOOK_BLAS_THREADS"
DEFAULT_THREADS = 1

_controller = None


def configured_threads() -> int | None:
    """The limit from ``AFTERLOOK_BLAS_THREADS`` (default 1); None for ``auto``."""
    raw = os.environ.get(ENV, "").strip().lower()
    if not raw:
        return DEFAULT_THREADS
    if raw == "auto":
        return None
    try:
        n = int(raw)
    except ValueError:
        n = 0
    if n < 1:
        raise AfterlookError(f"{ENV}={raw!r}: use a whole number of threads (1 or more) or 'auto'")
    return n


def _get_controller():
    global _controller
    if _controller is None:
        from threadpoolctl import ThreadpoolController

        _controller = ThreadpoolController()
    return _controller


@contextlib.contextmanager
def limited_blas():
    """Run the block with the configured number of BLAS threads, then restore the previous limits."""
    n = configured_threads()
    if n is None:
        yield
        return
    with _get_controller().limit(limits=n, user_api="blas"):
        yield


def with_limited_blas(fn):
    """Decorator form of :func:`limited_blas` for afterlook's operations."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        with limited_blas():
            return fn(*args, **kwargs)

    return wrapper
