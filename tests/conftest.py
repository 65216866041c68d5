"""Fixtures shared by every test folder: the CLI runners, the one-JSON parser, the demo files.

The demo (seed 7, the CLI's default) is generated and written once per test
session; tests only read those files (a test that writes copies them first).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import pytest

# The cache folder (store/cache.py) is off for the suite: no test is served by what an
# earlier test (or an earlier run) left there, and nothing is written to the home folder.
# tests/store/test_cache.py and tests/discovery/test_shaping_disk_cache.py switch it on
# in their own folders. CLI subprocesses inherit this environment.
os.environ["AFTERLOOK_CACHE_DIR"] = "off"

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


DEMO_SEED = 7


@dataclass(frozen=True)
class DemoFiles:
    folder: Path
    train: Path
    cases: Path
    model: Path


@pytest.fixture(scope="session")
def demo_scenario():
    """``afterlook.demo.generate(seed=7)``: the full-size invented fleet (frames and failure kinds)."""
    from afterlook.demo import generate

    return generate(seed=DEMO_SEED)


@pytest.fixture(scope="session")
def demo_written(tmp_path_factory) -> DemoFiles:
    """``afterlook demo``'s three files (seed 7), written once per session; read only."""
    from afterlook.demo.writer import write_demo

    folder = tmp_path_factory.mktemp("demo_seed7")
    train, cases, model = write_demo(folder, seed=DEMO_SEED)
    return DemoFiles(folder, Path(train), Path(cases), Path(model))
