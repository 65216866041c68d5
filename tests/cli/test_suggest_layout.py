"""The suggest table at every terminal width: nothing cut, no name broken, the verdict always shown.

Drawn on the demo's blocked-strainer miss (its unit-relative candidates have the longest expressions
the demo produces). Layout rules of our own; no outside reference applies.
"""

from __future__ import annotations

import io

import pytest
from rich.console import Console

import afterlook
from afterlook.analysis.discovery import suggest
from afterlook.analysis.session import Session
from afterlook.analysis.wording import candidate_verdict
from afterlook.cli.discovery_commands import _TOKEN_CAP, CandidateRows, suggest_table


@pytest.fixture(scope="module")
def result(demo_written, demo_scenario):
    model = afterlook.load_model(demo_written.model)
    session = Session(model, afterlook.load_table(demo_written.cases), afterlook.load_table(demo_written.train))
    missed = [m.case for m in afterlook.misses(session).misses]
    case = next(c for c in missed if demo_scenario.kinds.get(c) == "blocked_strainer")
    return suggest(session, None, case_ids=[case], top=6)


def _draw(renderable, width: int) -> list[str]:
    out = io.StringIO()
    Console(file=out, width=width, color_system=None, highlight=False, markup=False).print(renderable)
    return [line.rstrip() for line in out.getvalue().splitlines()]


@pytest.mark.parametrize("width", [64, 72, 80, 90, 100, 104, 105, 110, 120, 160])
def test_every_width_keeps_numbers_verdicts_and_names_whole(result, width):
    rows = CandidateRows(result)
    lines = _draw(rows, width)
    assert lines and all(len(line) <= width for line in lines)
    text = "\n".join(lines)
    for cells, _style, expression, _words in rows.rows:
        for cell in cells[1:]:
            assert cell in text, (width, cell)
        for piece in expression.split():
            if len(piece) <= _TOKEN_CAP:
                assert any(piece in line for line in lines), (width, piece)  # never split across lines
    for c in result.candidates:
        assert candidate_verdict(c) in text
    one_table = width >= rows.wide_width()
    assert ("expression" in lines[0]) == one_table  # the table's header names the column; stacked has none


def test_the_stacked_layout_puts_each_candidates_numbers_on_one_line(result):
    rows = CandidateRows(result)
    width = rows.wide_width() - 1
    lines = _draw(rows, width)
    for cells, *_ in rows.rows:
        line = next(line for line in lines if line.startswith(cells[0] + " ") and cells[-1] in line)
        positions = [line.index(cell) for cell in cells[1:]]
        assert positions == sorted(positions)  # in the header's order, on the candidate's own line


def test_the_whole_suggest_output_fits_an_80_column_terminal(result):
    lines = _draw(suggest_table(result), 80)
    assert all(len(line) <= 80 for line in lines)
    assert "holds up" in "\n".join(lines)
