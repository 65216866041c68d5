"""How often a worker's progress reaches the screen.

A worker thread (the candidate search) and the interface's thread share
Python's interpreter lock: while the interface redraws, the work waits. So
a worker's reports are passed on at a pace a person can read, not at the
pace the work makes them (it still checks for cancellation at every one),
and the interface does not animate: every frame of an animation is a redraw.
"""

from __future__ import annotations

import time

#: Least seconds between two progress messages of a candidate search. Every message redraws the bar in
#: the interface's thread, and that redraw holds Python's interpreter lock while the search (in its worker
#: thread) waits for it: a search sends 60 or more reports in a third of a second, and showing every one
#: made the same search take 0.8 s in the workbench against 0.31 s called directly (200,000 x 40, 2-core
#: machine, 2026-12-03). A bar needs no more than a few frames a second.
PROGRESS_EVERY = 0.1


class Every:
    """True on the first call, then at most once per ``seconds`` (``clock``: seconds, for the tests)."""

    def __init__(self, seconds: float, clock=time.monotonic):
        self.seconds, self._clock, self._last = seconds, clock, None

    def __call__(self) -> bool:
        now = self._clock()
        if self._last is not None and now - self._last < self.seconds:
            return False
        self._last = now
        return True


#: Textual's own switch for animations. Unless the user set it, the workbench runs without them: the
#: tabs' sliding underline alone redrew the screen about 20 times in the 0.3 s after ``c``, 50 ms of the
#: interface's 0.23 s of work while the search it had just started waited (measured 2026-12-03, 120 x 40).
ANIMATIONS_ENV = "TEXTUAL_ANIMATIONS"
