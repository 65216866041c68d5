"""explain: a case against its own unit's normal (analysis/unit_evidence.py).

References: pandas ``groupby(unit).median()`` and ``scipy.stats.median_abs_deviation(scale="normal")``
per unit over the normal training rows, and the same over every row for the fleet, on the demo's
invented pump-station fleet (whose blocked-strainer failures are, by construction, ordinary for the
fleet and far from their own station's suction pressure).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import afterlook
from afterlook.analysis.evidence import explain
from afterlook.analysis.session import Session, as_table

STRAINER = "PS-11/2026-03-15T18:00"  # labelled "suction strainer half clogged" in the demo (seed 7)


@pytest.fixture(scope="module")
def session(demo_written):
    model = afterlook.load_model(demo_written.model)
    return Session(model, as_table(demo_written.cases), as_table(demo_written.train))


def test_unit_and_fleet_z_equal_pandas_and_scipy(session, demo_written):
    result = explain(session, STRAINER)
    ctx = result.unit_context
    assert ctx is not None and ctx.unit == "PS-11"
    train = pd.read_csv(demo_written.train)
    case = pd.read_csv(demo_written.cases).set_index("id").loc[STRAINER]
    own = train[train["station"] == "PS-11"]
    assert ctx.unit_rows == len(own)
    for r in ctx.readings:
        x = own[r.feature].to_numpy(dtype=float)
        med = train.groupby("station")[r.feature].median()["PS-11"]
        mad = stats.median_abs_deviation(x, scale="normal")
        fleet_med = train[r.feature].median()
        fleet_mad = stats.median_abs_deviation(train[r.feature].to_numpy(dtype=float), scale="normal")
        assert r.unit_median == pytest.approx(med, rel=1e-12)
        assert r.unit_scale == pytest.approx(mad, rel=1e-9)
        assert r.unit_z == pytest.approx((case[r.feature] - med) / mad, rel=1e-9)
        assert r.fleet_z == pytest.approx((case[r.feature] - fleet_med) / fleet_mad, rel=1e-9)
        assert not r.fallback


def test_the_strainer_miss_is_ordinary_for_the_fleet_and_far_from_its_station(session):
    ctx = explain(session, STRAINER).unit_context
    far = [r.feature for r in ctx.readings if r.only_against_its_unit]
    assert far and far[0] == "suction_bar" and ctx.by_distance()[0].feature == "suction_bar"


def test_the_cli_says_it_and_json_carries_it(run_cli, one_json, demo_written):
    code, out, err = run_cli("explain", str(demo_written.model), str(demo_written.cases), STRAINER)
    assert code == 0, err
    assert "against PS-11's own normal" in out and "suction_bar is ordinary for the fleet" in out
    code, out, err = run_cli("explain", str(demo_written.model), str(demo_written.cases), STRAINER, "--json")
    doc = one_json(out)["unit_context"]
    assert doc["unit"] == "PS-11" and doc["features"][0]["feature"] == "suction_bar"
    assert doc["features"][0]["only_against_its_unit"] is True


def test_without_a_unit_column_or_training_rows_there_is_none(demo_written, tmp_path):
    train = afterlook.load_table(demo_written.train)
    plain = afterlook.fit(train, columns=["flow_m3h", "suction_bar"], threshold="value:-9")
    assert explain(plain, demo_written.cases, STRAINER).unit_context is None
    # an imported model has no training rows; without --train the explanation simply has no unit part
    from afterlook.analysis.interop import model_from_parameters_document, parameters_document

    fitted = afterlook.fit(train, columns=["flow_m3h", "suction_bar"], unit_col="station", threshold="value:-9")
    imported = model_from_parameters_document(parameters_document(fitted), source="test")
    cases = afterlook.load_table(demo_written.cases)
    unlabelled = as_table(cases.frame.drop(columns=["label"]))
    assert explain(imported, unlabelled, STRAINER).unit_context is None
