"""Streamed fits (chunked and Dask) against the in-memory fit and numpy.

Reference: numpy's mean and ``np.cov(bias=True)`` on the whole feature
matrix, and afterlook's in-memory fit (itself checked against scipy and
scikit-learn in tests/reference). The data are the invented demo fleet.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import afterlook
from afterlook.analysis.fitting import fit, fit_streamed
from afterlook.core.errors import AfterlookError
from afterlook.core.gaussian import SufficientStats
from afterlook.demo import generate
from afterlook.engines.local import Accumulator

DERIVE = {"hydraulic_power": "flow_m3h * (discharge_bar - suction_bar)"}
TRANSFORM = {"hours_since_service": "log(hours_since_service + 1)"}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("streamed")
    sc = generate(seed=3, n_train=3000, n_cases=400)
    train = sc.train.copy()
    train.loc[5, "flow_m3h"] = np.nan  # one row to drop, in both engines
    csv = folder / "train.csv"
    parquet = folder / "train.parquet"
    train.to_csv(csv, index=False)
    train.to_parquet(parquet, index=False)
    cases = folder / "cases.csv"
    sc.cases.to_csv(cases, index=False)
    return {"csv": csv, "parquet": parquet, "cases": cases, "train": train}


def _reference(train):
    """numpy on the whole feature matrix (finite rows)."""
    X = np.column_stack([
        train[c].to_numpy(float) for c in
        ["flow_m3h", "suction_bar", "discharge_bar", "motor_current_a", "vibration_mm_s",
         "bearing_temp_c", "ambient_temp_c"]
    ] + [np.log(train["hours_since_service"].to_numpy(float) + 1),
         train["flow_m3h"].to_numpy(float) * (train["discharge_bar"] - train["suction_bar"]).to_numpy(float)])
    X = X[np.all(np.isfinite(X), axis=1)]
    return X.mean(axis=0), np.cov(X, rowvar=False, bias=True), X.shape[0]


@pytest.mark.parametrize("which", ["csv", "parquet"])
def test_chunked_fit_equals_numpy_and_the_in_memory_fit(files, which):
    model = fit_streamed(files[which], engine="chunked", chunk_rows=257, kind="full",
                         derive=DERIVE, transform=TRANSFORM, threshold="rate:0.02")
    mean, cov, n = _reference(files["train"])
    assert model.training["rows_used"] == n
    assert model.training["rows_dropped_nonfinite"] == 1
    np.testing.assert_allclose(model.density.mean_, mean, rtol=1e-10)
    np.testing.assert_allclose(model.density.covariance_, cov, rtol=1e-9, atol=1e-12)
    memory = fit(afterlook.load_table(files[which]), kind="full", derive=DERIVE, transform=TRANSFORM,
                 threshold="rate:0.02")
    np.testing.assert_allclose(model.density.covariance_, memory.density.covariance_, rtol=1e-9, atol=1e-12)
    cases = afterlook.load_table(files["cases"])
    np.testing.assert_allclose(model.log_density(cases.frame), memory.log_density(cases.frame), rtol=1e-9)


def test_fitted_lambda_on_the_sample_equals_the_in_memory_lambda_when_the_sample_holds_every_row(files):
    # 3000 rows < the 100,000-row sample: the sample is every finite row.
    t = {"hours_since_service": "yeojohnson"}
    streamed = fit_streamed(files["csv"], engine="chunked", chunk_rows=500, kind="independent", transform=t,
                            threshold="rate:0.01")
    memory = fit(afterlook.load_table(files["csv"]), kind="independent", transform=t, threshold="rate:0.01")
    lam_s = streamed.recipe.transforms["hours_since_service"].lmbda
    lam_m = memory.recipe.transforms["hours_since_service"].lmbda
    assert lam_s == pytest.approx(lam_m, rel=1e-6)


def test_accumulator_is_independent_of_chunking(files):
    rng = np.random.default_rng(0)
    X = rng.normal(size=(5000, 4)) @ rng.normal(size=(4, 4)) + 10.0
    one = Accumulator(["a", "b", "c", "d"], sample_size=100, random_state=1)
    keys = np.random.default_rng(9).random(X.shape[0])
    one.add(X, keys)
    many = Accumulator(["a", "b", "c", "d"], sample_size=100, random_state=1)
    for start in range(0, 5000, 333):
        many.add(X[start:start + 333], keys[start:start + 333])
    a, b = one.result(), many.result()
    # numpy as the reference for the statistics
    np.testing.assert_allclose(b.stats.mean, X.mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(b.stats.covariance(), np.cov(X, rowvar=False, bias=True), rtol=1e-10)
    np.testing.assert_array_equal(a.sample, b.sample)  # same keys -> same sample
    assert b.sample.shape == (100, 4)


def test_sufficient_stats_merge_is_order_free():
    rng = np.random.default_rng(4)
    parts = [rng.normal(size=(n, 3)) * 1e3 + 1e6 for n in (10, 500, 7, 120)]
    fwd = SufficientStats.empty(3)
    for p in parts:
        fwd = fwd.merge(SufficientStats.of(p))
    back = SufficientStats.empty(3)
    for p in reversed(parts):
        back = back.merge(SufficientStats.of(p))
    X = np.vstack(parts)
    np.testing.assert_allclose(fwd.covariance(), np.cov(X, rowvar=False, bias=True), rtol=1e-9)
    np.testing.assert_allclose(back.covariance(), fwd.covariance(), rtol=1e-9)


def test_a_label_column_is_refused_for_a_streamed_fit(files, tmp_path):
    labelled = files["train"].assign(label="normal")
    p = tmp_path / "labelled.csv"
    labelled.to_csv(p, index=False)
    with pytest.raises(AfterlookError, match="label column"):
        fit_streamed(p, engine="chunked")


def test_cli_engine_errors_are_one_line(files, tmp_path):
    exe = Path(sys.executable).parent / "afterlook"
    for extra, word in ((["--engine", "chunked", "--robust"], "--robust"),
                        (["--engine", "warp"], "engine"),
                        (["--engine", "chunked", "--shrinkage", "ledoit-wolf"], "Ledoit-Wolf"),
                        (["--scheduler", "tcp://127.0.0.1:1"], "--engine dask")):
        r = subprocess.run([str(exe), "fit", str(files["csv"]), "--out", str(tmp_path / "m.json"), *extra],
                           capture_output=True, text=True, timeout=120)
        assert r.returncode == 2, (extra, r.stderr)
        lines = [line for line in r.stderr.splitlines() if line.strip()]
        assert len(lines) == 1 and lines[0].startswith("afterlook: error:") and word in lines[0], (extra, r.stderr)


def test_dask_engine_on_a_local_cluster_equals_the_chunked_fit(files):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                  dashboard_address=None) as cluster:
        model = fit_streamed(files["csv"], engine="dask", scheduler=cluster.scheduler_address, kind="full",
                             derive=DERIVE, transform=TRANSFORM, threshold="rate:0.02")
    chunked = fit_streamed(files["csv"], engine="chunked", chunk_rows=1000, kind="full", derive=DERIVE,
                           transform=TRANSFORM, threshold="rate:0.02")
    mean, cov, n = _reference(files["train"])
    assert model.training["rows_used"] == n
    np.testing.assert_allclose(model.density.mean_, mean, rtol=1e-10)
    np.testing.assert_allclose(model.density.covariance_, cov, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(model.density.covariance_, chunked.density.covariance_, rtol=1e-9, atol=1e-12)
