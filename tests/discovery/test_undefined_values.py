"""A derived feature undefined on finite readings is evidence, not silence.

The data are built here so the truth is known: ``ratio = a / b`` is undefined
exactly where ``b == 0`` while ``a`` and ``b`` are finite readings; a missing
reading (NaN) stays unscored. The threshold checks compare with an exhaustive
search over every cut written in the test (flag = log-density below the cut,
-inf always flagged), and with scikit-learn's ``f1_score``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import f1_score

from afterlook.core.thresholds import apply_undefined_policy, best_f1_threshold, flag, rate_threshold

DERIVE = "a_per_b=a / b"


def test_cases_outside_a_domain_are_always_flagged_by_the_f1_search():
    rng = np.random.default_rng(3)
    ld = rng.normal(-10, 3, 60)
    y = rng.random(60) < 0.25
    ld[[2, 5, 9]] = -np.inf  # outside a domain: flagged by any threshold
    ld[11] = np.nan  # unscored: never flagged
    thr, conf = best_f1_threshold(ld, y)
    cuts = np.r_[np.sort(ld[np.isfinite(ld)]) + 1e-9, -np.inf]
    best = max(f1_score(y, flag(ld, c), zero_division=0) for c in cuts)
    assert conf.f1 == pytest.approx(best, abs=1e-12)
    assert conf.f1 == pytest.approx(f1_score(y, flag(ld, thr)), abs=1e-12)
    assert flag(ld, thr)[[2, 5, 9]].all() and not flag(ld, thr)[11]


def test_normal_rows_outside_a_domain_count_against_the_false_alarm_budget():
    ld = np.r_[np.arange(100.0), [-np.inf] * 2, [np.nan] * 3]
    thr = rate_threshold(ld, 0.05)  # 5 of the 102 scored rows may be flagged; two already are
    assert int(flag(ld, thr).sum()) == 5


def test_the_policy_only_touches_undefined_values_on_finite_readings():
    ld = np.array([1.0, np.nan, np.nan])
    inputs_ok = np.array([True, True, False])
    np.testing.assert_array_equal(apply_undefined_policy(ld, inputs_ok, "flag"), [1.0, -np.inf, np.nan])
    np.testing.assert_array_equal(apply_undefined_policy(ld, inputs_ok, "skip"), [1.0, np.nan, np.nan])


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    rng = np.random.default_rng(11)
    n = 800
    a = rng.normal(50, 5, n)
    b = a / 2 * (1 + 0.02 * rng.normal(size=n))
    pd.DataFrame({"a": a, "b": b}).to_csv(tmp_path_factory.mktemp("u") / "train.csv", index=False)
    folder = tmp_path_factory.mktemp("undefined")
    pd.DataFrame({"a": a, "b": b}).to_csv(folder / "train.csv", index=False)
    m = 200
    ca = rng.normal(50, 5, m)
    cb = ca / 2 * (1 + 0.02 * rng.normal(size=m))
    label = np.array(["normal"] * m, dtype=object)
    # anomalies: the ratio broken (a few), one with a zero divisor (its a far out, so the base model flags it),
    # one with a missing reading; and one normal case with a zero divisor
    cb[:6] = ca[:6] / 2 * 1.4
    label[:6] = "anomaly"
    ca[6], cb[6], label[6] = 95.0, 0.0, "anomaly"
    cb[7], label[7] = np.nan, "anomaly"
    cb[8] = 0.0
    cases = pd.DataFrame({"id": [f"c{i}" for i in range(m)], "a": ca, "b": cb, "label": label})
    cases.to_csv(folder / "cases.csv", index=False)
    return folder


def test_misses_flag_the_zero_divisor_and_count_it_apart(files, run_cli, one_json):
    d = files
    code, _, err = run_cli("fit", d / "train.csv", "--cases", d / "cases.csv", "--derive", DERIVE, "--kind", "full",
                           "--out", d / "flag.json")
    assert code == 0, err
    code, out, err = run_cli("misses", d / "flag.json", d / "cases.csv", "--json")
    assert code == 0, err
    doc = one_json(out)
    assert doc["outside_domain"] == {"anomalies": ["c6"], "normal_cases": ["c8"]}
    assert doc["unscored_anomalies"] == ["c7"]  # a missing reading stays unscored
    assert "c6" not in [m["case"] for m in doc["misses"]]
    assert doc["metrics"]["fp"] >= 1  # the normal case with a zero divisor is a false alarm
    assert "undefined on finite readings" in err

    code, _, err = run_cli("fit", d / "train.csv", "--cases", d / "cases.csv", "--derive", DERIVE, "--kind", "full",
                           "--undefined", "skip", "--out", d / "skip.json")
    assert code == 0, err
    code, out, err = run_cli("misses", d / "skip.json", d / "cases.csv", "--json")
    assert sorted(one_json(out)["unscored_anomalies"]) == ["c6", "c7"]


def test_try_does_not_silently_unflag_a_case_whose_new_feature_is_undefined(files, run_cli, one_json):
    d = files
    code, _, err = run_cli("fit", d / "train.csv", "--cases", d / "cases.csv", "--kind", "independent",
                           "--out", d / "base.json")
    assert code == 0, err
    code, out, err = run_cli("try", d / "base.json", d / "cases.csv", "--derive", DERIVE, "--train", d / "train.csv",
                             "--case", "c6", "--json")
    assert code == 0, err
    doc = one_json(out)
    row = next(r for r in doc["cases"] if r["case"] == "c6")
    assert row["before"]["flagged"] and row["after"]["flagged"]
    assert doc["after"]["outside_domain"] == 2 and doc["before"]["outside_domain"] == 0
    assert "undefined on finite readings" in err
