"""``try``: re-fit with a derived feature, before/after, the normal population it uses, the CLI.

The before/after numbers are checked against an independent re-fit written
here: a per-column Gaussian with numpy means and (ddof=0) standard deviations,
log-densities summed from scipy.stats.norm.logpdf, and the best-F1 threshold
found by scanning the sorted scores (a case is flagged when its log-density
is below the threshold).
"""

from __future__ import annotations

import json
import shutil

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import afterlook
from afterlook.analysis.trial import try_features

BASE = list("abcdef")


# --------------------------------------------------------------------------
# independent reference
# --------------------------------------------------------------------------


def _features(frame: pd.DataFrame, with_ratio: bool) -> dict:
    cols = {n: frame[n].to_numpy(dtype=np.float64) for n in BASE}
    if with_ratio:
        cols["r"] = cols["a"] / cols["b"]
    return cols


def reference_flags(train: pd.DataFrame, cases: pd.DataFrame, with_ratio: bool) -> np.ndarray:
    """Flags of an independent Gaussian re-fit on ``train`` with the threshold of best F1 on ``cases``."""
    fit_cols = _features(train, with_ratio)
    case_cols = _features(cases, with_ratio)
    log_density = np.zeros(len(cases))
    for name, values in fit_cols.items():
        # maximum-likelihood fit: mean and ddof=0 standard deviation (scipy.stats.norm as the density)
        log_density += stats.norm.logpdf(case_cols[name], loc=values.mean(), scale=values.std(ddof=0))
    y = cases["label"].to_numpy() == "anomaly"
    order = np.argsort(log_density, kind="mergesort")
    assert np.all(np.diff(log_density[order]) > 0), "ties in the scores: the scan below assumes none"
    tp = np.cumsum(y[order])
    k = np.arange(1, len(y) + 1)  # flag the k lowest scores
    f1 = 2 * tp / (y.sum() + k)  # 2tp / (2tp + fp + fn) with fp + fn = k - tp + P - tp
    best = np.flatnonzero(f1 == f1.max())[-1]  # ties: the larger flagged set (more recall)
    flagged = np.zeros(len(y), dtype=bool)
    flagged[order[: best + 1]] = True
    return flagged


def confusion_of(flagged: np.ndarray, cases: pd.DataFrame) -> tuple[int, int, int, int]:
    y = cases["label"].to_numpy() == "anomaly"
    return (int(np.sum(flagged & y)), int(np.sum(flagged & ~y)), int(np.sum(~flagged & y)), int(np.sum(~flagged & ~y)))


def counts(m) -> tuple[int, int, int, int]:
    if isinstance(m, dict):
        return (m["tp"], m["fp"], m["fn"], m["tn"])
    return (m.tp, m.fp, m.fn, m.tn)


# --------------------------------------------------------------------------
# try through the API
# --------------------------------------------------------------------------


@pytest.mark.parametrize("seed", (0, 1))
@pytest.mark.parametrize("shift", (None, 0.15), ids=("shift40", "shift15"))
def test_try_ratio_catches_planted_misses_and_matches_independent_refit(fleet_factory, shift, seed):
    fitted = fleet_factory("ratio", seed, shift=shift)
    fleet = fitted.fleet
    cases = fleet.cases
    result = try_features(fitted.model, cases, {"r": "a / b"}, train=fleet.train)

    ref_before = reference_flags(fleet.train, cases, with_ratio=False)
    ref_after = reference_flags(fleet.train, cases, with_ratio=True)
    assert counts(result.before) == confusion_of(ref_before, cases)
    assert counts(result.after) == confusion_of(ref_after, cases)
    ref_added = confusion_of(ref_after, cases)[1] - confusion_of(ref_before, cases)[1]
    assert result.after.fp - result.before.fp == ref_added
    assert result.false_alarms_added == ref_added
    assert result.after.fn < result.before.fn

    # the cases listed are exactly those whose flag changed, each with the reference's flags
    ids = cases["id"].to_numpy()
    changed = set(ids[ref_before != ref_after])
    rows = {r["case"]: r for r in result.cases}
    assert set(rows) == changed
    for i, cid in enumerate(ids):
        if cid in rows:
            assert rows[cid]["before"]["flagged"] == bool(ref_before[i])
            assert rows[cid]["after"]["flagged"] == bool(ref_after[i])
    planted_now = [p for p in fleet.planted if p in rows and rows[p]["after"]["flagged"]]
    if shift is None:  # a 40% break: every planted miss is caught, from the planted structure
        assert sorted(planted_now) == sorted(fleet.planted)
    else:  # a 15% break: the feature now costs false alarms, which the comparison above checked
        assert ref_added > 0
        assert planted_now


# --------------------------------------------------------------------------
# the CLI: --out, JSON shapes, bad input
# --------------------------------------------------------------------------


def test_try_out_writes_model_with_feature_and_misses_drop(fleet_files, run_cli, one_json, tmp_path):
    files = fleet_files("ratio")
    new_model = tmp_path / "with_ratio.json"
    code, out, err = run_cli("try", files.model, files.cases, "--derive", "r=a/b", "--out", new_model, "--json")
    assert code == 0, err
    doc = one_json(out)
    assert doc["out"] == str(new_model)
    saved = json.loads(new_model.read_text())
    assert saved["format"] == "afterlook-model"
    derived = saved["recipe"]["derived"]
    assert [d["name"] for d in derived] == ["r"]
    assert derived[0]["expression"].replace(" ", "") == "a/b"

    code, out, err = run_cli("misses", files.model, files.cases, "--json")
    assert code == 0, err
    old = one_json(out)
    code, out, err = run_cli("misses", new_model, files.cases, "--json")
    assert code == 0, err
    new = one_json(out)
    assert len(new["misses"]) < len(old["misses"])
    # independent: the misses of a re-fit with a / b on the same files
    train, cases = pd.read_csv(files.train), pd.read_csv(files.cases)
    assert len(old["misses"]) == confusion_of(reference_flags(train, cases, False), cases)[2]
    assert len(new["misses"]) == confusion_of(reference_flags(train, cases, True), cases)[2]
    assert not {m["case"] for m in new["misses"]} & set(files.fleet.planted)


SUGGEST_KEYS = {"expression", "kind", "inputs", "case_z", "tail", "adjusted_tail", "beyond_chance",
                "other_anomalies_separated", "other_anomalies", "false_alarms_added"}
METRIC_KEYS = {"threshold", "tp", "fp", "fn", "tn", "precision", "recall", "f1"}


def test_cli_suggest_json_shape(fleet_files, run_cli, one_json):
    files = fleet_files("ratio")
    code, out, err = run_cli("suggest", files.model, files.cases, "p0", "--json")
    assert code == 0, err
    doc = one_json(out)
    assert doc["cases"] == ["p0"]
    assert isinstance(doc["tried"], int) and doc["tried"] > 50
    assert 1 <= len(doc["candidates"]) <= 10
    for c in doc["candidates"]:
        assert SUGGEST_KEYS <= set(c), SUGGEST_KEYS - set(c)
        assert isinstance(c["expression"], str) and isinstance(c["kind"], str)
        assert isinstance(c["inputs"], list) and len(c["inputs"]) == 2
        assert isinstance(c["beyond_chance"], bool)
        assert isinstance(c["other_anomalies_separated"], int) and isinstance(c["other_anomalies"], int)
        assert 0 <= c["other_anomalies_separated"] <= c["other_anomalies"]
        assert c["false_alarms_added"] is None or isinstance(c["false_alarms_added"], int)
        assert 0 < c["tail"] <= 1 and c["tail"] <= c["adjusted_tail"] <= 1
    assert set(doc["candidates"][0]["inputs"]) == {"a", "b"}


def test_cli_try_json_shape_matches_api(fleet_files, run_cli, one_json):
    files = fleet_files("ratio")
    code, out, err = run_cli("try", files.model, files.cases, "--derive", "r=a/b", "--json")
    assert code == 0, err
    doc = one_json(out)
    for side in ("before", "after"):
        assert METRIC_KEYS <= set(doc[side]), METRIC_KEYS - set(doc[side])
        m = doc[side]
        assert m["tp"] + m["fp"] + m["fn"] + m["tn"] == len(files.fleet.cases)
    assert doc["cases"]
    for row in doc["cases"]:
        assert {"case", "before", "after"} <= set(row)
        for side in ("before", "after"):
            assert {"log_density", "flagged"} <= set(row[side])
            assert isinstance(row[side]["flagged"], bool)
    # the CLI document is the API result's to_dict(), number for number
    api_doc = try_features(afterlook.load_model(files.model), afterlook.load_table(files.cases), {"r": "a/b"}).to_dict()
    for side in ("before", "after"):
        assert doc[side] == pytest.approx(api_doc[side], rel=1e-12)
    assert [r["case"] for r in doc["cases"]] == [r["case"] for r in api_doc["cases"]]


def _assert_bad_input(result, *words):
    code, out, err = result
    assert "Traceback" not in err
    assert code == 2, (code, err)
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("afterlook: error:"), lines[0]
    for w in words:
        assert w in lines[0], (w, lines[0])
    assert out == ""


@pytest.mark.parametrize("args, words", [
    (("suggest", "{model}", "{cases}", "no_such_case"), ("no_such_case",)),
    (("suggest", "{model}", "{cases}", "p0", "--top", "0"), ("--top",)),
    (("try", "{model}", "{cases}", "--derive", "r=a/zz"), ("zz",)),
    (("try", "{model}", "{cases}", "--derive", "r"), ("--derive",)),
    (("try", "{model}", "{cases}", "--derive", "r=a/"), ("a/",)),
], ids=("unknown-case", "top-0", "derive-unknown-column", "derive-no-equals", "derive-bad-syntax"))
def test_cli_bad_input(fleet_files, run_cli, args, words):
    files = fleet_files("ratio")
    argv = [str(a).format(model=files.model, cases=files.cases) for a in args]
    _assert_bad_input(run_cli(*argv, "--json"), *words)


def test_cli_try_unknown_case_is_bad_input(fleet_files, run_cli):
    files = fleet_files("ratio")
    _assert_bad_input(run_cli("try", files.model, files.cases, "--derive", "r=a/b", "--case", "no_such_case",
                              "--json"), "no_such_case")


# --------------------------------------------------------------------------
# the normal population try re-fits on (resolve_training)
# --------------------------------------------------------------------------


def test_try_uses_recorded_training_file_when_unchanged(fleet_files, run_cli, one_json):
    files = fleet_files("ratio")
    code, out, err = run_cli("try", files.model, files.cases, "--derive", "r=a/b", "--json")
    assert code == 0, err
    doc = one_json(out)
    assert str(files.train) in doc["training"]
    assert "SHA-256 matches" in doc["training"]
    assert "warning" not in err
    train, cases = pd.read_csv(files.train), pd.read_csv(files.cases)
    assert counts(doc["after"]) == confusion_of(reference_flags(train, cases, True), cases)


@pytest.fixture(scope="module")
def changed_train(tmp_path_factory, fleet_maker):
    """A ratio fleet fitted by the CLI, whose training file was then cut to its first 1000 rows."""
    make_fleet, write_fleet_files = fleet_maker
    files = write_fleet_files(make_fleet("ratio", 3), tmp_path_factory.mktemp("changed"))
    files.fleet.train.iloc[:1000].to_csv(files.train, index=False)
    return files


def test_try_falls_back_to_labelled_normal_cases_when_training_file_changed(changed_train, run_cli, one_json):
    files = changed_train
    code, out, err = run_cli("try", files.model, files.cases, "--derive", "r=a/b", "--json")
    assert code == 0, err
    doc = one_json(out)
    assert "cases labelled normal" in doc["training"]
    warnings = [line for line in err.splitlines() if line.startswith("afterlook: warning:")]
    assert len(warnings) == 1 and "changed" in warnings[0], err
    # independent: the re-fit is on the cases labelled normal
    cases = pd.read_csv(files.cases)
    normal_cases = cases[cases["label"] == "normal"]
    assert counts(doc["after"]) == confusion_of(reference_flags(normal_cases, cases, True), cases)


def test_try_train_option_overrides(changed_train, run_cli, one_json):
    files = changed_train
    code, out, err = run_cli("try", files.model, files.cases, "--derive", "r=a/b", "--train", files.train, "--json")
    assert code == 0, err
    doc = one_json(out)
    assert str(files.train) in doc["training"]
    assert "labelled normal" not in doc["training"]
    assert "warning" not in err
    cases = pd.read_csv(files.cases)
    assert counts(doc["after"]) == confusion_of(reference_flags(pd.read_csv(files.train), cases, True), cases)


def test_try_finds_recorded_training_file_beside_the_moved_model(tmp_path, fleet_maker, run_cli, one_json):
    """Fitted with relative names in one folder, used from another: the training file is looked for beside
    the model file (documented in afterlook.analysis.session)."""
    make_fleet, write_fleet_files = fleet_maker
    files = write_fleet_files(make_fleet("ratio", 4), tmp_path / "site", fit_model=False)
    code, _, err = run_cli("fit", "train.csv", "--out", "model.json", "--cases", "cases.csv", "--kind", "independent",
                           cwd=files.dir)
    assert code == 0, err
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    shutil.copy(files.cases, elsewhere / "cases.csv")
    code, out, err = run_cli("try", files.model, "cases.csv", "--derive", "r=a/b", "--json", cwd=elsewhere)
    assert code == 0, err
    doc = one_json(out)
    assert "SHA-256 matches" in doc["training"] and str(files.train) in doc["training"], doc["training"]
    assert "warning" not in err
