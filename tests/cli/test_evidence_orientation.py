"""Evidence reads in the direction of the reading, whatever transform the model applies.

Outside reference: the Wisconsin diagnostic breast cancer table shipped with
scikit-learn, read back with pandas; the direction of ``x ** -1`` (decreasing
for positive x) is arithmetic, not afterlook's output.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    data = load_breast_cancer()
    frame = pd.DataFrame(data.data[:, [0, 3]], columns=["radius", "area"])
    folder = tmp_path_factory.mktemp("orient")
    benign = frame[data.target == 1].reset_index(drop=True)
    benign.iloc[:250].to_csv(folder / "train.csv", index=False)
    cases = frame.copy()
    cases.insert(0, "id", [f"c{i}" for i in range(len(cases))])
    cases["label"] = np.where(data.target == 0, "anomaly", "normal")
    cases.to_csv(folder / "cases.csv", index=False)
    return folder, cases


def test_a_reversing_transform_does_not_make_a_high_reading_read_low(files, run_cli, one_json):
    folder, cases = files
    code, _, err = run_cli("fit", folder / "train.csv", "--cases", folder / "cases.csv", "--kind", "full",
                           "--transform", "area=area ** -1", "--out", folder / "m.json")
    assert code == 0, err
    biggest = cases.loc[cases["area"].idxmax()]
    code, out, err = run_cli("explain", folder / "m.json", folder / "cases.csv", biggest["id"], "--json")
    assert code == 0, err
    area = next(f for f in one_json(out)["features"] if f["name"] == "area")
    assert area["reading"] == pytest.approx(biggest["area"])  # the raw reading, not 1 / area
    assert area["value"] == pytest.approx(1.0 / biggest["area"])
    assert area["order_reversed"] is True
    assert area["z"] < 0 < area["z_reading"] == pytest.approx(-area["z"])
    assert area["percentile_reading"] == pytest.approx(100.0 - area["percentile"])
    radius = next(f for f in one_json(out)["features"] if f["name"] == "radius")
    assert radius["order_reversed"] is False and radius["z_reading"] == radius["z"]
    code, out, err = run_cli("explain", folder / "m.json", folder / "cases.csv", biggest["id"])
    row = next(line for line in out.splitlines() if line.strip().startswith("area"))
    assert f"+{area['z_reading']:.2f}" in row
