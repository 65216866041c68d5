"""A fit records the search's shaping choices in the model file; a search with that file makes none.

Data: scikit-learn's bundled Wisconsin diagnostic breast cancer table (sklearn.datasets.load_breast_cancer):
benign rows as the training rows, every row as labelled cases (malignant = anomaly). References: the
scipy-based one-column search :func:`afterlook.core.shaping.search_transform` (itself checked against
scipy.stats.boxcox / normaltest in tests/core) on the search's own sample, and the same suggest made
with a model that carries no record.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer

import afterlook
from afterlook.analysis import shaping_choices
from afterlook.analysis.session import Session
from afterlook.core import shaping, shaping_fast
from afterlook.core.candidates import Settings
from afterlook.core.search_inputs import finite_sample
from afterlook.store.tables import table_from_frame

DERIVE = {"area_per_perimeter": "mean_area / mean_perimeter"}


@pytest.fixture(scope="module")
def tables():
    data = load_breast_cancer()
    names = [n.replace(" ", "_") for n in data.feature_names[:8]]
    frame = pd.DataFrame(data.data[:, :8], columns=names)
    train = frame[data.target == 1].reset_index(drop=True)
    cases = frame.copy()
    cases["label"] = data.target == 0
    return train, cases


@pytest.fixture(autouse=True)
def _fresh_process(monkeypatch):
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", "off")
    monkeypatch.setattr(shaping_choices, "_SHAPING_CACHE", {})


def _no_search(monkeypatch):
    def searched(*args, **kwargs):
        raise AssertionError("a shaping choice was searched")

    monkeypatch.setattr(shaping_fast, "chosen_transforms", searched)
    monkeypatch.setattr(shaping, "chosen_transform", searched)


def test_the_record_is_the_search_s_own_choice_on_its_own_sample(tables):
    train, cases = tables
    model = afterlook.fit(train, cases=cases, derive=DERIVE, shaping=True)
    record = model.training["shaping"]
    names = model.recipe.features
    assert sorted(record) == sorted(names)  # every feature, the derived one too
    raw = Session(model, table_from_frame(cases, name="cases"), table_from_frame(train, name="train")) \
        .raw_features("normal")
    settings = Settings()
    sample = finite_sample(raw, names, settings.sample_size, settings.random_state)
    for k, name in enumerate(names):
        column = np.ascontiguousarray(sample[:, k])
        want = shaping_choices._as_expression(shaping.search_transform(column, name=name).transform, name)
        assert record[name]["expression"] == want, name
        assert record[name]["key"] == shaping_choices.entry_key(name, shaping_choices._digest(column))
    assert any(e["expression"] for e in record.values())  # some of these columns are skewed enough to be shaped


def test_a_search_with_the_model_file_makes_no_choice_and_finds_the_same(tables, tmp_path, monkeypatch):
    train, cases = tables
    plain = afterlook.fit(train, cases=cases, derive=DERIVE)
    assert "shaping" not in plain.training  # the in-memory fit records nothing unless asked
    reference = afterlook.suggest(plain, cases, train=train).to_dict()
    assert reference["candidates"]

    afterlook.fit(train, cases=cases, derive=DERIVE, shaping=True).save(tmp_path / "model.json")
    monkeypatch.setattr(shaping_choices, "_SHAPING_CACHE", {})  # a new process: only the file knows
    model = afterlook.load_model(tmp_path / "model.json")
    _no_search(monkeypatch)
    assert afterlook.suggest(model, cases, train=train).to_dict() == reference


@pytest.mark.parametrize("other", ["rows", "sample settings"])
def test_a_record_of_another_sample_is_not_used(tables, tmp_path, monkeypatch, other):
    train, cases = tables
    fitted_on = train.iloc[:200] if other == "rows" else train
    settings = Settings(sample_size=250) if other == "sample settings" else None
    reference = afterlook.suggest(afterlook.fit(fitted_on, cases=cases), cases, train=train, settings=settings)
    afterlook.fit(fitted_on, cases=cases, shaping=True).save(tmp_path / "model.json")
    monkeypatch.setattr(shaping_choices, "_SHAPING_CACHE", {})
    model = afterlook.load_model(tmp_path / "model.json")
    real, searched = shaping_fast.chosen_transforms, []
    monkeypatch.setattr(shaping_fast, "chosen_transforms",
                        lambda cols, **k: searched.extend(cols) or real(cols, **k))
    got = afterlook.suggest(model, cases, train=train, settings=settings)
    assert sorted(searched) == sorted(model.recipe.features)  # the search's sample is not the record's
    assert got.to_dict() == reference.to_dict()


def test_the_fit_command_records_the_choices_and_re_fits_do_not(tables, tmp_path, run_cli):
    train, cases = tables
    train.to_csv(tmp_path / "train.csv", index=False)
    cases.to_csv(tmp_path / "cases.csv", index=False)
    code, _, err = run_cli("fit", str(tmp_path / "train.csv"), "--cases", str(tmp_path / "cases.csv"),
                           "--out", str(tmp_path / "model.json"))
    assert code == 0, err
    doc = json.loads((tmp_path / "model.json").read_text("utf-8"))
    assert sorted(doc["training"]["shaping"]) == sorted(doc["model"]["features"])

    from afterlook.analysis.fitting import refit
    from afterlook.analysis.session import resolve_training

    model = afterlook.load_model(tmp_path / "model.json")
    case_table = table_from_frame(cases, name="cases")
    again = refit(model, model.recipe, resolve_training(model, case_table, train), case_table)
    assert "shaping" not in again.training  # a re-fit is compared, not searched
