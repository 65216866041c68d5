"""Columns a table found finite when it was read are not looked at again, and nothing else is taken on trust.

Values: the Wisconsin diagnostic breast-cancer table bundled with scikit-learn, with a missing
value and an infinity written into two of its columns. Reference: numpy's own isfinite on the
same arrays, and the search sample drawn with every column looked at.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.datasets import load_breast_cancer

import afterlook
from afterlook.analysis.session import Session
from afterlook.core.search_inputs import finite_sample
from afterlook.store.tables import table_from_frame


def _frames():
    data = load_breast_cancer()
    names = [f"c{k:02d}" for k in range(8)]
    frame = pd.DataFrame(data.data[:, :8], columns=names)
    frame["count"] = np.arange(len(frame)) % 7  # an integer column
    train = frame.copy()
    train.loc[5, "c01"] = np.nan
    train.loc[9, "c04"] = np.inf
    cases = frame.iloc[:60].copy()
    cases["label"] = data.target[:60] == 0
    return train, cases, names


def test_the_table_names_exactly_its_finite_numeric_columns():
    train, _, names = _frames()
    table = table_from_frame(train, name="train")
    want = {c for c in train.columns if np.isfinite(train[c].to_numpy(dtype=float)).all()}
    assert table.finite_columns == frozenset(want)
    assert "c01" not in table.finite_columns and "c04" not in table.finite_columns and "count" in table.finite_columns


def test_the_search_sample_is_the_same_and_never_holds_a_non_finite_row():
    train, cases, names = _frames()
    model = afterlook.fit(train.dropna().replace(np.inf, 0.0)[names], kind="full")
    session = Session(model, table_from_frame(cases, name="cases"), table_from_frame(train, name="train"))
    raw = session.raw_features("normal")
    known = session.finite_base_columns("normal")
    assert known == frozenset(names) - {"c01", "c04"}
    trusted = finite_sample(raw, names, 300, 0, known_finite=known)
    looked = finite_sample(raw, names, 300, 0)
    np.testing.assert_array_equal(trusted, looked)
    assert np.isfinite(trusted).all()
    every = finite_sample(raw, ["c00", "c02"], 10_000, 0, known_finite=known)
    assert every.shape[0] == len(train)  # both columns finite on every row: every row is kept
