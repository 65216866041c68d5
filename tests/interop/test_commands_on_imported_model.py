"""Every command with an imported model: it works, or refuses in one line with exit 2.

The imported model is the demo model's own parameters passed through
``afterlook model export --format json`` and ``model import`` (invented demo
data; the numbers are checked against the fitted demo model they came from).
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest

import afterlook
from afterlook.core.errors import AfterlookError

CASE = "PS-01/2026-05-21T17:00"


@pytest.fixture(scope="module")
def imported(demo_written, tmp_path_factory, run_cli):
    folder = tmp_path_factory.mktemp("imported")
    for name in ("train.csv", "cases.csv"):
        shutil.copy(demo_written.folder / name, folder / name)
    assert run_cli("model", "export", str(demo_written.model), "--format", "json", "--out", str(folder / "p.json"))[0] == 0
    assert run_cli("model", "import", str(folder / "p.json"), "--out", str(folder / "m.json"))[0] == 0
    return folder


def one_line_refusal(code, out, err, *words):
    assert code == 2 and out == "", (code, err)
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err, err
    for w in words:
        assert w in lines[0], lines[0]


def test_misses_and_score_work_and_match_the_fitted_model(imported, demo_written, run_cli, one_json):
    code, out, err = run_cli("misses", str(imported / "m.json"), str(imported / "cases.csv"), "--json")
    assert code == 0, err
    code2, out2, _ = run_cli("misses", str(demo_written.model), str(imported / "cases.csv"), "--json")
    assert [m["case"] for m in one_json(out)["misses"]] == [m["case"] for m in one_json(out2)["misses"]]
    code, out, err = run_cli("score", str(imported / "m.json"), str(imported / "cases.csv"), "--json")
    assert code == 0 and one_json(out)["n_flagged"] > 0


def test_explain_says_percentiles_are_not_available(imported, run_cli, one_json):
    code, out, err = run_cli("explain", str(imported / "m.json"), str(imported / "cases.csv"), CASE)
    assert code == 0, err
    assert "imported model" in out and "not available for an imported model" in " ".join(out.split())
    code, out, _ = run_cli("explain", str(imported / "m.json"), str(imported / "cases.csv"), CASE, "--json")
    doc = one_json(out)
    assert all(f["percentile"] is None for f in doc["features"])
    assert all(f["z"] is not None for f in doc["features"])


@pytest.mark.parametrize("command", [["suggest"], ["try", "--derive", "r=motor_current_a / flow_m3h"]])
def test_refits_need_train(imported, run_cli, command):
    code, out, err = run_cli(command[0], str(imported / "m.json"), str(imported / "cases.csv"), *command[1:])
    one_line_refusal(code, out, err, "imported", "--train")


def test_try_with_train_works_and_says_what_it_compares(imported, run_cli, one_json):
    code, out, err = run_cli("try", str(imported / "m.json"), str(imported / "cases.csv"), "--derive",
                             "r=motor_current_a / flow_m3h", "--train", str(imported / "train.csv"), "--json")
    assert code == 0, err
    assert "re-fit itself" in err
    assert one_json(out)["after"]["tp"] >= 0


def test_workbench_needs_train(imported):
    from afterlook.analysis.workbench import open_session

    with pytest.raises(AfterlookError, match="--train"):
        open_session(imported / "m.json", imported / "cases.csv", casebook=imported / "book.json")
    session = open_session(imported / "m.json", imported / "cases.csv", train_path=imported / "train.csv",
                           casebook=imported / "book.json")
    assert "imported" in session.model.describe_kind()


def test_casebook_add_report_check(imported, run_cli, one_json):
    book = imported / "book.json"
    code, _, err = run_cli("casebook", "add", str(book), "--model", str(imported / "m.json"), "--cases",
                           str(imported / "cases.csv"), "--case", CASE, "--status", "needs-signal")
    assert code == 0, err
    code, _, err = run_cli("casebook", "report", str(book), "--out", str(imported / "r.md"))
    assert code == 0, err
    assert "not available for an imported model" in (imported / "r.md").read_text()
    code, out, err = run_cli("casebook", "check", str(book), "--model", str(imported / "m.json"), "--cases",
                             str(imported / "cases.csv"), "--json")
    assert code == 0 and one_json(out)["ok"] is True


def test_shape_and_export_of_an_imported_model(imported, run_cli):
    assert run_cli("shape", str(imported / "train.csv"), "--no-hist")[0] == 0  # takes no model
    code, _, err = run_cli("model", "export", str(imported / "m.json"), "--format", "sklearn",
                           "--out", str(imported / "m.joblib"))
    assert code == 0, err
    import joblib

    model = afterlook.load_model(imported / "m.json")
    cases = afterlook.load_table(imported / "cases.csv").frame
    np.testing.assert_array_equal(joblib.load(imported / "m.joblib").score_samples(cases), model.log_density(cases))
