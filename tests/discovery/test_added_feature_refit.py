"""The fast exact re-fit with one added feature equals the full re-fit.

Reference: afterlook's full re-fit (``try_features``), which is itself
checked against an independent numpy/scipy re-fit in test_try.py; and
the fact that maximum-likelihood estimates of the other columns do not
change when a column is added on the same rows.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import afterlook
from afterlook.core.errors import AfterlookError
from afterlook.demo import generate
from afterlook.analysis.discovery import AddedFeatureRefit
from afterlook.analysis.session import Session
from afterlook.analysis.trial import try_features

EXPRESSIONS = [
    "motor_current_a / (flow_m3h * (discharge_bar - suction_bar))",
    "log(flow_m3h / motor_current_a)",
    "bearing_temp_c - 0.3 * ambient_temp_c",
    "vibration_mm_s ** 2 / flow_m3h",
]


@pytest.fixture(scope="module")
def demo():
    sc = generate(seed=5, n_train=1500, n_cases=600)
    return sc


@pytest.mark.parametrize("kind,shrinkage", [("independent", None), ("full", None), ("full", 0.2)])
@pytest.mark.parametrize("policy", ["f1", "rate:0.02"])
def test_fast_refit_equals_full_refit(demo, kind, shrinkage, policy):
    from afterlook.analysis.session import as_table

    tr, cs = as_table(demo.train), as_table(demo.cases)
    model = afterlook.fit(tr, cases=cs, kind=kind, shrinkage=shrinkage, threshold=policy,
                          transform={"hours_since_service": "log(hours_since_service + 1)"})
    fast = AddedFeatureRefit.prepare(Session(model, cs, tr))
    assert fast is not None
    compared = 0
    for text in EXPRESSIONS:
        outcome = fast.evaluate(text)
        try:
            full = try_features(model, cs, {"candidate": text}, train=tr)
        except AfterlookError:
            # e.g. a linear candidate makes the full covariance singular: the
            # fast path must decline too (and the search then reports it).
            assert outcome is None, text
            continue
        threshold, flagged, conf = outcome.threshold, outcome.flagged, outcome.confusion
        np.testing.assert_allclose(outcome.log_density, Session(full.model, cs).scored.log_density, rtol=1e-9, atol=1e-9)
        assert threshold == pytest.approx(full.threshold_after, rel=1e-9, abs=1e-9)
        assert conf == full.after, text
        ref_flagged = Session(full.model, cs).scored.flagged
        np.testing.assert_array_equal(flagged, ref_flagged)
        compared += 1
    assert compared >= 3


def test_robust_or_ledoit_wolf_fall_back_to_the_full_refit(demo):
    from afterlook.analysis.session import as_table

    tr, cs = as_table(demo.train), as_table(demo.cases)
    model = afterlook.fit(tr, cases=cs, kind="full", shrinkage="ledoit-wolf")
    assert AddedFeatureRefit.prepare(Session(model, cs, tr)) is None


def test_a_candidate_with_nan_on_training_rows_falls_back(demo):
    from afterlook.analysis.session import as_table

    tr, cs = as_table(demo.train), as_table(demo.cases)
    model = afterlook.fit(tr, cases=cs, kind="independent")
    fast = AddedFeatureRefit.prepare(Session(model, cs, tr))
    assert fast.evaluate("log(hours_since_service - 100)") is None  # log of negatives on some rows


@pytest.mark.parametrize("kind,shrinkage", [("full", None), ("independent", None), ("full", 0.2)])
def test_candidates_prepared_together_equal_one_at_a_time(demo, kind, shrinkage):
    # Reference: the same fast re-fit without prefetch (each candidate centred on its own), itself
    # checked against the full re-fit above
    from afterlook.analysis.session import as_table

    tr, cs = as_table(demo.train), as_table(demo.cases)
    model = afterlook.fit(tr, cases=cs, kind=kind, shrinkage=shrinkage)
    alone = AddedFeatureRefit.prepare(Session(model, cs, tr))
    together = AddedFeatureRefit.prepare(Session(model, cs, tr))
    texts = EXPRESSIONS + ["log(hours_since_service - 100)"]  # the last one is NaN on some rows: not prefetched
    together.prefetch(texts)
    for text in texts:
        a, b = alone.evaluate(text), together.evaluate(text)
        assert (a is None) == (b is None), text
        if a is not None:
            np.testing.assert_allclose(b.log_density, a.log_density, rtol=1e-11, atol=1e-11)
            assert b.threshold == pytest.approx(a.threshold, rel=1e-11, abs=1e-11) and b.confusion == a.confusion


def test_centred_cross_equals_the_plain_centred_product():
    # Reference: numpy on the breast-cancer table (scikit-learn's bundled copy): (X - mean)^T (Y - mean) / n
    from sklearn.datasets import load_breast_cancer

    from afterlook.core.search_inputs import centred_cross

    data = load_breast_cancer().data
    X, Y = data[:, :10], data[:, 10:16]
    expected = (X - X.mean(axis=0)).T @ (Y - Y.mean(axis=0)) / X.shape[0]
    np.testing.assert_allclose(centred_cross(X, Y, block=100), expected, rtol=1e-12, atol=1e-12 * np.abs(expected).max())
    # the same from separate columns (how suggest's re-fit passes them), with a last block shorter than the rest
    columns = [np.ascontiguousarray(X[:, j]) for j in range(X.shape[1])]
    ys = [np.ascontiguousarray(Y[:, j]) for j in range(Y.shape[1])]
    np.testing.assert_allclose(centred_cross(columns, ys, block=100), expected, rtol=1e-12,
                               atol=1e-12 * np.abs(expected).max())


def test_same_fit_reads_columns_as_it_reads_the_matrix():
    # Reference: the model fitted on the breast-cancer table (scikit-learn's bundled copy) is found again from
    # its columns, and a model of other rows is not
    from sklearn.datasets import load_breast_cancer

    import afterlook
    from afterlook.core.search_inputs import column_means, same_fit

    X = load_breast_cancer().data[:, :8]
    model = afterlook.fit(pd.DataFrame(X, columns=[f"x{j}" for j in range(8)]), kind="full")
    columns = [np.ascontiguousarray(X[:, j]) for j in range(8)]
    np.testing.assert_allclose(column_means(columns), X.mean(axis=0), rtol=1e-14)
    assert same_fit(model.density, columns, column_means(columns)) is model.density
    assert same_fit(model.density, X, X.mean(axis=0)) is model.density
    other = [c[:-3] for c in columns]
    assert same_fit(model.density, other, column_means(other)) is None


UNIT_EXPRESSIONS = [
    "suction_bar - unit_median(suction_bar)",
    "(suction_bar - unit_median(suction_bar)) / unit_scale(suction_bar) - "
    "(ambient_temp_c - unit_median(ambient_temp_c)) / unit_scale(ambient_temp_c)",
    "motor_current_a / unit_median(motor_current_a) / (flow_m3h / unit_median(flow_m3h))",
]


@pytest.mark.parametrize("kind,shrinkage", [("independent", None), ("full", None), ("full", 0.2)])
def test_fast_refit_of_a_unit_relative_candidate_equals_try(demo, kind, shrinkage):
    # The search freezes a unit candidate's baselines itself (analysis/fleet_search.py) and the fast re-fit
    # uses that frozen expression; reference: try_features, which freezes them again on the training rows.
    from afterlook.analysis.fleet_search import FleetSearch
    from afterlook.analysis.session import as_table
    from afterlook.core import expressions
    from afterlook.core.candidates import Settings

    tr, cs = as_table(demo.train), as_table(demo.cases)
    model = afterlook.fit(tr, cases=cs, kind=kind, shrinkage=shrinkage, unit_col="station", time_col="hour",
                          transform={"hours_since_service": "log(hours_since_service + 1)"})
    session = Session(model, cs, tr)
    fleet = FleetSearch.prepare(session, model.recipe.features, Settings())
    fast = AddedFeatureRefit.prepare(session)
    for text in UNIT_EXPRESSIONS:
        expr = expressions.parse(text).with_frozen(fleet.frozen)
        assert expr.is_fitted
        outcome = fast.evaluate(expr)
        full = try_features(model, cs, {"candidate": text}, train=tr)
        assert full.model.recipe.frozen == {k: v for k, v in fleet.frozen.items() if k in expr.calls}, text
        np.testing.assert_allclose(outcome.log_density, Session(full.model, cs).scored.log_density, rtol=1e-9,
                                   atol=1e-9)
        assert outcome.threshold == pytest.approx(full.threshold_after, rel=1e-9, abs=1e-9)
        assert outcome.confusion == full.after, text
    # a change candidate is NaN on each station's first training reading: the search re-fits it in full (try)
    assert fast.evaluate("suction_bar - lag(suction_bar, 1)") is None


def test_a_candidate_prepared_earlier_is_not_prepared_again_and_refits_the_same(demo, monkeypatch):
    # a spare prepared with the first re-fits is served from that pass; its outcome equals the full re-fit's
    from afterlook.analysis import added_refit
    from afterlook.analysis.session import as_table

    tr, cs = as_table(demo.train), as_table(demo.cases)
    model = afterlook.fit(tr, cases=cs, kind="full")
    fast = AddedFeatureRefit.prepare(Session(model, cs, tr))
    passes = []
    real = added_refit.centred_cross
    monkeypatch.setattr(added_refit, "centred_cross", lambda X, Y, **kw: passes.append(len(Y)) or real(X, Y, **kw))
    fast.prefetch(EXPRESSIONS[:2])  # the first re-fits and their spare
    fast.prefetch(EXPRESSIONS[1:3])  # later: the spare again, and one not prepared
    assert passes == [2, 1]
    outcome = fast.evaluate(EXPRESSIONS[1])
    full = try_features(model, cs, {"candidate": EXPRESSIONS[1]}, train=tr)
    np.testing.assert_allclose(outcome.log_density, Session(full.model, cs).scored.log_density, rtol=1e-9, atol=1e-9)
    assert outcome.confusion == full.after
