"""The search remembers its per-column shaping choices; a remembered choice equals a fresh search.

Reference: :func:`afterlook.core.shaping.search_transform` run afresh on the same sample.
"""

from __future__ import annotations

import numpy as np

from afterlook.analysis import shaping_choices
from afterlook.core.shaping import search_transform



def test_remembered_choices_equal_a_fresh_search(monkeypatch):
    rng = np.random.default_rng(3)
    sample = {"skewed": rng.lognormal(0.0, 0.9, 4000), "plain": rng.normal(size=4000),
              "other skewed": rng.exponential(3.0, 4000) + 1.0}
    monkeypatch.setattr(shaping_choices, "_SHAPING_CACHE", {})
    first = shaping_choices.expressions({}, sample)
    assert len(shaping_choices._SHAPING_CACHE) == 3
    calls = []
    monkeypatch.setattr("afterlook.core.shaping.chosen_transform", lambda *a, **k: calls.append(a))
    monkeypatch.setattr("afterlook.core.shaping_fast.chosen_transforms", lambda *a, **k: calls.append(a))
    again = shaping_choices.expressions({}, sample)
    assert again == first and calls == []  # served from memory
    fresh = {n: shaping_choices._as_expression(search_transform(v, name=n).transform, n) for n, v in sample.items()}
    assert first == {n: t for n, t in fresh.items() if t}
    assert "skewed" in first and "plain" not in first
    # other values under the same name are searched again
    changed = dict(sample, skewed=sample["skewed"] * 2.0)
    monkeypatch.undo()
    monkeypatch.setattr(shaping_choices, "_SHAPING_CACHE", dict(shaping_choices._SHAPING_CACHE))
    assert shaping_choices.expressions({}, changed)["skewed"] == shaping_choices._as_expression(
        search_transform(changed["skewed"], name="skewed").transform, "skewed")
