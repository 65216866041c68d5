"""`afterlook model import|export`: the parameter document in and out, bad files refused in one line.

References: scipy.stats.multivariate_normal.logpdf for an imported numpy
detector (breast-cancer table, scikit-learn's bundled copy), and the demo
model's own log-density for the round trip import(export(model)).
"""

from __future__ import annotations

import json
import pickle
import shutil
from pathlib import Path

import numpy as np
import pytest

import afterlook

COLUMNS = ["mean radius", "mean texture", "mean smoothness"]


@pytest.fixture(scope="module")
def cancer_files(tmp_path_factory):
    from sklearn.datasets import load_breast_cancer

    folder = tmp_path_factory.mktemp("cancer")
    frame = load_breast_cancer(as_frame=True).frame
    cases = frame[COLUMNS].copy()
    cases["label"] = np.where(frame["target"] == 0, "anomaly", "normal")  # malignant = anomaly
    cases.to_csv(folder / "cases.csv", index=False)
    normal = frame.loc[frame["target"] == 1, COLUMNS].to_numpy()
    return folder, normal, cases


def test_import_json_with_threshold_scores_as_scipy(run_cli, one_json, cancer_files):
    from scipy.stats import multivariate_normal

    folder, normal, cases = cancer_files
    mean, cov = normal.mean(axis=0), np.cov(normal, rowvar=False, bias=True)
    (folder / "p.json").write_text(json.dumps({"columns": COLUMNS, "mean": mean.tolist(),
                                               "covariance": cov.tolist(), "threshold": -4.5}))
    code, out, err = run_cli("model", "import", str(folder / "p.json"), "--out", str(folder / "m.json"), "--json")
    assert code == 0, err
    doc = one_json(out)
    assert doc["policy"] == "value:-4.5" and doc["threshold"] == -4.5
    model = afterlook.load_model(folder / "m.json")
    # scipy.stats.multivariate_normal.logpdf is the reference Gaussian log-density
    np.testing.assert_allclose(model.log_density(cases), multivariate_normal(mean, cov).logpdf(cases[COLUMNS]),
                               rtol=1e-9)


def test_import_npz_threshold_picked_on_cases(run_cli, one_json, cancer_files):
    folder, normal, cases = cancer_files
    np.savez(folder / "p.npz", mean=normal.mean(axis=0), variances=normal.var(axis=0), columns=np.array(COLUMNS))
    code, out, err = run_cli("model", "import", str(folder / "p.npz"), "--out", str(folder / "n.json"),
                             "--cases", str(folder / "cases.csv"), "--threshold", "rate:0.05", "--json")
    assert code == 0, err
    doc = one_json(out)
    assert doc["kind"] == "independent" and doc["policy"] == "rate:0.05"
    # at most floor(0.05 * 357) = 17 of the benign cases flagged (core.thresholds.rate_threshold's contract)
    assert doc["metrics"]["fp"] <= 17
    assert doc["model_quality"]["roc_auc"] > 0.5


def test_round_trip_of_the_demo_model_with_derived_feature_and_transform(run_cli, demo_written, tmp_path):
    model = afterlook.load_model(demo_written.model)
    assert model.recipe.derived and model.recipe.transforms  # the demo has both
    code, _, err = run_cli("model", "export", str(demo_written.model), "--format", "json",
                           "--out", str(tmp_path / "p.json"))
    assert code == 0, err
    code, _, err = run_cli("model", "import", str(tmp_path / "p.json"), "--out", str(tmp_path / "back.json"))
    assert code == 0, err
    back = afterlook.load_model(tmp_path / "back.json")
    cases = afterlook.load_table(demo_written.cases).frame
    np.testing.assert_array_equal(back.log_density(cases), model.log_density(cases))
    assert back.threshold == model.threshold and back.features == model.features
    assert back.imported and back.quantiles is None


def test_a_full_model_with_a_power_transform_round_trips_exactly(tmp_path, demo_written):
    train = afterlook.load_table(demo_written.train)
    model = afterlook.fit(train, columns=["flow_m3h", "motor_current_a"], derive={"r": "motor_current_a / flow_m3h"},
                          transform={"flow_m3h": "boxcox"}, threshold="value:-6")
    from afterlook.analysis.interop import model_from_parameters_document, parameters_document

    back = model_from_parameters_document(json.loads(json.dumps(parameters_document(model))), source="test")
    cases = afterlook.load_table(demo_written.cases).frame
    np.testing.assert_array_equal(back.log_density(cases), model.log_density(cases))


def test_frozen_statistics_and_units_travel_in_the_parameter_document(run_cli, demo_written, tmp_path):
    # A derived feature reading zscore(...) and each station's own baseline (unit_median, unit_scale) can only be
    # computed with the statistics frozen at fit: export must write them, and import must score the cases as the
    # model does (reference: the model's own log-density), also when the threshold is picked on the cases.
    import jsonschema

    import afterlook.store
    from afterlook.analysis.interop import parameters_document

    schema = Path(afterlook.store.__file__).parent / "schemas" / "afterlook-parameters.schema.json"

    train = afterlook.load_table(demo_written.train)
    rel = "(suction_bar - unit_median(suction_bar)) / unit_scale(suction_bar)"
    model = afterlook.fit(train, columns=["suction_bar", "motor_current_a"], derive={"rel": rel, "zq": "zscore(flow_m3h)"},
                          unit_col="station", time_col="hour", threshold="value:-9")
    model.save(tmp_path / "m.json")
    doc = parameters_document(model)
    jsonschema.validate(doc, json.loads(schema.read_text()))  # the published schema accepts it
    assert {e["function"] for e in doc["frozen"]} == {"unit_median", "unit_scale", "zscore"}
    assert doc["units"] == {"unit_col": "station", "time_col": "hour"}
    code, _, err = run_cli("model", "export", str(tmp_path / "m.json"), "--format", "json",
                           "--out", str(tmp_path / "p.json"))
    assert code == 0, err
    cases = afterlook.load_table(demo_written.cases).frame
    for extra in ([], ["--cases", str(demo_written.cases), "--threshold", "f1"]):
        code, _, err = run_cli("model", "import", str(tmp_path / "p.json"), "--out", str(tmp_path / "back.json"),
                               "--force", *extra)
        assert code == 0, err
        back = afterlook.load_model(tmp_path / "back.json")
        assert back.unit_col == "station" and back.time_col == "hour"
        np.testing.assert_array_equal(back.log_density(cases), model.log_density(cases))


def test_a_derived_feature_without_its_frozen_statistics_is_refused_at_import(run_cli, tmp_path):
    doc = {"columns": ["a", "z"], "mean": [0, 0], "variances": [1, 1], "threshold": -5,
           "derive": [{"name": "z", "expression": "zscore(a)"}]}
    (tmp_path / "p.json").write_text(json.dumps(doc))
    code, _, err = run_cli("model", "import", str(tmp_path / "p.json"), "--out", str(tmp_path / "m.json"))
    assert code == 2 and "zscore(a)" in err and "frozen" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "m.json").exists()


@pytest.mark.parametrize("content,message", [
    ("{not json", "not valid JSON"),
    ('{"columns": ["a"], "mean": [0]}', "does not match"),
    ('{"columns": ["a"], "mean": [0], "covariance": [[1]], "variances": [1]}', "does not match"),
    ('{"columns": ["a"], "mean": [0], "covarance": [[1]]}', "does not match"),
    ('{"columns": ["a", "b"], "mean": [0], "variances": [1]}', "mean has shape"),
    ('{"columns": ["a"], "mean": [0], "variances": [0]}', "zero variance"),
    ('{"columns": ["a", "b"], "mean": [0, 0], "covariance": [[1, 2], [2, 1]], "threshold": 1}', "not positive"),
    ('{"columns": ["a"], "mean": [0], "variances": [1]}', "f1 threshold needs labelled"),
])
def test_bad_json_files_are_one_line_exit_2(run_cli, tmp_path, content, message):
    (tmp_path / "p.json").write_text(content)
    extra = ["--threshold", "f1"] if "f1" in message else []
    code, out, err = run_cli("model", "import", str(tmp_path / "p.json"), "--out", str(tmp_path / "m.json"), *extra)
    assert code == 2 and out == ""
    assert len(err.strip().splitlines()) == 1 and message in err, err
    assert not (tmp_path / "m.json").exists()


def test_pickles_are_never_loaded(run_cli, tmp_path):
    (tmp_path / "p.pkl").write_bytes(pickle.dumps({"mean": [0.0]}))
    code, _, err = run_cli("model", "import", str(tmp_path / "p.pkl"), "--out", str(tmp_path / "m.json"))
    assert code == 2 and "pickle" in err and len(err.strip().splitlines()) == 1
    np.save(tmp_path / "obj.npy", np.array([{"a": 1}], dtype=object), allow_pickle=True)
    # an .npz holding an object array: refused by numpy.load(allow_pickle=False)
    np.savez(tmp_path / "p.npz", mean=np.array([0.0, 1.0], dtype=object), variances=np.ones(2),
             columns=np.array(["a", "b"]))
    code, _, err = run_cli("model", "import", str(tmp_path / "p.npz"), "--out", str(tmp_path / "m.json"))
    assert code == 2 and "pickle" in err and len(err.strip().splitlines()) == 1


def test_npz_with_an_unknown_array_is_refused(run_cli, tmp_path):
    np.savez(tmp_path / "p.npz", mean=np.zeros(2), variances=np.ones(2), columns=np.array(["a", "b"]),
             covariances=np.eye(2))
    code, _, err = run_cli("model", "import", str(tmp_path / "p.npz"), "--out", str(tmp_path / "m.json"))
    assert code == 2 and "covariances" in err


def test_export_refuses_to_overwrite_what_it_did_not_write(run_cli, demo_written, tmp_path):
    shutil.copy(demo_written.cases, tmp_path / "data.json")  # a CSV under a .json name: somebody's data
    code, _, err = run_cli("model", "export", str(demo_written.model), "--format", "json",
                           "--out", str(tmp_path / "data.json"))
    assert code == 2 and "will not overwrite" in err
    code, _, _ = run_cli("model", "export", str(demo_written.model), "--format", "json", "--out", str(tmp_path / "p.json"))
    assert code == 0
    code, _, err = run_cli("model", "export", str(demo_written.model), "--format", "json", "--out", str(tmp_path / "p.json"))
    assert code == 2 and "--force" in err
    code, _, _ = run_cli("model", "export", str(demo_written.model), "--format", "json", "--out",
                         str(tmp_path / "p.json"), "--force")
    assert code == 0


def test_model_without_action_is_one_line(run_cli):
    code, _, err = run_cli("model")
    assert code == 2 and "import or export" in err


def test_undefined_policy_from_the_command_line(run_cli, tmp_path):
    doc = {"columns": ["a", "r"], "mean": [1.0, 1.0], "variances": [1.0, 1.0], "threshold": -10.0,
           "derive": [{"name": "r", "expression": "a / b"}]}
    (tmp_path / "p.json").write_text(json.dumps(doc))
    (tmp_path / "c.csv").write_text("id,a,b\nx,1,0\ny,1,1\n")
    for policy, expected in (("flag", [True, False]), ("skip", [False, False])):
        out_model = tmp_path / f"{policy}.json"
        code, _, err = run_cli("model", "import", str(tmp_path / "p.json"), "--out", str(out_model),
                               "--undefined", policy)
        assert code == 0, err
        model = afterlook.load_model(out_model)
        assert model.undefined == policy
        frame = afterlook.load_table(tmp_path / "c.csv").frame
        assert list(model.score(frame)["flagged"]) == expected  # x: a / 0 is outside r's domain
