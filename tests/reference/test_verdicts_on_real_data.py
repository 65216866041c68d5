"""Verdicts on real labelled data the tool never saw.

Data: the Wisconsin diagnostic breast cancer table (malignant = anomaly) and
the wine table (cultivar 3 = anomaly), both shipped with scikit-learn. Each
is split with fixed seeds into training normals (half the normal rows),
validation cases (a quarter of the normals and anomalies up to ~15% of the
cases) and a holdout (the rest), exactly as ``scripts/evaluate_verdicts.py``
does. The holdout is scored here with numpy and the models' own thresholds;
afterlook never sees it.

Two properties (the second with a stated tolerance):

* following ``recommended`` never lowers F1 on the holdout (and at least one
  run has a recommendation, so the check is not empty);
* the K-fold estimate of the top candidate's F1 after the change is within
  the sampling error of F1 of the holdout's F1: |difference| at most 0.3 in
  every run and at most 0.15 on average. With ~15 anomalies in the cases and
  in the holdout, the binomial standard error of a recall near 0.8 alone is
  about 0.1 (common practice: +-2 standard errors), so tighter bounds would
  test the split, not the tool.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_wine
from sklearn.metrics import f1_score

import afterlook

RUNS = [(name, kind, seed) for name in ("breast_cancer", "wine") for kind in ("independent", "full") for seed in range(4)]


def _table(name):
    data = {"breast_cancer": load_breast_cancer, "wine": load_wine}[name]()
    frame = pd.DataFrame(data.data, columns=[re.sub(r"\W+", "_", c).strip("_").lower() for c in data.feature_names])
    return frame, (data.target == 0) if name == "breast_cancer" else (data.target == 2)


def _split(frame, anomaly, seed, max_share=0.15):
    rng = np.random.default_rng(seed)
    normal = rng.permutation(np.flatnonzero(~anomaly))
    anomalous = rng.permutation(np.flatnonzero(anomaly))
    n = normal.size
    cap = max(2, int(max_share / (1 - max_share) * ((3 * n) // 4 - n // 2)))
    half = min(anomalous.size // 2, cap)

    def table(idx, labelled=True):
        t = frame.iloc[idx].reset_index(drop=True).copy()
        t.insert(0, "id", [f"r{i}" for i in idx])
        if labelled:
            t["label"] = np.where(anomaly[idx], "anomaly", "normal")
        return t

    return (table(normal[: n // 2], labelled=False), table(np.r_[normal[n // 2: (3 * n) // 4], anomalous[:half]]),
            table(np.r_[normal[(3 * n) // 4:], anomalous[half: 2 * half]]))


def _holdout_f1(model, holdout) -> float:
    flagged = model.log_density(holdout) < model.threshold  # NaN: never flagged
    return f1_score((holdout["label"] == "anomaly").to_numpy(), flagged)


@pytest.fixture(scope="module")
def runs():
    out = []
    for name, kind, seed in RUNS:
        frame, anomaly = _table(name)
        train, cases, holdout = _split(frame, anomaly, seed)
        model = afterlook.fit(train, cases=cases, kind=kind)
        misses = [m.case for m in afterlook.misses(model, cases).misses]
        if not misses:
            continue
        result = afterlook.suggest(model, cases, train=train, case_ids=misses, top=5)
        base = _holdout_f1(model, holdout)
        top = result.candidates[0] if result.candidates else None
        after = {}
        for c in {id(c): c for c in filter(None, [top, next((c for c in result.candidates
                                                                if c.name == result.recommended), None)])}.values():
            tried = afterlook.try_features(model, cases, {c.name: c.expression}, train=train)
            after[c.name] = _holdout_f1(tried.model, holdout)
        out.append({"run": (name, kind, seed), "result": result, "base": base, "after": after, "top": top})
    return out


def test_following_recommended_never_lowers_holdout_f1(runs):
    recommended = [r for r in runs if r["result"].recommended is not None]
    assert recommended, "no run recommended anything: the check would be empty"
    for r in recommended:
        gain = r["after"][r["result"].recommended] - r["base"]
        assert gain >= 0, f"{r['run']}: following {r['result'].recommended} changed holdout F1 by {gain:+.3f}"


def test_kfold_estimate_is_within_sampling_error_of_the_holdout(runs):
    diffs = []
    for r in runs:
        top = r["top"]
        if top is None or top.heldout is None:
            continue
        diffs.append(abs(top.heldout.f1_after - r["after"][top.name]))
    assert len(diffs) >= 8
    assert max(diffs) <= 0.3 and float(np.mean(diffs)) <= 0.15, diffs
