"""fit and misses say when the model itself is the problem.

Outside references: scikit-learn's ``roc_auc_score`` and
``average_precision_score`` on the score ``-log_density`` (computed here from
the scores afterlook writes with ``score --out``, read back with pandas); the
Wisconsin diagnostic breast cancer table shipped with scikit-learn.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.metrics import average_precision_score, roc_auc_score


@pytest.fixture(scope="module")
def cancer_files(tmp_path_factory):
    data = load_breast_cancer()
    frame = pd.DataFrame(data.data[:, :5], columns=[f"x{i}" for i in range(5)])
    malignant = data.target == 0
    rng = np.random.default_rng(1)
    benign = rng.permutation(np.flatnonzero(~malignant))
    folder = tmp_path_factory.mktemp("quality")
    frame.iloc[benign[:200]].to_csv(folder / "train.csv", index=False)
    cases = frame.iloc[np.r_[benign[200:], np.flatnonzero(malignant)[:60]]].copy()
    cases.insert(0, "id", [f"c{i}" for i in range(len(cases))])
    cases["label"] = np.where(malignant[np.r_[benign[200:], np.flatnonzero(malignant)[:60]]], "anomaly", "normal")
    cases.to_csv(folder / "cases.csv", index=False)
    # the same cases with a constant-in-training column that differs on a few anomalies
    train = pd.read_csv(folder / "train.csv").assign(valve=1.0)
    train.to_csv(folder / "train_valve.csv", index=False)
    valve = np.ones(len(cases))
    valve[np.flatnonzero(cases["label"] == "anomaly")[:4]] = 0.0
    cases.assign(valve=valve).to_csv(folder / "cases_valve.csv", index=False)
    return folder


def test_fit_and_misses_report_roc_auc_and_average_precision_like_scikit_learn(cancer_files, run_cli, one_json):
    d = cancer_files
    code, out, err = run_cli("fit", d / "train.csv", "--cases", d / "cases.csv", "--out", d / "m.json", "--json")
    assert code == 0, err
    quality = one_json(out)["model_quality"]
    code, _, err = run_cli("score", d / "m.json", d / "cases.csv", "--out", d / "scored.csv")
    assert code == 0, err
    scored = pd.read_csv(d / "scored.csv")
    y = (scored["label"] == "anomaly").to_numpy()
    score = -scored["log_density"].to_numpy()
    assert quality["roc_auc"] == pytest.approx(roc_auc_score(y, score), abs=1e-12)
    assert quality["average_precision"] == pytest.approx(average_precision_score(y, score), abs=1e-12)
    code, out, err = run_cli("misses", d / "m.json", d / "cases.csv", "--json")
    assert code == 0, err
    assert one_json(out)["model_quality"]["roc_auc"] == pytest.approx(quality["roc_auc"], abs=1e-12)


def test_a_reversed_model_and_an_all_flagging_threshold_are_warned_about(cancer_files, run_cli):
    d = cancer_files
    cases = pd.read_csv(d / "cases.csv")
    cases["label"] = np.where(cases["label"] == "anomaly", "normal", "anomaly")  # labels swapped: AUC < 0.5
    cases.to_csv(d / "swapped.csv", index=False)
    code, out, err = run_cli("fit", d / "train.csv", "--cases", d / "swapped.csv", "--out", d / "bad.json")
    assert code == 0, err
    assert "ROC AUC" in err and "< 0.5" in err
    code, out, err = run_cli("misses", d / "bad.json", d / "swapped.csv")
    assert code == 0
    assert "ROC AUC" in err
    assert "of the labelled normal cases" in err  # best F1 on a reversed ranking flags (nearly) everything


def test_a_value_never_seen_in_normal_operation_is_reported(cancer_files, run_cli, one_json):
    d = cancer_files
    code, out, err = run_cli("fit", d / "train_valve.csv", "--cases", d / "cases_valve.csv", "--out", d / "v.json")
    assert code == 0 and "constant column" in err
    code, out, err = run_cli("misses", d / "v.json", d / "cases_valve.csv", "--json")
    assert code == 0, err
    (found,) = one_json(out)["never_seen_in_normal"]
    assert (found["column"], found["normal_value"], found["anomalies_differ"], found["normal_cases_differ"]) == \
        ("valve", 1.0, 4, 0)
    code, out, err = run_cli("misses", d / "v.json", d / "cases_valve.csv")
    assert "never seen in normal operation" in out
