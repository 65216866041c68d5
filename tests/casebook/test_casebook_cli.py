"""`afterlook casebook ...` through the real console script, as a shell script would run it.

Outside references: the ``json`` module parses every ``--json`` document;
``hashlib`` checks that refused books are byte-identical.
"""

from __future__ import annotations

import hashlib
import json
import shutil
from html.parser import HTMLParser

import pytest

from afterlook.store.casebook_file import STATUSES


def sha(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture(scope="module")
def flow(demo, tmp_path_factory, run_cli, parse_json):
    """add (explained, with the finding) -> add (needs-signal) -> a re-fitted model from `try --out`."""
    folder = tmp_path_factory.mktemp("casebook_cli")
    book = folder / "book.json"
    new_model = folder / "model-with-feature.json"
    code, out, err = run_cli("casebook", "add", book, "--model", demo.model, "--cases", demo.cases,
                             "--case", demo.worst, "--status", "explained",
                             "--derive", f"{demo.name}={demo.expression}", "--train", demo.train,
                             "--note", "worn impeller", "--reviewer", "cli-test", "--json")
    assert code == 0, err
    added = parse_json(out)
    bearing = next(c for c, k in sorted(demo.kinds.items()) if k == "bearing_wear")
    code, out, err = run_cli("casebook", "add", book, "--model", demo.model, "--cases", demo.cases,
                             "--case", bearing, "--status", "needs-signal", "--reviewer", "cli-test")
    assert code == 0, err
    assert "added case" in out
    code, out, err = run_cli("try", demo.model, demo.cases, "--derive", f"{demo.name}={demo.expression}",
                             "--train", demo.train, "--out", new_model, "--json")
    assert code == 0, err
    return {"book": book, "new_model": new_model, "added": added, "bearing": bearing, "folder": folder}


def test_add_prints_the_entry(flow, demo):
    entry = flow["added"]
    for key in ("case", "status", "note", "reviewer", "created", "updated", "model", "derived_feature", "snapshot",
                "before", "after", "metrics", "evidence", "deciding_feature", "history"):
        assert key in entry
    assert entry["case"] == demo.worst and entry["status"] == "explained"
    assert entry["derived_feature"] == {"name": demo.name, "expression": demo.expression}
    assert entry["model"]["path"] == str(demo.model)
    keys = {"name", "value", "z", "percentile", "contribution", "conditional_z"}
    readings = {"reading", "order_reversed", "z_reading", "percentile_reading"}  # what explain adds
    assert keys <= set(entry["evidence"][0]) <= keys | readings


def test_list_and_show(flow, demo, run_cli, parse_json):
    code, out, err = run_cli("casebook", "list", flow["book"], "--json")
    assert code == 0, err
    listed = parse_json(out)
    assert [e["case"] for e in listed["entries"]] == sorted([demo.worst, flow["bearing"]])
    row = next(e for e in listed["entries"] if e["case"] == demo.worst)
    assert row["status"] == "explained" and row["deciding_feature"] == demo.name
    assert row["after"]["flagged"] is True and row["before"]["flagged"] is False

    code, out, err = run_cli("casebook", "list", flow["book"])
    assert code == 0, err
    assert demo.worst in out and flow["bearing"] in out and "needs-signal" in out

    code, out, err = run_cli("casebook", "show", flow["book"], demo.worst, "--json")
    assert code == 0, err
    on_disk = {e["case"]: e for e in json.loads(flow["book"].read_text())["entries"]}  # json module
    assert parse_json(out) == on_disk[demo.worst]
    code, out, err = run_cli("casebook", "show", flow["book"], demo.worst)
    assert code == 0, err
    assert demo.name in out and "worn impeller" in out


def test_report_md_and_html(flow, demo, run_cli, parse_json):
    code, out, err = run_cli("casebook", "report", flow["book"])
    assert code == 0, err
    assert demo.worst in out and flow["bearing"] in out
    html_path = flow["folder"] / "report.html"
    code, out, err = run_cli("casebook", "report", flow["book"], "--out", html_path, "--json")
    assert code == 0, err
    doc = parse_json(out)
    assert doc["format"] == "html" and doc["entries"] == 2 and doc["out"] == str(html_path)

    class Tags(HTMLParser):  # html.parser: independent parser
        def __init__(self):
            super().__init__()
            self.tags = []

        def handle_starttag(self, tag, attrs):
            self.tags.append(tag)

    p = Tags()
    p.feed(html_path.read_text(encoding="utf-8"))
    p.close()
    # a histogram per entry, and the pair picture of the explained entry's two-column derived feature
    assert p.tags.count("svg") == 3 and p.tags.count("section") == 2


def test_check_passes_with_the_refitted_model_and_fails_with_the_original(flow, demo, run_cli, parse_json):
    code, out, err = run_cli("casebook", "check", flow["book"], "--model", flow["new_model"], "--cases", demo.cases,
                             "--json")
    assert code == 0, err
    doc = parse_json(out)
    assert doc["ok"] is True and doc["regressed"] == [] and doc["entries"] == 2

    code, out, err = run_cli("casebook", "check", flow["book"], "--model", demo.model, "--cases", demo.cases, "--json")
    assert code == 1, err
    doc = parse_json(out)
    assert doc["ok"] is False and doc["regressed"] == [demo.worst] and doc["entries"] == 2

    code, out, err = run_cli("casebook", "check", flow["book"], "--model", demo.model, "--cases", demo.cases)
    assert code == 1
    assert "regressed" in out and demo.worst in out.splitlines()[-1]
    assert "Traceback" not in err


# --------------------------------------------------------------------------
# bad input: exit 2, one line, nothing written
# --------------------------------------------------------------------------


def test_bad_status_lists_the_valid_ones_and_writes_nothing(demo, tmp_path, run_cli, one_line_error):
    book = tmp_path / "book.json"
    code, out, err = run_cli("casebook", "add", book, "--model", demo.model, "--cases", demo.cases,
                             "--case", demo.worst, "--status", "fixed")
    line = one_line_error(code, err)
    assert all(s in line for s in STATUSES)
    assert out == "" and not book.exists()


def test_unknown_case_is_refused(demo, tmp_path, run_cli, one_line_error):
    book = tmp_path / "book.json"
    code, out, err = run_cli("casebook", "add", book, "--model", demo.model, "--cases", demo.cases,
                             "--case", "PS-99/never", "--status", "open")
    assert "PS-99/never" in one_line_error(code, err)
    assert not book.exists()


@pytest.mark.parametrize("where", ["missing-folder", "file-as-folder"])
def test_unwritable_book_path_is_refused(demo, tmp_path, run_cli, one_line_error, where):
    if where == "missing-folder":
        book = tmp_path / "no" / "such" / "book.json"
    else:
        (tmp_path / "plain.txt").write_text("x")
        book = tmp_path / "plain.txt" / "book.json"
    code, out, err = run_cli("casebook", "add", book, "--model", demo.model, "--cases", demo.cases,
                             "--case", demo.worst, "--status", "open")
    one_line_error(code, err)
    assert out == ""


def test_missing_book_and_unknown_entry_for_read_commands(flow, demo, tmp_path, run_cli, one_line_error):
    for action in (["list"], ["show", "x"], ["report"], ["check", "--model", demo.model, "--cases", demo.cases]):
        code, out, err = run_cli("casebook", action[0], tmp_path / "none.json", *action[1:])
        assert "not found" in one_line_error(code, err)
    code, out, err = run_cli("casebook", "show", flow["book"], "PS-99/never")
    assert "PS-99/never" in one_line_error(code, err)
    code, out, err = run_cli("casebook")
    one_line_error(code, err)


BAD_BOOKS = {
    "garbage": b"this is not json at all \x00\xff",
    "truncated": b'{"entries": [{"case": "a", "status": "open"}], "format": "afterlook-case',
    "wrong-format": b'{"entries": [], "format": "afterlook-model", "version": 1}\n',
    "future-version": b'{"entries": [], "format": "afterlook-casebook", "version": 7}\n',
}


@pytest.mark.parametrize("kind", sorted(BAD_BOOKS))
def test_corrupt_books_are_refused_by_every_command_and_left_byte_identical(demo, tmp_path, run_cli,
                                                                           one_line_error, kind):
    book = tmp_path / "book.json"
    book.write_bytes(BAD_BOOKS[kind])
    digest = sha(book)
    commands = [
        ["add", book, "--model", demo.model, "--cases", demo.cases, "--case", demo.worst, "--status", "open"],
        ["list", book], ["show", book, "a"], ["report", book, "--out", tmp_path / "r.md"],
        ["check", book, "--model", demo.model, "--cases", demo.cases],
    ]
    # every command on a truncated book; the refusal itself is shared, so add and list suffice for the rest
    for args in commands if kind == "truncated" else commands[:2]:
        code, out, err = run_cli("casebook", *args)
        line = one_line_error(code, err)
        assert str(book) in line
        if kind == "future-version":
            assert "version 7" in line
        assert sha(book) == digest
    assert sorted(p.name for p in tmp_path.iterdir()) == ["book.json"]


def test_report_never_overwrites_a_casebook_or_a_model(flow, demo, tmp_path, run_cli, one_line_error):
    book = tmp_path / "book.json"
    shutil.copy(flow["book"], book)
    other = tmp_path / "other.json"
    shutil.copy(flow["book"], other)
    model = tmp_path / "model.json"
    shutil.copy(demo.model, model)
    for target in (book, other, model):
        digest = sha(target)
        code, out, err = run_cli("casebook", "report", book, "--out", target)
        one_line_error(code, err)
        assert sha(target) == digest


def test_a_status_change_keeps_and_shows_the_earlier_review(flow, demo, run_cli, parse_json):
    """Re-reviewing a case without the earlier feature says so; show and both reports list the earlier review."""
    book = flow["folder"] / "history-book.json"
    shutil.copy(flow["book"], book)
    code, out, err = run_cli("casebook", "add", book, "--model", demo.model, "--cases", demo.cases,
                             "--case", demo.worst, "--status", "needs-signal", "--train", demo.train,
                             "--note", "second look", "--reviewer", "cli-test-2")
    assert code == 0, err
    said = " ".join(out.split())
    assert "updated (was explained)" in said
    assert "kept in the case's history" in said
    assert f"its derived feature {demo.name} = {demo.expression} is not part of this review" in said

    stored = {e["case"]: e for e in json.loads(book.read_text())["entries"]}[demo.worst]  # json module
    (old,) = stored["history"]
    assert old["status"] == "explained" and old["derived_feature"] == {"name": demo.name,
                                                                       "expression": demo.expression}
    assert old["evidence"] and old["after"]["flagged"] is True

    code, out, err = run_cli("casebook", "show", book, demo.worst)
    assert code == 0, err
    said = " ".join(out.split())
    assert "Earlier reviews (oldest first)" in said and "cli-test: explained" in said and demo.name in said
    code, out, err = run_cli("casebook", "report", book)
    assert code == 0, err
    assert "### Earlier reviews (oldest first)" in out and "worn impeller" in out
    html = flow["folder"] / "history.html"
    code, out, err = run_cli("casebook", "report", book, "--format", "html", "--out", html)
    assert code == 0, err
    assert '<table class="history">' in html.read_text(encoding="utf-8")


def test_show_of_a_mistyped_case_suggests_the_closest(flow, demo, run_cli, one_line_error):
    typo = demo.worst[:-1] + ("1" if demo.worst[-1] != "1" else "2")
    code, out, err = run_cli("casebook", "show", flow["book"], typo)
    line = one_line_error(code, err)
    assert f"did you mean {demo.worst!r}" in line
