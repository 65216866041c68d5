"""Data from files reaches the terminal as printable plain text, never as control bytes or markup (issue 11).

A table whose ids, column names and context carry escape sequences, Rich
markup, brackets, quotes, keywords, non-ASCII letters and a bidi override is
taken through every command. The terminal output must hold no control
character but newline, every name must appear as written (``[/]`` and
``pressure [bar]`` intact), ``--json`` must keep the exact strings, and what
``suggest`` writes must be accepted by ``try``.
"""

from __future__ import annotations

import json
import unicodedata

import numpy as np
import pandas as pd
import pytest

from afterlook.core.printable import printable

COLUMNS = ["pressure [bar]", "class", "[/]", "e\x1b]0;T\x07", "None", "__x", "Durchfluß m³/h"]
IDS = {0: "[link=http://example.invalid]y[/link]", 1: "\x1b[2Jboom", 2: "[/]", 3: "名前 \u202e x",
       4: "[bold]b[/]", 5: "\x9b31m c1", 6: ":fire:"}
SITE = "\x1b]52;c;aGk=\x07 [red]r"


def control_characters(text: str) -> list[str]:
    """Every character a terminal would act on (newline aside): C0, DEL, C1 controls and bidi overrides."""
    return [ch for ch in text if ch != "\n" and (unicodedata.category(ch) == "Cc" or ch in "\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069")]


@pytest.fixture(scope="module")
def weird(tmp_path_factory):
    d = tmp_path_factory.mktemp("weird")
    rng = np.random.default_rng(3)
    n, m = 400, 60

    def frame(rows, broken=0):
        a = rng.normal(10, 1, rows)
        b = 2 * a + rng.normal(0, 0.3, rows)
        b[:broken] = 2 * a[:broken] + rng.choice([-2.5, 2.5], broken)
        data = {COLUMNS[0]: a, COLUMNS[1]: b}
        for c in COLUMNS[2:]:
            data[c] = rng.normal(5, 1, rows)
        return data

    train = pd.DataFrame({"id": [f"t{i}" for i in range(n)], **frame(n)})
    train.to_csv(d / "train.csv", index=False)
    ids = [IDS.get(i, f"c{i}") for i in range(m)]
    labels = np.zeros(m, int)
    labels[:8] = 1
    cases = pd.DataFrame({"id": ids, **frame(m, broken=8), "site": [SITE] * m, "label": labels})
    cases.to_csv(d / "cases.csv", index=False)
    return d


def _clean(code, out, err, expect=0):
    assert code == expect, err
    assert "Traceback" not in err and "internal error" not in err, err
    assert control_characters(out) == [], repr(out[:400])
    assert control_characters(err) == [], repr(err[:400])


def test_every_command_shows_data_printable_and_literal(weird, run_cli):
    d = weird
    code, out, err = run_cli("fit", d / "train.csv", "--out", d / "model.json", "--cases", d / "cases.csv",
                             "--kind", "independent")
    _clean(code, out, err)
    for c in COLUMNS:
        assert printable(c) in out  # the features line names each column as written
    code, out, err = run_cli("misses", d / "model.json", d / "cases.csv", "--json")
    assert code == 0
    missed = {m["case"] for m in json.loads(out)["misses"]} & set(IDS.values())  # exact strings in --json
    assert len(missed) >= 3, missed
    code, out, err = run_cli("misses", d / "model.json", d / "cases.csv")
    _clean(code, out, err)
    for case in missed:
        assert printable(case) in out, case  # brackets, colons and escapes shown as written
    assert "\\x1b]52;c;aGk=" in out and "[red]r" in out  # the context column
    for case in IDS.values():
        code, out, err = run_cli("explain", d / "model.json", d / "cases.csv", case)
        _clean(code, out, err)
        assert printable(case) in out
        assert "pressure [bar]" in out and "[/]" in out
    code, out, err = run_cli("explain", d / "model.json", d / "cases.csv", "\x1b[2Jno such case")
    _clean(code, out, err, expect=2)
    assert len(err.strip().splitlines()) == 1 and "\\x1b[2Jno such case" in err
    code, out, err = run_cli("score", d / "model.json", d / "cases.csv")
    _clean(code, out, err)
    code, out, err = run_cli("score", d / "model.json", d / "cases.csv", "--out", d / "scored.csv")
    _clean(code, out, err)
    assert list(pd.read_csv(d / "scored.csv")["id"][:7]) == [IDS[i] for i in range(7)]  # --out stays exact


def test_suggest_writes_expressions_that_try_accepts(weird, run_cli):
    d = weird
    code, out, err = run_cli("fit", d / "train.csv", "--out", d / "ind.json", "--cases", d / "cases.csv",
                             "--kind", "independent")
    assert code == 0, err
    code, out, err = run_cli("suggest", d / "ind.json", d / "cases.csv", "--train", d / "train.csv", "--top", "5")
    _clean(code, out, err)
    assert "`pressure [bar]`" in out or "`class`" in out
    code, out, err = run_cli("suggest", d / "ind.json", d / "cases.csv", "--train", d / "train.csv", "--top", "5",
                             "--json")
    assert code == 0, err
    found = json.loads(out)["candidates"]
    assert found
    for c in found:
        code, out, err = run_cli("try", d / "ind.json", d / "cases.csv", "--train", d / "train.csv",
                                 "--derive", f"{c['name']}={c['expression']}")
        _clean(code, out, err)


@pytest.mark.parametrize("name", ["class", "None", "True", "__x", "_y", "match", "log", "pressure [bar]",
                                  "Durchfluß", "a'b\"c", "[/]", "\x1b[31m", "__col0__"])
def test_quoted_names_read_back_as_the_same_column(name):
    from afterlook.core.expressions import parse, quote_name, unparse

    expr = parse(f"{quote_name(name)} / 2", [name])
    assert expr.columns == (name,)
    assert parse(unparse(expr), [name]).columns == (name,)


def test_casebook_commands_and_reports_show_notes_printable(weird, run_cli):
    d = weird
    code, out, err = run_cli("fit", d / "train.csv", "--out", d / "book-model.json", "--cases", d / "cases.csv",
                             "--kind", "independent")
    assert code == 0, err
    note = "bad \x1b]0;x\x07 [bold]n[/] \u202e"
    book = d / "book.json"
    code, out, err = run_cli("casebook", "add", book, "--model", d / "book-model.json", "--cases", d / "cases.csv",
                             "--case", IDS[1], "--status", "open", "--note", note, "--reviewer", "[/]\x1b[5m",
                             "--train", d / "train.csv")
    _clean(code, out, err)
    for argv in (["list", book], ["show", book, IDS[1]], ["report", book], ["report", book, "--format", "html"],
                 ["check", book, "--model", d / "book-model.json", "--cases", d / "cases.csv"]):
        code, out, err = run_cli("casebook", *argv)
        _clean(code, out, err, expect=code if code in (0, 1) else 0)
    code, out, err = run_cli("casebook", "show", book, IDS[1])
    assert "[bold]n[/]" in out and "\\x1b]0;x" in out
    code, out, err = run_cli("casebook", "show", book, IDS[1], "--json")
    assert json.loads(out)["note"] == note  # --json exact
    code, out, err = run_cli("casebook", "report", book, "--out", d / "report.html")
    assert code == 0, err
    assert control_characters((d / "report.html").read_text()) == []


@pytest.mark.asyncio
async def test_the_workbench_shows_weird_ids_and_names_without_crashing(weird, tmp_path):
    from textual.widgets import DataTable, Static

    from afterlook.analysis.fitting import fit
    from afterlook.store.tables import load_table
    from afterlook.tui import create_app

    model = fit(load_table(weird / "train.csv"), cases=load_table(weird / "cases.csv", require_labels=True),
                kind="independent")
    model.save(tmp_path / "m.json")
    app = create_app(tmp_path / "m.json", weird / "cases.csv", train_path=weird / "train.csv",
                     casebook=tmp_path / "book.json")
    async with app.run_test(size=(120, 40)) as pilot:
        for _ in range(400):  # bounded only so a broken app cannot hang the suite
            if app.selected_case is not None and app.evidence is not None:
                break
            await pilot.pause(0.05)
        assert app.selected_case is not None
        shown = []
        for table in app.workbench.query(DataTable):
            for row in range(table.row_count):
                shown += [getattr(c, "plain", str(c)) for c in table.get_row_at(row)]
            shown += [getattr(col.label, "plain", str(col.label)) for col in table.columns.values()]
        for widget in app.workbench.query(Static):
            shown.append(str(widget.render()))
        text = "\n".join(shown)
        assert control_characters(text) == [], repr([s for s in shown if control_characters(s)][:3])
        assert "[/]" in text or "\\x1b" in text
        app.notify("id \x1b[2J [/] done")  # a notification with data never parses markup
        await pilot.pause()
        await pilot.press("q")
