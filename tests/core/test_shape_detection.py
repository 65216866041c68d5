"""shape judged by detection: a transform that hides labelled anomalies is not recommended.

Outside references: scipy.stats.norm's log-density of a normal fitted to the
normal rows (the column as a one-feature Gaussian model sees it) with the cut
at the 1% quantile of the normal rows' log-densities, counted here with
numpy; the data are drawn here so the truth is known (a log-normal column,
anomalies placed where a log transform does or does not pull them in).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from afterlook.core.shape_detection import separation


def _naive_separation(normal, anomalies, rate=0.01):
    model = stats.norm(normal.mean(), normal.std())
    cut = np.quantile(model.logpdf(normal), rate, method="higher")
    return float(np.mean(model.logpdf(anomalies) < cut))


def test_separation_is_the_share_a_one_column_gaussian_flags_at_1_percent():
    rng = np.random.default_rng(0)
    normal = rng.lognormal(0.0, 0.5, 4000)
    anomalies = np.r_[rng.uniform(5, 9, 10), rng.uniform(1.0, 1.5, 30)]  # far out, and well inside
    assert separation(normal, anomalies) == pytest.approx(_naive_separation(normal, anomalies)) == 0.25


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    rng = np.random.default_rng(5)
    folder = tmp_path_factory.mktemp("shape_detect")
    pd.DataFrame({"pressure": rng.lognormal(0.0, 0.5, 3000)}).to_csv(folder / "train.csv", index=False)
    normal_cases = rng.lognormal(0.0, 0.5, 300)
    # failures read moderately high: far in the raw column's Gaussian, pulled inside by a log
    high = rng.uniform(3.3, 3.5, 20)
    cases = pd.DataFrame({"id": [f"c{i}" for i in range(320)], "pressure": np.r_[normal_cases, high],
                          "label": ["normal"] * 300 + ["anomaly"] * 20})
    cases.to_csv(folder / "cases.csv", index=False)
    return folder


def test_a_transform_that_separates_fewer_anomalies_is_held_back(files, run_cli, one_json):
    code, out, err = run_cli("shape", files / "train.csv", "--cases", files / "cases.csv", "--json")
    assert code == 0, err
    (col,) = one_json(out)["features"]
    assert col["transform"] is not None  # the normal rows alone do look better transformed
    train = pd.read_csv(files / "train.csv")["pressure"].to_numpy()
    cases = pd.read_csv(files / "cases.csv")
    anomalies = cases.loc[cases["label"] == "anomaly", "pressure"].to_numpy()
    assert col["separation_before"] == pytest.approx(_naive_separation(train, anomalies))
    assert col["separation_after"] < col["separation_before"]
    assert col["recommended"] is False and "separates fewer labelled anomalies" in col["held_back"]
    code, out, err = run_cli("shape", files / "train.csv", "--cases", files / "cases.csv", "--no-hist")
    assert "--transform" not in out and "No transform to recommend" in out
