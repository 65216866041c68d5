"""Output to a pipe or a file: tables keep their numbers whole.

With no terminal to ask, Rich lays text out 80 columns wide unless the COLUMNS
environment variable says otherwise (Rich's documented console-width rule). At 80
the explain table cut its z column to "-0.…"; a pipe now gets 120 columns, and
COLUMNS still wins when it is set.
"""

from __future__ import annotations

import re


def _explain(run_script, demo_written, env):
    code, out, err = run_script("explain", demo_written.model, demo_written.cases, "PS-01/2026-05-21T17:00",
                                env=env)
    assert code == 0, err
    return out


def test_a_pipe_gets_120_columns_and_whole_numbers(run_script, demo_written):
    out = _explain(run_script, demo_written, {"COLUMNS": ""})
    widths = [len(line) for line in out.splitlines()]
    assert max(widths) <= 120 and max(widths) > 100
    row = next(line for line in out.splitlines() if line.lstrip().startswith("hydraulic_power"))
    assert re.search(r"[-+]\d+\.\d\d\s", row), row  # the z value whole, not cut to "-0.…"
    assert "…" not in row


def test_columns_in_the_environment_still_wins(run_script, demo_written):
    out = _explain(run_script, demo_written, {"COLUMNS": "90"})
    assert max(len(line) for line in out.splitlines()) <= 90
