"""The top-level --help names every environment variable the code reads, and only those."""

from __future__ import annotations

import re
from pathlib import Path

import afterlook
from afterlook.cli.main import ENVIRONMENT, build_parser

SRC = Path(afterlook.__file__).resolve().parent


def test_help_lists_exactly_the_variables_the_code_reads():
    read = set()
    for path in SRC.rglob("*.py"):
        read |= set(re.findall(r"\b(AFTERLOOK_[A-Z_]+)\b", path.read_text(encoding="utf-8")))
    shown = set(re.findall(r"^  (AFTERLOOK_[A-Z_]+)\s", ENVIRONMENT, flags=re.M))
    assert shown == read
    assert ENVIRONMENT in build_parser().format_help()
    assert max(len(line) for line in ENVIRONMENT.splitlines()) <= 79  # an 80-column terminal
