"""Model.score(df): a scored copy, the caller's frame untouched, the same numbers as scipy.

Reference: ``scipy.stats.multivariate_normal.logpdf`` with the model's own
mean and covariance, and ``pandas.testing.assert_frame_equal`` against a deep
copy taken before scoring.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import afterlook


@pytest.fixture(scope="module")
def frame():
    rng = np.random.default_rng(4)
    X = rng.normal(size=(20_000, 5)) @ rng.normal(size=(5, 5)) + 3.0
    df = pd.DataFrame(X, columns=list("abcde"))
    df["note"] = "x"
    df["count"] = rng.integers(0, 9, len(df))  # an integer column goes through the numeric conversion
    return df


def test_score_leaves_the_callers_frame_alone_and_matches_scipy(frame):
    df = frame.copy()
    df["log_density"] = -1.0  # a column the score replaces
    before = df.copy(deep=True)
    model = afterlook.fit(frame[list("abcde") + ["count"]], kind="full")
    scored = model.score(df)
    pd.testing.assert_frame_equal(df, before)
    ref = stats.multivariate_normal(model.density.mean_, model.density.covariance_).logpdf(
        frame[list("abcde") + ["count"]].to_numpy(dtype=float))
    np.testing.assert_allclose(scored["log_density"].to_numpy(), ref, rtol=1e-10)
    assert list(scored.columns) == list(df.columns) + ["flagged"]
    np.testing.assert_array_equal(scored["flagged"].to_numpy(), scored["log_density"].to_numpy() < model.threshold)
    scored.loc[0, "a"] = 1e9  # changing the result does not reach the caller's frame
    assert df.loc[0, "a"] == before.loc[0, "a"]
