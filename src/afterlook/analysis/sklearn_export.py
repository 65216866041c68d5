"""A model as a scikit-learn Pipeline: the recipe, then an outlier detector.

``Model.to_sklearn()`` returns ``Pipeline([("features", RecipeFeatures),
("detector", GaussianDetector)])``, already fitted:

* :class:`RecipeFeatures` turns a DataFrame's columns into the model's
  features with afterlook's own recipe evaluation (base columns, derived
  features in afterlook's expression language, per-feature transforms), so
  every expression afterlook can write works in the pipeline. A feature that
  is undefined although the row's readings are finite (a zero divisor, the
  log of a non-positive value) comes out as ``+inf`` when the model's
  undefined-value policy is "flag" (outside the feature's domain), NaN when
  it is "skip" or when a reading is missing.
* :class:`GaussianDetector` is the Gaussian: ``score_samples`` is afterlook's
  log-density (computed by :class:`afterlook.core.gaussian.GaussianModel`
  itself), ``-inf`` for a row with an infinite feature, NaN for a row with a
  missing one; ``decision_function = score_samples - offset_`` with
  ``offset_`` the model's threshold, and ``predict`` is -1 (flagged) where it
  is negative, else 1, scikit-learn's outlier convention (a NaN row is 1: never
  flagged, as in afterlook).

Both classes are ordinary estimators too: with no parameters given they
learn from ``X`` (the identity recipe; the maximum-likelihood Gaussian and a
threshold at the ``contamination`` quantile of the training log-densities,
as ``EllipticEnvelope`` sets its offset). With parameters given (what the
export does) ``fit`` keeps them and only checks the input's width: the
detector is fixed, a refit belongs to ``afterlook fit``.
"""

from __future__ import annotations

import copy
import io

import numpy as np
from sklearn.base import BaseEstimator, OutlierMixin, TransformerMixin
from sklearn.pipeline import Pipeline
from sklearn.utils.validation import check_array, check_is_fitted, validate_data

from ..core.errors import AfterlookError
from ..core.gaussian import GaussianModel
from ..core.recipe import Recipe

__all__ = ["RecipeFeatures", "GaussianDetector", "to_sklearn", "write_pipeline", "pipeline_bytes"]


class RecipeFeatures(TransformerMixin, BaseEstimator):
    """The model's features from a table, by afterlook's recipe.

    Parameters
    ----------
    recipe : dict or None
        ``Recipe.to_dict()`` of the model (base columns, derived features,
        transforms with fixed lambdas). None: the identity on every column.
    undefined : {"flag", "skip"}
        A feature undefined on finite readings becomes ``+inf`` ("flag": the
        detector scores the row ``-inf``, flagged) or NaN ("skip": unscored).

    A DataFrame's columns are read by name; an array's columns are the
    recipe's required columns in order (``feature_names_in_``).
    """

    def __init__(self, recipe=None, undefined="flag"):
        self.recipe = recipe
        self.undefined = undefined

    def fit(self, X, y=None):
        if self.undefined not in ("flag", "skip"):
            raise ValueError(f"undefined must be 'flag' or 'skip', got {self.undefined!r}")
        if self.recipe is None:
            validate_data(self, X, ensure_all_finite=False, reset=True)
            self.recipe_ = None
            return self
        try:
            self.recipe_ = Recipe.from_dict(self.recipe)
        except AfterlookError as exc:
            raise ValueError(exc.message) from None
        self.feature_names_in_ = np.asarray(self.recipe_.required_columns(), dtype=object)
        self.n_features_in_ = len(self.feature_names_in_)
        if X is not None:  # the recipe is fixed: fit only checks that X carries its columns
            self._columns(X)
        return self

    def transform(self, X):
        check_is_fitted(self, "n_features_in_")
        if self.recipe_ is None:
            X = validate_data(self, X, ensure_all_finite=False, reset=False, dtype=np.float64)
            return np.asarray(X, dtype=np.float64)
        columns = self._columns(X)
        try:
            fm = self.recipe_.apply(columns)
        except AfterlookError as exc:
            raise ValueError(exc.message) from None
        values = fm.values.copy()
        if self.undefined == "flag":
            inputs = [np.isfinite(columns[c]) for c in self.recipe_.required_columns()]
            finite_inputs = np.all(np.column_stack(inputs), axis=1) if inputs else np.ones(len(values), bool)
            outside = np.isnan(values) & finite_inputs[:, None]
            values[outside] = np.inf
        return values

    def _columns(self, X) -> dict:
        names = list(self.feature_names_in_)
        if hasattr(X, "columns"):
            missing = [c for c in names if c not in X.columns]
            if missing:
                raise ValueError(f"the table has no column '{missing[0]}', which the model uses")
            return {c: _float_column(X[c]) for c in names}
        # scikit-learn's own validation first (2-D, dense, real, not empty), with its usual messages
        A = check_array(X, dtype=np.float64, ensure_all_finite=False)
        if A.shape[1] != len(names):
            raise ValueError(f"X has {A.shape[1]} features, but RecipeFeatures is expecting {len(names)} features "
                             f"as input ({', '.join(names)}); pass a DataFrame with those columns")
        return {c: A[:, j] for j, c in enumerate(names)}

    def get_feature_names_out(self, input_features=None):
        check_is_fitted(self, "n_features_in_")
        if self.recipe_ is None:
            if input_features is not None:
                return np.asarray(input_features, dtype=object)
            names = getattr(self, "feature_names_in_", None)
            return names if names is not None else np.asarray([f"x{j}" for j in range(self.n_features_in_)],
                                                              dtype=object)
        return np.asarray(self.recipe_.features, dtype=object)

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True  # a missing reading is a NaN feature: the detector leaves it unscored
        tags.requires_fit = True
        return tags


def _float_column(series) -> np.ndarray:
    import pandas as pd

    return pd.to_numeric(series, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)


class GaussianDetector(OutlierMixin, BaseEstimator):
    """A Gaussian outlier detector whose ``score_samples`` is the log-density.

    Parameters
    ----------
    kind : {"full", "independent"}
    location : array of shape (d,) or None
    covariance : array (d, d) for "full", (d,) variances for "independent", or None
    threshold : float or None
        Log-density below which a row is an outlier (``offset_``).
    contamination : float in (0, 0.5]
        Only when learning without a threshold: the share of training rows
        below the learnt threshold.
    """

    def __init__(self, kind="full", location=None, covariance=None, threshold=None, contamination=0.01):
        self.kind = kind
        self.location = location
        self.covariance = covariance
        self.threshold = threshold
        self.contamination = contamination

    def fit(self, X, y=None):
        if self.kind not in ("full", "independent"):
            raise ValueError(f"kind must be 'full' or 'independent', got {self.kind!r}")
        if not 0 < self.contamination <= 0.5:
            raise ValueError(f"contamination must be in (0, 0.5], got {self.contamination!r}")
        X = validate_data(self, X, dtype=np.float64, reset=True, ensure_min_samples=2, ensure_all_finite=False)
        density = GaussianModel(kind=self.kind, names=[f"x{j}" for j in range(X.shape[1])])
        try:
            if self.location is None:
                # as afterlook's fit: rows with a NaN or infinite feature are left out of the estimate
                density.fit(X[np.isfinite(X).all(axis=1)], density.names)
            else:
                _set_parameters(density, self.location, self.covariance, X.shape[1])
        except AfterlookError as exc:
            raise ValueError(exc.message) from None
        self.density_ = density
        self.location_ = density.mean_
        self.covariance_ = density.covariance_
        if self.threshold is not None:
            self.offset_ = float(self.threshold)
        else:
            scores = self.score_samples(X)
            self.offset_ = float(np.quantile(scores[~np.isnan(scores)], self.contamination))
        return self

    def score_samples(self, X):
        """Log-density of each row; -inf for a row with an infinite feature, NaN for a missing one."""
        check_is_fitted(self, "density_")
        X = validate_data(self, X, dtype=np.float64, reset=False, ensure_all_finite=False)
        ld = self.density_.log_density(X)
        return np.where(np.isinf(X).any(axis=1), -np.inf, ld)

    def decision_function(self, X):
        return self.score_samples(X) - self.offset_

    def predict(self, X):
        """-1 where the log-density is below the threshold (an outlier), else 1."""
        with np.errstate(invalid="ignore"):
            return np.where(self.decision_function(X) < 0, -1, 1)

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True  # NaN rows are scored NaN and never flagged, as in afterlook
        return tags


def _set_parameters(density: GaussianModel, location, covariance, d: int) -> None:
    mean = np.asarray(location, dtype=np.float64)
    if mean.shape != (d,):
        raise AfterlookError(f"X has {d} features, but GaussianDetector is expecting {mean.size} features as input "
                             "(its location is fixed)")
    density.mean_ = mean
    if density.kind == "independent":
        density._set_variances(np.asarray(covariance, dtype=np.float64).reshape(d))
    else:
        cov = np.asarray(covariance, dtype=np.float64)
        density.covariance_ = cov
        density.chol_ = density.cholesky_factor(cov)


def to_sklearn(model) -> Pipeline:
    """A fitted scikit-learn Pipeline that scores and flags exactly as ``model``."""
    density = model.density
    features = RecipeFeatures(recipe=model.recipe.to_dict(), undefined=model.undefined).fit(None)
    covariance = density.var_.copy() if density.kind == "independent" else density.covariance_.copy()
    detector = GaussianDetector(kind=density.kind, location=density.mean_.copy(), covariance=covariance,
                                threshold=float(model.threshold))
    # Set as a fit would, without rows: the parameters are the model's, so nothing is learnt.
    d = len(model.features)
    detector.density_ = copy.deepcopy(density)
    detector.location_, detector.covariance_ = density.mean_, density.covariance_
    detector.offset_ = float(model.threshold)
    detector.n_features_in_ = d
    return Pipeline([("features", features), ("detector", detector)])


def pipeline_bytes(model) -> bytes:
    """The joblib file of :func:`to_sklearn` as bytes."""
    import joblib

    buffer = io.BytesIO()
    joblib.dump(to_sklearn(model), buffer)
    return buffer.getvalue()


def write_pipeline(model, path) -> None:
    """Write the pipeline as a joblib file, atomically (afterlook's one atomic writer)."""
    from ..store.atomic import write_bytes_atomic

    write_bytes_atomic(path, pipeline_bytes(model))
