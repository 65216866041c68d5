"""Fixtures for the workbench tests: the demo scenario written with ``write_demo`` (seed 7).

The demo files are written once per session and only read; each test that
saves to a casebook gives its own path under its ``tmp_path``.
"""

from __future__ import annotations

import shutil
from dataclasses import dataclass
from pathlib import Path

import pytest



@dataclass(frozen=True)
class Demo:
    folder: Path
    train: Path
    cases: Path
    model: Path


@pytest.fixture(scope="session")
def demo(demo_written) -> Demo:
    return Demo(demo_written.folder, demo_written.train, demo_written.cases, demo_written.model)


@pytest.fixture
def demo_copy(demo, tmp_path) -> Demo:
    """The demo files copied into this test's folder (for tests that write next to them)."""
    out = tmp_path / "demo"
    shutil.copytree(demo.folder, out)
    return Demo(out, out / demo.train.name, out / demo.cases.name, out / demo.model.name)


@pytest.fixture(scope="session")
def session(demo):
    from afterlook.analysis.workbench import open_session

    return open_session(demo.model, demo.cases, train_path=demo.train, casebook=demo.folder / "unused.json")


@pytest.fixture(scope="session")
def wait_until():
    """``await wait_until(pilot, condition, what=...)``: see :func:`_wait_until`."""
    return _wait_until


async def _wait_until(pilot, condition, *, what: str, steps: int = 1200, pause: float = 0.05) -> None:
    """Let the app run until ``condition()`` holds; fail (not a timing check) if it never does.

    The bound only keeps a broken app from hanging the suite; the tests assert
    on what happened, never on how long it took.
    """
    for _ in range(steps):
        if condition():
            return
        await pilot.pause(pause)
    raise AssertionError(f"the workbench never reached: {what}")
