"""Fitting: a model from the normal rows of a training table, in memory or streamed.

:func:`fit` reads the whole table; :func:`fit_streamed` reads a file larger
than memory in chunks (or on a Dask cluster) and gives the same Gaussian.
:func:`refit` re-fits a model's kind and options with another recipe, as
``try`` and ``suggest`` do.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from typing import Iterable, Mapping

import numpy as np
import pandas as pd

from ..core.errors import AfterlookError
from ..core.explain import grid_of_columns
from ..core.gaussian import GaussianModel, RowMoments
from ..core.search_inputs import as_columns
from ..core.recipe import POWER_KINDS, Recipe, apply_transform, parse_transform
from ..core.thresholds import UNDEFINED_POLICIES, ThresholdPolicy, apply_undefined_policy, choose_threshold, parse_policy
from ..core.blas import with_limited_blas
from ..store.tables import Table, sha256_file
from .model import Model, _FrameColumns, training_summary
from .session import TrainingRows, as_table, derive_pairs, numeric_columns_of, table_name

__all__ = ["fit", "fit_streamed", "refit", "checked_base_columns", "DEFAULT_RATE"]

DEFAULT_RATE = 0.01


@with_limited_blas
def fit(
    train,
    *,
    cases=None,
    kind: str = "full",
    robust: bool = False,
    shrinkage=None,
    derive: Mapping[str, str] | Iterable[tuple[str, str]] | None = None,
    transform: Mapping[str, str] | Iterable[tuple[str, str]] | None = None,
    threshold: str | ThresholdPolicy | None = None,
    columns: list[str] | None = None,
    recipe: Recipe | None = None,
    quantiles: bool = True,
    shaping: bool = False,
    undefined: str = "flag",
    unit_col: str | None = None,
    time_col: str | None = None,
    context=None,
) -> Model:
    """Fit a model on the normal rows of ``train``.

    Parameters
    ----------
    train : path, DataFrame or Table
        Rows labelled normal are used when the table has a label column,
        otherwise every row.
    cases : path, DataFrame or Table, optional
        Labelled cases on which the threshold is picked.
    kind : "independent" or "full"
    robust : bool
        Minimum covariance determinant fit (resists anomalies hidden in train).
    shrinkage : None, "ledoit-wolf" or float
    derive : {name: expression}
    transform : {feature: expression | "boxcox" | "yeojohnson" | "boxcox(0.5)"}
    threshold : "f1", "rate:R", "value:V"; default f1 with labelled cases, else rate:0.01
    columns : base columns; default every numeric column of ``train``
    recipe : a complete recipe, instead of columns/derive/transform (used for re-fits)
    quantiles : store the per-feature quantile grid used for percentiles (skipped
        by the candidate search's throw-away re-fits, where it is the slowest step)
    shaping : also record in the model the shaping choice a candidate search of
        these rows would make for each feature (``training.shaping``, saved in
        the model file; see :mod:`afterlook.analysis.shaping_choices`), so that
        the first search with this model, in any process or on any machine,
        does not make them. Made beside the fit, in a second thread: at
        200,000 x 40 it costs the fit about 0.08 s and saves the first search
        about as much. ``afterlook fit`` records them; off by default here,
        where the search's own memory of them serves a session.
    undefined : "flag" (default) or "skip": a case whose feature is undefined on
        finite readings (a zero divisor) is flagged as outside the feature's
        domain, or left unscored (see :class:`~afterlook.analysis.model.Model`)
    unit_col, time_col : the unit of each row and its time (``unit_median``, ``unit_scale``,
        ``lag``, ``rolling_median``; see :mod:`afterlook.analysis.unit_rows`), recorded in the model
    context : DataFrame of the readings before ``cases`` (their units' past for ``lag`` and
        ``rolling_median``), kept on the model for scoring those cases (not saved)
    """
    if undefined not in UNDEFINED_POLICIES:
        raise AfterlookError(f"undefined must be one of {', '.join(UNDEFINED_POLICIES)}, got {undefined!r}")
    warnings: list[str] = []
    table = as_table(train)
    frame = table.frame
    normal = np.ones(len(frame), dtype=bool) if table.labels is None else ~table.labels
    n_labelled_anomaly = int((~normal).sum())
    if n_labelled_anomaly:
        warnings.append(f"fit uses the {int(normal.sum())} rows labelled normal; {n_labelled_anomaly} labelled anomaly left out")
    if not normal.any():
        raise AfterlookError("nothing normal to fit on: every training row is labelled anomaly")
    normal_frame = frame if normal.all() else frame.loc[normal]  # no copy when every row is normal
    frame_columns = _FrameColumns(normal_frame)
    converted: dict[str, np.ndarray] = {}

    def columns_of(names) -> dict[str, np.ndarray]:
        """Columns as float arrays: views of float64 columns, others converted once per fit."""
        for name in names:
            if name not in converted:
                if name not in normal_frame.columns:
                    raise AfterlookError(f"the table has no column '{name}', which the model uses")
                converted[name] = frame_columns[name]
        return {name: converted[name] for name in names}

    constants: dict[str, float] = {}
    if recipe is None:
        recipe = _build_recipe(table, normal_frame, columns, derive, transform, warnings, constants, columns_of,
                               keys=(unit_col, time_col))
    columns_map = columns_of(recipe.required_columns())
    # Lambdas and frozen statistics are fitted on the rows whose raw inputs are
    # all finite (the rows a streamed fit sees too), so both engines give the
    # same recipe; a running AND over the columns, no (n, d) copy.
    raw_ok = np.ones(len(normal_frame), dtype=bool)
    for name, v in columns_map.items():
        if name not in table.finite_columns:  # every value of those was found finite when the table was read
            raw_ok &= np.isfinite(v)
    if time_col and not unit_col:
        raise AfterlookError("--time-col needs --unit-col (a time orders the readings of one unit)")
    if unit_col:
        from .unit_rows import row_context

        columns_map = {**columns_map, **row_context(normal_frame, unit_col, time_col, table_name(table))}
    recipe = recipe.fit(columns_map if raw_ok.all() else {k: v[raw_ok] for k, v in columns_map.items()})
    density = GaussianModel(kind=kind, shrinkage=shrinkage, robust=robust)
    raw = recipe.raw_features(columns_map)
    # The shaping choices (about 0.1 s at 200,000 x 40) are made beside the fit and the threshold, in a
    # second thread (the search's numpy work lets go of the interpreter); the quantile grid (a sort of a
    # copy of every column) then follows the threshold here, or, without the shaping choices, is made
    # in that thread. The fit waits for the thread before returning: leaving the block waits for it
    # on every way out, so no work outlives the call.
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="afterlook-fit") as beside:
        shaped = beside.submit(_shaping_record, recipe, raw) if shaping else None
        # One look at the rows gives the fit's moments and the training summary's statistics.
        X, nan_by_feature, known = _training_rows(recipe, raw, len(normal_frame),
                                                  matrix=robust or shrinkage == "ledoit-wolf")
        n_used = len(X[0]) if isinstance(X, list) else X.shape[0]
        dropped = len(normal_frame) - n_used
        if dropped:
            worst = max(nan_by_feature, key=nan_by_feature.get)
            warnings.append(
                f"dropped {dropped} training row(s) with NaN or infinite features "
                f"(most in '{worst}': {nan_by_feature[worst]})"
            )
        if n_used < 2:
            raise AfterlookError(f"nothing normal to fit on: {n_used} usable normal row(s); need at least 2")
        # the grid beside the fit when that thread is free, else here after the threshold
        grid = beside.submit(grid_of_columns, as_columns(X)) if quantiles and shaped is None else None
        moments = RowMoments.of(X, kind == "full" and not robust, **known)
        density.fit(X, recipe.features, moments=moments)
        if density.support_fraction_ is not None:
            warnings.append(f"robust fit kept {density.support_fraction_:.1%} of the training rows as its core")
        policy, value, basis = _pick_threshold(density, recipe, threshold, cases, X, warnings, undefined,
                                               f"training rows ({n_used})", units=(unit_col, time_col, context))
        grid_here = grid_of_columns(as_columns(X)) if quantiles and grid is None else None
    grid_values = grid.result() if grid is not None else grid_here  # raises what the grid's thread raised
    shaping_record = shaped.result() if shaped is not None else {}

    stats, _ = training_summary(X, recipe.features, quantiles=False, moments=moments)
    training = {
        "path": table.path,
        "sha256": sha256_file(table.path) if table.path else None,
        "rows": int(len(frame)),
        "rows_used": int(n_used),
        "rows_dropped_nonfinite": dropped,
        "rows_labelled_anomaly": n_labelled_anomaly,
        "columns": stats,
    }
    if shaping_record:
        training["shaping"] = shaping_record
    if constants:
        # left out of the model (zero variance), kept so misses can report values never seen in normal rows
        training["constant_columns"] = constants
    model = Model(recipe=recipe, density=density, threshold=value, policy=policy, threshold_basis=basis,
                  training=training, quantiles=grid_values, warnings=warnings + list(table.warnings),
                  undefined=undefined, unit_col=unit_col, time_col=time_col, context_frame=context)
    return model


def _shaping_record(recipe: Recipe, raw: dict) -> dict:
    """The model file's ``training.shaping`` (empty when the choices cannot be made: they are only a
    head start for a later search, which then makes them itself)."""
    from . import shaping_choices

    try:
        return shaping_choices.recorded_for_fit(recipe.transforms, raw, recipe.features)
    except (AfterlookError, ValueError, TypeError, ArithmeticError):
        return {}


def _training_rows(recipe: Recipe, env: dict[str, np.ndarray], n: int,
                   matrix: bool = False) -> tuple[list[np.ndarray] | np.ndarray, dict, dict]:
    """The recipe's finite training rows, the count of non-finite values per feature, and the columns'
    mean, minimum and maximum when they were read here (keywords of :meth:`RowMoments.of`).

    Column by column, as :meth:`Recipe.apply` builds them (derived features,
    then transforms). Each column's mean, min and max are read while it is
    in cache (min and max tell whether it is all finite, since they propagate
    NaN and an infinity is one of them). When every value is finite the rows
    are the d columns themselves (views of the table's columns where nothing
    was computed: no (n, d) copy, whose fresh 64 MB at 200,000 x 40 cost 40 ms
    to 190 ms of page faults in a new process); else, or when ``matrix`` is
    asked for (the robust and Ledoit-Wolf fits read rows), one Fortran-ordered
    (n, d) copy of the finite rows.
    """
    names = recipe.features
    for values in env.values():
        if np.ndim(values):
            n = len(values)
            break
    d = len(names)
    cols = []
    mean, minimum, maximum = np.empty(d), np.empty(d), np.empty(d)
    nan_by_feature = {}
    for j, name in enumerate(names):
        t = recipe.transforms.get(name)
        values = apply_transform(t, name, env[name]) if t is not None else env[name]
        # contiguous (a copy only of a strided or scalar one): each statistic sums in one order
        col = np.ascontiguousarray(np.broadcast_to(np.asarray(values, dtype=np.float64), (n,)))
        cols.append(col)
        minimum[j], maximum[j] = (col.min(), col.max()) if n else (np.nan, np.nan)
        nan_by_feature[name] = 0
        if np.isfinite(minimum[j]) and np.isfinite(maximum[j]):
            mean[j] = col.mean()
        else:
            nan_by_feature[name] = int((~np.isfinite(col)).sum())
    finite = not any(nan_by_feature.values())
    if finite and not matrix:
        return cols, nan_by_feature, {"mean": mean, "minimum": minimum, "maximum": maximum}
    X = np.empty((n, d), order="F")
    for j, col in enumerate(cols):
        X[:, j] = col
    if finite:
        return X, nan_by_feature, {"mean": mean, "minimum": minimum, "maximum": maximum}
    return np.asfortranarray(X[np.all(np.isfinite(X), axis=1)]), nan_by_feature, {}


def _pick_threshold(density, recipe: Recipe, threshold, cases, normal_rows: np.ndarray, warnings: list[str],
                    undefined: str,
                    normal_basis: str, rate_note: str = "", units=(None, None, None)):
    """Threshold by policy: labelled cases when given, else the normal rows.

    Returns ``(policy, value, basis)``; the default policy is f1 with
    labelled anomalies, else a 1% false-alarm budget on the training rows.
    """
    policy = _policy(threshold)
    case_table = as_table(cases) if cases is not None else None
    case_ld = case_y = None
    if case_table is not None and case_table.labels is not None:
        case_cols = numeric_columns_of(case_table.frame, recipe.required_columns())
        inputs_ok = np.all(np.column_stack([np.isfinite(v) for v in case_cols.values()]), axis=1) \
            if case_cols else np.ones(len(case_table.frame), bool)
        if units[0]:
            from ..core.units import PAST, TIMES, UNITS, with_history
            from .unit_rows import row_context

            case_cols = {**case_cols, **row_context(case_table.frame, units[0], units[1], table_name(case_table),
                                                    units[2])}
            if recipe.history and TIMES in case_cols:
                inputs_ok &= with_history(case_cols[UNITS], case_cols[TIMES], recipe.history, case_cols.get(PAST))
        case_ld = density.log_density(recipe.apply(case_cols).values)
        case_ld = apply_undefined_policy(case_ld, inputs_ok, undefined)
        case_y = case_table.labels
    if policy is None:
        if case_y is not None and case_y.any():
            policy = ThresholdPolicy("f1")
        else:
            policy = ThresholdPolicy("rate", DEFAULT_RATE)
            warnings.append(f"no labelled cases with anomalies: threshold set to flag {DEFAULT_RATE:.0%} of the "
                            f"training rows{rate_note} (give --cases or --threshold)")
    if policy.kind == "f1" and (case_y is None or not case_y.any()):
        raise AfterlookError("--threshold f1 needs labelled cases with at least one anomaly (--cases FILE)")
    normal_ld = density.log_density(normal_rows) if policy.kind == "rate" else None
    value = choose_threshold(policy, case_log_density=case_ld, case_is_anomaly=case_y, normal_log_density=normal_ld)
    if policy.kind == "value":
        basis = "given"
    elif case_y is not None and (policy.kind == "f1" or (~case_y).any()):
        basis = f"{table_name(case_table)} ({len(case_y)} cases, {int(case_y.sum())} labelled anomaly)"
    else:
        basis = normal_basis
    return policy, value, basis


def _policy(threshold) -> ThresholdPolicy | None:
    if threshold is None or isinstance(threshold, ThresholdPolicy):
        return threshold
    return parse_policy(threshold)


def checked_base_columns(table: Table, columns) -> list[str]:
    """The base columns asked for, each present in the table and numeric."""
    base = list(columns)
    unknown = [c for c in base if c not in table.frame.columns]
    if unknown:
        raise AfterlookError(f"training table has no column '{unknown[0]}'")
    not_numeric = [c for c in base if c not in table.numeric_columns]
    if not_numeric:
        raise AfterlookError(f"column '{not_numeric[0]}' is not numeric and cannot be modelled")
    return base


def _build_recipe(table: Table, normal_frame: pd.DataFrame, columns, derive, transform, warnings,
                  constants: dict | None = None, columns_of=None, keys=()) -> Recipe:
    if columns:
        base = checked_base_columns(table, columns)
    else:
        # a numeric unit id or time key orders and groups the rows; it is not a reading to model
        base = [c for c in table.numeric_columns if c not in {k for k in keys if k}]
        values = (columns_of or (lambda names: numeric_columns_of(normal_frame, names)))(base)
        constant = [c for c in base if _is_constant(values[c])] if len(normal_frame) else []
        if constant:
            warnings.append(f"left out {len(constant)} constant column(s): {', '.join(constant)} (a value they "
                            "take on a case but never in normal rows is reported by misses)")
            base = [c for c in base if c not in constant]
            if constants is not None:
                constants.update({c: float(np.nanmin(values[c])) for c in constant})
    derived = derive_pairs(derive)
    if not base and not derived:
        raise AfterlookError("no numeric columns to model")
    transforms = {name: parse_transform(name, text) for name, text in derive_pairs(transform, "--transform")}
    return Recipe(base, derived, transforms)


def _is_constant(values: np.ndarray) -> bool:
    """``nanmin == nanmax``; two different values among the first rows settle it without reading the rest."""
    head = values[:1024]
    head = head[~np.isnan(head)]
    if head.size and (head != head[0]).any():
        return False
    return bool(np.nanmin(values) == np.nanmax(values))


@with_limited_blas
def refit(model: Model, recipe: Recipe, train: TrainingRows, cases: Table, *, quantiles: bool = True) -> Model:
    """Re-fit the model's kind and options with another recipe, threshold by the same policy (without
    the shaping record: a re-fit is compared, not searched; a search of it makes its own choices)."""
    return fit(train.table, cases=cases, kind=model.density.kind, robust=model.density.robust,
               shrinkage=model.density.shrinkage, threshold=model.policy, recipe=recipe, quantiles=quantiles,
               shaping=False,
               undefined=model.undefined, unit_col=model.unit_col, time_col=model.time_col,
               context=model.context_frame)


@with_limited_blas
def fit_streamed(
    train_path,
    *,
    engine: str = "chunked",
    scheduler: str | None = None,
    chunk_rows: int = 262_144,
    cases=None,
    kind: str = "full",
    shrinkage=None,
    derive=None,
    transform=None,
    threshold: str | ThresholdPolicy | None = None,
    columns: list[str] | None = None,
    id_col: str | None = None,
    label_col: str | None = None,
    random_state: int = 0,
    undefined: str = "flag",
    progress=None,
) -> Model:
    """Fit from a training file without loading it whole.

    ``progress(rows_done, chunks_done)``, if given, is called after each chunk
    (or Dask partition) of each pass over the file.

    The Gaussian's parameters equal those of :func:`fit` on the same rows
    (they come from mergeable counts, means and scatter matrices); the
    quantile grid for percentiles, fitted lambdas and a rate threshold on
    training rows come from a seeded uniform sample of at most 100,000 rows.
    Every row is used: the file must not have a label column.
    """
    from ..engines import ENGINES
    from ..engines.local import SAMPLE_ROWS, check_streamable, fit_local
    from ..store.table_stream import load_head

    if engine not in ENGINES or engine == "memory":
        raise AfterlookError(f"unknown engine '{engine}' for a streamed fit (choose: chunked, dask)")
    warnings: list[str] = []
    head = load_head(train_path, id_col=id_col, label_col=label_col)
    check_streamable(head.label_col, head.path)
    base = checked_base_columns(head, columns) if columns else list(head.numeric_columns)
    recipe = Recipe(base, derive_pairs(derive), {n: parse_transform(n, t) for n, t in derive_pairs(transform, "--transform")})
    if engine == "dask":
        from ..engines.dask_engine import fit_dask

        recipe, streamed = fit_dask(train_path, recipe, scheduler=scheduler, random_state=random_state,
                                    progress=progress)
    else:
        recipe, streamed = fit_local(train_path, recipe, chunk_rows=chunk_rows, random_state=random_state,
                                     progress=progress)
    if streamed.rows_dropped:
        worst = max(streamed.nan_by_feature, key=streamed.nan_by_feature.get)
        warnings.append(f"dropped {streamed.rows_dropped} training row(s) with NaN or infinite features "
                        f"(most in '{worst}': {streamed.nan_by_feature[worst]})")
    density = GaussianModel(kind=kind, shrinkage=shrinkage).fit_stats(streamed.stats, recipe.features)

    policy, value, basis = _pick_threshold(density, recipe, threshold, cases, streamed.sample, warnings, undefined,
                                           f"a sample of {streamed.sample.shape[0]} training rows",
                                           " (estimated on a sample of the training rows)")

    sd = np.sqrt(np.diag(streamed.stats.covariance()))
    stats = {name: {"mean": float(streamed.stats.mean[j]), "std": float(sd[j]),
                    "min": float(streamed.minimum[j]), "max": float(streamed.maximum[j])}
             for j, name in enumerate(recipe.features)}
    from ..core.explain import QUANTILE_POINTS, quantile_grid

    training = {
        "path": head.path,
        "sha256": sha256_file(head.path),
        "rows": int(streamed.rows_total),
        "rows_used": int(streamed.stats.n),
        "rows_dropped_nonfinite": int(streamed.rows_dropped),
        "rows_labelled_anomaly": 0,
        "columns": stats,
        "engine": engine,
        "quantiles_from": f"seeded sample of {streamed.sample.shape[0]} rows (at most {SAMPLE_ROWS})",
    }
    return Model(recipe=recipe, density=density, threshold=value, policy=policy, threshold_basis=basis,
                 training=training, quantiles=quantile_grid(streamed.sample, QUANTILE_POINTS),
                 warnings=warnings + list(head.warnings), undefined=undefined)
