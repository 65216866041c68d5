"""`afterlook shape` through the real console script.

Input is the invented demo fleet (``afterlook.demo.generate(seed=7).train``
written to CSV). The numbers are checked against ``scipy.stats.normaltest``
and ``scipy.stats.skew`` recomputed here; the JSON shape is the one in
PRODUCT.md ("shape" under "JSON shapes").
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from afterlook.core.recipe import apply_transform, parse_transform

SCRIPT = Path(sys.executable).parent / "afterlook"
FEATURE_KEYS = {
    "name", "transform", "skew_before", "skew_after", "normality_before", "normality_after", "statistic",
}


@pytest.fixture(scope="module")
def demo_train(tmp_path_factory, demo_scenario):
    folder = tmp_path_factory.mktemp("shape_demo")
    frame = demo_scenario.train
    path = folder / "train.csv"
    frame.to_csv(path, index=False)
    return path, frame


@pytest.fixture(scope="module")
def shape_doc(demo_train):
    """``afterlook shape train.csv --json`` once for the module (the real console script)."""
    path, _ = demo_train
    env = {k: v for k, v in os.environ.items() if k != "AFTERLOOK_DEBUG"}
    proc = subprocess.run([str(SCRIPT), "shape", str(path), "--json"], capture_output=True, text=True,
                          env=env, timeout=300, stdin=subprocess.DEVNULL)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout)


def by_name(doc: dict) -> dict:
    return {f["name"]: f for f in doc["features"]}


def test_json_shape_matches_product_doc(shape_doc, demo_train):
    _, frame = demo_train
    assert set(shape_doc) == {"features"}
    numeric = [c for c in frame.columns if c != "id" and pd.api.types.is_numeric_dtype(frame[c])]
    assert [f["name"] for f in shape_doc["features"]] == numeric
    for f in shape_doc["features"]:
        assert set(f) == FEATURE_KEYS
        assert f["statistic"] == "dagostino"
        assert f["transform"] is None or isinstance(f["transform"], str)
        for key in ("skew_before", "skew_after", "normality_before", "normality_after"):
            assert isinstance(f[key], float)


def test_skewed_hours_get_a_transform_and_gaussian_ish_ambient_does_not(shape_doc):
    feats = by_name(shape_doc)
    hours = feats["hours_since_service"]
    assert hours["transform"] is not None
    assert abs(hours["skew_after"]) < abs(hours["skew_before"]) / 2
    assert hours["normality_after"] < hours["normality_before"] / 2
    ambient = feats["ambient_temp_c"]
    assert ambient["transform"] is None
    assert ambient["skew_after"] == ambient["skew_before"]


def test_json_numbers_equal_scipy_on_the_seeded_sample(shape_doc, demo_train):
    # Reference: scipy.stats.normaltest and scipy.stats.skew on the same rows the
    # tool sampled (sample of 5000 of 6000 rows, numpy Generator seeded 0).
    _, frame = demo_train
    hours = by_name(shape_doc)["hours_since_service"]
    x = frame["hours_since_service"].to_numpy(dtype=float)
    idx = np.sort(np.random.default_rng(0).choice(x.size, size=5000, replace=False))
    before = x[idx]
    transform = parse_transform("hours_since_service", hours["transform"])
    after = apply_transform(transform, "hours_since_service", before)
    assert hours["normality_before"] == pytest.approx(stats.normaltest(before).statistic, rel=1e-9)
    assert hours["normality_after"] == pytest.approx(stats.normaltest(after).statistic, rel=1e-9)
    assert hours["skew_before"] == pytest.approx(stats.skew(before), rel=1e-9)
    assert hours["skew_after"] == pytest.approx(stats.skew(after), rel=1e-9)


def test_api_to_dict_equals_the_cli_json(shape_doc, demo_train):
    import afterlook

    path, _ = demo_train
    assert json.loads(json.dumps(afterlook.shape(afterlook.load_table(path)).to_dict())) == shape_doc


def test_suggested_transform_fits(run_cli, demo_train, shape_doc, tmp_path):
    path, _ = demo_train
    expr = by_name(shape_doc)["hours_since_service"]["transform"]
    model = tmp_path / "m.json"
    code, out, err = run_cli("fit", path, "--out", model, "--transform", f"hours_since_service={expr}")
    assert code == 0, err
    recipe = json.loads(model.read_text())["recipe"]
    assert recipe["transforms"]["hours_since_service"] == {"kind": "expression", "expression": expr}


def test_text_output_has_table_histograms_and_the_fit_hint(run_cli, demo_train):
    path, _ = demo_train
    code, out, err = run_cli("shape", path.name, "--columns", "hours_since_service", "ambient_temp_c",
                             cwd=path.parent, env={"COLUMNS": "80"})
    assert code == 0, err
    lines = out.splitlines()
    assert all(len(line) <= 80 for line in lines), max(lines, key=len)
    assert any(line.startswith("before: hours_since_service") for line in lines)
    assert any(set(line.strip()) <= {"+", "-", " "} and line.count("+") == 4 for line in lines)  # two axes
    hist = [line for line in lines if "#" in line]
    assert hist and all(line.isascii() for line in hist)
    assert "before: ambient_temp_c" not in out  # left alone: no histogram
    assert "--transform 'hours_since_service=" in out
    assert "afterlook fit train.csv --out MODEL.json" in out


def test_no_hist_and_anderson(run_cli, one_json, demo_train):
    path, _ = demo_train
    code, out, err = run_cli("shape", path, "--columns", "hours_since_service", "--no-hist")
    assert code == 0, err
    assert "before: hours_since_service" not in out
    code, out, err = run_cli("shape", path, "--columns", "hours_since_service", "--statistic", "anderson",
                             "--sample", "800", "--json")
    assert code == 0, err
    (feat,) = one_json(out)["features"]
    assert feat["statistic"] == "anderson" and feat["transform"] is not None


@pytest.mark.parametrize("args", [
    ["--columns", "no_such_column"],
    ["--columns", "station"],  # text column
    ["--statistic", "shapiro"],
    ["--sample", "lots"],
])
def test_bad_input_is_exit_2_one_line(run_cli, demo_train, args):
    path, _ = demo_train
    code, out, err = run_cli("shape", path, *args, "--json")
    assert code == 2
    assert out == ""
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert err.startswith("afterlook: error:")


def test_constant_column_is_left_alone(run_cli, one_json, tmp_path):
    rng = np.random.default_rng(3)
    path = tmp_path / "t.csv"
    pd.DataFrame({"setpoint": np.full(60, 4.0), "runtime": rng.lognormal(0, 1, 60)}).to_csv(path, index=False)
    code, out, err = run_cli("shape", path, "--json")
    assert code == 0, err
    feats = by_name(one_json(out))
    assert feats["setpoint"]["transform"] is None and feats["setpoint"]["skew_before"] is None
    code, out, err = run_cli("shape", path)
    assert code == 0 and "constant column: left alone" in out


def test_help_shows_the_caution_epilog(run_cli):
    code, out, err = run_cli("shape", "--help")
    assert code == 0
    assert "--statistic" in out and "--no-hist" in out
    assert "Caution:" in out and "protection devices" in out
