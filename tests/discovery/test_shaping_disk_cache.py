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
