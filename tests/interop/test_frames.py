"""``to_frame()`` and ``_repr_html_`` of the result objects: the same numbers as ``to_dict()`` (the CLI's
``--json``), and data shown as text, never markup. Invented demo data."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import afterlook


@pytest.fixture(scope="module")
def demo(demo_written):
    model = afterlook.load_model(demo_written.model)
    frame = afterlook.load_table(demo_written.cases).frame.copy()
    missed = afterlook.misses(model, frame)
    worst = missed.misses[0].case
    frame.loc[frame["id"] == worst, "id"] = "<b>PS-01</b>"  # an id that looks like markup
    return model, frame


def test_frames_hold_the_json_numbers(demo):
    model, cases = demo
    missed = afterlook.misses(model, cases)
    doc, frame = missed.to_dict(), missed.to_frame()
    assert list(frame.index) == [m["case"] for m in doc["misses"]]
    np.testing.assert_array_equal(frame["margin"].to_numpy(), [m["margin"] for m in doc["misses"]])
    ex = afterlook.explain(model, cases, "<b>PS-01</b>")
    ef = ex.to_frame()
    assert list(ef.index) == [f["name"] for f in ex.to_dict()["features"]]
    np.testing.assert_array_equal(ef["contribution"].to_numpy(), [f["contribution"] for f in ex.to_dict()["features"]])
    tried = afterlook.try_features(model, cases, derive={"r": "motor_current_a / hydraulic_power"})
    tf = tried.to_frame()
    assert list(tf.index) == ["before", "after"] and tf.loc["after", "tp"] == tried.to_dict()["after"]["tp"]
    assert len(tried.to_frame("cases")) == len(tried.to_dict()["cases"])
    with pytest.raises(ValueError):
        tried.to_frame("nothing")


def test_html_escapes_data(demo):
    model, cases = demo
    html = afterlook.misses(model, cases)._repr_html_()
    assert "&lt;b&gt;PS-01&lt;/b&gt;" in html and "<b>PS-01</b>" not in html
    assert isinstance(afterlook.shape(cases[["flow_m3h", "hours_since_service"]]).to_frame(), pd.DataFrame)
