"""Tests for afterlook.store.tables: reading, writing and streaming tables.

Outside references used here: ``pandas.testing.assert_frame_equal`` (CSV and
Parquet load alike, write/read round trips), ``hashlib.sha256`` (file
hashes), ``numpy.testing`` with ``pandas.read_csv`` / ``pyarrow.parquet``
(values read by afterlook equal those read by the libraries directly).
"""

from __future__ import annotations

import gzip
import hashlib
import os
import stat

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from afterlook.core.errors import AfterlookError
from afterlook.store import table_write
from afterlook.store.table_stream import iter_numeric_chunks
from afterlook.store.tables import (
    LABEL_VALUES,
    load_table,
    sha256_file,
    table_from_frame,
    write_table,
)

# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------


def write_text(path, text: str) -> str:
    path.write_text(text, encoding="utf-8")
    return str(path)


def raises(fn, *needles: str) -> AfterlookError:
    """Call fn, expect an AfterlookError with a one-line message holding all needles."""
    with pytest.raises(AfterlookError) as info:
        fn()
    err = info.value
    assert "\n" not in err.message
    assert err.exit_code == 2
    for needle in needles:
        assert needle in err.message, (needle, err.message)
    return err


def pump_frame(n: int = 6) -> pd.DataFrame:
    rng = np.random.default_rng(7)
    return pd.DataFrame(
        {
            "id": [f"pump-{i:02d}" for i in range(n)],
            "flow": rng.normal(50, 5, n).round(3),
            "motor_current": rng.normal(12, 1, n),
            "starts": rng.integers(0, 9, n),
            "site": ["north", "south"] * (n // 2),
            "label": ["normal", "anomaly"] * (n // 2),
        }
    )


# --------------------------------------------------------------------------
# LABEL_VALUES and labels
# --------------------------------------------------------------------------


def test_label_values_spellings():
    assert {k for k, v in LABEL_VALUES.items() if v} == {"1", "1.0", "true", "anomaly", "yes"}
    assert {k for k, v in LABEL_VALUES.items() if not v} == {"0", "0.0", "false", "normal", "no"}
    with pytest.raises(TypeError):
        LABEL_VALUES["maybe"] = True  # read-only


@pytest.mark.parametrize(
    "values, expected",
    [
        (["1", "0", "1"], [True, False, True]),
        (["1.0", "0.0", "0.0"], [True, False, False]),
        (["true", "False", "TRUE"], [True, False, True]),
        ([" Anomaly ", "NORMAL", "normal"], [True, False, False]),
        (["yes", "No", " YES"], [True, False, True]),
        (["anomaly", "0", "yes"], [True, False, True]),  # mixed spellings
    ],
)
def test_label_spellings_any_case(tmp_path, values, expected):
    rows = "\n".join(f"{i},{v}" for i, v in enumerate(values))
    t = load_table(write_text(tmp_path / "t.csv", f"x,label\n{rows}\n"))
    assert t.label_col == "label"
    assert t.labels.dtype == bool
    assert t.labels.tolist() == expected
    assert t.numeric_columns == ["x"]


def test_label_col_given(tmp_path):
    p = write_text(tmp_path / "t.csv", "x,failed\n1,yes\n2,no\n")
    t = load_table(p, label_col="failed")
    assert t.label_col == "failed" and t.labels.tolist() == [True, False]
    assert "failed" not in t.numeric_columns and "failed" not in t.context_columns


def test_label_col_given_but_missing(tmp_path):
    p = write_text(tmp_path / "t.csv", "x,failed\n1,yes\n")
    raises(lambda: load_table(p, label_col="fail"), p, "'fail'", "did you mean 'failed'")


def test_no_label_column_is_fine_unless_required(tmp_path):
    p = write_text(tmp_path / "t.csv", "x,y\n1,2\n")
    t = load_table(p)
    assert t.labels is None and t.label_col is None
    raises(lambda: load_table(p, require_labels=True), p, "no label column")


def test_bad_label_values(tmp_path):
    p = write_text(tmp_path / "t.csv", "x,label\n1,normal\n2,broken\n3,maybe\n4,2\n5,bad\n6,normal\n")
    err = raises(lambda: load_table(p), p, "'label'", "anomaly/normal", "yes/no", "1/0")
    shown = [v for v in ("'broken'", "'maybe'", "'2'", "'bad'") if v in err.message]
    assert len(shown) == 3  # at most three examples
    assert "4 value(s)" in err.message


def test_missing_label_value_is_error(tmp_path):
    p = write_text(tmp_path / "t.csv", "x,label\n1,normal\n2,\n3,anomaly\n")
    raises(lambda: load_table(p), p, "missing", "1 value(s)")


def test_numeric_labels_other_than_0_1_rejected(tmp_path):
    p = write_text(tmp_path / "t.csv", "x,label\n1,1\n2,0\n3,2\n")
    raises(lambda: load_table(p), p, "2")


def test_label_column_parquet_bool_and_float(tmp_path):
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0], "label": [True, False, True], "lab2": [1.0, 0.0, 0.0]})
    p = str(tmp_path / "t.parquet")
    frame.to_parquet(p)
    assert load_table(p).labels.tolist() == [True, False, True]
    assert load_table(p, label_col="lab2").labels.tolist() == [True, False, False]


def test_default_label_column_case_insensitive(tmp_path):
    p = write_text(tmp_path / "t.csv", "x,Label\n1,anomaly\n2,normal\n")
    t = load_table(p)
    assert t.label_col == "Label" and t.labels.tolist() == [True, False]


# --------------------------------------------------------------------------
# ids
# --------------------------------------------------------------------------


def test_ids_from_id_column(tmp_path):
    p = write_text(tmp_path / "t.csv", "id,x\npump-a,1\npump-b,2\n")
    t = load_table(p)
    assert t.id_col == "id"
    assert t.ids.tolist() == ["pump-a", "pump-b"]
    assert t.numeric_columns == ["x"]


def test_ids_numeric_become_strings(tmp_path):
    p = write_text(tmp_path / "t.csv", "id,x\n17,1\n18,2\n")
    t = load_table(p)
    assert t.ids.tolist() == ["17", "18"]
    assert "id" not in t.numeric_columns


def test_integral_float_ids_lose_point_zero(tmp_path):
    p = str(tmp_path / "t.parquet")
    pd.DataFrame({"id": [3.0, 4.0], "x": [1.0, 2.0]}).to_parquet(p)
    assert load_table(p).ids.tolist() == ["3", "4"]


def test_ids_row_numbers_when_no_id_column(tmp_path):
    p = write_text(tmp_path / "t.csv", "x\n1\n2\n3\n")
    t = load_table(p)
    assert t.id_col is None
    assert t.ids.tolist() == ["0", "1", "2"]
    assert all(isinstance(i, str) for i in t.ids)


def test_id_col_given(tmp_path):
    p = write_text(tmp_path / "t.csv", "unit,x\nu1,1\nu2,2\n")
    t = load_table(p, id_col="unit")
    assert t.id_col == "unit" and t.ids.tolist() == ["u1", "u2"]
    assert t.context_columns == []


def test_id_col_given_but_missing(tmp_path):
    p = write_text(tmp_path / "t.csv", "unit,x\nu1,1\n")
    raises(lambda: load_table(p, id_col="units"), p, "no id column 'units'", "did you mean 'unit'")


def test_default_id_column_case_insensitive(tmp_path):
    p = write_text(tmp_path / "t.csv", "ID,x\na,1\nb,2\n")
    assert load_table(p).id_col == "ID"


def test_missing_id_value_is_error(tmp_path):
    p = write_text(tmp_path / "t.csv", "id,x\na,1\n,2\nc,3\n")
    raises(lambda: load_table(p), p, "'id'", "missing", "row 1")


def test_duplicate_ids_warn_with_count(tmp_path):
    p = write_text(tmp_path / "t.csv", "id,x\na,1\na,2\nb,3\nb,4\nb,5\nc,6\n")
    t = load_table(p)
    dup = [w for w in t.warnings if "duplicate ids" in w]
    assert len(dup) == 1 and dup[0].startswith("3 duplicate ids") and p in dup[0]
    assert t.row_index("b") == 2  # first row of that id


def test_duplicate_ids_error_when_unique_required(tmp_path):
    p = write_text(tmp_path / "t.csv", "id,x\na,1\nb,2\nb,3\n")
    raises(lambda: load_table(p, require_unique_ids=True), p, "'b'", "unique")


def test_same_column_for_id_and_label_is_error(tmp_path):
    p = write_text(tmp_path / "t.csv", "id,x\n1,1\n0,2\n")
    raises(lambda: load_table(p, label_col="id"), p, "both")


# --------------------------------------------------------------------------
# numeric and context columns
# --------------------------------------------------------------------------


def test_numeric_and_context_columns(tmp_path):
    p = write_text(
        tmp_path / "t.csv",
        "id,flow,starts,site,running,label\np1,1.5,3,north,true,normal\np2,2.5,4,south,false,anomaly\n",
    )
    t = load_table(p)
    assert t.numeric_columns == ["flow", "starts"]
    # decision: true/false columns are context (not modelled), with a warning
    assert t.context_columns == ["site", "running"]
    assert any("'running'" in w and "true/false" in w for w in t.warnings)
    assert t.frame.shape == (2, 6)
    assert list(t.frame.index) == [0, 1]


def test_numeric_returns_float64_matrix(tmp_path):
    p = write_text(tmp_path / "t.csv", "a,b,c,flag\n1,2.5,x,true\n3,,y,false\n")
    t = load_table(p)
    m = t.numeric(["b", "a"])
    assert m.dtype == np.float64 and m.shape == (2, 2)
    np.testing.assert_array_equal(m, [[2.5, 1.0], [np.nan, 3.0]])
    assert t.numeric("a").shape == (2, 1)
    # a true/false column can still be asked for by name, as 0/1
    np.testing.assert_array_equal(t.numeric(["flag"])[:, 0], [1.0, 0.0])


def test_numeric_unknown_column(tmp_path):
    p = write_text(tmp_path / "t.csv", "flow,b\n1,2\n")
    t = load_table(p)
    raises(lambda: t.numeric(["flw"]), "'flw'", p, "did you mean 'flow'")


def test_numeric_text_column_refused(tmp_path):
    p = write_text(tmp_path / "t.csv", "a,site\n1,north\n")
    t = load_table(p)
    raises(lambda: t.numeric(["site"]), "'site'", "not numeric")


def test_no_numeric_columns(tmp_path):
    p = write_text(tmp_path / "t.csv", "id,site,label\na,north,normal\n")
    raises(lambda: load_table(p), p, "no numeric columns", "'site'")


def test_semicolon_file_hint(tmp_path):
    p = write_text(tmp_path / "t.csv", "a;b\n1;2\n")
    raises(lambda: load_table(p), p, "no numeric columns", "';'")


def test_unnamed_index_column_not_modelled(tmp_path):
    p = str(tmp_path / "t.csv")
    pd.DataFrame({"x": [1.0, 2.0]}).to_csv(p)  # writes the index as an unnamed first column
    t = load_table(p)
    assert t.numeric_columns == ["x"]
    assert any("no name" in w for w in t.warnings)


def test_mostly_numeric_text_column_warns(tmp_path):
    rows = "\n".join(f"{i},{i * 1.5}" for i in range(30)) + "\n30,?\n"
    t = load_table(write_text(tmp_path / "t.csv", "a,b\n" + rows))
    assert t.context_columns == ["b"]
    assert any("'b'" in w and "mostly numbers" in w and "'?'" in w for w in t.warnings)


@pytest.mark.parametrize("bad_first, warned", [(100, True), (101, False)])
def test_mostly_numeric_text_threshold_with_the_bad_values_first(bad_first, warned):
    # The rule: a text column warns as "mostly numbers" when at least 90% of its first 1,000 values parse.
    # With the failures first, 100 of 1,000 is exactly 90% parsed (warns), 101 is not (the early stop
    # after the first 101 values must agree with parsing all of them).
    b = ["n/a-" + str(i) for i in range(bad_first)] + [str(i * 0.5) for i in range(1000 - bad_first)]
    t = table_from_frame(pd.DataFrame({"a": np.arange(1000.0), "b": b}))
    assert t.context_columns == ["b"]
    assert any("'b'" in w and "mostly numbers" in w for w in t.warnings) is warned


def test_numbers_stored_as_text_found_whatever_the_first_value():
    t = table_from_frame(pd.DataFrame({"a": [1.0, 2.0, 3.0], "b": ["1.5", "2", "3e2"], "c": ["x", "2", "3"]}))
    assert any("'b'" in w and "numbers stored as text" in w for w in t.warnings)
    assert not any("'c'" in w and "numbers stored as text" in w for w in t.warnings)


def test_finite_columns_whatever_their_sum():
    # finite_columns is read from each column's sum (NaN and infinities carry into it); a column of
    # finite values whose sum overflows, and one whose +inf and -inf would cancel into NaN, must still
    # be judged value by value. Reference: numpy.isfinite on every value.
    big = [1e308, 1e308, -1e308, 1.0]
    frame = pd.DataFrame({"big": big, "both": [np.inf, -np.inf, 1.0, 2.0], "nan": [1.0, np.nan, 2.0, 3.0],
                          "ints": pd.array([1, 2, None, 4], dtype="Int64"), "fine": [0.5, 1.5, 2.5, 3.5]})
    t = table_from_frame(frame)
    expected = {c for c in frame.columns if np.isfinite(frame[c].to_numpy(dtype=float, na_value=np.nan)).all()}
    assert t.finite_columns == expected == {"big", "fine"}
    assert any("missing or infinite" in w and "'both': 2" in w for w in t.warnings)


def test_nan_and_inf_warn_with_row_count(tmp_path):
    p = write_text(tmp_path / "t.csv", "a,b,c\n1,2,x\n,3,y\n4,inf,z\nnan,-inf,w\n5,6,v\n")
    t = load_table(p)
    warn = [w for w in t.warnings if "missing or infinite" in w]
    assert len(warn) == 1 and warn[0].startswith("3 rows") and p in warn[0]
    assert "'a': 2" in warn[0] and "'b': 2" in warn[0]
    assert np.isinf(t.numeric(["b"])[2, 0])


def test_clean_table_has_no_warnings(tmp_path):
    p = str(tmp_path / "t.csv")
    write_table(pump_frame(), p)
    assert load_table(p).warnings == []


# --------------------------------------------------------------------------
# row_index
# --------------------------------------------------------------------------


def test_row_index(tmp_path):
    p = str(tmp_path / "t.csv")
    write_table(pump_frame(), p)
    t = load_table(p)
    assert t.row_index("pump-03") == 3
    raises(lambda: t.row_index("pump-3"), "unknown case id 'pump-3'", p, "did you mean")
    raises(lambda: t.row_index("PUMP-03 "), "did you mean 'pump-03'")
    err = raises(lambda: t.row_index("zzzzzzzz"), "unknown case id")
    assert "did you mean" not in err.message


def test_row_index_with_row_numbers(tmp_path):
    t = load_table(write_text(tmp_path / "t.csv", "x\n1\n2\n3\n"))
    assert t.row_index("2") == 2
    raises(lambda: t.row_index("9"), "unknown case id '9'")


# --------------------------------------------------------------------------
# formats
# --------------------------------------------------------------------------


def test_csv_and_parquet_load_identically(tmp_path):
    """pandas.testing.assert_frame_equal as reference."""
    frame = pump_frame(8)
    frame["when"] = pd.date_range("2024-01-01", periods=8, freq="h")
    frame.loc[2, "flow"] = np.nan
    csv, parquet, tsv = str(tmp_path / "t.csv"), str(tmp_path / "t.parquet"), str(tmp_path / "t.tsv")
    write_table(frame, csv)
    write_table(frame, parquet)
    write_table(frame, tsv)
    a, b, c = load_table(csv), load_table(parquet), load_table(tsv)
    # Decision: date/time text in a CSV stays text exactly as written (it is
    # context, never modelled); a typed Parquet timestamp stays a timestamp.
    assert a.frame["when"].tolist() == c.frame["when"].tolist()
    assert pd.to_datetime(a.frame["when"]).tolist() == b.frame["when"].tolist()
    pd.testing.assert_frame_equal(a.frame.drop(columns="when"), b.frame.drop(columns="when"))
    pd.testing.assert_frame_equal(a.frame, c.frame)
    for other in (b, c):
        assert a.ids.tolist() == other.ids.tolist()
        assert a.labels.tolist() == other.labels.tolist()
        assert a.numeric_columns == other.numeric_columns
        assert a.context_columns == other.context_columns
        assert a.warnings == [w.replace(other.path, a.path) for w in other.warnings]
        np.testing.assert_array_equal(a.numeric(a.numeric_columns), other.numeric(a.numeric_columns))


def test_values_match_pandas_reader(tmp_path):
    """pandas.read_csv as reference for the numbers read from a CSV."""
    rng = np.random.default_rng(1)
    frame = pd.DataFrame(rng.normal(size=(500, 4)), columns=list("abcd"))
    p = str(tmp_path / "t.csv")
    write_table(frame, p)
    ref = pd.read_csv(p)
    np.testing.assert_array_equal(load_table(p).numeric(list("abcd")), ref.to_numpy())
    np.testing.assert_array_equal(ref.to_numpy(), frame.to_numpy())  # written exactly


def test_parquet_with_saved_index(tmp_path):
    named = pd.DataFrame({"x": [1.0, 2.0]}, index=pd.Index(["u1", "u2"], name="id"))
    p1 = str(tmp_path / "named.parquet")
    named.to_parquet(p1)
    t = load_table(p1)
    assert t.id_col == "id" and t.ids.tolist() == ["u1", "u2"]
    unnamed = pd.DataFrame({"x": [1.0, 2.0]}, index=[10, 20])
    p2 = str(tmp_path / "unnamed.parquet")
    unnamed.to_parquet(p2)
    t = load_table(p2)
    assert list(t.frame.columns) == ["x"] and t.ids.tolist() == ["0", "1"]


def test_tsv_and_gzip_and_unknown_extension(tmp_path):
    tsv = write_text(tmp_path / "t.tsv", "id\tx\na\t1\n")
    assert load_table(tsv).numeric_columns == ["x"]
    gz = tmp_path / "t.csv.gz"
    gz.write_bytes(gzip.compress(b"id,x\na,1\nb,2\n"))
    assert load_table(str(gz)).ids.tolist() == ["a", "b"]
    txt = write_text(tmp_path / "t.txt", "id,x\na,1\n")
    assert load_table(txt).numeric_columns == ["x"]
    tab = write_text(tmp_path / "t.dat", "id\tx\na\t1\n")
    assert load_table(tab).numeric_columns == ["x"]


def test_parquet_content_wins_over_name(tmp_path):
    p = str(tmp_path / "really_parquet.csv")
    pd.DataFrame({"x": [1.0]}).to_parquet(p)
    assert load_table(p).numeric_columns == ["x"]


def test_quoted_newline_in_context_column(tmp_path):
    p = write_text(tmp_path / "t.csv", 'x,note\n1,"two\nlines"\n2,plain\n')
    t = load_table(p)
    assert t.frame["note"].tolist() == ["two\nlines", "plain"]


def test_bom_is_ignored(tmp_path):
    p = tmp_path / "t.csv"
    p.write_bytes(b"\xef\xbb\xbfid,x\na,1\n")
    assert load_table(str(p)).id_col == "id"


def test_late_float_in_int_column(tmp_path):
    """A column whose first block is all integers but later has a float still loads."""
    rows = "\n".join(str(i) for i in range(200_000)) + "\n2.5\n"
    p = write_text(tmp_path / "t.csv", "x\n" + rows)
    t = load_table(p)
    assert t.numeric(["x"])[-1, 0] == 2.5 and len(t) == 200_001


# --------------------------------------------------------------------------
# bad inputs: one clear line naming the file
# --------------------------------------------------------------------------


def test_missing_file(tmp_path):
    p = str(tmp_path / "nope.csv")
    raises(lambda: load_table(p), p, "no such file")


def test_directory(tmp_path):
    raises(lambda: load_table(str(tmp_path)), str(tmp_path), "folder")


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0, reason="root can read any file")
def test_unreadable_file(tmp_path):
    p = write_text(tmp_path / "t.csv", "x\n1\n")
    os.chmod(p, 0)
    try:
        raises(lambda: load_table(p), p, "permission denied")
    finally:
        os.chmod(p, stat.S_IRUSR | stat.S_IWUSR)


def test_unreadable_file_simulated(tmp_path, monkeypatch):
    """Same check where tests run as root: opening the file is refused."""
    p = write_text(tmp_path / "t.csv", "x\n1\n")
    real_open = open

    def refusing_open(file, *args, **kwargs):
        if os.fspath(file) == p:
            raise PermissionError(13, "Permission denied", p)
        return real_open(file, *args, **kwargs)

    monkeypatch.setattr("builtins.open", refusing_open)
    raises(lambda: load_table(p), p, "permission denied")
    raises(lambda: sha256_file(p), p, "permission denied")


def test_empty_file(tmp_path):
    p = write_text(tmp_path / "t.csv", "")
    raises(lambda: load_table(p), p, "empty")
    q = str(tmp_path / "t.parquet")
    open(q, "wb").close()
    raises(lambda: load_table(q), q, "empty")


def test_blank_lines_only(tmp_path):
    p = write_text(tmp_path / "t.csv", "\n\n")
    raises(lambda: load_table(p), p)


def test_header_only_csv(tmp_path):
    p = write_text(tmp_path / "t.csv", "id,x,label\n")
    raises(lambda: load_table(p), p, "header but no rows")


def test_header_only_parquet(tmp_path):
    p = str(tmp_path / "t.parquet")
    pd.DataFrame({"x": pd.Series([], dtype=float)}).to_parquet(p)
    raises(lambda: load_table(p), p, "no rows")


def test_binary_garbage(tmp_path):
    data = np.random.default_rng(3).integers(0, 256, 4096, dtype=np.uint8).tobytes()
    for ext in (".csv", ".parquet", ".bin"):
        p = tmp_path / f"junk{ext}"
        p.write_bytes(data)
        raises(lambda: load_table(str(p)), str(p))


def test_not_utf8(tmp_path):
    p = tmp_path / "t.csv"
    p.write_bytes("x,site\n1,Süd\n".encode("latin-1"))
    raises(lambda: load_table(str(p)), str(p), "UTF-8")


def test_csv_named_parquet(tmp_path):
    p = write_text(tmp_path / "t.parquet", "x\n1\n")
    raises(lambda: load_table(p), p, "not one")


def test_truncated_parquet(tmp_path):
    good = tmp_path / "good.parquet"
    pd.DataFrame({"x": np.arange(1000.0), "y": np.arange(1000.0)}).to_parquet(good)
    data = good.read_bytes()
    for cut in (len(data) // 2, len(data) - 3, 6):
        p = tmp_path / f"cut{cut}.parquet"
        p.write_bytes(data[:cut])
        raises(lambda: load_table(str(p)), str(p), "Parquet")
        raises(lambda: iter_numeric_chunks(str(p), ["x"]), str(p), "Parquet")


def test_damaged_parquet_middle(tmp_path):
    good = tmp_path / "good.parquet"
    pd.DataFrame({"x": np.arange(1000.0)}).to_parquet(good)
    data = bytearray(good.read_bytes())
    data[8:-8] = bytes(len(data) - 16)  # keep header and footer magic, wipe the rest
    p = tmp_path / "wiped.parquet"
    p.write_bytes(bytes(data))
    raises(lambda: load_table(str(p)), str(p))


def test_ragged_csv(tmp_path):
    p = write_text(tmp_path / "t.csv", "a,b\n1,2\n3,4,5\n")
    raises(lambda: load_table(p), p, "CSV")


def test_duplicate_column_names_csv(tmp_path):
    p = write_text(tmp_path / "t.csv", "a,b,a,c,c\n1,2,3,4,5\n")
    raises(lambda: load_table(p), p, "duplicate column names", "'a'", "'c'")


def test_duplicate_column_names_parquet(tmp_path):
    p = str(tmp_path / "t.parquet")
    table = pa.Table.from_arrays([pa.array([1.0]), pa.array([2.0])], names=["x", "x"])
    pq.write_table(table, p)
    raises(lambda: load_table(p), p, "duplicate column names", "'x'")


def test_path_type_errors(tmp_path):
    raises(lambda: load_table(""), "empty path")
    raises(lambda: load_table(42), "not a file path")


# --------------------------------------------------------------------------
# hypothesis: any bytes either load or raise AfterlookError
# --------------------------------------------------------------------------


_MAGIC = b"PAR1"


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    data=st.one_of(
        st.binary(max_size=600),
        st.binary(max_size=600).map(lambda b: _MAGIC + b),
        st.binary(max_size=600).map(lambda b: _MAGIC + b + _MAGIC),
        st.text(alphabet=st.sampled_from(list("ab1,.\n\"-e9 \tnay")), max_size=200).map(str.encode),
    ),
    ext=st.sampled_from([".csv", ".parquet", ".tsv", ".txt"]),
)
def test_random_bytes_load_or_clear_error(tmp_path, data, ext):
    p = tmp_path / f"random{ext}"
    p.write_bytes(data)
    try:
        t = load_table(str(p))
    except AfterlookError as err:
        assert "\n" not in err.message and err.message
    else:
        assert len(t) > 0 and t.numeric_columns
    try:
        for chunk in iter_numeric_chunks(str(p), ["a"], chunk_rows=3):
            assert chunk.dtype == np.float64
    except AfterlookError as err:
        assert "\n" not in err.message


# --------------------------------------------------------------------------
# sha256_file
# --------------------------------------------------------------------------


def test_sha256_file(tmp_path):
    """hashlib.sha256 as reference."""
    data = os.urandom(300_000)
    p = tmp_path / "blob.bin"
    p.write_bytes(data)
    assert sha256_file(str(p)) == hashlib.sha256(data).hexdigest()
    e = tmp_path / "empty.csv"
    e.write_bytes(b"")
    assert sha256_file(e) == hashlib.sha256(b"").hexdigest()
    raises(lambda: sha256_file(str(tmp_path / "nope")), "no such file")
    raises(lambda: sha256_file(str(tmp_path)), "folder")


# --------------------------------------------------------------------------
# write_table
# --------------------------------------------------------------------------


@pytest.mark.parametrize("ext", [".csv", ".tsv", ".parquet", ".pq"])
def test_write_round_trip(tmp_path, ext):
    """pandas.testing.assert_frame_equal as reference."""
    frame = pump_frame()
    frame.index = range(100, 106)  # the index is not written
    p = str(tmp_path / f"out{ext}")
    write_table(frame, p)
    back = load_table(p).frame
    pd.testing.assert_frame_equal(back, frame.reset_index(drop=True), check_dtype=False)
    assert [f for f in os.listdir(tmp_path) if f.endswith(".tmp")] == []


def test_write_replaces_and_keeps_mode(tmp_path):
    p = str(tmp_path / "out.csv")
    write_table(pd.DataFrame({"x": [1]}), p)
    os.chmod(p, 0o640)
    write_table(pd.DataFrame({"x": [2, 3]}), p)
    assert load_table(p).numeric(["x"])[:, 0].tolist() == [2.0, 3.0]
    assert stat.S_IMODE(os.stat(p).st_mode) == 0o640


def test_write_new_file_mode_follows_umask(tmp_path):
    p = str(tmp_path / "out.parquet")
    old = os.umask(0o022)
    try:
        write_table(pd.DataFrame({"x": [1.0]}), p)
    finally:
        os.umask(old)
    assert stat.S_IMODE(os.stat(p).st_mode) == 0o644


def test_write_csv_mixed_object_column_falls_back(tmp_path):
    frame = pd.DataFrame({"x": [1.0, 2.0], "note": ["a", 3]})
    p = str(tmp_path / "out.csv")
    write_table(frame, p)
    assert load_table(p).frame["note"].tolist() == ["a", "3"]
    q = str(tmp_path / "out.parquet")
    raises(lambda: write_table(frame, q), q, "'note'")


def test_write_errors(tmp_path):
    frame = pd.DataFrame({"x": [1.0]})
    missing = str(tmp_path / "no_such_folder" / "out.csv")
    raises(lambda: write_table(frame, missing), missing, "does not exist")
    raises(lambda: write_table(frame, str(tmp_path)), "folder")
    xlsx = str(tmp_path / "out.xlsx")
    raises(lambda: write_table(frame, xlsx), xlsx, "unknown extension")
    dup = pd.DataFrame([[1, 2]], columns=["a", "a"])
    raises(lambda: write_table(dup, str(tmp_path / "d.csv")), "duplicate column names")
    raises(lambda: write_table([1, 2], str(tmp_path / "l.csv")), "DataFrame")


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0, reason="root can write anywhere")
def test_write_read_only_folder(tmp_path):
    folder = tmp_path / "ro"
    folder.mkdir()
    os.chmod(folder, stat.S_IRUSR | stat.S_IXUSR)
    try:
        p = str(folder / "out.csv")
        raises(lambda: write_table(pd.DataFrame({"x": [1]}), p), p, "permission denied")
    finally:
        os.chmod(folder, stat.S_IRWXU)


def test_write_permission_denied_simulated(tmp_path, monkeypatch):
    def refuse(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    import afterlook.store.atomic as atomic

    real_open = os.open

    def refuse_temp(path, *args, **kwargs):  # only the temp file's creation is refused
        return refuse() if str(path).endswith(".tmp") else real_open(path, *args, **kwargs)

    monkeypatch.setattr(atomic.os, "open", refuse_temp)
    p = str(tmp_path / "out.csv")
    raises(lambda: write_table(pd.DataFrame({"x": [1]}), p), p, "permission denied")


def test_write_failure_leaves_old_file_and_no_temp(tmp_path, monkeypatch):
    p = str(tmp_path / "out.parquet")
    write_table(pd.DataFrame({"x": [1.0]}), p)
    before = open(p, "rb").read()

    def disk_full(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(table_write.pq, "write_table", disk_full)
    raises(lambda: write_table(pd.DataFrame({"x": [2.0]}), p), p, "No space left")
    assert open(p, "rb").read() == before
    assert sorted(os.listdir(tmp_path)) == ["out.parquet"]


# --------------------------------------------------------------------------
# iter_numeric_chunks
# --------------------------------------------------------------------------


@pytest.mark.parametrize("ext", [".csv", ".parquet"])
def test_chunks_match_full_load(tmp_path, ext):
    """Values from load_table (pyarrow + pandas) as reference for the streamed chunks."""
    rng = np.random.default_rng(5)
    frame = pd.DataFrame(rng.normal(size=(10_007, 3)), columns=["a", "b", "c"])
    frame["n"] = rng.integers(0, 100, len(frame))
    frame["site"] = "north"
    frame.loc[17, "b"] = np.nan
    p = str(tmp_path / f"t{ext}")
    if ext == ".parquet":
        frame.to_parquet(p, row_group_size=999)  # row groups that do not line up with chunks
    else:
        write_table(frame, p)
    chunks = list(iter_numeric_chunks(p, ["c", "a", "n", "b"], chunk_rows=1000))
    assert [len(c) for c in chunks] == [1000] * 10 + [7]
    assert all(c.dtype == np.float64 and c.shape[1] == 4 for c in chunks)
    np.testing.assert_array_equal(np.vstack(chunks), load_table(p).numeric(["c", "a", "n", "b"]))


def test_chunks_big_default_chunk(tmp_path):
    p = str(tmp_path / "t.csv")
    write_table(pd.DataFrame({"x": np.arange(5.0)}), p)
    chunks = list(iter_numeric_chunks(p, "x"))
    assert len(chunks) == 1 and chunks[0].shape == (5, 1)


def test_chunks_gzip_csv(tmp_path):
    p = tmp_path / "t.csv.gz"
    p.write_bytes(gzip.compress(b"x,y\n1,2\n3,\n"))
    out = np.vstack(list(iter_numeric_chunks(str(p), ["y", "x"])))
    np.testing.assert_array_equal(out, [[2.0, 1.0], [np.nan, 3.0]])


def test_chunks_errors(tmp_path):
    p = write_text(tmp_path / "t.csv", "x,site\n1,north\n2,oops\n")
    raises(lambda: iter_numeric_chunks(p, ["nope"]), p, "'nope'")
    raises(lambda: list(iter_numeric_chunks(p, ["site"])), p, "'site'", "not a number", "'north'")
    raises(lambda: iter_numeric_chunks(p, []), p, "no columns")
    raises(lambda: iter_numeric_chunks(p, ["x", "x"]), p, "repeat")
    raises(lambda: iter_numeric_chunks(p, ["x"], chunk_rows=0), "chunk size")
    raises(lambda: iter_numeric_chunks(str(tmp_path / "missing.csv"), ["x"]), "no such file")
    raises(lambda: iter_numeric_chunks(str(tmp_path), ["x"]), "folder")
    header_only = write_text(tmp_path / "h.csv", "x,y\n")
    raises(lambda: list(iter_numeric_chunks(header_only, ["x"])), header_only, "no rows")
    dup = write_text(tmp_path / "d.csv", "x,x\n1,2\n")
    raises(lambda: iter_numeric_chunks(dup, ["x"]), dup, "duplicate column names")
    q = str(tmp_path / "t.parquet")
    pd.DataFrame({"x": [1.0], "site": ["north"]}).to_parquet(q)
    raises(lambda: iter_numeric_chunks(q, ["site"]), q, "'site'", "not numeric")
    raises(lambda: iter_numeric_chunks(q, ["y"]), q, "'y'")


def test_chunks_parquet_int_and_bool_columns(tmp_path):
    q = str(tmp_path / "t.parquet")
    pd.DataFrame({"i": pd.array([1, None, 3], dtype="Int64"), "b": [True, False, True]}).to_parquet(q)
    out = np.vstack(list(iter_numeric_chunks(q, ["i", "b"], chunk_rows=2)))
    np.testing.assert_array_equal(out, [[1.0, 1.0], [np.nan, 0.0], [3.0, 1.0]])


def test_random_bytes_without_nul_are_called_binary_and_never_echoed(tmp_path):
    # Random bytes (seeded) with every NUL removed: the message must be the
    # plain "binary file" line, with no raw bytes of the file in it.
    rng = np.random.default_rng(5)
    data = bytes(b for b in rng.integers(0, 256, size=600, dtype=np.uint8).tolist() if b != 0)
    p = tmp_path / "junk.csv"
    p.write_bytes(data)
    with pytest.raises(AfterlookError) as info:
        load_table(str(p))
    assert "binary" in info.value.message
    assert all(ch.isprintable() for ch in info.value.message)
