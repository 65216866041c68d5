"""The one error type of afterlook.

Every failure that a user can cause (bad file, bad expression, unknown case
id, singular covariance ...) is raised as :class:`AfterlookError` carrying a
display-ready, single-line message. The CLI prints ``message`` on stderr and
exits with ``exit_code``; the workbench shows it as a notification. Anything
else escaping the core is a bug in afterlook, not bad input.
"""

from __future__ import annotations

# Exit codes, in one place (the CLI and AfterlookError read them here):
#   0    the command did its job;
#   1    a check ran and failed (``casebook check`` found a regression): the
#        input was fine, the answer is "no";
#   2    bad input: a file, option, expression or id the user can fix;
#        nothing was computed or written;
#   3    an internal error of afterlook (a bug): reported in one line,
#        traceback with AFTERLOOK_DEBUG=1;
#   130  interrupted by Ctrl-C (128 + SIGINT, the shell's convention).
EXIT_OK = 0
EXIT_CHECK_FAILED = 1
EXIT_BAD_INPUT = 2
EXIT_INTERNAL = 3
EXIT_INTERRUPTED = 130


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
