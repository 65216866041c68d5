"""Extreme readings are flagged, unscored anomalies never read as an all-clear, warnings stay one line (issue 11).

Items 4, 6 and 7: a finite but absurd reading overflows to a log-density of
minus infinity and is flagged (only missing values are unscored); ``misses``
says how many anomalies were flagged, missed and not scored; Python's own
warnings never reach stderr.
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest


def _edit_cases(src, dst, edits):
    rows = list(csv.reader(open(src, newline="")))
    head = rows[0]
    for row_index, column, value in edits:
        rows[row_index][head.index(column)] = value
    with open(dst, "w", newline="") as fh:
        csv.writer(fh).writerows(rows)
    return rows


def _only_afterlook_lines(err):
    lines = err.strip().splitlines()
    assert all(line.startswith("afterlook: ") for line in lines), err
    return lines


def test_an_overflowing_reading_is_flagged_with_the_reason(demo_written, tmp_path, run_cli):
    cases = tmp_path / "cases.csv"
    rows = _edit_cases(demo_written.cases, cases, [(1, "motor_current_a", "-4.5e205"), (2, "motor_current_a", "1e300"),
                                                   (3, "motor_current_a", "")])
    extreme, missing = rows[1][0], rows[3][0]
    code, out, err = run_cli("score", demo_written.model, cases, "--json")
    assert code == 0, err
    doc = json.loads(out)
    by_case = {r["case"]: r for r in doc["rows"]}
    assert by_case[extreme] == {"case": extreme, "log_density": None, "flagged": True, "overflow": True}
    assert by_case[missing]["flagged"] is False and "overflow" not in by_case[missing]
    assert doc["n_overflow"] == 2 and doc["n_unscored"] == 1
    lines = _only_afterlook_lines(err)
    assert any("overflow" in line for line in lines)
    code, out, err = run_cli("explain", demo_written.model, cases, extreme, "--json")
    assert code == 0, err
    ex = json.loads(out)
    assert ex["flagged"] is True and ex["overflow"] is True and ex["log_density"] is None
    code, out, err = run_cli("explain", demo_written.model, cases, extreme)
    assert code == 0 and "-inf" in out and "FLAGGED" in out and "overflows" in out
    _only_afterlook_lines(err)


def test_model_log_density_overflow_and_missing_against_a_naive_sum():
    from afterlook.core.gaussian import GaussianModel

    rng = np.random.default_rng(0)
    X = rng.normal(size=(200, 3))
    for kind in ("independent", "full"):
        model = GaussianModel(kind=kind).fit(X, ["a", "b", "c"])
        rows = np.array([[0.1, 0.2, 0.3], [-4.5e205, 0.0, 0.0], [np.nan, 0.0, 0.0], [np.inf, 0.0, 0.0]])
        ld = model.log_density(rows)
        # naive reference for the ordinary row: the multivariate normal density written out
        mu, S = model.mean_, model.covariance_
        diff = rows[0] - mu
        naive = -0.5 * (3 * math.log(2 * math.pi) + math.log(np.linalg.det(S)) + diff @ np.linalg.solve(S, diff))
        assert ld[0] == pytest.approx(naive, rel=1e-10)
        assert ld[1] == -np.inf
        assert np.isnan(ld[2]) and np.isnan(ld[3])


def test_a_huge_column_is_named_as_overflow_in_one_line(tmp_path, run_cli):
    rng = np.random.default_rng(1)
    train = tmp_path / "train.csv"
    with open(train, "w") as fh:
        fh.write("a,b,c\n")
        for a, b, c in zip(rng.normal(0, 1, 100), rng.normal(1e300, 3e299, 100), rng.normal(5, 1, 100)):
            fh.write(f"{float(a)!r},{float(b)!r},{float(c)!r}\n")
    for extra in ([], ["--kind", "independent"], ["--engine", "chunked"]):
        code, out, err = run_cli("fit", train, "--out", tmp_path / "m.json", *extra)
        lines = _only_afterlook_lines(err)
        assert code == 2 and len(lines) == 1 and "overflow" in lines[0] and "'b'" in lines[0], err
        assert "constant" not in lines[0]


def test_a_syntax_warning_never_reaches_stderr(tmp_path, run_cli):
    train = tmp_path / "t.csv"
    train.write_text("a,b\n1,2\n3,4\n5,7\n2,2\n")
    code, out, err = run_cli("fit", train, "--out", tmp_path / "m.json", "--derive", "x=1if a else 2")
    assert code == 2 and len(_only_afterlook_lines(err)) == 1, err
    from afterlook.core.expressions import parse
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")  # any warning would raise here
        with pytest.raises(Exception) as info:
            parse("1if a else 2")
    assert "SyntaxWarning" not in type(info.value).__name__


def test_misses_never_gives_an_all_clear_for_unscored_anomalies(demo_written, tmp_path, run_cli):
    rows = list(csv.reader(open(demo_written.cases, newline="")))
    label = rows[0].index("label")
    anomalies = [k for k, r in enumerate(rows[1:], 1) if r[label].strip().lower() in ("1", "anomaly", "true", "yes")]
    cases = tmp_path / "cases.csv"
    _edit_cases(demo_written.cases, cases, [(k, "flow_m3h", "") for k in anomalies])
    code, out, err = run_cli("misses", demo_written.model, cases)
    assert code == 0, err
    assert "no misses" not in out and "every labelled anomaly is flagged" not in out
    assert f"{len(anomalies)} not scored" in out and "nothing can be concluded" in out
    code, out, err = run_cli("misses", demo_written.model, cases, "--json")
    doc = json.loads(out)
    assert doc["n_unscored_anomalies"] == len(anomalies) and doc["n_flagged_anomalies"] == 0
    assert doc["misses"] == []


def test_the_workbench_lists_an_overflowing_normal_case_as_a_false_alarm(demo_written, tmp_path):
    from afterlook.analysis.workbench import case_counts, case_rows, open_session
    from afterlook.tui import format as fmt

    cases = tmp_path / "cases.csv"
    rows = list(csv.reader(open(demo_written.cases, newline="")))
    label = rows[0].index("label")
    k = next(i for i, r in enumerate(rows[1:], 1) if r[label].strip().lower() in ("0", "normal", "false", "no"))
    _edit_cases(demo_written.cases, cases, [(k, "motor_current_a", "-4.5e205")])
    session = open_session(demo_written.model, cases, train_path=demo_written.train, casebook=tmp_path / "b.json")
    before = open_session(demo_written.model, demo_written.cases, train_path=demo_written.train,
                          casebook=tmp_path / "b.json")
    assert case_counts(session)["false alarm"] == case_counts(before)["false alarm"] + 1
    alarms = [r for r in case_rows(session, false_alarms=True) if r.kind == "false alarm"]
    assert alarms[0].case == rows[k][0] and alarms[0].log_density == -math.inf  # lowest log-density first
    assert fmt.num(alarms[0].log_density) == "-inf" and fmt.num(float("nan")) == fmt.MISSING


def test_overflow_is_told_apart_from_a_feature_outside_its_domain(demo_written, tmp_path, run_cli):
    cases = tmp_path / "cases.csv"
    # row 1 overflows; row 2 makes hydraulic_power = flow * (discharge - suction) fine but a ratio undefined
    rows = _edit_cases(demo_written.cases, cases, [(1, "motor_current_a", "-4.5e205"), (2, "flow_m3h", "0")])
    model = tmp_path / "ratio.json"
    code, out, err = run_cli("fit", demo_written.train, "--out", model, "--cases", cases, "--kind", "independent",
                             "--derive", "r=motor_current_a / flow_m3h")
    assert code == 0, err
    code, out, err = run_cli("score", model, cases, "--json")
    assert code == 0, err
    by_case = {r["case"]: r for r in json.loads(out)["rows"]}
    assert by_case[rows[1][0]].get("overflow") is True and by_case[rows[1][0]]["flagged"] is True
    assert "overflow" not in by_case[rows[2][0]] and by_case[rows[2][0]]["flagged"] is True
    code, out, err = run_cli("explain", model, cases, rows[2][0], "--json")
    assert code == 0 and json.loads(out)["overflow"] is False, err
    code, out, err = run_cli("explain", model, cases, rows[2][0])
    assert "outside its domain" in out and "overflows" not in out


def test_python_warnings_become_one_afterlook_line_each():
    import warnings

    from afterlook.cli.main import python_warnings

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        np.square(np.array([1e300]))  # numpy: "overflow encountered in square"
        np.square(np.array([1e300]))
        warnings.warn("old api", DeprecationWarning)
        warnings.warn("a\nsecond line", UserWarning)
    lines = python_warnings(caught)
    assert len(lines) == 2
    assert lines[0].startswith("numeric overflow")
    assert lines[1] == "UserWarning: a second line"
