"""The affine-dependence check on a seeded subset of rows agrees with the check on every row.

Reference: :class:`afterlook.core.collinear.LinearSpan` over all rows (itself checked against
numpy's matrix rank in tests/core/test_collinear.py), on every pair candidate of real columns:
the Wisconsin diagnostic breast-cancer table bundled with scikit-learn, its rows resampled
(a bootstrap of the real values) to many more rows than the subset.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.datasets import load_breast_cancer

import afterlook
from afterlook.analysis import discovery
from afterlook.core import candidates as cand
from afterlook.core import expressions
from afterlook.core.collinear import LinearSpan


def _sample(columns: int, rows: int):
    data = load_breast_cancer()
    names = [n.replace(" ", "_") for n in data.feature_names[:columns]]
    rng = np.random.default_rng(0)
    X = data.data[rng.integers(0, data.data.shape[0], rows), :columns]
    return names, X


def test_subset_rule_equals_the_full_check_on_every_pair_candidate():
    names, X = _sample(12, 20_000)
    model = afterlook.fit(pd.DataFrame(X, columns=names), kind="full")
    sample = {n: X[:, k] for k, n in enumerate(names)}
    shaped = {names[0]: f"log({names[0]})", names[5]: f"{names[5]} ** 0.5"}
    found, _, _ = cand.generate_and_screen(names, sample, X[:1] * 1.1, shaped, select=False)
    # a few more, near the floor from both sides: affine, and affine plus a small curvature
    extra = [f"{names[0]} - 2.5 * {names[1]} + 3", f"{names[0]} + 0.001 * {names[1]} ** 2",
             f"{names[2]} + 1e-4 * log({names[3]})"]
    found += [cand.Candidate(e, "extra", (names[0], names[1]), 0.0) for e in extra]
    span = LinearSpan(X)
    full = {c.expression: not span.contains(expressions.parse(c.expression).fit(sample).evaluate(sample)) for c in found}
    kept, dropped = discovery._addable(model, sample, list(found))
    subset = {c.expression: False for c in found} | {c.expression: True for c in kept}
    assert subset == full
    assert dropped == sum(not v for v in full.values())
    assert dropped >= 60 and len(kept) >= 300  # both outcomes are exercised (standardized differences are affine)
    assert full[extra[1]] and not full[extra[0]]  # the small curvature is kept, the affine one dropped


def test_the_subset_is_only_a_few_hundred_rows():
    names, X = _sample(6, 50_000)
    model = afterlook.fit(pd.DataFrame(X, columns=names), kind="full")
    seen = []
    recipe = type(model.recipe)

    class Spy(recipe):  # records the rows the check looks at
        def transform_features(self, columns):
            seen.append(len(next(iter(columns.values()))))
            return super().transform_features(columns)

    model.recipe.__class__ = Spy
    sample = {n: X[:, k] for k, n in enumerate(names)}
    discovery._addable(model, sample, [cand.Candidate(f"{names[0]} / {names[1]}", "ratio", (names[0], names[1]), 0.0)])
    assert seen == [discovery.ADDABLE_ROWS]
