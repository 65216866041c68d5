"""Shaping choices remembered on disk between processes give the same search as a fresh one.

Data: scikit-learn's bundled Wisconsin diagnostic breast cancer table (sklearn.datasets.load_breast_cancer),
benign rows as the normal population. The reference for every choice is a fresh search with the disk cache
off (itself checked against scipy.stats.boxcox / normaltest in tests/core).
"""

from __future__ import annotations

import pytest

from afterlook.analysis import shaping_choices
from afterlook.core import shaping_fast


@pytest.fixture(scope="module")
def breast_cancer():
    from sklearn.datasets import load_breast_cancer

    data = load_breast_cancer(as_frame=True)
    frame = data.frame.drop(columns="target")
    benign = data.target.to_numpy() == 1
    return {name: frame[name].to_numpy(dtype=float)[benign] for name in frame.columns[:12]}



def _fresh_process(monkeypatch):
    monkeypatch.setattr(shaping_choices, "_SHAPING_CACHE", {})


def test_a_new_process_reads_the_choices_instead_of_searching(breast_cancer, tmp_path, monkeypatch):
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", "off")
    _fresh_process(monkeypatch)
    reference = shaping_choices.expressions({}, breast_cancer)
    assert reference  # some of these columns are skewed enough to be shaped

    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(tmp_path))
    _fresh_process(monkeypatch)
    assert shaping_choices.expressions({}, breast_cancer) == reference
    assert len(list((tmp_path / "shaping").glob("*.json"))) == len(breast_cancer)  # one entry per column

    _fresh_process(monkeypatch)
    searched = []
    monkeypatch.setattr(shaping_fast, "chosen_transforms", lambda cols, **k: searched.append(list(cols)) or {})
    assert shaping_choices.expressions({}, breast_cancer) == reference
    assert searched == []  # every choice came from disk


def test_other_values_under_the_same_name_are_searched_again(breast_cancer, tmp_path, monkeypatch):
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(tmp_path))
    _fresh_process(monkeypatch)
    shaping_choices.expressions({}, breast_cancer)
    changed = dict(breast_cancer, **{"mean area": breast_cancer["mean area"] ** 0.5})
    _fresh_process(monkeypatch)
    real = shaping_fast.chosen_transforms
    searched = []
    monkeypatch.setattr(shaping_fast, "chosen_transforms",
                        lambda cols, **k: searched.append(sorted(cols)) or real(cols, **k))
    got = shaping_choices.expressions({}, changed)
    assert searched == [["mean area"]]  # only the column whose values changed
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", "off")
    _fresh_process(monkeypatch)
    monkeypatch.setattr(shaping_fast, "chosen_transforms", real)
    assert got == shaping_choices.expressions({}, changed)


def test_an_entry_from_other_code_is_not_read(breast_cancer, tmp_path, monkeypatch):
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(tmp_path))
    _fresh_process(monkeypatch)
    shaping_choices.expressions({}, breast_cancer)
    _fresh_process(monkeypatch)
    monkeypatch.setattr(shaping_choices, "_shaping_code_digest", b"another release or an edited checkout")
    searched = []
    real = shaping_fast.chosen_transforms
    monkeypatch.setattr(shaping_fast, "chosen_transforms", lambda cols, **k: searched.append(1) or real(cols, **k))
    shaping_choices.expressions({}, breast_cancer)
    assert searched == [1]


def test_damaged_entries_are_searched_again(breast_cancer, tmp_path, monkeypatch):
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", "off")
    _fresh_process(monkeypatch)
    reference = shaping_choices.expressions({}, breast_cancer)
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(tmp_path))
    _fresh_process(monkeypatch)
    shaping_choices.expressions({}, breast_cancer)
    for p in (tmp_path / "shaping").glob("*.json"):
        p.write_text('{"key": "' + p.stem + '", "value": {"expression": 7}}')  # parses, but not an expression
    _fresh_process(monkeypatch)
    assert shaping_choices.expressions({}, breast_cancer) == reference


def _stored(folder):
    import json

    return sorted(json.loads(p.read_text())["value"]["expression"] or "" for p in (folder / "shaping").glob("*.json"))


def test_a_search_with_nothing_stored_searches_first_and_ends_as_a_lookup_first_search_does(
        breast_cancer, tmp_path, monkeypatch):
    # shaping_choices.Choices (what suggest runs beside its screen) searches at once when nothing stored could
    # answer and computes the keys meanwhile; the reference is expressions(), which looks every column up first:
    # the same choices, remembered in this process and written to the cache folder under the same keys.
    reference_folder, folder = tmp_path / "reference", tmp_path / "choices"
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(reference_folder))
    _fresh_process(monkeypatch)
    reference = shaping_choices.expressions({}, breast_cancer)
    remembered = dict(shaping_choices._SHAPING_CACHE)

    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(folder))
    _fresh_process(monkeypatch)
    job = shaping_choices.Choices({}, breast_cancer)
    assert job._search_first  # an empty process, no record, no folder yet
    assert job.result() == reference
    job.stop()
    assert shaping_choices._SHAPING_CACHE == remembered
    assert sorted(p.name for p in (folder / "shaping").glob("*.json")) == \
        sorted(p.name for p in (reference_folder / "shaping").glob("*.json"))
    assert _stored(folder) == _stored(reference_folder)


def test_anything_stored_that_could_answer_makes_the_search_look_up_first(breast_cancer, tmp_path, monkeypatch):
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", "off")
    _fresh_process(monkeypatch)
    name = next(iter(breast_cancer))
    assert not shaping_choices._could_answer(breast_cancer, None)
    assert shaping_choices._could_answer(breast_cancer, {name: {"key": "k", "expression": None}})  # a model record
    shaping_choices._remember((name, b"other values"), None)  # a choice of this process under that name
    assert shaping_choices._could_answer(breast_cancer, None)
    _fresh_process(monkeypatch)
    monkeypatch.setenv("AFTERLOOK_CACHE_DIR", str(tmp_path))
    assert not shaping_choices._could_answer(breast_cancer, None)  # the folder does not exist yet
    shaping_choices.expressions({}, {name: breast_cancer[name]})  # writes one entry
    _fresh_process(monkeypatch)
    assert shaping_choices._could_answer(breast_cancer, None)
    job = shaping_choices.Choices({}, breast_cancer)
    assert not job._search_first
    got = job.result()
    job.stop()
    assert got == shaping_choices.expressions({}, breast_cancer)
