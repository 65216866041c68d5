"""Table columns as float arrays: float columns are read where they are, never changed, never strided.

Reference: pandas itself (the DataFrame's own column values, ``Series.to_numpy``) and numpy's memory flags.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from afterlook.store.columns import numeric_column


def test_a_float_column_is_read_in_place_and_read_only():
    frame = pd.DataFrame({"a": np.linspace(0.0, 1.0, 1000), "b": np.arange(1000)})
    got = numeric_column(frame, "a")
    np.testing.assert_array_equal(got, frame["a"].to_numpy())
    assert got.dtype == np.float64 and got.flags.c_contiguous
    with pytest.raises(ValueError):
        got[0] = 99.0  # afterlook never writes into a user's table
    assert frame["a"].iloc[0] == 0.0
    # an integer column is converted (a new float array), as before
    b = numeric_column(frame, "b")
    assert b.dtype == np.float64 and not np.shares_memory(b, frame["b"].to_numpy())


def test_a_column_of_a_row_major_frame_is_copied_contiguous():
    X = np.arange(3000, dtype=np.float64).reshape(1000, 3)  # a frame made from a row-major array
    frame = pd.DataFrame(X, columns=["x", "y", "z"])
    got = numeric_column(frame, "y")
    np.testing.assert_array_equal(got, X[:, 1])
    assert got.flags.c_contiguous


def test_missing_values_stay_nan():
    frame = pd.DataFrame({"a": [1.0, np.nan, 3.0]})
    got = numeric_column(frame, "a")
    assert np.isnan(got[1]) and got[0] == 1.0
