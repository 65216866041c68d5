"""No command writes over its own inputs, a casebook, a data table or a non-file (issue 11, item 1).

Every refusal must be exit 2 with one stderr line naming the clash, and the
file must be byte-identical afterwards. Paths are also tried through a
symbolic link, a ``..`` detour and a hard link, since each names the same file.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil

import pytest


def sha(path) -> str:
    return hashlib.sha256(open(path, "rb").read()).hexdigest()


@pytest.fixture
def files(demo_written, tmp_path, run_cli):
    """Copies of the demo files plus a casebook with one entry, all in tmp_path."""
    for name in ("train.csv", "cases.csv", "model.json"):
        shutil.copy(getattr(demo_written, name.split(".")[0]), tmp_path / name)
    code, out, err = run_cli("misses", tmp_path / "model.json", tmp_path / "cases.csv", "--json")
    assert code == 0, err
    worst = json.loads(out)["misses"][0]["case"]
    code, out, err = run_cli("casebook", "add", tmp_path / "book.json", "--model", tmp_path / "model.json",
                             "--cases", tmp_path / "cases.csv", "--case", worst, "--status", "open",
                             "--train", tmp_path / "train.csv")
    assert code == 0, err
    code, out, err = run_cli("casebook", "add", tmp_path / "book.json", "--model", tmp_path / "model.json",
                             "--cases", tmp_path / "cases.csv", "--case", worst, "--status", "needs-signal",
                             "--train", tmp_path / "train.csv")  # a second save leaves book.json.bak
    assert code == 0, err
    assert (tmp_path / "book.json.bak").exists()
    return tmp_path


def _refused(run_cli, argv, target, word=None):
    digest = sha(target)
    code, out, err = run_cli(*argv)
    lines = err.strip().splitlines()
    assert code == 2, (argv, code, err)
    assert len(lines) == 1, err
    assert lines[0].startswith("afterlook: error: ")
    if word:
        assert word in lines[0], lines[0]
    assert "Traceback" not in err
    assert sha(target) == digest
    return lines[0]


def _spellings(folder, name):
    """The same file named four ways: plain, through `..`, through a symlink, and a hard link."""
    target = folder / name
    sub = folder / "sub"
    sub.mkdir(exist_ok=True)
    link = folder / f"link-to-{name}"
    if not link.exists():
        link.symlink_to(target)
    hard = folder / f"hard-{name}"
    if not hard.exists():
        os.link(target, hard)
    return [target, sub / ".." / name, link, hard]


def test_every_command_refuses_to_write_over_its_own_input(files, run_cli):
    d = files
    derive = "--derive", "r=flow_m3h / motor_current_a"
    cases = {
        "fit onto its training table": (["fit", "{p}", "--out", "{p}"], "train.csv"),
        "fit onto its cases": (["fit", d / "train.csv", "--cases", "{p}", "--out", "{p}"], "cases.csv"),
        "score onto its data": (["score", d / "model.json", "{p}", "--out", "{p}"], "cases.csv"),
        "score onto its model": (["score", "{p}", d / "cases.csv", "--out", "{p}", "--force"], "model.json"),
        "try onto its cases": (["try", d / "model.json", "{p}", *derive, "--train", d / "train.csv",
                                "--out", "{p}"], "cases.csv"),
        "try onto its model, even with --force": (["try", "{p}", d / "cases.csv", *derive, "--train",
                                                   d / "train.csv", "--out", "{p}", "--force"], "model.json"),
        "report onto its book": (["casebook", "report", "{p}", "--out", "{p}", "--force"], "book.json"),
    }
    for what, (argv, name) in cases.items():
        for spelling in _spellings(d, name):
            filled = [spelling if a == "{p}" else a for a in argv]
            line = _refused(run_cli, filled, d / name)
            assert "input" in line, (what, line)


@pytest.mark.parametrize("target,word", [("cases.csv", "data table"), ("train.csv", "data table"),
                                         ("book.json", "casebook"), ("book.json.bak", "casebook")])
def test_outputs_never_replace_a_table_or_a_casebook_even_with_force(files, run_cli, target, word):
    d = files
    other = d / "other"
    other.mkdir()
    for name in ("train.csv", "cases.csv", "model.json"):
        shutil.copy(d / name, other / name)
    t = d / target
    for force in ([], ["--force"]):
        _refused(run_cli, ["fit", other / "train.csv", "--out", t, *force], t, word)
        _refused(run_cli, ["score", other / "model.json", other / "cases.csv", "--out", t, *force], t, word)
        _refused(run_cli, ["casebook", "report", d / "book.json", "--out", t, *force], t)


def test_a_report_never_replaces_a_model_and_a_fit_never_replaces_a_report(files, run_cli):
    d = files
    _refused(run_cli, ["casebook", "report", d / "book.json", "--out", d / "model.json", "--force"],
             d / "model.json", "model")
    code, out, err = run_cli("casebook", "report", d / "book.json", "--out", d / "report.md")
    assert code == 0, err
    _refused(run_cli, ["fit", d / "train.csv", "--out", d / "report.md", "--force"], d / "report.md", "report")
    # Replacing one's own report is a normal wish: --force allows it, its absence is a one-line refusal.
    _refused(run_cli, ["casebook", "report", d / "book.json", "--out", d / "report.md"], d / "report.md", "--force")
    code, out, err = run_cli("casebook", "report", d / "book.json", "--out", d / "report.md", "--force")
    assert code == 0, err


def test_rewriting_ones_own_model_or_scored_table_needs_force(files, run_cli):
    d = files
    new = d / "new.json"
    code, out, err = run_cli("fit", d / "train.csv", "--out", new)
    assert code == 0, err
    _refused(run_cli, ["fit", d / "train.csv", "--out", new], new, "--force")
    code, out, err = run_cli("fit", d / "train.csv", "--out", new, "--force", "--kind", "independent")
    assert code == 0, err
    assert json.loads(new.read_text())["format"] == "afterlook-model"
    scored = d / "scored.csv"
    code, out, err = run_cli("score", d / "model.json", d / "cases.csv", "--out", scored)
    assert code == 0, err
    _refused(run_cli, ["score", d / "model.json", d / "cases.csv", "--out", scored], scored, "--force")
    code, out, err = run_cli("score", d / "model.json", d / "cases.csv", "--out", scored, "--force")
    assert code == 0, err
    # an empty file holds nothing to lose (mktemp, touch)
    empty = d / "empty.json"
    empty.write_bytes(b"")
    code, out, err = run_cli("fit", d / "train.csv", "--out", empty)
    assert code == 0, err


def test_a_users_notes_are_never_replaced(files, run_cli):
    d = files
    notes = d / "notes.md"
    notes.write_text("my notes\n")
    _refused(run_cli, ["casebook", "report", d / "book.json", "--out", notes, "--force"], notes)
    _refused(run_cli, ["fit", d / "train.csv", "--out", notes, "--force"], notes)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs")
def test_out_onto_a_fifo_or_a_device_is_refused(files, run_cli):
    d = files
    fifo = d / "pipe.csv"
    os.mkfifo(fifo)
    for argv in (["score", d / "model.json", d / "cases.csv", "--out", fifo],
                 ["fit", d / "train.csv", "--out", fifo],
                 ["casebook", "report", d / "book.json", "--out", fifo]):
        code, out, err = run_cli(*argv)  # would block forever if the FIFO were opened
        assert code == 2 and "not a regular file" in err and len(err.strip().splitlines()) == 1, err
    code, out, err = run_cli("fit", d / "train.csv", "--out", "/dev/null")
    assert code == 2 and "not a regular file" in err, err


def test_demo_writes_only_into_an_empty_or_demo_made_folder(tmp_path, run_cli):
    user = tmp_path / "mine"
    user.mkdir()
    (user / "train.csv").write_text("id,a\n1,2\n")
    digest = sha(user / "train.csv")
    code, out, err = run_cli("demo", "--dir", user, "--no-tui", "--json")
    assert code == 2 and "train.csv" in err and len(err.strip().splitlines()) == 1, err
    assert sha(user / "train.csv") == digest
    (user / "train.csv").unlink()
    (user / "notes.txt").write_text("x")
    code, out, err = run_cli("demo", "--dir", user, "--no-tui", "--json")
    assert code == 2 and "not empty" in err, err
    fresh = tmp_path / "fresh"
    code, out, err = run_cli("demo", "--dir", fresh, "--no-tui", "--json")
    assert code == 0, err
    (fresh / "casebook.json").write_text("{}")  # a review's book beside the demo files stays
    code, out, err = run_cli("demo", "--dir", fresh, "--no-tui", "--json")  # demo-made: written again
    assert code == 0, err
    assert (fresh / "casebook.json").read_text() == "{}"
    afile = tmp_path / "plain"
    afile.write_text("x")
    code, out, err = run_cli("demo", "--dir", afile, "--no-tui", "--json")
    assert code == 2 and afile.read_text() == "x", err


def test_a_casebook_path_that_is_an_input_is_refused(files, run_cli):
    d = files
    for target in ("cases.csv", "model.json", "train.csv"):
        for spelling in _spellings(d, target):
            _refused(run_cli, ["casebook", "add", spelling, "--model", d / "model.json", "--cases", d / "cases.csv",
                               "--case", "x", "--status", "open", "--train", d / "train.csv"], d / target, "input")
            _refused(run_cli, ["review", d / "model.json", d / "cases.csv", "--train", d / "train.csv",
                               "--casebook", spelling, "--json"], d / target, "input")
