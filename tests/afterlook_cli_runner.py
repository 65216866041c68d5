"""Two runners for the CLI, shared by every test folder.

``run_cli_in_process`` calls the CLI's own entry function (``afterlook.cli.main.main``)
with the arguments, captured stdout/stderr, a closed stdin and the environment a
script would give it; it returns the exit code exactly as the console script
would. Most CLI tests use it: a subprocess pays about two seconds of imports,
which made the suite slow on a loaded two-core machine.

``run_cli_script`` starts the installed console script (the one next to the
interpreter running the tests) in a subprocess. A handful of smoke tests use it
so that the script's existence, the exit-code contract, one-line stderr and
``--json`` on stdout are still checked exactly as a shell sees them.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import subprocess
import sys
import warnings
from pathlib import Path

import pytest

SCRIPT = Path(sys.executable).parent / "afterlook"

#: The environment both runners give the CLI: wide enough that Rich tables do
#: not wrap ids, no colour codes, and never a traceback.
_ENV = {"COLUMNS": "200", "NO_COLOR": "1"}


def run_cli_script(*args, cwd: str | os.PathLike | None = None, env: dict | None = None,
                   timeout: float = 300) -> tuple[int, str, str]:
    """Run the real ``afterlook`` console script; return (exit code, stdout, stderr)."""
    if not SCRIPT.exists():  # pragma: no cover - a broken install, not a test result
        pytest.fail(f"console script not found next to the interpreter: {SCRIPT}")
    full_env = dict(os.environ)
    full_env.pop("AFTERLOOK_DEBUG", None)  # tracebacks must never be needed
    full_env.update(_ENV)
    if env:
        full_env.update(env)
    proc = subprocess.run([str(SCRIPT), *[str(a) for a in args]], cwd=cwd, env=full_env, capture_output=True,
                          text=True, timeout=timeout, stdin=subprocess.DEVNULL)
    return proc.returncode, proc.stdout, proc.stderr


class _Captured(io.StringIO):
    """A text stream that says it is not a terminal, like a pipe."""

    def isatty(self) -> bool:
        return False


@contextlib.contextmanager
def _environment(env: dict, cwd):
    saved_env = dict(os.environ)
    saved_cwd = os.getcwd()
    try:
        os.environ.pop("AFTERLOOK_DEBUG", None)
        os.environ.update(env)
        if cwd is not None:
            os.chdir(cwd)
        yield
    finally:
        os.chdir(saved_cwd)
        os.environ.clear()
        os.environ.update(saved_env)


def _show_on_stderr(message, category, filename, lineno, file=None, line=None):
    sys.stderr.write(warnings.formatwarning(message, category, filename, lineno, line))


def run_cli_in_process(*args, cwd: str | os.PathLike | None = None, env: dict | None = None,
                       timeout: float = 300) -> tuple[int, str, str]:
    """Run ``afterlook ARGS`` through the CLI's entry function; return (exit code, stdout, stderr).

    ``timeout`` is accepted for the same signature as :func:`run_cli_script`
    and not enforced (an in-process call cannot be killed cleanly).
    """
    from afterlook.cli.main import main

    out, err = _Captured(), _Captured()
    full_env = dict(_ENV)
    if env:
        full_env.update(env)
    with _environment(full_env, cwd), contextlib.redirect_stdout(out), contextlib.redirect_stderr(err), \
            warnings.catch_warnings():
        # Warnings as a fresh interpreter shows them: Python's default filters,
        # written to the (captured) stderr rather than into pytest's record.
        warnings.resetwarnings()
        for action, category in (("ignore", DeprecationWarning), ("ignore", PendingDeprecationWarning),
                                 ("ignore", ImportWarning), ("ignore", ResourceWarning)):
            warnings.simplefilter(action, category)
        warnings.showwarning = _show_on_stderr
        saved_stdin = sys.stdin
        sys.stdin = _Captured("")
        try:
            code = main([str(a) for a in args])
        except SystemExit as exc:  # argparse's --help and --version exit through SystemExit
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
        finally:
            sys.stdin = saved_stdin
    return code, out.getvalue(), err.getvalue()


def one_json(stdout: str):
    """stdout parsed as exactly one JSON document (json module as the parser; nothing before or after)."""
    text = stdout.strip()
    assert text, "stdout is empty; expected one JSON document"
    doc, end = json.JSONDecoder().raw_decode(text)
    assert end == len(text), f"extra output after the JSON document: {text[end:end + 80]!r}"
    return doc
