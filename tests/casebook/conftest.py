"""Fixtures for the casebook tests: the demo on disk, its best finding, and a runner for the console script.

The demo comes from ``afterlook.cli.demo_command.write_demo`` (the invented
pump-station fleet, seed 7), exactly what ``afterlook demo`` writes. It is
written once per session; tests copy what they change.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import pytest

SCRIPT = Path(sys.executable).parent / "afterlook"
DEMO_SEED = 7


def _run_cli(*args, cwd=None, timeout: float = 300) -> tuple[int, str, str]:
    """Run the real ``afterlook`` console script; return (exit code, stdout, stderr)."""
    if not SCRIPT.exists():  # pragma: no cover - a broken install, not a test result
        pytest.fail(f"console script not found next to the interpreter: {SCRIPT}")
    env = dict(os.environ)
    env.pop("AFTERLOOK_DEBUG", None)
    env["COLUMNS"] = "200"
    env["NO_COLOR"] = "1"
    proc = subprocess.run([str(SCRIPT), *map(str, args)], cwd=cwd, env=env, capture_output=True, text=True,
                          timeout=timeout, stdin=subprocess.DEVNULL)
    return proc.returncode, proc.stdout, proc.stderr


@pytest.fixture(scope="session")
def run_cli():
    """``run_cli(*args, cwd=None) -> (code, stdout, stderr)`` for the real console script."""
    return _run_cli


def one_json(stdout: str):
    """stdout as exactly one JSON document (json module as the parser)."""
    text = stdout.strip()
    assert text, "stdout is empty; expected one JSON document"
    doc, end = json.JSONDecoder().raw_decode(text)
    assert end == len(text), f"extra output after the JSON document: {text[end:end + 80]!r}"
    return doc


def assert_one_line_error(code: int, stderr: str, expected_code: int = 2) -> str:
    assert code == expected_code, f"exit {code}, stderr: {stderr}"
    lines = [line for line in stderr.splitlines() if line.strip()]
    assert len(lines) == 1, f"expected one error line, got: {stderr!r}"
    assert "Traceback" not in stderr
    assert lines[0].startswith("afterlook: error: ")
    return lines[0]


@dataclass
class Demo:
    dir: Path
    train: Path
    cases: Path
    model: Path
    worst: str  # the worst miss
    name: str  # the best finding's name and expression (first beyond chance)
    expression: str
    kinds: dict  # case id -> failure kind (from the generator, not from afterlook)


@pytest.fixture(scope="session")
def demo(tmp_path_factory) -> Demo:
    from afterlook import api
    from afterlook.cli.demo_command import write_demo
    from afterlook.demo import generate
    from afterlook.discovery import suggest

    folder = tmp_path_factory.mktemp("casebook_demo")
    train, cases, model_path = write_demo(folder, seed=DEMO_SEED)
    model = api.load_model(model_path)
    table = api.load_table(cases, require_labels=True)
    worst = api.misses(model, table).misses[0].case
    found = suggest(model, table, train=api.load_table(train), case_ids=[worst], top=5)
    best = next(c for c in found.candidates if c.beyond_chance)
    return Demo(folder, train, cases, model_path, worst, best.name, best.expression, generate(seed=DEMO_SEED).kinds)


@pytest.fixture(scope="session")
def parse_json():
    """``parse_json(stdout)``: see :func:`one_json`."""
    return one_json


@pytest.fixture(scope="session")
def one_line_error():
    """``one_line_error(code, stderr, expected_code=2) -> the line``: see :func:`assert_one_line_error`."""
    return assert_one_line_error
