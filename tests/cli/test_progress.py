"""The progress display: on a terminal only, never with --json, never on stdout, never for a fast run.

The CLI runs in process with its captured streams made to say they are (or
are not) terminals; the display's delay is set to 0 (shown at once) or an
hour (never shown) instead of waiting on a clock.
"""

from __future__ import annotations

import argparse
import io
import json

import pytest

import afterlook_cli_runner
from afterlook.cli import progress


class _Stream(io.StringIO):
    def __init__(self, tty: bool):
        super().__init__()
        self.tty = tty

    def isatty(self) -> bool:
        return self.tty


@pytest.mark.parametrize("stdout_tty, stderr_tty, as_json, shown", [
    (True, True, False, True),
    (False, True, False, False),  # stdout piped: `afterlook ... | less`
    (True, False, False, False),  # stderr to a file
    (False, False, False, False),
    (True, True, True, False),  # --json on a terminal
])
def test_the_on_off_rule(monkeypatch, stdout_tty, stderr_tty, as_json, shown):
    monkeypatch.setattr("sys.stdout", _Stream(stdout_tty))
    monkeypatch.setattr("sys.stderr", _Stream(stderr_tty))
    assert progress.wanted(argparse.Namespace(json=as_json)) is shown


@pytest.fixture
def terminal(monkeypatch):
    """The in-process runner's captured streams say they are terminals."""
    monkeypatch.setattr(afterlook_cli_runner._Captured, "isatty", lambda self: True)


@pytest.fixture
def at_once(monkeypatch):
    monkeypatch.setattr(progress, "SHOW_AFTER", 0.0)


def _scored_args(demo_written, tmp_path):
    return ("score", demo_written.model, demo_written.cases, "--out", tmp_path / "s.csv", "--engine", "chunked",
            "--chunk-rows", "500")


def test_on_a_terminal_the_display_goes_to_stderr_and_stdout_is_untouched(demo_written, tmp_path, run_cli,
                                                                           terminal, at_once):
    code, out, err = run_cli(*_scored_args(demo_written, tmp_path))
    assert code == 0, err
    assert "scoring" in err  # the display's line, drawn on stderr
    assert out == f"wrote {tmp_path / 's.csv'}: 2400 rows, 18 flagged (threshold -125.31)\n"


def test_piped_there_is_no_display(demo_written, tmp_path, run_cli, at_once):
    code, out, err = run_cli(*_scored_args(demo_written, tmp_path))
    assert code == 0
    assert err == "" and "\x1b" not in out


def test_json_on_a_terminal_has_no_display(demo_written, tmp_path, run_cli, terminal, at_once):
    code, out, err = run_cli(*_scored_args(demo_written, tmp_path), "--json")
    assert code == 0
    assert json.loads(out)["n_rows"] == 2400
    assert err == ""


def test_a_run_shorter_than_the_delay_shows_nothing(demo_written, tmp_path, run_cli, terminal, monkeypatch):
    monkeypatch.setattr(progress, "SHOW_AFTER", 3600.0)
    code, out, err = run_cli(*_scored_args(demo_written, tmp_path))
    assert code == 0
    assert err == "" and "\x1b" not in out


def test_suggest_shows_the_stage_of_its_search(demo_written, run_cli, terminal, at_once):
    code, out, err = run_cli("suggest", demo_written.model, demo_written.cases, "--train", demo_written.train,
                             "--top", "2", "--sample", "2000")
    assert code == 0, err
    assert "searching" in err
    # Only the command's own (styled) output on stdout: none of the display's lines or cursor moves.
    assert "searching" not in out and "\x1b[?25l" not in out and "\x1b[2K" not in out and "\x1b[1A" not in out


def test_reporters_update_the_display(monkeypatch, at_once):
    monkeypatch.setattr("sys.stdout", _Stream(True))
    monkeypatch.setattr("sys.stderr", _Stream(True))
    args = argparse.Namespace(json=False)
    with progress.rows_progress(args, "reading") as rows:
        rows.total(1000)
        rows(250, 1)
        task = rows.display.progress.tasks[0]
        assert (task.completed, task.total, task.fields["detail"]) == (250, 1000, "250 rows, 1 chunk")
        assert rows.display.shown
    with progress.stage_progress(args, "start") as stage:
        stage("screening candidates", 0.15)
        task = stage.display.progress.tasks[0]
        assert (task.description, task.completed) == ("screening candidates", 0.15)
    off = argparse.Namespace(json=True)
    with progress.rows_progress(off, "reading") as rows:
        rows(1, 1)  # a reporter that does nothing
        assert rows.display is None


def test_a_streamed_fit_reports_its_chunks(demo_scenario, tmp_path, run_cli, terminal, at_once):
    train = tmp_path / "train.csv"
    demo_scenario.train.to_csv(train, index=False)
    code, out, err = run_cli("fit", train, "--out", tmp_path / "m.json", "--engine", "chunked",
                             "--chunk-rows", "1000", "--threshold", "rate:0.01")
    assert code == 0, err
    assert "reading training rows" in err
    assert "reading training rows" not in out and "fitted on" in out


@pytest.mark.parametrize("argv, line", [
    (["shape", "{train}", "--columns", "hours_since_service"], "searching transforms"),
    (["fit", "{train}", "--out", "{tmp}/m.json", "--threshold", "rate:0.01"], "reading and fitting"),
])
def test_commands_without_a_count_say_what_they_are_doing(demo_written, tmp_path, run_cli, terminal, at_once,
                                                         argv, line):
    argv = [a.replace("{train}", str(demo_written.train)).replace("{tmp}", str(tmp_path)) for a in argv]
    code, out, err = run_cli(*argv)
    assert code == 0, err
    assert line in err and line not in out
