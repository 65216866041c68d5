"""Imported scikit-learn detectors score exactly as the estimator does.

Source of the data: scikit-learn's bundled breast-cancer table
(``sklearn.datasets.load_breast_cancer``; Wisconsin Diagnostic Breast Cancer,
569 rows). Benign rows (target 1) are the normal population the estimators
are fitted on; malignant rows (target 0) are the labelled anomalies among the
cases. References: the estimators' own ``mahalanobis`` (squared distances),
``score`` (mean log-likelihood of a Gaussian), ``score_samples`` and
``predict``, and numpy's ``slogdet`` for the log-density's constant.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import afterlook
from afterlook.core.errors import AfterlookError

COLUMNS = ["mean radius", "mean texture", "mean smoothness", "mean symmetry", "mean concavity"]
RTOL = 1e-9


@pytest.fixture(scope="module")
def cancer():
    from sklearn.datasets import load_breast_cancer

    frame = load_breast_cancer(as_frame=True).frame
    cases = frame[COLUMNS].copy()
    cases["label"] = np.where(frame["target"] == 0, "anomaly", "normal")  # malignant = anomaly
    normal = frame.loc[frame["target"] == 1, COLUMNS].to_numpy()
    return normal, cases


def covariance_estimators():
    from sklearn.covariance import OAS, EllipticEnvelope, EmpiricalCovariance, LedoitWolf, MinCovDet, ShrunkCovariance

    return [EmpiricalCovariance(), MinCovDet(random_state=0), LedoitWolf(), OAS(), ShrunkCovariance(shrinkage=0.2),
            EllipticEnvelope(random_state=0, contamination=0.05)]


def gaussian_constant(location, covariance) -> float:
    """``-1/2 (d log 2 pi + log|S|)`` from numpy's slogdet: the additive constant of a Gaussian log-density."""
    sign, logdet = np.linalg.slogdet(covariance)
    assert sign > 0
    return -0.5 * (len(location) * np.log(2 * np.pi) + logdet)


@pytest.mark.parametrize("estimator", covariance_estimators(), ids=lambda e: type(e).__name__)
def test_covariance_estimators_score_as_their_mahalanobis_distance(cancer, estimator):
    normal, cases = cancer
    estimator.fit(normal)
    model = afterlook.from_estimator(estimator, COLUMNS, cases=cases)
    X = cases[COLUMNS].to_numpy()
    ld = model.log_density(cases)
    # log p(x) = C - m(x) / 2 with m the estimator's squared Mahalanobis distance (sklearn's mahalanobis)
    expected = gaussian_constant(estimator.location_, estimator.covariance_) - 0.5 * estimator.mahalanobis(X)
    np.testing.assert_allclose(ld, expected, rtol=RTOL)
    # sklearn's score() is the mean Gaussian log-likelihood under (location_, covariance_)
    assert np.mean(ld) == pytest.approx(estimator.score(X) if not hasattr(estimator, "offset_")
                                        else _mean_loglik(estimator, X), rel=RTOL)
    flagged = model.score(cases)["flagged"].to_numpy()
    if hasattr(estimator, "offset_"):
        # EllipticEnvelope: its decision offset is the threshold; predict == -1 exactly where afterlook flags
        assert model.threshold_basis.startswith("EllipticEnvelope offset_")
        np.testing.assert_array_equal(flagged, estimator.predict(X) == -1)
        # and its score_samples (-m) is afterlook's log-density up to the constant, times 2
        np.testing.assert_allclose(ld - 0.5 * estimator.score_samples(X),
                                   np.full(len(X), gaussian_constant(estimator.location_, estimator.covariance_)),
                                   rtol=RTOL)
    else:
        # the same threshold on the estimator's own scale: m(x) > 2 (C - threshold)
        cut = 2 * (gaussian_constant(estimator.location_, estimator.covariance_) - model.threshold)
        np.testing.assert_array_equal(flagged, estimator.mahalanobis(X) > cut)
        assert str(model.policy) == "f1"  # labelled anomalies among the cases: fit's default policy
    assert 0 < flagged.sum() < len(X)


def _mean_loglik(estimator, X):
    """The Gaussian mean log-likelihood sklearn's EmpiricalCovariance.score computes (EllipticEnvelope overrides score)."""
    from sklearn.covariance import EmpiricalCovariance

    return EmpiricalCovariance.score(estimator, X)


@pytest.mark.parametrize("covariance_type", ["full", "diag", "tied", "spherical"])
def test_one_component_mixture_is_exactly_its_log_density(cancer, covariance_type):
    from sklearn.mixture import GaussianMixture

    normal, cases = cancer
    gm = GaussianMixture(n_components=1, covariance_type=covariance_type, random_state=0).fit(normal)
    model = afterlook.from_estimator(gm, COLUMNS, cases=cases)
    X = cases[COLUMNS].to_numpy()
    ld = model.log_density(cases)
    # GaussianMixture.score_samples is the log-density itself (one component, weight 1)
    np.testing.assert_allclose(ld, gm.score_samples(X), rtol=RTOL)
    assert model.kind == ("independent" if covariance_type in ("diag", "spherical") else "full")
    flagged = model.score(cases)["flagged"].to_numpy()
    np.testing.assert_array_equal(flagged, gm.score_samples(X) < model.threshold)
    assert str(model.policy) == "f1"


def test_a_rate_threshold_sits_on_a_case_and_agrees_up_to_that_tie(cancer):
    """A rate threshold is a case's own log-density (core.thresholds.rate_threshold), so the
    estimator's score for that one case may fall on either side by a last-bit difference."""
    from sklearn.mixture import GaussianMixture

    normal, cases = cancer
    gm = GaussianMixture(n_components=1, covariance_type="diag", random_state=0).fit(normal)
    model = afterlook.from_estimator(gm, COLUMNS, threshold="rate:0.05", cases=cases)
    reference = gm.score_samples(cases[COLUMNS].to_numpy())
    flagged = model.score(cases)["flagged"].to_numpy()
    differ = flagged != (reference < model.threshold)
    assert np.all(np.abs(reference[differ] - model.threshold) <= RTOL * abs(model.threshold))
    # rate:0.05 on the 357 benign cases: at most floor(0.05 * 357) = 17 of them flagged
    assert flagged[cases["label"].to_numpy() == "normal"].sum() <= 17


def test_from_parameters_numpy_detector_matches_scipy(cancer):
    from scipy.stats import multivariate_normal

    normal, cases = cancer
    mean, cov = normal.mean(axis=0), np.cov(normal, rowvar=False, bias=True)
    model = afterlook.from_parameters(mean, cov, columns=COLUMNS, threshold=-5.0)
    X = cases[COLUMNS].to_numpy()
    # scipy.stats.multivariate_normal.logpdf: the reference Gaussian log-density
    np.testing.assert_allclose(model.log_density(cases), multivariate_normal(mean, cov).logpdf(X), rtol=RTOL)
    independent = afterlook.from_parameters(mean, variances=normal.var(axis=0), columns=COLUMNS, threshold=-5.0)
    from scipy.stats import norm

    np.testing.assert_allclose(independent.log_density(cases),
                               norm.logpdf(X, mean, normal.std(axis=0)).sum(axis=1), rtol=RTOL)


def test_derived_features_and_transforms_are_represented_exactly(cancer):
    from scipy.stats import multivariate_normal
    from sklearn.covariance import MinCovDet

    normal, cases = cancer
    frame = pd.DataFrame(normal, columns=COLUMNS)
    # the practitioner's own features: a ratio and a logged column, in their own order
    feats = pd.DataFrame({
        "ratio": frame["mean radius"] / frame["mean texture"],
        "mean radius": frame["mean radius"],
        "mean concavity": np.log(frame["mean concavity"] + 0.01),
    })
    est = MinCovDet(random_state=0).fit(feats.to_numpy())
    model = afterlook.from_estimator(est, list(feats.columns), threshold=-1.0,
                                     derive={"ratio": "`mean radius` / `mean texture`"},
                                     transforms={"mean concavity": "log(`mean concavity` + 0.01)"})
    assert model.features == ["mean radius", "mean concavity", "ratio"]  # afterlook's order: base, then derived
    case_feats = np.column_stack([cases["mean radius"] / cases["mean texture"], cases["mean radius"],
                                  np.log(cases["mean concavity"] + 0.01)])
    expected = multivariate_normal(est.location_, est.covariance_).logpdf(case_feats)
    np.testing.assert_allclose(model.log_density(cases), expected, rtol=RTOL)


def test_without_threshold_or_cases_the_models_own_tail_is_used(cancer):
    from scipy.stats import chi2
    from sklearn.covariance import EmpiricalCovariance

    normal, cases = cancer
    est = EmpiricalCovariance().fit(normal)
    model = afterlook.from_estimator(est, COLUMNS)
    assert str(model.policy) == "rate:0.01"
    assert any("chi-square" in w for w in model.warnings)
    # 1% of the model's own Gaussian lies beyond the chi-square(d) 99% point (scipy.stats.chi2)
    cut = 2 * (gaussian_constant(est.location_, est.covariance_) - model.threshold)
    assert cut == pytest.approx(chi2.ppf(0.99, len(COLUMNS)), rel=RTOL)
    # a rate without labelled normal cases uses the same tail
    assert afterlook.from_estimator(est, COLUMNS, threshold="rate:0.01").threshold == pytest.approx(model.threshold)


def test_imported_model_saves_and_loads_without_training_rows(cancer, tmp_path):
    from sklearn.covariance import LedoitWolf

    normal, cases = cancer
    model = afterlook.from_estimator(LedoitWolf().fit(normal), COLUMNS, cases=cases)
    assert model.quantiles is None and model.imported["source"].startswith("scikit-learn")
    model.save(tmp_path / "m.json")
    again = afterlook.load_model(tmp_path / "m.json")
    assert again.imported == model.imported and again.quantiles is None
    assert again.fingerprint() == model.fingerprint()
    np.testing.assert_array_equal(again.log_density(cases), model.log_density(cases))
    assert again.density.shrinkage == "ledoit-wolf"


def test_refusals_are_one_clear_line(cancer):
    from sklearn.covariance import EmpiricalCovariance
    from sklearn.ensemble import IsolationForest
    from sklearn.mixture import GaussianMixture

    normal, _ = cancer
    with pytest.raises(AfterlookError, match="cannot import a IsolationForest"):
        afterlook.from_estimator(IsolationForest(), COLUMNS)
    with pytest.raises(AfterlookError, match="not fitted"):
        afterlook.from_estimator(EmpiricalCovariance(), COLUMNS)
    with pytest.raises(AfterlookError, match="2 components"):
        afterlook.from_estimator(GaussianMixture(2, random_state=0).fit(normal), COLUMNS)
    with pytest.raises(AfterlookError, match="fitted on 5"):
        afterlook.from_estimator(EmpiricalCovariance().fit(normal), COLUMNS[:3])
    with pytest.raises(AfterlookError, match="exactly one of covariance"):
        afterlook.from_parameters([0, 0], columns=["a", "b"])
    with pytest.raises(AfterlookError, match="not symmetric"):
        afterlook.from_parameters([0, 0], [[1, 0.5], [0.2, 1]], columns=["a", "b"], threshold=-3)
    with pytest.raises(AfterlookError, match="not positive definite"):
        afterlook.from_parameters([0, 0], [[1, 1], [1, 1]], columns=["a", "b"], threshold=-3)
    with pytest.raises(AfterlookError, match="'b' is a linear combination of 'a'"):
        afterlook.from_parameters([0, 0], [[1, 1], [1, 1 + 1e-12]], columns=["a", "b"], threshold=-3)
    with pytest.raises(AfterlookError, match="needs the lambda"):
        afterlook.from_parameters([0, 0], [[1, 0], [0, 1]], columns=["a", "b"], threshold=-3,
                                  transforms={"a": "boxcox"})
    with pytest.raises(AfterlookError, match="f1 threshold needs labelled"):
        afterlook.from_parameters([0, 0], [[1, 0], [0, 1]], columns=["a", "b"], threshold="f1")


def test_import_afterlook_does_not_load_sklearn():
    import subprocess
    import sys

    code = "import sys, afterlook; afterlook.from_parameters; print('sklearn' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "False"
