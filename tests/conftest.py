"""Fixtures shared by every test folder: the CLI runners and the one-JSON parser."""

from __future__ import annotations

import pytest

from afterlook_cli_runner import one_json as _one_json
from afterlook_cli_runner import run_cli_in_process, run_cli_script


@pytest.fixture(scope="session")
def run_cli():
    """``run_cli(*args, cwd=None, env=None, timeout=300) -> (code, stdout, stderr)``, in process.

    Calls the CLI's own entry function with captured streams; use
    ``run_script`` where the real console script must be started.
    """
    return run_cli_in_process


@pytest.fixture(scope="session")
def run_script():
    """The real ``afterlook`` console script in a subprocess (smoke tests only: ~2 s each)."""
    return run_cli_script


@pytest.fixture(scope="session")
def one_json():
    """``one_json(stdout)``: stdout as exactly one JSON document."""
    return _one_json


@pytest.fixture(scope="session")
def parse_json():
    """Same as ``one_json`` (the casebook tests' name for it)."""
    return _one_json
