"""What is printed after the workbench closes (run_workbench), with the App's run replaced by a stand-in.

The stand-in plays a session in which one case was saved; the casebook file
it writes is read back by the real file layer.
"""

from __future__ import annotations

import io
import shlex

from afterlook.store.casebook_file import Casebook
from afterlook.tui import create_app, run_workbench
from afterlook.tui.closing import closing_lines


def _play(app, book, case):
    def run():
        b = Casebook.open(book)
        b.upsert({"case": case, "status": "open", "note": "", "reviewer": "t", "updated": "2026-01-01T00:00:00Z"})
        b.save()
        app.saved_this_session.append(case)
        return 0
    return run


def test_a_saved_case_and_the_next_commands_are_printed(demo, tmp_path):
    book = tmp_path / "my book.json"  # a space: the printed commands must still paste into a shell
    app = create_app(demo.model, demo.cases, train_path=demo.train, casebook=book, auto_candidates=False)
    app.run = _play(app, book, "PS-01/x")
    out = io.StringIO()
    assert run_workbench(app, out=out) == 0
    text = out.getvalue()
    assert "1 case(s) saved to" in text and "PS-01/x" in text and "the book holds 1 case(s)" in text
    list_line = next(line for line in text.splitlines() if "casebook list" in line)
    assert shlex.split(list_line)[-1] == str(book)  # the shell reads back the path as written
    assert "earlier session" not in text  # not a demo: a user's own book is never pointed at for deletion


def test_the_demo_says_when_it_reuses_a_book(demo, tmp_path):
    book = tmp_path / "casebook.json"
    b = Casebook.open(book)
    b.upsert({"case": "old", "status": "open"})
    b.save()
    app = create_app(demo.model, demo.cases, train_path=demo.train, casebook=book, auto_candidates=False)
    app.run = lambda: 0
    out = io.StringIO()
    run_workbench(app, demo=True, out=out)
    text = out.getvalue()
    assert "nothing saved this session" in text
    assert "already held 1 case(s) from an earlier session" in text


def test_nothing_saved_and_no_book():
    lines = closing_lines([], "/nowhere/casebook.json", 0, model_path="m.json", cases_path="c.csv")
    assert lines[0] == "workbench closed: nothing saved (no casebook written)"
    assert "  afterlook suggest m.json c.csv" in lines
    assert not any("casebook list" in line for line in lines)
