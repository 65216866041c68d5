"""Fixtures shared by every test folder: the console-script runner and the one-JSON parser."""

from __future__ import annotations

import pytest

from afterlook_cli_runner import one_json as _one_json
from afterlook_cli_runner import run_cli_script


@pytest.fixture(scope="session")
def run_cli():
    """``run_cli(*args, cwd=None, env=None, timeout=300) -> (code, stdout, stderr)``."""
    return run_cli_script


@pytest.fixture(scope="session")
def one_json():
    """``one_json(stdout)``: stdout as exactly one JSON document."""
    return _one_json


@pytest.fixture(scope="session")
def parse_json():
    """Same as ``one_json`` (the casebook tests' name for it)."""
    return _one_json
