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
import sys
import threading

from .errors import AfterlookError
from .heap import settle, small_pages

ENV = "AFTERLOOK_BLAS_THREADS"
DEFAULT_THREADS = 1

_lock = threading.Lock()
_depth = 0  # blocks running now, in any thread (BLAS thread counts are process-wide)
_limiters: list = []  # what the running blocks changed, restored when the last block ends
_modules_seen = -1  # len(sys.modules) when the loaded libraries were last looked at
#: The limit every BLAS of this process was started with through the environment, before any was loaded
#: (:func:`note_environment`, called by the console script): such a process needs no look at its libraries.
_started_with: int | None = None
#: The variables the BLAS libraries read when they load (OpenBLAS, OpenMP builds, MKL, BLIS, Apple's vecLib).
THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "BLIS_NUM_THREADS",
                    "VECLIB_MAXIMUM_THREADS")


def configured_threads(environ=None) -> int | None:
    """The limit from ``AFTERLOOK_BLAS_THREADS`` (default 1); None for ``auto``."""
    raw = (os.environ if environ is None else environ).get(ENV, "").strip().lower()
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


def _enter(n: int) -> None:
    global _depth, _modules_seen
    with _lock:
        _depth += 1
        # Look for BLAS libraries to limit whenever modules were imported since
        # the last look: a block may start before numpy is loaded (the CLI's
        # dispatch), and scipy brings its own OpenBLAS. One look takes about a
        # millisecond; a nested block with nothing new imported costs nothing.
        if len(sys.modules) == _modules_seen or _started_with == n:
            return
        _modules_seen = len(sys.modules)
        from threadpoolctl import ThreadpoolController

        blas = ThreadpoolController().select(user_api="blas")
        paths = [lib.filepath for lib in blas.lib_controllers if lib.num_threads != n]
        if paths:
            _limiters.append(blas.select(filepath=paths).limit(limits=n))
            _hand_back_control()


def _exit() -> None:
    global _depth, _modules_seen
    with _lock:
        _depth -= 1
        if _depth == 0:
            if _limiters:  # nothing changed, nothing to put back (and threadpoolctl need not be imported)
                while _limiters:
                    _limiters.pop().restore_original_limits()
                _hand_back_control()
            _modules_seen = -1


def _hand_back_control() -> None:
    """Let the next change of OpenBLAS's thread count come from any thread.

    threadpoolctl (3.8.0, the locked version) lets only one thread change an
    OpenBLAS pool that all threads share: the first to set a count, until that
    is cleared; a count set from any other thread is silently dropped. Its own
    ``threadpool_limits`` block clears it on leaving, but afterlook sets the
    count when its first block starts and puts it back when its last one ends,
    in whichever threads those are (the workbench searches in worker threads), so
    every change it makes is followed by this. Without it, a search run in a
    thread after any afterlook call in the main thread ran on every BLAS thread
    (measured: the count read 2 inside the block, and an OpenBLAS thread worked
    through the whole search), and a count put back from another thread stayed
    at 1. Changes are made under ``_lock``, so afterlook's threads never race
    each other; older threadpoolctl versions have no such rule and no method.
    """
    from threadpoolctl import OpenBLASController

    clear = getattr(OpenBLASController, "clear_controlling_thread", None)
    if clear is not None:
        clear(force=True)


@contextlib.contextmanager
def limited_blas():
    """Run the block with the configured number of BLAS threads, then restore the previous limits.

    Blocks nest and may run in several threads at once (the workbench's
    workers): the limit is set when the first block starts and the caller's
    setting comes back when the last one ends.
    """
    n = configured_threads()
    if n is None:
        yield
        return
    _enter(n)
    try:
        yield
    finally:
        _exit()


def with_limited_blas(fn):
    """Decorator form of :func:`limited_blas` for afterlook's operations (which also :func:`~afterlook.core.heap.settle`
    the process's heap, once, and run with numpy's huge-page advice off, :func:`~afterlook.core.heap.small_pages`)."""

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        settle()  # once per process: glibc then keeps the operation's temporaries for reuse (core/heap.py)
        with limited_blas(), small_pages():  # no huge-page advice meanwhile (core/heap.py)
            return fn(*args, **kwargs)

    return wrapper


def environment_for_new_process(environ=None) -> dict:
    """``environ`` with the BLAS thread variables set to the configured limit, where the user set none.

    The console script calls it before numpy is imported: OpenBLAS then
    starts with one thread and never creates the others, so even the first
    product of a fresh process runs on one thread. Child processes (a local
    Dask cluster's workers) inherit the setting.
    """
    env = dict(os.environ if environ is None else environ)
    try:
        n = configured_threads(env)
    except AfterlookError:
        return env
    if n is not None:
        for var in THREAD_VARIABLES:
            env.setdefault(var, str(n))
    return env


def note_environment(environ=None) -> bool:
    """Record that this process's BLAS libraries will all start with the configured limit: True when no
    numerical library is loaded yet and every variable of :data:`THREAD_VARIABLES` holds that limit
    (what :func:`environment_for_new_process` gives, unless the user set one of them otherwise).

    :func:`limited_blas` then skips its look at the loaded libraries (threadpoolctl's scan of
    every shared object of the process: about 10 ms of each command).
    """
    global _started_with
    environ = os.environ if environ is None else environ
    try:
        n = configured_threads(environ)
    except AfterlookError:
        return False
    if n is None or any(m in sys.modules for m in ("numpy", "scipy")) \
            or any(environ.get(var) != str(n) for var in THREAD_VARIABLES):
        return False
    _started_with = n
    return True

