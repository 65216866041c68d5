"""External checks of the functions whose statistics are frozen at fit (afterlook.core.frozen).

Expected values come from scipy.stats: ``zscore`` (ddof 0, nan_policy
"omit"), ``zmap`` (new scores standardised by a comparison array: the frozen
training statistics), ``boxcox`` and ``yeojohnson`` with a given ``lmbda``,
``norm.logpdf`` for the scored log-density. Data: the Wisconsin diagnostic
breast cancer table (Street, Wolberg and Mangasarian 1993), shipped by
scikit-learn as ``sklearn.datasets.load_breast_cancer``; its benign rows
play the normal population and its malignant rows, whose mean radius is far
higher, the new rows scored.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from afterlook.analysis.fitting import fit
from afterlook.analysis.model import load_model
from afterlook.core import expressions
from afterlook.core.errors import AfterlookError
from afterlook.core.recipe import Recipe


@pytest.fixture(scope="module")
def cancer():
    from sklearn.datasets import load_breast_cancer

    data = load_breast_cancer()
    names = [n.replace(" ", "_") for n in data.feature_names]
    frame = pd.DataFrame(data.data, columns=names)
    benign = frame[data.target == 1].reset_index(drop=True)  # target 1 = benign in scikit-learn's coding
    malignant = frame[data.target == 0].reset_index(drop=True)
    return benign, malignant


def _cols(frame, names):
    return {n: frame[n].to_numpy(dtype=np.float64) for n in names}


def test_zscore_on_the_training_rows_is_scipy_zscore(cancer):
    benign, _ = cancer
    x = benign["mean_radius"].to_numpy()
    expr = expressions.parse("zscore(mean_radius)").fit({"mean_radius": x})
    np.testing.assert_allclose(expr.evaluate({"mean_radius": x}), stats.zscore(x, ddof=0), rtol=1e-12)


def test_zscore_ignores_non_finite_training_values_like_scipy_omit(cancer):
    benign, _ = cancer
    x = benign["mean_texture"].to_numpy().copy()
    x[[3, 17, 40]] = [np.nan, np.inf, -np.inf]
    expr = expressions.parse("zscore(mean_texture)").fit({"mean_texture": x})
    ok = np.isfinite(x)
    expected = stats.zscore(np.where(ok, x, np.nan), ddof=0, nan_policy="omit")
    got = expr.evaluate({"mean_texture": x})
    np.testing.assert_allclose(got[ok], expected[ok], rtol=1e-12, atol=1e-12)
    assert np.isnan(got[~ok]).all()
    assert expr.frozen["zscore(mean_texture)"]["rows"] == int(ok.sum())


def test_zscore_of_new_rows_uses_the_training_statistics_scipy_zmap(cancer):
    benign, malignant = cancer
    expr = expressions.parse("zscore(mean_radius / mean_texture)").fit(_cols(benign, ["mean_radius", "mean_texture"]))
    new = malignant["mean_radius"].to_numpy() / malignant["mean_texture"].to_numpy()
    train = benign["mean_radius"].to_numpy() / benign["mean_texture"].to_numpy()
    got = expr.evaluate(_cols(malignant, ["mean_radius", "mean_texture"]))
    np.testing.assert_allclose(got, stats.zmap(new, train, ddof=0), rtol=1e-12)
    # the scored rows' own statistics would give a very different answer (mean near 0)
    assert abs(got.mean()) > 0.5 and abs(stats.zscore(new).mean()) < 1e-9


def test_zscore_without_frozen_statistics_is_refused_not_taken_from_the_rows(cancer):
    benign, _ = cancer
    with pytest.raises(AfterlookError, match="no statistics frozen from normal rows"):
        expressions.parse("zscore(mean_radius)").evaluate(_cols(benign, ["mean_radius"]))


@pytest.mark.parametrize("p", [-1.0, -0.5, -0.05, 0.0, 0.25, 0.5, 1.0, 2.0])
def test_boxcox_is_scipy_boxcox_with_the_given_lambda(cancer, p):
    benign, _ = cancer
    x = benign["mean_area"].to_numpy()
    got = expressions.parse(f"boxcox(mean_area, {p})").evaluate({"mean_area": x})
    np.testing.assert_allclose(got, stats.boxcox(x, lmbda=p), rtol=1e-12)


def test_boxcox_outside_its_domain_is_nan():
    got = expressions.parse("boxcox(x, -0.5)").evaluate({"x": np.array([-1.0, 0.0, 4.0])})
    assert np.isnan(got[:2]).all() and got[2] == pytest.approx((4.0**-0.5 - 1) / -0.5)


@pytest.mark.parametrize("p", [-1.5, -0.5, 0.0, 0.5, 1.0, 2.0, 2.5])
def test_yeojohnson_is_scipy_yeojohnson_with_the_given_lambda(cancer, p):
    benign, _ = cancer
    # centred, so negative and positive values both occur (Yeo-Johnson's two branches)
    x = benign["mean_smoothness"].to_numpy() - benign["mean_smoothness"].median()
    got = expressions.parse(f"yeojohnson(x, {p})").evaluate({"x": x})
    np.testing.assert_allclose(got, stats.yeojohnson(x, lmbda=p), rtol=1e-10, atol=1e-15)


def test_a_model_with_zscore_saved_loaded_scores_new_rows_with_the_training_statistics(cancer, tmp_path):
    benign, malignant = cancer
    cols = ["mean_radius", "mean_texture"]
    model = fit(benign[cols], kind="independent", threshold="rate:0.01",
                derive={"rel": "zscore(mean_radius) - zscore(mean_texture)"})
    path = tmp_path / "m.json"
    model.save(path)
    doc = json.loads(path.read_text())
    assert doc["version"] == 2
    assert {e["argument"] for e in doc["recipe"]["frozen"]} == set(cols)
    loaded = load_model(path)
    rel = loaded.feature_matrix(malignant[cols]).column("rel")
    expected = (stats.zmap(malignant["mean_radius"], benign["mean_radius"])
                - stats.zmap(malignant["mean_texture"], benign["mean_texture"]))
    np.testing.assert_allclose(rel, expected, rtol=1e-10)
    own = stats.zscore(malignant["mean_radius"]) - stats.zscore(malignant["mean_texture"])
    assert np.max(np.abs(rel - own)) > 1.0  # fails if the scored table's own means were used
    # the log-density: independent Gaussian over the three features (stored mean and variance)
    scored = loaded.score(malignant[cols])
    X = np.column_stack([malignant["mean_radius"], malignant["mean_texture"], expected])
    mean, var = np.asarray(loaded.density.mean_), np.asarray(doc["model"]["variance"])
    ref = stats.norm.logpdf(X, loc=mean, scale=np.sqrt(var)).sum(axis=1)
    np.testing.assert_allclose(scored["log_density"], ref, rtol=1e-9)
    # scoring one row at a time gives the same numbers: nothing depends on the table scored
    one = loaded.score(malignant[cols].iloc[[5]])["log_density"].iloc[0]
    assert one == pytest.approx(scored["log_density"].iloc[5], rel=1e-12)


def test_a_refit_on_other_rows_freezes_their_statistics(cancer):
    benign, malignant = cancer
    recipe = Recipe(["mean_radius"], [("z", "zscore(mean_radius)")])
    a = recipe.fit(_cols(benign, ["mean_radius"]))
    b = a.fit(_cols(malignant, ["mean_radius"]))
    assert a.frozen["zscore(mean_radius)"]["mean"] == pytest.approx(benign["mean_radius"].mean(), rel=1e-12)
    assert b.frozen["zscore(mean_radius)"]["mean"] == pytest.approx(malignant["mean_radius"].mean(), rel=1e-12)
    assert b.frozen["zscore(mean_radius)"]["sd"] == pytest.approx(np.std(malignant["mean_radius"]), rel=1e-12)


OLD_MODEL = Path(__file__).resolve().parents[1] / "store" / "data" / "model-v1-literal-constants.json"
#: the fingerprint the casebook written before frozen statistics existed recorded for this model
OLD_FINGERPRINT = "3865183a97d4e715"


def test_a_model_file_from_before_frozen_statistics_loads_and_scores_as_before(demo_written):
    doc = json.loads(OLD_MODEL.read_text())
    assert doc["version"] == 1 and "frozen" not in doc["recipe"]
    model = load_model(OLD_MODEL)
    assert model.fingerprint() == OLD_FINGERPRINT
    again = model.to_dict()
    assert again["version"] == 1 and again["recipe"] == doc["recipe"]
    cases = pd.read_csv(demo_written.cases)
    ld = model.score(cases)["log_density"].to_numpy()
    # independent reference: the literal expressions in plain numpy, scipy's normal log-density
    c = {n: cases[n].to_numpy(dtype=np.float64) for n in cases.columns if cases[n].dtype.kind in "fi"}
    derived = {}
    derived["hydraulic_power"] = c["flow_m3h"] * (c["discharge_bar"] - c["suction_bar"])
    a, h = c["motor_current_a"], derived["hydraulic_power"]
    derived["shaped_motor_current_a_vs_hydraulic_power"] = (
        ((-(a ** -0.05)) + 0.824271) / 0.0165608 - ((-(h ** -0.05)) + 0.720919) / 0.0159193)
    assert [d["expression"] for d in doc["recipe"]["derived"]] == [
        "flow_m3h * (discharge_bar - suction_bar)",
        "((-(motor_current_a ** -0.05)) + 0.824271) / 0.0165608 - ((-(hydraulic_power ** -0.05)) + 0.720919) / 0.0159193"]
    values = {**c, **derived}
    values["hours_since_service"] = np.log(c["hours_since_service"] + 1)  # the recipe's transform
    X = np.column_stack([values[n] for n in doc["model"]["features"]])
    ref = stats.norm.logpdf(X, loc=doc["model"]["mean"], scale=np.sqrt(doc["model"]["variance"])).sum(axis=1)
    ok = np.isfinite(ref)
    assert ok.sum() > 0.9 * len(ref)
    np.testing.assert_allclose(ld[ok], ref[ok], rtol=1e-9)
