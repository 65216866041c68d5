"""Fixtures for the casebook tests: the demo on disk, its best finding, and a runner for the console script.

The demo comes from ``afterlook.demo.writer.write_demo`` (the invented
pump-station fleet, seed 7), exactly what ``afterlook demo`` writes. It is
written once per session; tests copy what they change.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pytest



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
def demo(demo_written, demo_scenario) -> Demo:
    import afterlook
    from afterlook.analysis.discovery import suggest

    folder, train, cases, model_path = demo_written.folder, demo_written.train, demo_written.cases, demo_written.model
    model = afterlook.load_model(model_path)
    table = afterlook.load_table(cases, require_labels=True)
    worst = afterlook.misses(model, table).misses[0].case
    found = suggest(model, table, train=afterlook.load_table(train), case_ids=[worst], top=5)
    best = next(c for c in found.candidates if c.beyond_chance)
    return Demo(folder, train, cases, model_path, worst, best.name, best.expression, demo_scenario.kinds)


@pytest.fixture(scope="session")
def one_line_error():
    """``one_line_error(code, stderr, expected_code=2) -> the line``: see :func:`assert_one_line_error`."""
    return assert_one_line_error
