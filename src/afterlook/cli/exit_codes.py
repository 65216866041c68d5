"""Exit codes, in one place.

0  the command did its job;
1  a check ran and failed (``casebook check`` found a regression): the input
   was fine, the answer is "no";
2  bad input: a file, option, expression or id the user can fix; nothing
   was computed or written;
3  an internal error of afterlook (a bug): reported in one line, traceback
   with AFTERLOOK_DEBUG=1.
"""

from ..core.errors import EXIT_BAD_INPUT, EXIT_CHECK_FAILED, EXIT_OK

EXIT_INTERNAL = 3

__all__ = ["EXIT_OK", "EXIT_CHECK_FAILED", "EXIT_BAD_INPUT", "EXIT_INTERNAL"]
