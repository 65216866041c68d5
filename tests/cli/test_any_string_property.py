"""Any string as a case id, a column name or a note survives every command (issue 11, item 9).

Property: for an arbitrary string (printable or not: controls, escapes, markup,
quotes, surrogate-free Unicode), used as an id, a column name and a note,
``fit``, ``misses``, ``explain``, ``score`` and ``casebook add/list/show/report``
either work or refuse the input in one line (exit 2), never crash (exit 3)
and never put a control character on the terminal.
"""

from __future__ import annotations

import unicodedata

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

BIDI = set("\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069")


def control_characters(text: str) -> list[str]:
    return [ch for ch in text if ch != "\n" and (unicodedata.category(ch) == "Cc" or ch in BIDI)]


# Strings a file can carry (no lone surrogates: they cannot be written as UTF-8), biased to the nasty ones.
NASTY = st.sampled_from(["\x1b[2J", "\x1b]0;title\x07", "\x9b", "[/]", "[bold]", "[link=http://x]", ":fire:",
                         "\u202e", "`", "'", '"', "\\", "class", "None", "__x", " ", "\t", "\r", "\n", "é", "名",
                         ",", ";", "=", "\x00", "\x7f", "\x85"])
ANY_TEXT = st.lists(NASTY | st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=4),
                    min_size=1, max_size=4).map("".join)


def _table(name: str, case: str, rows: int, rng) -> pd.DataFrame:
    a = rng.normal(10, 1, rows)
    frame = pd.DataFrame({"id": [f"r{i}" for i in range(rows)], name: a, "base_b": 2 * a + rng.normal(0, 0.3, rows),
                          "label": [1 if i < 3 else 0 for i in range(rows)]})
    frame.loc[0, "id"] = case
    return frame


def _check(code, out, err):
    assert code in (0, 1, 2), (code, err)
    assert "Traceback" not in err and "internal error" not in err, err
    if code == 2:
        lines = err.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("afterlook: error: "), err
    assert control_characters(out) == [], repr(out[:300])
    assert control_characters(err) == [], repr(err[:300])


@settings(max_examples=40, deadline=None, suppress_health_check=list(HealthCheck), derandomize=True)
@given(text=ANY_TEXT)
@example(text="\x1b]0;pwned\x07[/]")
@example(text="pressure [bar]")
@example(text="class")
def test_any_string_as_id_column_and_note(run_cli, tmp_path_factory, text):
    d = tmp_path_factory.mktemp("anystring")
    rng = np.random.default_rng(0)
    name = text if text != "id" and text != "label" and text != "base_b" else text + "_"
    train = _table(name, "t0", 200, rng).drop(columns="label")
    cases = _table(name, text, 40, rng)
    try:
        train.to_csv(d / "train.csv", index=False)
        cases.to_csv(d / "cases.csv", index=False)
    except (UnicodeEncodeError, ValueError):
        return  # pandas cannot write it: not a file a user could hold
    results = [run_cli("fit", d / "train.csv", "--out", d / "model.json", "--cases", d / "cases.csv",
                       "--kind", "independent")]
    _check(*results[-1])
    if results[-1][0] != 0:
        return  # refused in one line (e.g. an empty or duplicate column name): nothing more to run
    for argv in (["misses", d / "model.json", d / "cases.csv"],
                 ["explain", d / "model.json", d / "cases.csv", text],
                 ["score", d / "model.json", d / "cases.csv"],
                 ["casebook", "add", d / "book.json", "--model", d / "model.json", "--cases", d / "cases.csv",
                  "--case", text, "--status", "open", "--note", text, "--reviewer", text,
                  "--train", d / "train.csv"],
                 ["casebook", "list", d / "book.json"],
                 ["casebook", "show", d / "book.json", text],
                 ["casebook", "report", d / "book.json"]):
        _check(*run_cli(*argv))


def test_a_parquet_list_column_is_context_text(demo_written, tmp_path, run_cli):
    cases = pd.read_csv(demo_written.cases)
    cases["tags"] = [[1, 2]] * len(cases)
    path = tmp_path / "cases.parquet"
    cases.to_parquet(path)
    case = str(cases["id"].iloc[0])
    code, out, err = run_cli("misses", demo_written.model, path)
    _check(code, out, err)
    assert code == 0
    code, out, err = run_cli("explain", demo_written.model, path, case)
    assert code == 0 and "tags: [1, 2]" in out, err
    code, out, err = run_cli("casebook", "add", tmp_path / "book.json", "--model", demo_written.model,
                             "--cases", path, "--case", case, "--status", "open", "--train", demo_written.train)
    assert code == 0, err
