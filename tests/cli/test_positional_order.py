"""A command's positionals may be written before or after its options, as a shell user writes them.

Reference: POSIX utility argument syntax and GNU getopt's default ordering, which let
operands and options mix (from memory); Python's ``ArgumentParser.parse_intermixed_args``
documents the same for argparse. The demo's blocked-strainer miss is the case id.
"""

from __future__ import annotations

import json

import pytest

import afterlook


@pytest.fixture(scope="module")
def a_miss(demo_written, demo_scenario):
    from afterlook.analysis.session import Session

    session = Session(afterlook.load_model(demo_written.model), afterlook.load_table(demo_written.cases))
    missed = [m.case for m in afterlook.misses(session).misses]
    return next(c for c in missed if demo_scenario.kinds.get(c) == "blocked_strainer")


def test_a_case_id_after_the_options_is_the_same_search(demo_written, a_miss, run_cli):
    d = demo_written
    before = run_cli("suggest", d.model, d.cases, a_miss, "--train", d.train, "--top", "3", "--json")
    after = run_cli("suggest", d.model, d.cases, "--train", d.train, "--top", "3", a_miss, "--json")
    assert before[0] == after[0] == 0, (before[2], after[2])
    assert json.loads(before[1]) == json.loads(after[1])
    assert json.loads(after[1])["cases"] == [a_miss]


def test_explain_takes_its_case_after_an_option(demo_written, a_miss, run_cli):
    d = demo_written
    code, out, err = run_cli("explain", d.model, d.cases, "--json", a_miss)
    assert code == 0, err
    assert json.loads(out)["case"] == a_miss


def test_a_stray_word_is_still_one_line_and_exit_2(demo_written, run_cli):
    d = demo_written
    code, out, err = run_cli("misses", d.model, d.cases, "--json", "surplus")
    assert code == 2 and out == ""
    assert err.strip().count("\n") == 0 and "surplus" in err


def test_a_command_with_sub_commands_still_parses(tmp_path, run_cli):
    code, out, err = run_cli("casebook", "list", tmp_path / "none.json")
    assert code == 2 and "none.json" in err and err.strip().count("\n") == 0
