"""Context cells looked up a column at a time read what pandas' own positional lookup reads.

Outside reference: ``Series.iloc[i]`` (pandas), cell by cell, the way
:func:`afterlook.analysis.session.case_context` read them before it looked
each column up once for a whole list of rows.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from afterlook.analysis.session import case_context, case_contexts, context_text
from afterlook.store.tables import table_from_frame


def _frame() -> pd.DataFrame:
    n = 7
    stamps = pd.to_datetime(["2026-05-21 17:00", None, "2026-01-01", "2026-02-03 04:05:06", "2026-03-01",
                             "2026-04-01", "2026-06-30 23:59"], format="mixed")
    return pd.DataFrame({
        "id": [f"c{i}" for i in range(n)],
        "label": [0, 1, 0, 1, 0, 0, 1],
        "reading": np.linspace(1.0, 2.0, n),
        "text": ["a", None, "b, c", "", "ü", "x" * 40, "[bold]y[/]"],
        "text_dtype": pd.array(["p", None, "q", "r", "s", "t", "u"], dtype="string"),
        "arrow_text": pd.array(["p", "q", None, "r", "s", "t", "u"], dtype="string[pyarrow]"),
        "when": stamps,
        "when_utc": stamps.tz_localize("UTC"),
        "flag": [True, False, True, True, False, False, True],
        "maybe": pd.array([True, None, False, True, None, False, True], dtype="boolean"),
        "kind": pd.Categorical(["a", "b", None, "a", "b", "a", None]),
        "cells": pd.Series([np.array([1, 2]), [3], None, np.array([]), [4.5], np.array(["x"]), [None]],
                           dtype=object),
        "raw": [b"ab", b"\xc3\xbc", None, b"", b"x", b"y", b"z"],
    })


def test_every_row_and_column_reads_what_iloc_reads():
    table = table_from_frame(_frame(), id_col="id", label_col="label")
    assert {"text", "when", "flag", "maybe", "kind", "cells", "raw"} <= set(table.context_columns)
    rows = np.array([6, 0, 3, 3, 1, 5, 2, 4])  # any order, repeats allowed
    expected = [{col: context_text(table.frame[col].iloc[i]) for col in table.context_columns} for i in rows]
    assert case_contexts(table, rows) == expected
    assert case_contexts(table, list(rows)) == expected
    assert [case_context(table, int(i)) for i in rows] == expected
    assert case_contexts(table, np.array([], dtype=int)) == []


@pytest.mark.parametrize("i", [1, 2])
def test_missing_cells_are_none_and_dates_read_as_pandas_prints_them(i):
    table = table_from_frame(_frame(), id_col="id", label_col="label")
    context = case_contexts(table, [i])[0]
    if i == 1:
        assert context["text"] is None and context["when"] is None and context["maybe"] is None
    else:
        assert context["when"] == str(pd.Timestamp("2026-01-01"))  # "2026-01-01 00:00:00", not numpy's form
        assert context["kind"] is None
