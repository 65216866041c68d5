"""A command line that names a command builds that command's parser alone, and it is the same parser.

Reference: the whole parser (every command, as ``afterlook --help`` shows them): argparse's own
help text and argument actions of each command, compared between the two.
"""

from __future__ import annotations

import argparse

import pytest

from afterlook.cli import main as cli


def _commands(parser: argparse.ArgumentParser) -> dict[str, argparse.ArgumentParser]:
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return dict(sub.choices)


def _shape(parser: argparse.ArgumentParser):
    """Every action of a parser and, for nested commands, of theirs."""
    out = []
    for a in parser._actions:
        if isinstance(a, argparse._SubParsersAction):
            out.append(("sub", tuple((name, tuple(_shape(p))) for name, p in a.choices.items())))
        else:
            out.append((tuple(a.option_strings), a.dest, repr(a.default), a.nargs, repr(a.type), a.choices,
                        a.required, a.help, a.metavar, type(a).__name__))
    return out


FULL = _commands(cli.build_parser())


def test_every_command_has_a_known_owner():
    assert set(FULL) == set(cli._OWN) | set(cli._OWNER)


@pytest.mark.parametrize("name", sorted(FULL))
def test_the_parser_of_one_command_is_the_whole_parsers(name):
    alone = _commands(cli.build_parser(only=name))
    assert list(alone) == [name]
    assert alone[name].format_help() == FULL[name].format_help()
    assert _shape(alone[name]) == _shape(FULL[name])
    assert alone[name].prog == FULL[name].prog


def test_main_builds_one_command_only_when_the_line_names_one(monkeypatch, tmp_path, capsys):
    asked = []
    real = cli.build_parser
    monkeypatch.setattr(cli, "build_parser", lambda only=None: asked.append(only) or real(only))
    missing = str(tmp_path / "none.json")
    assert cli.main(["misses", missing, missing]) == cli.EXIT_BAD_INPUT  # the command's own parser ran
    assert cli.main(["nosuch"]) == cli.EXIT_BAD_INPUT  # not a command: the whole parser says so
    with pytest.raises(SystemExit):
        cli.main(["--version"])
    assert asked == ["misses", None, None]
    assert "invalid choice: 'nosuch'" in capsys.readouterr().err
