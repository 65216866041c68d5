"""Bring your own detector: an afterlook model from a Gaussian someone else fitted.

Two doors in:

* :func:`from_parameters`: a mean and a covariance (or per-feature variances)
  from hand-rolled numpy code;
* :func:`from_estimator`: a fitted scikit-learn covariance estimator
  (``EmpiricalCovariance``, ``MinCovDet``, ``LedoitWolf``, ``OAS``,
  ``ShrunkCovariance``, ``EllipticEnvelope``) or a one-component
  ``GaussianMixture``.

Every one of these is a single Gaussian ``N(mu, S)``; afterlook scores it as
``log p(x) = -1/2 (d log 2 pi + log|S| + m(x))`` with ``m`` the squared
Mahalanobis distance, which is what ``GaussianMixture.score_samples`` returns
and, up to the additive constant ``-1/2 (d log 2 pi + log|S|)`` and the
factor ``-1/2``, what the covariance estimators' ``mahalanobis`` and
``EllipticEnvelope.score_samples`` (``-m``) return.

A detector that used derived features or transforms is represented exactly
by ``derive`` (name -> expression over the table's columns) and
``transforms`` (feature -> ``--transform`` text with a fixed lambda): the
estimator's ``columns`` then name its features in its own order, and the
parameters are re-ordered to afterlook's (base columns, then derived ones).

An imported model has no training rows: its ``training`` holds an
``imported`` record instead of row counts, and it carries no quantile grid,
so percentiles (and anything else computed from the normal rows) are "not
available for an imported model". Operations that re-fit (``suggest``,
``try``) need the normal rows given explicitly (``train=`` / ``--train``).

Threshold (log-density below which a case is flagged):

* a number: that log-density; a policy text ``f1`` / ``rate:R`` /
  ``value:V`` as ``fit`` takes it;
* None with labelled ``cases``: ``fit``'s default policy (best F1 when the
  cases hold labelled anomalies, else a 1% false-alarm budget on the cases
  labelled normal);
* ``EllipticEnvelope`` with None: its own decision offset ``offset_``
  (``predict == -1`` exactly when afterlook flags);
* None and no cases (or ``rate:R`` without labelled normal cases): the
  model's own Gaussian tail: the share ``R`` (default 1%) of its own
  population lies below it, because ``m(x)`` follows a chi-square law with
  ``d`` degrees of freedom under the model. The model records a warning
  saying so.
"""

from __future__ import annotations

from typing import Iterable, Mapping

import numpy as np

from ..core.blas import with_limited_blas
from ..core.errors import AfterlookError
from ..core.frozen import frozen_from_list, frozen_to_list
from ..core.gaussian import LOG_2PI, GaussianModel
from ..core.recipe import POWER_KINDS, Recipe, parse_transform
from ..core.thresholds import ThresholdPolicy, apply_undefined_policy, choose_threshold, parse_policy
from .model import Model
from .session import as_table, derive_pairs, numeric_columns_of, table_name
from .unit_rows import row_context

__all__ = ["from_parameters", "from_estimator", "parameters_document", "model_from_parameters_document",
           "NOT_AVAILABLE", "SUPPORTED_ESTIMATORS", "DEFAULT_OWN_RATE"]

#: the words shown wherever a number needs the training rows an imported model does not have
NOT_AVAILABLE = "not available for an imported model"
SUPPORTED_ESTIMATORS = ("EmpiricalCovariance", "MinCovDet", "LedoitWolf", "OAS", "ShrunkCovariance",
                        "EllipticEnvelope", "GaussianMixture (one component)")
DEFAULT_OWN_RATE = 0.01
#: relative asymmetry of a covariance that is still taken for rounding (as the model file's check)
SYMMETRY_TOL = 1e-9


# --------------------------------------------------------------------------
# parameters -> model
# --------------------------------------------------------------------------


@with_limited_blas
def from_parameters(mean, covariance=None, variances=None, *, columns, threshold=None, cases=None,
                    derive=None, transforms=None, undefined: str = "flag", frozen=None,
                    unit_col: str | None = None, time_col: str | None = None,
                    source: str = "parameters given by hand", _density_options: dict | None = None,
                    _own_threshold=None) -> Model:
    """An afterlook model from a Gaussian's mean and covariance (full) or variances (independent).

    Parameters
    ----------
    mean : array-like of shape (d,)
    covariance : array-like of shape (d, d), optional
        Symmetric positive definite; gives a full model.
    variances : array-like of shape (d,), optional
        Positive; gives an independent model. Exactly one of ``covariance``
        and ``variances``.
    columns : list of d names
        The features in the order of ``mean``: table columns, or names of
        ``derive`` features.
    threshold : float, policy text or None (see the module docstring)
    cases : path, DataFrame or Table, optional
        Labelled cases on which a policy threshold is picked.
    derive : {name: expression} or [(name, expression)], optional
        Features the detector computed from the table's columns.
    transforms : {feature: text}, optional
        Per-feature transforms (an expression over the feature, or
        ``boxcox(L)`` / ``yeojohnson(L)`` with a fixed lambda).
    undefined : "flag" or "skip", as :func:`afterlook.fit`.
    frozen : list of frozen statistics, optional
        The statistics of the stateful calls in ``derive`` (``zscore``, ``unit_median``,
        ``unit_scale``), as a model file's ``recipe.frozen`` holds them and
        ``afterlook model export`` writes them; required when ``derive`` uses such a call.
    unit_col, time_col : the unit and time columns the features read (``unit_median``, ``lag``), as
        :func:`afterlook.fit` records them.
    """
    columns = _checked_columns(columns)
    d = len(columns)
    mu = _vector(mean, "mean", d)
    if (covariance is None) == (variances is None):
        raise AfterlookError("give exactly one of covariance (a full model) and variances (an independent model)")
    recipe = _recipe(columns, derive, transforms, frozen)
    order = [columns.index(f) for f in recipe.features]
    options = dict(_density_options or {})
    density = GaussianModel(kind="independent" if covariance is None else "full",
                            shrinkage=options.pop("shrinkage", None), robust=bool(options.pop("robust", False)),
                            names=recipe.features)
    density.mean_ = mu[order]
    if covariance is None:
        var = _vector(variances, "variances", d)[order]
        density._set_variances(var)  # refuses a variance that is not positive, naming the feature
    else:
        cov = _matrix(covariance, d)[np.ix_(order, order)]
        smallest = float(np.linalg.eigvalsh(cov)[0])
        if not smallest > 0:
            raise AfterlookError(f"covariance is not positive definite (smallest eigenvalue {smallest:.3g}): "
                                 "it is not the covariance of a Gaussian")
        density.covariance_ = cov
        try:
            density.chol_ = density.cholesky_factor(cov)  # a nearly singular one is refused, naming collinear features
        except AfterlookError as exc:
            raise AfterlookError(exc.message.split(" (drop the column")[0] + " (the detector's covariance; shrink it "
                                 "before importing, e.g. with scikit-learn's LedoitWolf)") from None
    density.shrinkage_ = float(options.pop("shrinkage_used", 0.0))
    density.support_fraction_ = options.pop("support_fraction", None)
    warnings: list[str] = []
    if _own_threshold is not None and threshold is None:
        policy, value, basis = _own_threshold(density)
    else:
        policy, value, basis = pick_threshold(density, recipe, threshold, cases, undefined, warnings,
                                              unit_col=unit_col, time_col=time_col)
    training = {"imported": {"source": source, "features": list(recipe.features)}, "path": None, "sha256": None}
    return Model(recipe=recipe, density=density, threshold=value, policy=policy, threshold_basis=basis,
                 training=training, quantiles=None, warnings=warnings, undefined=undefined,
                 unit_col=unit_col, time_col=time_col if unit_col else None)


def pick_threshold(density: GaussianModel, recipe: Recipe, threshold, cases, undefined: str,
                   warnings: list[str], *, unit_col: str | None = None, time_col: str | None = None) -> tuple[ThresholdPolicy, float, str]:
    """``(policy, value, basis)`` for an imported density (see the module docstring)."""
    if isinstance(threshold, (int, float, np.floating, np.integer)) and not isinstance(threshold, bool):
        value = float(threshold)
        if not np.isfinite(value):
            raise AfterlookError(f"threshold must be a finite log-density, got {threshold!r}")
        return ThresholdPolicy("value", value), value, "given"
    if threshold is not None and not isinstance(threshold, (str, ThresholdPolicy)):
        raise AfterlookError(f"threshold must be a log-density, a policy text (f1, rate:R, value:V) or None, "
                             f"got {type(threshold).__name__}")
    policy = parse_policy(threshold) if isinstance(threshold, str) else threshold
    case_ld = case_y = case_table = None
    if cases is not None:
        case_table = as_table(cases)
        if case_table.labels is not None:
            cols = numeric_columns_of(case_table.frame, recipe.required_columns())
            inputs = {**cols, **row_context(case_table.frame, unit_col, time_col, table_name(case_table))}
            ld = density.log_density(recipe.apply(inputs).values)
            inputs_ok = np.all(np.column_stack([np.isfinite(v) for v in cols.values()]), axis=1)
            case_ld, case_y = apply_undefined_policy(ld, inputs_ok, undefined), case_table.labels
    has_anomalies = case_y is not None and bool(case_y.any())
    has_normals = case_y is not None and bool((~case_y).any())
    if policy is None:
        policy = ThresholdPolicy("f1") if has_anomalies else ThresholdPolicy("rate", DEFAULT_OWN_RATE)
    if policy.kind == "value":
        return policy, float(policy.parameter), "given"
    if policy.kind == "f1":
        if not has_anomalies:
            raise AfterlookError("an f1 threshold needs labelled cases with at least one anomaly (cases / --cases)")
        value = choose_threshold(policy, case_log_density=case_ld, case_is_anomaly=case_y)
        return policy, value, f"{table_name(case_table)} ({len(case_y)} cases, {int(case_y.sum())} labelled anomaly)"
    if has_normals:
        value = choose_threshold(policy, case_log_density=case_ld, case_is_anomaly=case_y)
        return policy, value, f"{table_name(case_table)} ({int((~case_y).sum())} cases labelled normal)"
    value = own_tail_threshold(density, float(policy.parameter))
    warnings.append(f"no threshold and no labelled cases: the threshold flags {policy.parameter:g} of the model's "
                    "own Gaussian population (chi-square tail); give a threshold or labelled cases to choose it on data")
    return policy, value, "the model's own Gaussian (chi-square tail, no rows)"


def log_density_constant(density: GaussianModel) -> float:
    """``-1/2 (d log 2 pi + log|S|)``: the log-density at the mean."""
    d = len(density.mean_)
    return float(-0.5 * d * LOG_2PI - np.log(np.diag(density.chol_)).sum())


def own_tail_threshold(density: GaussianModel, rate: float) -> float:
    """The log-density below which a share ``rate`` of the model's own Gaussian lies.

    Under ``N(mu, S)`` the squared Mahalanobis distance follows chi-square
    with ``d`` degrees of freedom, and ``log p = C - m / 2``, so the cut is
    ``C - chi2.isf(rate, d) / 2``.
    """
    from scipy.stats import chi2  # here: scipy.stats is slow to import

    return log_density_constant(density) - 0.5 * float(chi2.isf(rate, len(density.mean_)))


# --------------------------------------------------------------------------
# scikit-learn estimator -> model
# --------------------------------------------------------------------------


def from_estimator(estimator, columns=None, threshold=None, cases=None, *, derive=None, transforms=None,
                   undefined: str = "flag") -> Model:
    """An afterlook model from a fitted scikit-learn Gaussian detector.

    Parameters
    ----------
    estimator : a fitted EmpiricalCovariance, MinCovDet, LedoitWolf, OAS,
        ShrunkCovariance, EllipticEnvelope or one-component GaussianMixture
        (covariance_type full, tied, diag or spherical)
    columns : list of names of the estimator's features, in its order;
        default: ``feature_names_in_`` when it was fitted on a DataFrame
    threshold, cases, derive, transforms, undefined : as :func:`from_parameters`;
        an EllipticEnvelope's ``offset_`` is its threshold when none is given.
    """
    from sklearn import __version__ as sklearn_version
    from sklearn.covariance import (OAS, EllipticEnvelope, EmpiricalCovariance, LedoitWolf, MinCovDet,
                                    ShrunkCovariance)
    from sklearn.exceptions import NotFittedError
    from sklearn.mixture import GaussianMixture
    from sklearn.utils.validation import check_is_fitted

    name = type(estimator).__name__
    if not isinstance(estimator, (EmpiricalCovariance, GaussianMixture)):
        raise AfterlookError(f"cannot import a {name}: afterlook reads {', '.join(SUPPORTED_ESTIMATORS)}")
    try:
        check_is_fitted(estimator)
    except NotFittedError:
        raise AfterlookError(f"the {name} is not fitted: call its fit() first") from None
    columns = _estimator_columns(estimator, columns)
    options: dict = {}
    own = None
    variances = covariance = None
    if isinstance(estimator, GaussianMixture):
        if estimator.n_components != 1:
            raise AfterlookError(f"a GaussianMixture with {estimator.n_components} components is not one Gaussian; "
                                 "afterlook imports a one-component mixture only")
        mean = estimator.means_[0]
        kind = estimator.covariance_type
        if kind == "full":
            covariance = estimator.covariances_[0]
        elif kind == "tied":
            covariance = estimator.covariances_
        elif kind == "diag":
            variances = estimator.covariances_[0]
        else:  # spherical: one variance for every feature
            variances = np.full(len(mean), float(estimator.covariances_[0]))
        detail = f"GaussianMixture (covariance_type {kind})"
    else:
        mean, covariance = estimator.location_, estimator.covariance_
        detail = name
        if isinstance(estimator, MinCovDet):  # EllipticEnvelope is one too
            options.update(robust=True, support_fraction=float(np.mean(estimator.support_)))
        if isinstance(estimator, LedoitWolf):
            options.update(shrinkage="ledoit-wolf", shrinkage_used=float(estimator.shrinkage_))
        elif isinstance(estimator, OAS):
            # afterlook has no OAS fit: a re-fit (try, suggest) keeps OAS's intensity as a fixed shrinkage
            options.update(shrinkage=float(estimator.shrinkage_), shrinkage_used=float(estimator.shrinkage_))
            detail = f"OAS (shrinkage {estimator.shrinkage_:.6g}; a re-fit keeps it fixed)"
        elif isinstance(estimator, ShrunkCovariance):
            options.update(shrinkage=float(estimator.shrinkage), shrinkage_used=float(estimator.shrinkage))
        if isinstance(estimator, EllipticEnvelope):
            offset = float(estimator.offset_)
            contamination = estimator.contamination

            def own(density):
                # predict == -1  <=>  -m(x) - offset_ < 0  <=>  C - m/2 < C + offset_/2
                value = log_density_constant(density) + 0.5 * offset
                return (ThresholdPolicy("value", value), value,
                        f"EllipticEnvelope offset_ {offset:.6g} (contamination {contamination})")
    return from_parameters(mean, covariance, variances, columns=columns, threshold=threshold, cases=cases,
                           derive=derive, transforms=transforms, undefined=undefined,
                           source=f"scikit-learn {sklearn_version} {detail}", _density_options=options,
                           _own_threshold=own)


def _estimator_columns(estimator, columns) -> list[str]:
    fitted_names = getattr(estimator, "feature_names_in_", None)
    if columns is None:
        if fitted_names is None:
            raise AfterlookError("columns: name the estimator's features in its order (it was fitted on an array)")
        columns = [str(c) for c in fitted_names]
    columns = _checked_columns(columns)
    if len(columns) != estimator.n_features_in_:
        raise AfterlookError(f"columns names {len(columns)} features but the {type(estimator).__name__} "
                             f"was fitted on {estimator.n_features_in_}")
    if fitted_names is not None and list(map(str, fitted_names)) != columns:
        raise AfterlookError(f"columns {columns} differ from the names the estimator was fitted with "
                             f"{list(map(str, fitted_names))}")
    return columns


# --------------------------------------------------------------------------
# checks
# --------------------------------------------------------------------------


def _checked_columns(columns) -> list[str]:
    if columns is None or isinstance(columns, str):
        raise AfterlookError("columns: give the list of feature names, in the order of the mean")
    names = [str(c) for c in columns]
    if not names:
        raise AfterlookError("columns: no features named")
    dup = [c for c in names if names.count(c) > 1]
    if dup:
        raise AfterlookError(f"columns: '{dup[0]}' is named twice")
    return names


def _vector(values, what: str, d: int) -> np.ndarray:
    try:
        v = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise AfterlookError(f"{what} must be a list of numbers") from None
    if v.ndim != 1 or v.shape[0] != d:
        raise AfterlookError(f"{what} has shape {v.shape}, expected ({d},) for {d} columns")
    if not np.all(np.isfinite(v)):
        raise AfterlookError(f"{what} holds a value that is not a finite number")
    return v.copy()


def _matrix(values, d: int) -> np.ndarray:
    try:
        S = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise AfterlookError("covariance must be a square table of numbers") from None
    if S.shape != (d, d):
        raise AfterlookError(f"covariance has shape {S.shape}, expected ({d}, {d}) for {d} columns")
    if not np.all(np.isfinite(S)):
        raise AfterlookError("covariance holds a value that is not a finite number")
    scale = float(np.max(np.abs(S))) or 1.0
    if np.max(np.abs(S - S.T)) > SYMMETRY_TOL * scale:
        raise AfterlookError("covariance is not symmetric")
    return (S + S.T) / 2.0  # exact for a symmetric matrix; rounding-level asymmetry averaged away


def _recipe(columns: list[str], derive, transforms, frozen=None) -> Recipe:
    derived = derive_pairs(derive)
    names = [n for n, _ in derived]
    missing = [n for n in names if n not in columns]
    if missing:
        raise AfterlookError(f"derived feature '{missing[0]}' is not one of the columns {columns}; "
                             "name every feature of the detector in columns")
    base = [c for c in columns if c not in names]
    parsed = {}
    for feature, text in derive_pairs(transforms, "--transform"):
        if feature not in columns:
            raise AfterlookError(f"transform for '{feature}', which is not one of the columns")
        t = parse_transform(feature, text)
        if t.kind in POWER_KINDS and t.lmbda is None:
            raise AfterlookError(f"transform '{feature}={text}': an imported model needs the lambda the detector "
                                 f"used, e.g. {t.kind}(0.5)")
        parsed[feature] = t
    recipe = Recipe(base, derived, parsed, frozen_from_list(list(frozen or [])))
    missing = [k for k in recipe.stateful_calls if k not in recipe.frozen]
    if missing:  # refused now, not when the written model is first used
        raise AfterlookError(f"{missing[0]} in a derived feature needs its frozen statistics (the 'frozen' entries "
                             "that 'afterlook model export' writes); give them, or derive the feature without it")
    return recipe


# --------------------------------------------------------------------------
# the plain parameter document (model import / export --format json)
# --------------------------------------------------------------------------

PARAMETERS_FORMAT = "afterlook-parameters"
PARAMETERS_VERSION = 1


def parameters_document(model: Model) -> dict:
    """The plain parameter document of a model: what ``afterlook model import`` reads back."""
    density = model.density
    doc = {
        "format": PARAMETERS_FORMAT,
        "version": PARAMETERS_VERSION,
        "columns": list(model.features),
        "mean": density.mean_.tolist(),
    }
    if density.kind == "independent":
        doc["variances"] = density.var_.tolist()
    else:
        doc["covariance"] = density.covariance_.tolist()
    doc["threshold"] = float(model.threshold)
    doc["derive"] = [{"name": n, "expression": e} for n, e in model.recipe.derived]
    doc["transforms"] = {n: transform_text(t) for n, t in model.recipe.transforms.items()}
    doc["undefined"] = model.undefined
    if model.recipe.frozen:  # zscore / unit baselines: the derived features cannot be computed without them
        doc["frozen"] = frozen_to_list(model.recipe.frozen)
    if model.unit_col:
        doc["units"] = {"unit_col": model.unit_col, "time_col": model.time_col}
    return doc


def transform_text(t) -> str:
    """A transform as ``--transform`` text that parses back to the same transform (lambda exactly)."""
    if t.kind == "expression":
        return t.expression
    if t.lmbda is None:
        raise AfterlookError("the model has a power transform without a fitted lambda")
    return f"{t.kind}({float(t.lmbda)!r})"


def model_from_parameters_document(doc: Mapping, *, threshold=None, cases=None, source: str) -> Model:
    """A model from a checked parameter document; ``threshold`` (a policy) overrides the file's."""
    derive: Iterable = [(d["name"], d["expression"]) for d in doc.get("derive", [])]
    return from_parameters(doc["mean"], doc.get("covariance"), doc.get("variances"), columns=doc["columns"],
                           threshold=threshold if threshold is not None else doc.get("threshold"), cases=cases,
                           derive=derive, transforms=doc.get("transforms") or None,
                           undefined=doc.get("undefined", "flag"), frozen=doc.get("frozen"),
                           unit_col=(doc.get("units") or {}).get("unit_col"),
                           time_col=(doc.get("units") or {}).get("time_col"), source=source)
