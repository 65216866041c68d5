"""A streamed fit freezes zscore's statistics like the in-memory fit (from the seeded sample of raw rows).

Reference: the in-memory fit (its frozen statistics are checked against
scipy.stats.zscore / zmap in tests/reference/test_frozen_reference.py) and
numpy's mean and standard deviation (ddof 0). Data: the invented demo fleet.
"""

from __future__ import annotations

import numpy as np
import pytest

import afterlook
from afterlook.analysis.fitting import fit, fit_streamed
from afterlook.demo import generate

DERIVE = {"hydraulic_power": "flow_m3h * (discharge_bar - suction_bar)",
          "rel": "zscore(motor_current_a) - zscore(boxcox(hydraulic_power, 0.5))"}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("frozen_streamed")
    sc = generate(seed=5, n_train=2500, n_cases=300)
    train = sc.train.copy()
    train.loc[7, "motor_current_a"] = np.nan  # dropped before the statistics, in both fits
    csv = folder / "train.csv"
    train.to_csv(csv, index=False)
    cases = folder / "cases.csv"
    sc.cases.to_csv(cases, index=False)
    return {"csv": csv, "cases": cases, "train": train}


def test_streamed_zscore_statistics_equal_the_in_memory_ones_when_the_sample_holds_every_row(files):
    # 2500 rows < the 100,000-row sample: the sample is every finite row
    streamed = fit_streamed(files["csv"], engine="chunked", chunk_rows=300, kind="full", derive=DERIVE,
                            threshold="rate:0.02")
    memory = fit(afterlook.load_table(files["csv"]), kind="full", derive=DERIVE, threshold="rate:0.02")
    train = files["train"].dropna(subset=["motor_current_a"])
    current = train["motor_current_a"].to_numpy(float)
    for recipe in (streamed.recipe, memory.recipe):
        got = recipe.frozen["zscore(motor_current_a)"]
        assert got["rows"] == current.size
        assert got["mean"] == pytest.approx(current.mean(), rel=1e-12)
        assert got["sd"] == pytest.approx(current.std(), rel=1e-12)
    cases = afterlook.load_table(files["cases"]).frame
    np.testing.assert_allclose(streamed.log_density(cases), memory.log_density(cases), rtol=1e-9)
