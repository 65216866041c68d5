"""The second pass's two steps (rank every chosen candidate on a seeded subset of the normal sample,
then measure the ones that can be listed on the whole sample) list what measuring everything on the
whole sample lists, with the same numbers.

Reference: the one-step second pass (every chosen candidate measured on every sample row; the
subset switched off), on real columns: the Wisconsin diagnostic breast-cancer table bundled with
scikit-learn, its benign rows resampled (a bootstrap of the real values) to many more rows than the
subset, and its malignant rows as the targets.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer

from afterlook.core import candidates as cand
from afterlook.core import measure as measure_module

FIELDS = ("expression", "case_z", "tail", "tail_method", "adjusted_tail", "beyond_chance", "targets_exposed",
          "other_anomalies_separated", "other_misses_separated", "case_z_by_case", "tail_by_case")


def _inputs(rows: int, columns: int, targets: int):
    data = load_breast_cancer()
    names = [n.replace(" ", "_") for n in data.feature_names[:columns]]
    benign = data.data[data.target == 1, :columns]
    malignant = data.data[data.target == 0, :columns]
    rng = np.random.default_rng(1)
    X = benign[rng.integers(0, benign.shape[0], rows)] * rng.uniform(0.995, 1.005, (rows, columns))  # few ties
    sample = {n: X[:, k] for k, n in enumerate(names)}
    T = malignant[:targets]
    O = malignant[targets:targets + 40]
    return names, sample, T, O


def _second_pass(names, sample, T, O, quick_rows, monkeypatch):
    monkeypatch.setattr(measure_module, "QUICK_ROWS", quick_rows)
    found, tried, _ = cand.generate_and_screen(names, sample, T, None, select=True)
    target_cols = {n: T[:, k] for k, n in enumerate(names)}
    other_cols = {n: O[:, k] for k, n in enumerate(names)}
    is_miss = np.arange(len(O)) % 2 == 0
    measure = cand.RobustMeasure(sample, target_cols, [f"t{k}" for k in range(len(T))], other_cols, is_miss,
                                 tried, cand.Settings())
    ranked = cand.second_pass(found, tried, sample, target_cols, [f"t{k}" for k in range(len(T))], other_cols,
                              is_miss, cand.Settings(), measure=measure)
    return ranked, measure


def _fields(c):
    return {f: getattr(c, f) for f in FIELDS}


@pytest.mark.parametrize("targets", [1, 3])
def test_the_listed_head_equals_measuring_everything_whole(targets, monkeypatch):
    names, sample, T, O = _inputs(40_000, 10, targets)
    whole, _ = _second_pass(names, sample, T, O, 10**9, monkeypatch)  # subset off: every candidate whole
    two, measure = _second_pass(names, sample, T, O, 4096, monkeypatch)
    assert measure.quick_sample is not None  # the two steps really ran
    assert all(c.rows_used == 40_000 for c in whole)
    assert all(c.rows_used == 40_000 for c in two[:cand.EXACT_FIRST])
    assert any(c.rows_used == -4096 for c in two[cand.EXACT_FIRST:])  # the rest were measured on the subset only
    # what suggest re-fits and lists first (at least discovery.EXACT_AT_LEAST): the same, with the same numbers;
    # further down the subset's ranking may differ (measured: from about the 17th on 4,096 rows here)
    head = 12
    assert [_fields(c) for c in two[:head]] == [_fields(c) for c in whole[:head]]


def test_more_rows_on_demand_keep_the_order_of_measuring_everything_whole(monkeypatch):
    names, sample, T, O = _inputs(40_000, 10, 1)
    whole, _ = _second_pass(names, sample, T, O, 10**9, monkeypatch)
    two, measure = _second_pass(names, sample, T, O, 4096, monkeypatch)
    more = measure.exact_prefix(two, 60)
    assert all(c.rows_used == 40_000 for c in more[:60])
    assert [c.expression for c in more[:60]] == [c.expression for c in whole[:60]]


def test_a_small_sample_is_measured_whole_in_one_step(monkeypatch):
    names, sample, T, O = _inputs(3_000, 8, 1)
    ranked, measure = _second_pass(names, sample, T, O, cand.QUICK_ROWS, monkeypatch)
    assert measure.quick_sample is None
    assert ranked and all(c.rows_used == 3_000 for c in ranked)


def test_suggest_lists_the_same_as_measuring_everything_whole(monkeypatch):
    """The whole call: the listed candidates, their numbers, verdicts and held-out gains, with the screen
    and the second pass each on a 4,096-row subset against both on the whole sample."""
    import pandas as pd

    import afterlook
    from afterlook.analysis import discovery

    data = load_breast_cancer()
    names = [n.replace(" ", "_") for n in data.feature_names[:10]]
    benign = data.data[data.target == 1, :10]
    malignant = data.data[data.target == 0, :10]
    rng = np.random.default_rng(2)
    train = pd.DataFrame(benign[rng.integers(0, benign.shape[0], 30_000)] * rng.uniform(0.995, 1.005, (30_000, 10)),
                         columns=names)
    cases = pd.DataFrame(np.vstack([benign, malignant]), columns=names)
    cases["label"] = ["normal"] * len(benign) + ["anomaly"] * len(malignant)
    cases["id"] = [f"r{k}" for k in range(len(cases))]
    model = afterlook.fit(train, cases=cases, kind="full")

    def listed(subset_rows):
        monkeypatch.setattr(measure_module, "QUICK_ROWS", subset_rows)
        monkeypatch.setattr(discovery, "SCREEN_ROWS", subset_rows)
        out = afterlook.suggest(model, cases, train=train, top=10).to_dict()
        out.pop("beyond_chance_total")  # counted over every measured candidate, most on the subset
        out.pop("verdict")  # says that count
        for c in out["candidates"]:
            c.pop("first_pass_z")  # the screen's own statistic, on the rows the screen read
        return out

    whole = listed(10**9)
    assert len(whole["candidates"]) == 10
    assert listed(4096) == whole
