"""The one error type of afterlook.

Every failure that a user can cause (bad file, bad expression, unknown case
id, singular covariance ...) is raised as :class:`AfterlookError` carrying a
display-ready, single-line message. The CLI prints ``message`` on stderr and
exits with ``exit_code``; the workbench shows it as a notification. Anything
else escaping the core is a bug in afterlook, not bad input.
"""

from __future__ import annotations

# Exit codes live in one place (afterlook.cli.exit_codes re-exports them):
# 0 all good, 1 a check ran and failed (e.g. a casebook regression),
# 2 the input was bad and nothing was computed.
EXIT_OK = 0
EXIT_CHECK_FAILED = 1
EXIT_BAD_INPUT = 2


class AfterlookError(Exception):
    """A failure with a message fit to show a user as it is.

    Parameters
    ----------
    message : str
        One line, no traceback, says what was wrong and, where possible,
        what to do about it.
    title : str
        Short heading for the workbench's notification.
    exit_code : int
        Process exit code the CLI uses (2 for bad input by default).
    """

    def __init__(self, message: str, *, title: str = "afterlook", exit_code: int = EXIT_BAD_INPUT):
        message = " ".join(str(message).split())  # always one line
        super().__init__(message)
        self.message = message
        self.title = title
        self.exit_code = exit_code

    def __str__(self) -> str:  # pragma: no cover - trivial
        return self.message
