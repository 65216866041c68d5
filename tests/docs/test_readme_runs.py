"""The README works as written: every shell block runs in a fresh folder and shows what the README shows.

scripts/readme_tour.py runs the blocks (through bash, with the venv on PATH)
and compares each tour block's shown output with a new run, numbers within
one unit of their last shown digit. The reference is the README itself: a
reader following it must see what it says.
"""

from __future__ import annotations

import functools
import importlib.util
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


@functools.lru_cache(maxsize=1)
def _tour():
    spec = importlib.util.spec_from_file_location("readme_tour", ROOT / "scripts" / "readme_tour.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up by name
    spec.loader.exec_module(module)
    return module


def test_every_readme_block_runs_as_written(tmp_path):
    tour = _tour()
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    assert len([b for b in tour.blocks(text) if b.kind == "tour"]) >= 5  # the tour is there to be checked
    problems, regenerated = tour.run_readme(text, tmp_path)
    assert not problems, "\n".join(problems)


@pytest.mark.parametrize("want, got, same", [
    ("threshold -125.31", "threshold -125.314", True),  # within one unit of the last shown digit
    ("threshold -125.31", "threshold -125.41", False),
    ("4.1e-12", "4.14e-12", True),
    ("4.1e-12", "4.3e-12", False),
    ("holds up", "hurts", False),
    ("0.0%:", "0.0%:", True),
])
def test_the_comparison_tolerates_only_the_last_digit(want, got, same):
    assert (_tour().differences([want], [got]) is None) is same


def test_a_block_without_a_marker_is_reported(tmp_path):
    problems, _ = _tour().run_readme("text\n\n```\n$ afterlook --version\n```\n", tmp_path)
    assert problems and "without a marker" in problems[0]


def test_every_help_example_runs_as_written(tmp_path):
    """The examples of `afterlook --help` run in order in a fresh folder (bash, venv on PATH), each exit 0."""
    tour = _tour()
    assert not tour.run_help_examples(tmp_path)
    assert (tmp_path / "new.json").is_file() and (tmp_path / "book.json").is_file()  # they did their work
