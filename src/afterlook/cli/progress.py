"""Progress on stderr for the slow part of a command, on a terminal only.

A command wraps its long computation (never its output) in :func:`busy` (what
is being done and the time taken: in-memory fit, try, shape),
:func:`rows_progress` (rows read and chunks: the streamed fit and score) or
:func:`stage_progress` (the stage of a search: ``suggest``'s
``progress(stage, fraction)`` callback, or the steps of an in-memory
score). The rules:

* only when both stdout and stderr are terminals and ``--json`` is not
  given: a pipe, a file or a JSON reader never sees a byte of it, and
  nothing of it ever goes to stdout;
* only after :data:`SHOW_AFTER` seconds (a timer starts the display), so a
  fast command does not flash; it is transient: cleared when the block
  ends, before the command writes its results;
* while it is shown, anything written to stderr (a warning) is printed
  above it rather than through it (Rich's stderr redirection).

Rich is imported only when the display is on.
"""

from __future__ import annotations

import contextlib
import sys
import threading
from collections.abc import Iterator

SHOW_AFTER = 1.0
"""Seconds a block runs before its progress is shown (0: at once)."""


def wanted(args) -> bool:
    """Whether a progress display may be shown for this run: both streams terminals, no --json."""
    if getattr(args, "json", False):
        return False
    try:
        return bool(sys.stdout.isatty() and sys.stderr.isatty())
    except (AttributeError, ValueError):  # a closed or odd stream: no terminal
        return False


class _Display:
    """One Rich ``Progress`` line on stderr, started by a timer after ``delay`` seconds."""

    def __init__(self, description: str, total: float | None, delay: float):
        from rich.console import Console
        from rich.progress import BarColumn, Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

        console = Console(file=sys.stderr, markup=False, highlight=False)
        self.progress = Progress(SpinnerColumn(), TextColumn("{task.description}", markup=False),
                                 BarColumn(), TextColumn("{task.fields[detail]}", markup=False),
                                 TimeElapsedColumn(), console=console, transient=True,
                                 redirect_stdout=False, redirect_stderr=True)
        self.task = self.progress.add_task(description, total=total, detail="")
        self._lock = threading.Lock()
        self.shown = False
        self._closed = False
        self._timer = None
        if delay <= 0:
            self._start()
        else:
            self._timer = threading.Timer(delay, self._start)
            self._timer.daemon = True
            self._timer.start()

    def _start(self) -> None:
        with self._lock:
            if not self._closed:
                self.progress.start()
                self.shown = True

    def update(self, **fields) -> None:
        self.progress.update(self.task, **fields)

    def close(self) -> None:
        if self._timer is not None:
            self._timer.cancel()
        with self._lock:
            self._closed = True
            if self.shown:
                self.progress.stop()


class RowsProgress:
    """``progress(rows_done, chunks_done)`` for a streamed command; ``total(rows)`` once the count is known."""

    def __init__(self, display: _Display | None):
        self.display = display

    def total(self, rows: int | None) -> None:
        if self.display is not None and rows:
            self.display.update(total=rows)

    def __call__(self, rows: int, chunks: int) -> None:
        if self.display is not None:
            self.display.update(completed=rows, detail=f"{rows:,} rows, {chunks:,} chunk{'s' if chunks != 1 else ''}")


class StageProgress:
    """``progress(stage, fraction)``: the callback :func:`afterlook.analysis.discovery.suggest` reports to."""

    def __init__(self, display: _Display | None):
        self.display = display

    def __call__(self, stage: str, fraction: float) -> None:
        if self.display is not None:
            self.display.update(description=str(stage), completed=min(max(float(fraction), 0.0), 1.0))


@contextlib.contextmanager
def _displayed(args, description: str, total: float | None) -> Iterator[_Display | None]:
    display = _Display(description, total, SHOW_AFTER) if wanted(args) else None
    try:
        yield display
    finally:
        if display is not None:
            display.close()


@contextlib.contextmanager
def rows_progress(args, what: str) -> Iterator[RowsProgress]:
    """Rows and chunks done (a bar once the total is known), or a reporter that does nothing."""
    with _displayed(args, what, None) as display:
        yield RowsProgress(display)


@contextlib.contextmanager
def stage_progress(args, first_stage: str) -> Iterator[StageProgress]:
    """The current stage and a bar of the fraction done, or a reporter that does nothing."""
    with _displayed(args, first_stage, 1.0) as display:
        yield StageProgress(display)


@contextlib.contextmanager
def busy(args, what: str) -> Iterator[None]:
    """A line saying what is being done, with the time it has taken (no fraction to show)."""
    with _displayed(args, what, None):
        yield
