"""Bad input through the CLI: exit code 2, one clear line, no traceback.

Each scenario is one ``afterlook`` invocation through the CLI's entry function
(in process, captured streams). The module runs them all up front and every
scenario is then checked in its own test, which keeps failures readable. A few
scenarios also run through the real console script, so the subprocess view
(exit code, one line on stderr, nothing on stdout) is checked as a shell sees it.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import numpy as np
import pytest

def assert_bad_input(result, *words):
    """Exit 2, nothing on stdout, exactly one 'afterlook: error:' line naming ``words``."""
    code, out, err = result
    assert "Traceback" not in err and "Traceback" not in out, err
    assert code == 2, f"exit code {code}, stderr: {err!r}"
    lines = err.splitlines()
    assert len(lines) == 1, f"expected one line on stderr, got {len(lines)}: {err!r}"
    line = lines[0]
    assert line.startswith("afterlook: error:"), line
    assert line[len("afterlook: error:"):].strip(), "empty error message"
    for word in words:
        assert word in line, f"{word!r} not in error line {line!r}"
    assert out == "", f"bad input must print nothing on stdout, got {out[:200]!r}"


# --------------------------------------------------------------------------
# files for all scenarios, in one folder (the scenarios run with it as cwd)
# --------------------------------------------------------------------------


def _write_files(folder: Path, demo, tiny_frame) -> None:
    train = tiny_frame(60, seed=1)
    train.to_csv(folder / "train.csv", index=False)
    # demo tables and model, copied so that relative names appear in the messages
    shutil.copy(demo.train, folder / "demo_train.csv")
    shutil.copy(demo.cases, folder / "demo_cases.csv")
    shutil.copy(demo.model_full, folder / "model.json")

    (folder / "a_folder").mkdir()
    (folder / "empty.csv").write_bytes(b"")
    (folder / "header_only.csv").write_text("id,a,b,c,label\n")
    rng = np.random.default_rng(20240601)
    garbage = rng.bytes(4096)
    (folder / "garbage.csv").write_bytes(garbage)
    (folder / "garbage.parquet").write_bytes(garbage)
    train.to_parquet(folder / "whole.parquet", index=False)
    whole = (folder / "whole.parquet").read_bytes()
    (folder / "truncated.parquet").write_bytes(whole[: len(whole) // 2])

    all_anomaly = train.copy()
    all_anomaly["label"] = "anomaly"
    all_anomaly.to_csv(folder / "all_anomaly.csv", index=False)

    # model files that are not (valid) afterlook models
    (folder / "not_json.json").write_text("id,a,b\n1,2,3\n")
    doc = json.loads((folder / "model.json").read_text())
    broken = {k: v for k, v in doc.items() if k not in ("recipe", "training")}
    (folder / "missing_keys.json").write_text(json.dumps(broken))
    (folder / "version99.json").write_text(json.dumps({**doc, "version": 99}))
    (folder / "other_format.json").write_text(json.dumps({**doc, "format": "afterlook-casebook"}))

    cases = demo.cases_frame
    cases.drop(columns=["motor_current_a"]).to_csv(folder / "no_current.csv", index=False)
    cases.drop(columns=["label"]).to_csv(folder / "no_label.csv", index=False)
    maybe = cases.copy()
    maybe.loc[5, "label"] = "maybe"
    maybe.to_csv(folder / "maybe_labels.csv", index=False)
    (folder / "dup_columns.csv").write_text("id,a,b,a\nr1,1,2,3\nr2,2,3,5\nr3,3,5,4\n")


    # succeed-with-warning inputs
    nan_train = train.copy()
    nan_train.loc[[2, 5], "a"] = np.nan
    nan_train.loc[9, "b"] = np.inf
    nan_train.loc[13, "c"] = -np.inf
    nan_train.to_csv(folder / "nan_train.csv", index=False)
    const = train.copy()
    const.insert(2, "setpoint_bar", 4.5)
    const.to_csv(folder / "const_train.csv", index=False)
    dup = cases.copy()
    first_id = dup.loc[4, "id"]
    dup.loc[9, "id"] = first_id  # row 9 now repeats the id of row 4
    dup.to_csv(folder / "dup_ids.csv", index=False)


#: name -> (argv, words the error line must contain). All run with the folder as cwd.
BAD = {
    "missing_file": (["fit", "nope.csv", "--out", "m.json"], ["nope.csv"]),
    "directory_as_table": (["fit", "a_folder", "--out", "m.json"], ["a_folder"]),
    "under_missing_folder": (["fit", "no_such_folder/train.csv", "--out", "m.json"], ["no_such_folder/train.csv"]),
    "empty_file": (["fit", "empty.csv", "--out", "m.json"], ["empty.csv", "empty"]),
    "header_only": (["fit", "header_only.csv", "--out", "m.json"], ["header_only.csv", "no rows"]),
    "garbage_csv": (["fit", "garbage.csv", "--out", "m.json"], ["garbage.csv"]),
    "garbage_parquet": (["fit", "garbage.parquet", "--out", "m.json"], ["garbage.parquet", "Parquet"]),
    "truncated_parquet": (["fit", "truncated.parquet", "--out", "m.json"], ["truncated.parquet"]),
    "unknown_kind": (["fit", "train.csv", "--out", "m.json", "--kind", "diagonalish"], ["diagonalish"]),
    "threshold_rate_2": (["fit", "train.csv", "--out", "m.json", "--threshold", "rate:2"], ["rate:2"]),
    "threshold_rate_x": (["fit", "train.csv", "--out", "m.json", "--threshold", "rate:x"], ["rate:x"]),
    "threshold_bogus": (["fit", "train.csv", "--out", "m.json", "--threshold", "bogus"], ["bogus"]),
    "derive_empty_expr": (["fit", "train.csv", "--out", "m.json", "--derive", "x="], ["x=", "NAME=EXPR"]),
    "derive_empty_name": (["fit", "train.csv", "--out", "m.json", "--derive", "=a"], ["=a"]),
    "derive_no_equals": (["fit", "train.csv", "--out", "m.json", "--derive", "noequals"], ["noequals"]),
    "derive_unbalanced": (["fit", "train.csv", "--out", "m.json", "--derive", "r=a/(b"], ["a/(b"]),
    "derive_unknown_column": (["fit", "train.csv", "--out", "m.json", "--derive", "r=a/zzz_missing"],
                              ["zzz_missing"]),
    "derive_import": (["fit", "train.csv", "--out", "m.json", "--derive", "r=__import__('os').system('true')"],
                      ["not allowed"]),
    "derive_import_sentinel": (["fit", "train.csv", "--out", "m.json",
                                "--derive", "r=__import__('os').system('touch PWNED')"], ["not allowed"]),
    "derive_attribute": (["fit", "train.csv", "--out", "m.json", "--derive", "r=a.real"], ["a.real", "not allowed"]),
    "derive_open": (["fit", "train.csv", "--out", "m.json", "--derive", "r=open('x')"], ["open", "not allowed"]),
    "nothing_normal": (["fit", "all_anomaly.csv", "--out", "m.json"], ["normal", "anomaly"]),
    "out_folder_missing": (["fit", "train.csv", "--out", "no_such_folder/m.json"], ["no_such_folder"]),
    "out_is_directory": (["fit", "train.csv", "--out", "a_folder"], ["a_folder", "directory"]),
    "score_out_folder_missing": (["score", "model.json", "demo_cases.csv", "--out", "no_such_folder/s.csv"],
                                 ["no_such_folder"]),
    "score_out_is_directory": (["score", "model.json", "demo_cases.csv", "--out", "a_folder"], ["a_folder"]),
    "model_not_json": (["misses", "not_json.json", "demo_cases.csv"], ["not_json.json", "JSON"]),
    "model_missing_keys": (["misses", "missing_keys.json", "demo_cases.csv"], ["missing_keys.json", "recipe"]),
    "model_version_99": (["explain", "version99.json", "demo_cases.csv", "x", "--json"], ["version99.json", "99"]),
    "model_other_format": (["score", "other_format.json", "demo_cases.csv"], ["other_format.json", "afterlook-model"]),
    "cases_missing_column_misses": (["misses", "model.json", "no_current.csv"], ["motor_current_a"]),
    "misses_without_labels": (["misses", "model.json", "no_label.csv", "--json"], ["no_label.csv", "label"]),
    "unknown_label_value": (["misses", "model.json", "maybe_labels.csv"], ["maybe_labels.csv", "maybe"]),
    "unknown_case_id": (["explain", "model.json", "demo_cases.csv", "PS-99/nowhere", "--json"], ["PS-99/nowhere"]),
    "duplicate_columns_fit": (["fit", "dup_columns.csv", "--out", "m.json"], ["dup_columns.csv", "'a'"]),
    "unknown_subcommand": (["frobnicate"], ["frobnicate"]),
    "missing_required_out": (["fit", "train.csv"], ["--out"]),
    "missing_required_case_id": (["explain", "model.json", "demo_cases.csv"], ["CASE_ID"]),
    "bad_limit": (["misses", "model.json", "demo_cases.csv", "--limit", "lots"], ["lots"]),
    "score_out_unknown_extension": (["score", "model.json", "demo_cases.csv", "--out", "scored.txt"], ["scored.txt"]),
}

#: runs that must succeed (exit 0) with warnings
GOOD = {
    "nan_train": ["fit", "nan_train.csv", "--out", "nan_model.json", "--json"],
    "const_train": ["fit", "const_train.csv", "--out", "const_model.json", "--json"],
    "dup_ids_explain": ["explain", "model.json", "dup_ids.csv", "@DUP_ID", "--json"],
    "dup_ids_misses": ["misses", "model.json", "dup_ids.csv", "--json"],
}


@pytest.fixture(scope="module")
def bad_dir(tmp_path_factory, demo_files, make_tiny_frame) -> Path:
    folder = tmp_path_factory.mktemp("bad_input")
    _write_files(folder, demo_files, make_tiny_frame)
    return folder


@pytest.fixture(scope="module")
def results(bad_dir, demo_files, run_cli):
    dup_id = str(demo_files.cases_frame.loc[4, "id"])
    jobs = {name: argv for name, (argv, _) in BAD.items()}
    jobs.update({name: [dup_id if a == "@DUP_ID" else a for a in argv] for name, argv in GOOD.items()})
    # one after another: the in-process runner changes the working folder and the streams
    return {name: run_cli(*argv, cwd=bad_dir) for name, argv in jobs.items()}


#: scenarios that also run through the real console script (smoke: ~2 s each)
SCRIPT_SMOKE = ("missing_file", "model_not_json", "derive_import", "unknown_subcommand", "bad_limit")


@pytest.mark.parametrize("name", SCRIPT_SMOKE)
def test_the_console_script_gives_the_same_refusal(name, bad_dir, run_script, results):
    argv, words = BAD[name]
    script = run_script(*argv, cwd=bad_dir)
    assert_bad_input(script, *words)
    assert script == results[name]


# --------------------------------------------------------------------------
# refusals
# --------------------------------------------------------------------------


@pytest.mark.parametrize("name", list(BAD))
def test_bad_input_is_one_line_and_exit_2(name, results):
    _, words = BAD[name]
    assert_bad_input(results[name], *words)


def test_nothing_written_and_nothing_executed_on_bad_input(results, bad_dir):
    # every failing fit used --out m.json; none may have left a model (or a temp file) behind
    assert not (bad_dir / "m.json").exists()
    assert not list(bad_dir.glob(".m.json.*"))
    assert not (bad_dir / "scored.txt").exists()
    # the expression language never reaches Python's import/os machinery
    assert not (bad_dir / "PWNED").exists()


def test_unreadable_file(tmp_path, run_cli, make_tiny_frame):
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        pytest.skip("running as root: a chmod 000 file is still readable (see under_missing_folder)")
    path = tmp_path / "locked.csv"
    make_tiny_frame(20).to_csv(path, index=False)
    path.chmod(0)
    try:
        assert_bad_input(run_cli("fit", path, "--out", tmp_path / "m.json"), "locked.csv", "permission")
    finally:
        path.chmod(0o644)


# --------------------------------------------------------------------------
# inputs that work, with a warning
# --------------------------------------------------------------------------


def _warnings(err: str) -> list[str]:
    lines = err.splitlines()
    assert "Traceback" not in err
    assert all(line.startswith("afterlook: warning:") for line in lines), err
    return lines


def test_nan_and_inf_rows_are_dropped_with_a_counted_warning(results, bad_dir, one_json):
    code, out, err = results["nan_train"]
    assert code == 0, err
    lines = _warnings(err)
    dropped = [line for line in lines if "dropped" in line]
    assert len(dropped) == 1, lines
    assert "dropped 4 " in dropped[0], dropped[0]  # rows 2, 5 (NaN), 9 (+inf), 13 (-inf)
    doc = one_json(out)
    assert doc["rows_used"] == 60 - 4
    saved = json.loads((bad_dir / "nan_model.json").read_text())
    assert saved["training"]["rows_dropped_nonfinite"] == 4
    assert saved["training"]["rows_used"] == 56
    assert all(np.isfinite(v["mean"]) for v in saved["training"]["columns"].values())


def test_constant_column_is_left_out_with_a_warning(results, bad_dir, one_json):
    code, out, err = results["const_train"]
    assert code == 0, err
    lines = _warnings(err)
    assert any("setpoint_bar" in line and "constant" in line for line in lines), lines
    doc = one_json(out)
    assert doc["features"] == ["a", "b", "c"]
    saved = json.loads((bad_dir / "const_model.json").read_text())
    assert "setpoint_bar" not in saved["recipe"]["base"]
    assert saved["model"]["features"] == ["a", "b", "c"]


def test_duplicate_ids_warn_and_explain_uses_the_first_row(results, bad_dir, demo_files, one_json):
    cases = demo_files.cases_frame
    dup_id = str(cases.loc[4, "id"])
    for name in ("dup_ids_explain", "dup_ids_misses"):
        code, out, err = results[name]
        assert code == 0, err
        lines = _warnings(err)
        assert any("duplicate" in line and dup_id in line for line in lines), lines
        one_json(out)
    doc = one_json(results["dup_ids_explain"][1])
    assert doc["case"] == dup_id
    values = {f["name"]: f["value"] for f in doc["features"]}
    first, second = cases.loc[4], cases.loc[9]
    for col in ("flow_m3h", "motor_current_a", "bearing_temp_c"):
        assert values[col] == pytest.approx(float(first[col]), rel=1e-12)
    # the two rows differ, so the check above really tells first from second
    assert any(values[c] != pytest.approx(float(second[c])) for c in ("flow_m3h", "motor_current_a"))


def test_usage_error_does_not_repeat_the_prefix(results):
    line = results["unknown_subcommand"][2].strip()
    assert not line.startswith("afterlook: error: afterlook:"), line
