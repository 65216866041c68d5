"""One piece of work in a second thread while the caller goes on, stopped when the caller stops.

The candidate search makes its shaping choices (numpy work that lets go of the
interpreter) while the calling thread screens the candidates that need none;
on a machine with a free core the two overlap. The work must take a
``progress`` callable(fraction) and call it between its steps: that is where
it is stopped once the caller has given up (an error, or a workbench search
gone stale). :meth:`Beside.result` waits for it, calling the caller's own
check meanwhile, and raises what the work raised; :meth:`Beside.stop` asks it
to stop and waits for it, so no work outlives the call that started it.
"""

from __future__ import annotations

import threading

__all__ = ["Beside"]


class _Stopped(Exception):
    """Raised inside the work's progress once the caller asked it to stop."""


class Beside:
    """``fn(*args, progress=..., **kwargs)`` run in a daemon thread from construction on."""

    def __init__(self, fn, *args, name: str = "afterlook-beside", **kwargs):
        self._stop = threading.Event()
        self._value = None
        self._error: BaseException | None = None

        def check(fraction: float) -> None:
            if self._stop.is_set():
                raise _Stopped()

        def run() -> None:
            try:
                self._value = fn(*args, progress=check, **kwargs)
            except BaseException as exc:  # handed to the caller by result()
                self._error = exc

        self._thread = threading.Thread(target=run, name=name, daemon=True)
        self._thread.start()

    def result(self, check=None, every: float = 0.05):
        """The work's value, once it is done; ``check`` (optional callable()) is called every ``every`` s
        while waiting (it may raise: the work is then stopped and the exception goes on)."""
        try:
            while True:
                self._thread.join(every)
                if not self._thread.is_alive():
                    break
                if check is not None:
                    check()
        except BaseException:
            self.stop()
            raise
        if self._error is not None:
            raise self._error
        return self._value

    def stop(self) -> None:
        """Ask the work to stop at its next step and wait for it (a no-op once it is done)."""
        self._stop.set()
        self._thread.join()
