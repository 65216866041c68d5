"""`--json` documents of the CLI, checked against the Python API.

Like the bad-input module, the invocations run up front through the CLI's
entry function (in process, one after another: the runner changes the working
folder and the streams); each test then checks one of them. ``python -m
afterlook --help`` runs as a real subprocess.
"""

from __future__ import annotations

import hashlib
import json
import math
import re
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import afterlook
from afterlook.analysis.session import scored_cases
from afterlook.demo import FEATURE_COLUMNS

DERIVE = "head_per_amp=(discharge_bar - suction_bar) / motor_current_a"
TRANSFORM = "hours_since_service=log1p(hours_since_service)"
CAUTION_WORDS = "does not replace protection devices"
RELATION_KINDS = {"worn_impeller", "bearing_wear"}


def _roundtrip(obj):
    return json.loads(json.dumps(obj, allow_nan=False))


@pytest.fixture(scope="module")
def work(tmp_path_factory, demo_files) -> Path:
    folder = tmp_path_factory.mktemp("json")
    shutil.copy(demo_files.train, folder / "train.csv")
    shutil.copy(demo_files.cases, folder / "cases.csv")
    shutil.copy(demo_files.model_full, folder / "full.json")
    shutil.copy(demo_files.model_independent, folder / "independent.json")
    return folder


@pytest.fixture(scope="module")
def demo_kinds(demo_scenario) -> dict:
    """Failure kind of every anomalous case of the full-size demo (seed 7, the CLI's default)."""
    return demo_scenario.kinds


@pytest.fixture(scope="module")
def case_id(work) -> str:
    """The worst miss of the independent model (a case labelled anomaly that it scored as normal)."""
    result = afterlook.misses(afterlook.load_model(work / "independent.json"), afterlook.load_table(work / "cases.csv"))
    assert result.misses, "the small demo scenario should have misses under the independent model"
    return result.misses[0].case


@pytest.fixture(scope="module")
def runs(work, case_id, run_cli, run_module):
    jobs = {
        "fit_full": (run_cli, ["fit", "train.csv", "--out", "fit_full.json", "--cases", "cases.csv", "--kind", "full",
                               "--derive", DERIVE, "--transform", TRANSFORM, "--json"]),
        "fit_independent": (run_cli, ["fit", "train.csv", "--out", "fit_independent.json", "--kind", "independent",
                                      "--threshold", "rate:0.02", "--json"]),
        "score_json": (run_cli, ["score", "full.json", "cases.csv", "--json"]),
        "score_out": (run_cli, ["score", "full.json", "cases.csv", "--out", "scored.csv"]),
        "misses_full": (run_cli, ["misses", "full.json", "cases.csv", "--json"]),
        "misses_independent": (run_cli, ["misses", "independent.json", "cases.csv", "--json"]),
        "explain_full": (run_cli, ["explain", "full.json", "cases.csv", case_id, "--json"]),
        "explain_independent": (run_cli, ["explain", "independent.json", "cases.csv", case_id, "--json"]),
        "demo_text": (run_cli, ["demo", "--no-tui", "--dir", "demo_text"]),
        "demo_json": (run_cli, ["demo", "--json", "--dir", "demo_json"]),
        "module_help": (run_module, ["--help"]),
        "fit_help": (run_cli, ["fit", "--help"]),
    }
    return {name: fn(*argv, cwd=work) for name, (fn, argv) in jobs.items()}


def _ok_json(result, one_json):
    code, out, err = result
    assert "Traceback" not in err
    assert code == 0, err
    assert all(line.startswith("afterlook: warning:") for line in err.splitlines()), err
    return one_json(out)


def _finite_number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


# --------------------------------------------------------------------------
# fit and the model file
# --------------------------------------------------------------------------


def test_fit_json_and_model_file(runs, work, one_json):
    doc = _ok_json(runs["fit_full"], one_json)
    assert doc["model"] == "fit_full.json"
    assert doc["kind"] == "full"
    assert doc["features"] == list(FEATURE_COLUMNS) + ["head_per_amp"]
    assert doc["rows_used"] == len(pd.read_csv(work / "train.csv"))
    assert set(doc["metrics"]) >= {"tp", "fp", "fn", "tn", "precision", "recall", "f1"}
    assert doc["policy"] == "f1"

    saved = json.loads((work / "fit_full.json").read_text())
    assert saved["format"] == "afterlook-model"
    assert saved["version"] == 1
    assert saved["training"]["sha256"] == hashlib.sha256((work / "train.csv").read_bytes()).hexdigest()
    assert saved["training"]["path"].endswith("train.csv")
    assert saved["threshold"]["value"] == doc["threshold"]
    assert [d["name"] for d in saved["recipe"]["derived"]] == ["head_per_amp"]
    assert "".join(saved["recipe"]["derived"][0]["expression"].split()) == "(discharge_bar-suction_bar)/motor_current_a"
    assert saved["recipe"]["transforms"]["hours_since_service"]["kind"] == "expression"

    doc_i = _ok_json(runs["fit_independent"], one_json)
    assert doc_i["kind"] == "independent" and doc_i["policy"] == "rate:0.02"
    assert "metrics" not in doc_i


def test_fit_on_tiny_tables_matches_the_api(tiny_train, tiny_cases, tiny_model, tmp_path, run_cli, one_json):
    """CLI fit and API fit (the tiny_model fixture) of the same tiny tables agree."""
    out_path = tmp_path / "cli_tiny.json"
    doc = _ok_json(run_cli("fit", tiny_train, "--cases", tiny_cases, "--out", out_path, "--json"), one_json)
    assert doc["policy"] == "f1" and "tiny_cases.csv" in doc["chosen_on"]
    assert doc["metrics"]["tp"] >= 1  # the far-out anomaly c3 is flagged
    assert doc["metrics"]["tp"] + doc["metrics"]["fn"] == 3
    api_model = afterlook.load_model(tiny_model)
    assert doc["threshold"] == pytest.approx(api_model.threshold, rel=1e-12)
    assert doc["fingerprint"] == api_model.fingerprint()
    assert afterlook.load_model(out_path).fingerprint() == api_model.fingerprint()


def test_saved_model_scores_like_the_in_memory_model(runs, work):
    """CLI-fitted file, in-memory fit and its saved-and-reloaded copy give the same log-densities."""
    assert runs["fit_full"][0] == 0, runs["fit_full"][2]
    train = afterlook.load_table(work / "train.csv")
    cases = afterlook.load_table(work / "cases.csv")
    name, expr = DERIVE.split("=", 1)
    col, texpr = TRANSFORM.split("=", 1)
    memory = afterlook.fit(train, cases=cases, kind="full", derive={name.strip(): expr.strip()},
                     transform={col: texpr})
    memory.save(work / "resaved.json")
    reloaded = afterlook.load_model(work / "resaved.json")
    from_cli = afterlook.load_model(work / "fit_full.json")

    ld_memory = scored_cases(memory, cases).log_density
    assert np.isfinite(ld_memory).all()
    for other in (reloaded, from_cli):
        np.testing.assert_allclose(scored_cases(other, cases).log_density, ld_memory, rtol=1e-12, atol=1e-12)
        assert other.threshold == pytest.approx(memory.threshold, rel=1e-12, abs=1e-12)
        assert other.features == memory.features
    # the comparison can fail: a different model scores differently
    other_kind = afterlook.fit(train, kind="independent", derive={name.strip(): expr.strip()}, transform={col: texpr})
    assert not np.allclose(scored_cases(other_kind, cases).log_density, ld_memory, rtol=1e-6)


# --------------------------------------------------------------------------
# score
# --------------------------------------------------------------------------


def test_score_json(runs, work, demo_files, one_json):
    doc = _ok_json(runs["score_json"], one_json)
    frame = demo_files.cases_frame
    assert doc["n_rows"] == len(frame) == len(doc["rows"])
    assert [r["case"] for r in doc["rows"]] == frame["id"].astype(str).tolist()
    model = afterlook.load_model(work / "full.json")
    expected = model.log_density(frame)
    got = np.array([r["log_density"] for r in doc["rows"]], dtype=float)
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    flagged = [r["flagged"] for r in doc["rows"]]
    assert flagged == list(expected < model.threshold)
    assert doc["n_flagged"] == sum(flagged) > 0


def test_score_out_adds_two_columns(runs, work):
    """Every column of the table is kept (text context included); log_density and flagged are added."""
    code, out, err = runs["score_out"]
    assert code == 0, err
    assert "scored.csv" in out
    original = pd.read_csv(work / "cases.csv")
    scored = pd.read_csv(work / "scored.csv")
    assert len(scored) == len(original)
    assert list(scored.columns) == list(original.columns) + ["log_density", "flagged"]
    # numbers unchanged (a CSV round trip may write 2228.0 as 2228, so dtypes may differ)
    numeric = list(FEATURE_COLUMNS)
    pd.testing.assert_frame_equal(scored[numeric], original[numeric], check_dtype=False)
    for col in ("id", "station", "label"):
        assert scored[col].tolist() == original[col].tolist(), col
    model = afterlook.load_model(work / "full.json")
    np.testing.assert_allclose(scored["log_density"], model.log_density(original), rtol=1e-12)
    assert scored["flagged"].tolist() == (scored["log_density"] < model.threshold).tolist()
    assert 0 < scored["flagged"].sum() < len(scored)


def test_score_out_keeps_context_text_unchanged(runs, work):
    assert runs["score_out"][0] == 0, runs["score_out"][2]
    original = pd.read_csv(work / "cases.csv", dtype=str, keep_default_na=False)
    scored = pd.read_csv(work / "scored.csv", dtype=str, keep_default_na=False)
    for col in ("id", "station", "label", "review_note", "hour"):
        assert scored[col].tolist() == original[col].tolist(), col


# --------------------------------------------------------------------------
# misses and explain, CLI == API
# --------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["full", "independent"])
def test_misses_json_matches_api(kind, runs, work, demo_files, one_json):
    doc = _ok_json(runs[f"misses_{kind}"], one_json)
    assert {"threshold", "n_cases", "n_anomalies", "misses"} <= set(doc)
    frame = demo_files.cases_frame
    assert doc["n_cases"] == len(frame)
    assert doc["n_anomalies"] == int((frame["label"] == "anomaly").sum())
    misses = doc["misses"]
    assert misses, "the small demo has misses under both models"
    labels = dict(zip(frame["id"].astype(str), frame["label"]))
    for m in misses:
        assert {"case", "log_density", "margin"} <= set(m)
        assert labels[m["case"]] == "anomaly"
        assert m["margin"] > 0
        assert m["margin"] == pytest.approx(m["log_density"] - doc["threshold"], rel=1e-12, abs=1e-12)
    margins = [m["margin"] for m in misses]
    assert margins == sorted(margins, reverse=True)

    model = afterlook.load_model(work / f"{kind}.json")
    expected = afterlook.misses(model, afterlook.load_table(work / "cases.csv")).to_dict()
    assert doc == _roundtrip(expected)


@pytest.mark.parametrize("kind", ["full", "independent"])
def test_explain_json_matches_api(kind, runs, work, case_id, one_json):
    doc = _ok_json(runs[f"explain_{kind}"], one_json)
    assert doc["case"] == case_id
    assert {"case", "log_density", "threshold", "features"} <= set(doc)
    assert _finite_number(doc["log_density"]) and _finite_number(doc["threshold"])
    names = [f["name"] for f in doc["features"]]
    assert names == list(FEATURE_COLUMNS)
    for f in doc["features"]:
        assert set(f) >= {"name", "value", "z", "percentile", "contribution", "conditional_z"}
        for key in ("value", "z", "percentile", "contribution"):
            assert _finite_number(f[key]), (f["name"], key, f[key])
        assert 0 <= f["percentile"] <= 100
        if kind == "independent":
            assert f["conditional_z"] is None
        else:
            assert _finite_number(f["conditional_z"])

    model = afterlook.load_model(work / f"{kind}.json")
    expected = afterlook.explain(model, afterlook.load_table(work / "cases.csv"), case_id).to_dict()
    assert doc == _roundtrip(expected)


# --------------------------------------------------------------------------
# demo
# --------------------------------------------------------------------------


def _first_miss_row(text: str) -> str:
    """The first data row of the misses table printed by the demo."""
    start = text.index("1. misses")
    for line in text[start:].splitlines():
        if re.match(r"^\s*1\s+\S", line):
            return line
    raise AssertionError("no first row in the misses table:\n" + text[start:start + 2000])


def test_demo_text(runs, work, demo_kinds):
    code, out, err = runs["demo_text"]
    assert code == 0, err
    assert "Traceback" not in err
    folder = work / "demo_text"
    for name in ("train.csv", "cases.csv", "model.json"):
        assert (folder / name).is_file(), name
    saved = json.loads((folder / "model.json").read_text())
    assert saved["format"] == "afterlook-model" and saved["model"]["kind"] == "independent"

    model = afterlook.load_model(folder / "model.json")
    cases = afterlook.load_table(folder / "cases.csv")
    worst = afterlook.misses(model, cases).misses[0]
    assert demo_kinds[worst.case] in RELATION_KINDS

    row = _first_miss_row(out)
    assert worst.case in row, row
    note = str(pd.read_csv(folder / "cases.csv").set_index("id").loc[worst.case, "review_note"])
    assert re.search(r"impeller|bearing", note), note
    # the table may shorten a long note with an ellipsis; what it shows must be the start of this note
    shown = row.rstrip().split("   ")[-1].strip().rstrip("…").strip()
    assert len(shown) >= 8 and note.startswith(shown), (shown, note)

    why = out[out.index(f"why did {worst.case} look normal"):]
    next_section = re.search(r"^─+ \d+\. ", why, re.MULTILINE)
    if next_section:
        why = why[: next_section.start()]
    assert note in why  # the explanation prints the case's context in full
    for feature in model.features:
        assert re.search(rf"^\s*{re.escape(feature)}\s+-?[0-9]", why, re.MULTILINE), feature


def test_demo_json(runs, work, demo_kinds, one_json):
    doc = _ok_json(runs["demo_json"], one_json)
    folder = work / "demo_json"
    for name in ("train.csv", "cases.csv", "model.json"):
        assert (folder / name).is_file(), name
    assert doc["misses"]["misses"], "the demo has misses"
    worst = doc["worst"]
    assert worst is not None
    assert worst["case"] == doc["misses"]["misses"][0]["case"]
    assert demo_kinds[worst["case"]] in RELATION_KINDS
    model = afterlook.load_model(folder / "model.json")
    names = [f["name"] for f in worst["features"]]
    assert names == model.features
    assert set(FEATURE_COLUMNS) <= set(names)
    for f in worst["features"]:
        for key in ("value", "z", "percentile", "contribution"):
            assert _finite_number(f[key]), (f["name"], key)
        assert f["conditional_z"] is None  # the demo model is independent
    # same analysis as the Python API on the written files
    expected = afterlook.explain(model, afterlook.load_table(folder / "cases.csv"), worst["case"]).to_dict()
    assert worst == _roundtrip(expected)


# --------------------------------------------------------------------------
# help
# --------------------------------------------------------------------------


def test_help_carries_the_caution(runs):
    for name in ("module_help", "fit_help"):
        code, out, err = runs[name]
        assert code == 0, err
        assert err == ""
        flat = " ".join(out.split())
        assert flat.startswith("usage:"), flat[:80]
        assert CAUTION_WORDS in flat, name
    assert "fit" in " ".join(runs["module_help"][1].split())
    assert "--derive" in runs["fit_help"][1]
