"""Every float afterlook writes to a file reads back as the same double.

Outside references: Python's ``csv`` module and ``float()`` read the CSV text;
``pyarrow.parquet`` reads Parquet; the ``json`` module reads model files.
Floats written with fewer digits than ``repr`` would make files depend on how
they were printed rather than on the numbers.
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
from hypothesis import given, settings
from hypothesis import strategies as st

import afterlook as api
from afterlook.store.tables import write_table

finite = st.floats(allow_nan=False, allow_infinity=False, width=64)


def _same_double(a: float, b: float) -> bool:
    return a == b and math.copysign(1.0, a) == math.copysign(1.0, b)


@settings(max_examples=40, deadline=None)
@given(st.lists(finite, min_size=1, max_size=30))
def test_csv_and_parquet_keep_every_bit(tmp_path_factory, values):
    folder = tmp_path_factory.mktemp("floats")
    frame = pd.DataFrame({"x": np.array(values, dtype=np.float64)})
    write_table(frame, folder / "t.csv")
    with open(folder / "t.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    assert rows[0] == ["x"]
    back = [float(r[0]) for r in rows[1:]]
    assert all(_same_double(a, b) or (a == 0.0 == b) for a, b in zip(values, back)), (values, back)
    write_table(frame, folder / "t.parquet")
    assert pq.read_table(folder / "t.parquet").column("x").to_pylist() == values


def test_a_saved_model_file_holds_the_fitted_doubles(tmp_path):
    rng = np.random.default_rng(5)
    train = pd.DataFrame(rng.normal(size=(500, 3)) * [1.0, 1e-7, 3e5], columns=["a", "b", "c"])
    model = api.fit(train, kind="full")
    model.save(tmp_path / "m.json")
    doc = json.loads((tmp_path / "m.json").read_text(encoding="utf-8"))  # json module: an independent reader
    assert doc["model"]["mean"] == model.density.to_dict()["mean"]
    assert doc["threshold"]["value"] == model.threshold
    back = api.load_model(tmp_path / "m.json")
    assert back.fingerprint() == model.fingerprint()
    np.testing.assert_array_equal(back.log_density(train), model.log_density(train))
