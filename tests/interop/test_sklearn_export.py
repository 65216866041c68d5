"""`Model.to_sklearn()` and `afterlook model export --format sklearn`: a Pipeline that scores as afterlook.

References: afterlook's own log-density and flags (the pipeline must equal
them to 1e-9 relative; it computes them with the same GaussianModel, so they
agree to the bit), scikit-learn's outlier convention (``predict`` -1/1,
``decision_function = score_samples - offset_``) and scikit-learn's
estimator checks (``sklearn.utils.estimator_checks.parametrize_with_checks``).
"""

from __future__ import annotations

import joblib
import numpy as np
import pandas as pd
import pytest
from sklearn.utils.estimator_checks import parametrize_with_checks

import afterlook
from afterlook.analysis.sklearn_export import GaussianDetector, RecipeFeatures

# The checks draw random arrays of 1 to 10 columns, so they run on the classes in their learning
# configuration (no parameters given): the exported instances have the model's features fixed, a
# width no generated array has, and are checked instead against afterlook's own scores below.
# No check is skipped in that configuration (check_array_api_input skips itself unless
# SCIPY_ARRAY_API is set).


@parametrize_with_checks([GaussianDetector(), GaussianDetector(kind="independent"), RecipeFeatures()])
def test_sklearn_estimator_checks(estimator, check):
    check(estimator)


def _equal_scores(pipeline, model, frame):
    ld = model.log_density(frame)
    got = pipeline.score_samples(frame)
    finite = np.isfinite(ld)
    np.testing.assert_allclose(got[finite], ld[finite], rtol=1e-9)
    np.testing.assert_array_equal(np.isnan(got), np.isnan(ld))
    np.testing.assert_array_equal(np.isneginf(got), np.isneginf(ld))
    np.testing.assert_array_equal(pipeline.predict(frame) == -1, model.score(frame)["flagged"].to_numpy())


def test_demo_model_pipeline_scores_and_flags_as_afterlook(demo_written, tmp_path, run_cli):
    model = afterlook.load_model(demo_written.model)
    cases = afterlook.load_table(demo_written.cases).frame
    _equal_scores(model.to_sklearn(), model, cases)
    code, _, err = run_cli("model", "export", str(demo_written.model), "--format", "sklearn",
                           "--out", str(tmp_path / "m.joblib"))
    assert code == 0, err
    loaded = joblib.load(tmp_path / "m.joblib")
    _equal_scores(loaded, model, cases)
    assert list(loaded[:-1].get_feature_names_out()) == model.features
    # the same file again needs --force; a joblib file is never opened to decide
    code, _, err = run_cli("model", "export", str(demo_written.model), "--format", "sklearn",
                           "--out", str(tmp_path / "m.joblib"))
    assert code == 2 and "--force" in err


def test_undefined_and_missing_values_follow_the_models_policy(demo_written):
    train = afterlook.load_table(demo_written.train)
    cases = afterlook.load_table(demo_written.cases).frame.head(50).copy()
    cases.loc[cases.index[0], "flow_m3h"] = 0.0  # r = current / flow undefined on finite readings
    cases.loc[cases.index[1], "flow_m3h"] = np.nan  # a missing reading
    for undefined in ("flag", "skip"):
        model = afterlook.fit(train, kind="full", columns=["flow_m3h", "motor_current_a", "bearing_temp_c"],
                              derive={"r": "motor_current_a / flow_m3h"}, transform={"flow_m3h": "log(flow_m3h + 1)"},
                              threshold="value:-12", undefined=undefined)
        pipeline = model.to_sklearn()
        ld = pipeline.score_samples(cases)
        assert np.isnan(ld[1])  # missing: unscored either way
        assert (np.isneginf(ld[0]) if undefined == "flag" else np.isnan(ld[0]))
        _equal_scores(pipeline, model, cases)


def test_pipeline_of_an_imported_estimator_matches_the_estimator(tmp_path):
    """Breast-cancer table (scikit-learn's bundled copy): import MinCovDet, export, compare with the estimator."""
    from sklearn.covariance import MinCovDet
    from sklearn.datasets import load_breast_cancer

    frame = load_breast_cancer(as_frame=True).frame
    cols = ["mean radius", "mean texture", "mean symmetry"]
    est = MinCovDet(random_state=0).fit(frame[cols])
    model = afterlook.from_estimator(est, threshold=-6.0)  # columns from feature_names_in_
    pipeline = model.to_sklearn()
    X = frame[cols]
    # log p = C - m / 2 with m = MinCovDet.mahalanobis; the differences are constant
    diff = pipeline.score_samples(X) + 0.5 * est.mahalanobis(X)
    np.testing.assert_allclose(diff, np.full(len(X), diff[0]), rtol=1e-9)
    np.testing.assert_array_equal(pipeline.predict(X) == -1, pipeline.score_samples(X) < -6.0)
    assert isinstance(pipeline.decision_function(X), np.ndarray)


def test_array_input_reads_the_required_columns_in_order(demo_written):
    model = afterlook.load_model(demo_written.model)
    cases = afterlook.load_table(demo_written.cases).frame
    pipeline = model.to_sklearn()
    names = list(pipeline[0].feature_names_in_)
    np.testing.assert_array_equal(pipeline.score_samples(cases[names].to_numpy(dtype=float)),
                                  pipeline.score_samples(cases))
    with pytest.raises(ValueError, match="has no column"):
        pipeline.score_samples(pd.DataFrame({"x": [1.0]}))



#: Checks that fit on generated arrays of 1 to 10 columns. An exported instance has the model's columns
#: fixed (8 readings in, 9 features out on the demo), so each of these is refused with scikit-learn's
#: own words "X has N features, but ... is expecting M features as input"; they cannot apply to a fixed,
#: pre-fitted step. Every other check runs and passes (the test below asserts both).
_FIT_ON_RANDOM_WIDTH = [
    "check_dict_unchanged", "check_dont_overwrite_parameters", "check_dtype_object", "check_estimators_dtypes",
    "check_estimators_fit_returns_self", "check_estimators_overwrite_params", "check_estimators_pickle",
    "check_f_contiguous_array_estimator", "check_fit2d_1feature", "check_fit2d_predict1d",
    "check_fit_check_is_fitted", "check_fit_idempotent", "check_fit_score_takes_y",
    "check_methods_sample_order_invariance", "check_methods_subset_invariance", "check_n_features_in",
    "check_n_features_in_after_fitting", "check_pipeline_consistency", "check_positive_only_tag_during_fit",
    "check_readonly_memmap_input",
]
FIXED_RECIPE_SKIPS = set(_FIT_ON_RANDOM_WIDTH + ["check_fit2d_1sample", "check_transformer_data_not_an_array",
                                                 "check_transformer_general", "check_transformer_preserve_dtypes"])
FIXED_DETECTOR_SKIPS = set(_FIT_ON_RANDOM_WIDTH + ["check_classifier_data_not_an_array", "check_outliers_fit_predict",
                                                   "check_outliers_train"])


def _messages(exc) -> str:
    out = []
    while exc is not None:
        out.append(str(exc))
        exc = exc.__cause__ or exc.__context__
    return " ".join(out)


def test_exported_instances_pass_the_checks_that_apply(demo_written):
    from sklearn.base import clone
    from sklearn.utils.estimator_checks import check_estimator

    pipeline = afterlook.load_model(demo_written.model).to_sklearn()
    for step, skips in ((pipeline[0], FIXED_RECIPE_SKIPS), (pipeline[-1], FIXED_DETECTOR_SKIPS)):
        results = check_estimator(clone(step), on_fail=None, on_skip=None)
        failed = [r for r in results if r["status"] == "failed"]
        assert {r["check_name"] for r in failed} == skips
        for r in failed:
            assert "is expecting" in _messages(r["exception"]), (r["check_name"], _messages(r["exception"]))
        assert sum(r["status"] == "passed" for r in results) >= 15
