"""One runner for the real ``afterlook`` console script, shared by every test folder.

It starts the installed script (the one next to the interpreter running the
tests) in a subprocess, so argument parsing, exit codes, stdout/stderr
separation and the absence of tracebacks are checked as a user or a shell
script would see them.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

SCRIPT = Path(sys.executable).parent / "afterlook"


def run_cli_script(*args, cwd: str | os.PathLike | None = None, env: dict | None = None,
                   timeout: float = 300) -> tuple[int, str, str]:
    """Run the real ``afterlook`` console script; return (exit code, stdout, stderr)."""
    if not SCRIPT.exists():  # pragma: no cover - a broken install, not a test result
        pytest.fail(f"console script not found next to the interpreter: {SCRIPT}")
    full_env = dict(os.environ)
    full_env.pop("AFTERLOOK_DEBUG", None)  # tracebacks must never be needed
    full_env["COLUMNS"] = "200"  # wide enough that Rich tables do not wrap ids
    full_env["NO_COLOR"] = "1"
    if env:
        full_env.update(env)
    proc = subprocess.run([str(SCRIPT), *[str(a) for a in args]], cwd=cwd, env=full_env, capture_output=True,
                          text=True, timeout=timeout, stdin=subprocess.DEVNULL)
    return proc.returncode, proc.stdout, proc.stderr


def one_json(stdout: str):
    """stdout parsed as exactly one JSON document (json module as the parser; nothing before or after)."""
    text = stdout.strip()
    assert text, "stdout is empty; expected one JSON document"
    doc, end = json.JSONDecoder().raw_decode(text)
    assert end == len(text), f"extra output after the JSON document: {text[end:end + 80]!r}"
    return doc
