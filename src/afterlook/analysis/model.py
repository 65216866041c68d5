"""A fitted afterlook model: recipe + Gaussian density + threshold + training summary.

This is the object the CLI, the workbench and notebooks share. Fitting and
scoring call the pure functions in :mod:`afterlook.core`; only ``save`` and
``load`` touch files, through :mod:`afterlook.store`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import Mapping

import numpy as np
import pandas as pd

from .._version import __version__
from ..core import fingerprint as fingerprints
from ..core.errors import AfterlookError
from ..core.explain import QUANTILE_POINTS, quantile_grid
from ..core.gaussian import GaussianModel, RowMoments
from ..core.recipe import FeatureMatrix, Recipe, apply_transform
from ..core.thresholds import UNDEFINED_POLICIES, ThresholdPolicy, apply_undefined_policy, flag, parse_policy
from ..core.blas import with_limited_blas
from ..store import model_file
from ..store.columns import numeric_column


@dataclass
class Model:
    """A fitted model.

    Attributes
    ----------
    recipe : Recipe
    density : GaussianModel
    threshold : float
        Log-density below which a case is flagged.
    policy : ThresholdPolicy
        How the threshold was chosen.
    threshold_basis : str
        What the threshold was chosen on, in words.
    training : dict
        Rows used, rows dropped and why, per-feature statistics, the SHA-256
        and path of the training file.
    quantiles : ndarray (points, d)
        Quantile grid of each feature over the normal population, for
        percentiles in explanations.
    warnings : list of str
        What the fit had to drop or assume (not saved).
    undefined : "flag" or "skip"
        A case whose feature is undefined although its readings are finite (a
        zero divisor, a log of a non-positive value) is outside the feature's
        domain: scored -inf and flagged ("flag", the default), or left
        unscored ("skip"). Cases with a missing reading are unscored either way.
    """

    recipe: Recipe
    density: GaussianModel
    threshold: float
    policy: ThresholdPolicy
    threshold_basis: str
    training: dict
    quantiles: np.ndarray | None
    created: str = field(default_factory=lambda: datetime.now(timezone.utc).replace(microsecond=0).isoformat())
    tool_version: str = __version__
    source_path: str | None = None
    warnings: list[str] = field(default_factory=list)
    undefined: str = "flag"
    unit_col: str | None = None  # --unit-col / --time-col recorded at fit (analysis/unit_rows.py)
    time_col: str | None = None
    context_frame: pd.DataFrame | None = None  # --context: readings before the cases (not saved)

    # -- features and scores ---------------------------------------------
    @property
    def kind(self) -> str:
        return self.density.kind

    @property
    def features(self) -> list[str]:
        return self.recipe.features

    def feature_matrix(self, columns: Mapping[str, np.ndarray] | pd.DataFrame) -> FeatureMatrix:
        """Model features of ``columns`` (a DataFrame or a name -> array mapping) after the recipe."""
        return self.recipe.apply(self._columns_of(columns))

    def feature_columns(self, columns: Mapping[str, np.ndarray] | pd.DataFrame) -> list[np.ndarray]:
        """The model's features of ``columns`` as d 1-D arrays, without building the (n, d) matrix.

        A feature the recipe takes as it is stays a view of the table's float64
        column; derived and transformed ones are computed (as :meth:`feature_matrix`
        does, except that non-finite values are left as they are: the density
        treats NaN and infinity alike).
        """
        cols = _columns_of(columns)
        env = self.recipe.raw_features(cols)
        out = []
        for name in self.recipe.features:
            t = self.recipe.transforms.get(name)
            out.append(apply_transform(t, name, env[name]) if t is not None else np.asarray(env[name], np.float64))
        if any(v.ndim == 0 for v in out):  # a derived feature that is a constant
            n = next((len(v) for v in out if v.ndim), getattr(cols, "n_rows", None))
            if n is None:
                n = len(next(iter(cols.values()))) if len(cols) else 0
            out = [np.broadcast_to(v, (n,)) if v.ndim == 0 else v for v in out]
        return out

    def log_density(self, columns: Mapping[str, np.ndarray] | pd.DataFrame) -> np.ndarray:
        """Log-density of each row: NaN where a reading is missing; -inf where a feature is
        undefined on finite readings and the model's ``undefined`` policy is "flag"."""
        cols = self._columns_of(columns)
        ld = self.density.log_density(self.feature_columns(cols))
        return self.with_undefined_policy(ld, cols)

    def with_undefined_policy(self, log_density: np.ndarray, columns: Mapping[str, np.ndarray]) -> np.ndarray:
        """``log_density`` with the model's undefined-value policy applied (``columns``: the raw readings).

        A new array. Only the rows whose log-density is NaN can change, so only
        their readings are looked at.
        """
        ld = np.array(log_density, dtype=np.float64)
        rows = np.flatnonzero(np.isnan(ld))
        ld[rows] = apply_undefined_policy(ld[rows], self.inputs_finite(columns, rows), self.undefined)
        return ld

    def inputs_finite(self, columns: Mapping[str, np.ndarray], rows: np.ndarray | None = None) -> np.ndarray:
        """Rows whose every reading the recipe uses is finite (of the rows at positions ``rows``, when given)."""
        ok = None
        for c in self.recipe.required_columns():
            values = np.asarray(columns[c], dtype=np.float64)
            finite = np.isfinite(values if rows is None else values[rows])
            ok = finite if ok is None else np.logical_and(ok, finite, out=ok)
        if self.recipe.history:  # a unit's first readings have no past: like a missing reading, never "outside"
            from ..core.units import PAST, TIMES, UNITS, with_history

            if UNITS in columns and TIMES in columns:
                past = columns[PAST] if PAST in columns else None
                has = with_history(columns[UNITS], columns[TIMES], self.recipe.history, past)
                has = has if rows is None else has[rows]
                ok = has if ok is None else np.logical_and(ok, has)
        if ok is None:
            n = len(rows) if rows is not None else (len(next(iter(columns.values()))) if columns else 0)
            return np.ones(n, dtype=bool)
        return ok

    @with_limited_blas
    def score(self, df: pd.DataFrame) -> pd.DataFrame:
        """A copy of ``df`` with ``log_density`` and ``flagged`` columns added."""
        ld = self.log_density(df)
        # A shallow copy: the two columns are added to (or replace whole columns
        # of) the copy only, so the caller's frame stays as it was without a
        # second copy of every value (a test checks it).
        out = df.copy(deep=False)
        out["log_density"] = ld
        out["flagged"] = flag(ld, self.threshold)
        return out

    @with_limited_blas
    def score_with_overflow(self, df: pd.DataFrame) -> tuple[pd.DataFrame, np.ndarray]:
        """:meth:`score` and the rows at -inf because a finite reading overflowed (not a feature's domain)."""
        cols = self._columns_of(df)
        raw = self.density.log_density(self.feature_columns(cols))  # -inf only on overflow
        ld = self.with_undefined_policy(raw, cols)
        out = df.copy(deep=False)  # as in score: the caller's frame is never written
        out["log_density"] = ld
        out["flagged"] = flag(ld, self.threshold)
        return out, np.isneginf(raw)

    def _columns_of(self, obj) -> Mapping[str, np.ndarray]:
        cols = _columns_of(obj)
        if self.unit_col and isinstance(obj, pd.DataFrame):
            from .unit_rows import row_context

            cols.extra = row_context(obj, self.unit_col, self.time_col, context=self.context_frame)
        return cols

    def fingerprint(self) -> str:
        """16 hex digits that identify this fit on any machine (see :mod:`afterlook.core.fingerprint`).

        Recipe text and kinds, the density's options, and the parameters and
        threshold rounded to 8 significant digits: the same fit elsewhere gets
        the same fingerprint, a refit on other data does not.
        """
        return fingerprints.fingerprint(self.recipe.to_dict(), self.density.to_dict(), self.threshold)

    def has_fingerprint(self, recorded: str | None) -> bool:
        """Whether ``recorded`` names this model: the current scheme, or the exact
        scheme that casebook entries written by earlier releases carry."""
        if not recorded:
            return False
        return recorded in (self.fingerprint(), fingerprints.exact_fingerprint(
            self.recipe.to_dict(), self.density.to_dict(), self.threshold))

    # -- file ------------------------------------------------------------
    @property
    def imported(self) -> dict | None:
        """What an imported model came from (:mod:`afterlook.analysis.interop`); None for a fitted one."""
        return (self.training or {}).get("imported")

    def to_sklearn(self):
        """A scikit-learn Pipeline (recipe, then an outlier detector scoring this log-density)."""
        from .sklearn_export import to_sklearn

        return to_sklearn(self)

    def to_dict(self) -> dict:
        if self.quantiles is None and not self.imported:
            raise AfterlookError("this model was fitted without its quantile grid and cannot be saved")
        training = dict(self.training)
        if self.quantiles is not None:  # an imported model has no training rows, hence no grid
            training["quantiles"] = {"points": int(self.quantiles.shape[0]), "values": self.quantiles.T.tolist()}
        recipe = self.recipe.to_dict()
        units = {"unit_col": self.unit_col, "time_col": self.time_col} if self.unit_col else None
        return {
            "format": model_file.FORMAT,
            "version": model_file.version_for(recipe),
            "tool_version": self.tool_version,
            "created": self.created,
            "recipe": recipe,
            "model": self.density.to_dict(),
            "threshold": {
                "value": self.threshold,
                "policy": str(self.policy),
                "description": self.policy.describe(),
                "chosen_on": self.threshold_basis,
                "undefined": self.undefined,
            },
            "training": training,
            **({"units": units} if units else {}),
        }

    def save(self, path) -> None:
        """Write the model file atomically."""
        model_file.write_model_document(self.to_dict(), path)
        self.source_path = str(path)

    @classmethod
    def from_dict(cls, doc: dict, source_path: str | None = None) -> "Model":
        try:
            recipe = Recipe.from_dict(doc["recipe"])
            density = GaussianModel.from_dict(doc["model"])
            if density.names != recipe.features:
                raise AfterlookError("model file: the recipe's features and the density's features differ")
            thr = doc["threshold"]
            threshold = float(thr["value"])
            policy = parse_policy(thr.get("policy", "f1"))
            undefined = thr.get("undefined", "flag")
            if undefined not in UNDEFINED_POLICIES:
                raise AfterlookError(f"model file: threshold.undefined must be one of {', '.join(UNDEFINED_POLICIES)}")
            training = dict(doc["training"])
            q = training.pop("quantiles", None)
            if q is None and training.get("imported"):
                quantiles = None  # an imported model: no training rows, no grid
            else:
                quantiles = np.asarray(q["values"], dtype=np.float64).T
                if quantiles.ndim != 2 or quantiles.shape[1] != len(recipe.features):
                    raise ValueError("quantile grid does not match the features")
        except AfterlookError as exc:
            where = f"model file {source_path}: " if source_path else ""
            raise AfterlookError(where + exc.message) from None
        except (KeyError, TypeError, ValueError) as exc:
            where = f"model file {source_path}" if source_path else "model"
            raise AfterlookError(f"{where} is malformed (missing or bad {exc})") from None
        return cls(
            recipe=recipe, density=density, threshold=threshold, policy=policy,
            threshold_basis=str(thr.get("chosen_on", "")), training=training, quantiles=quantiles,
            created=str(doc.get("created", "")), tool_version=str(doc.get("tool_version", "")),
            source_path=source_path, undefined=undefined,
            unit_col=(doc.get("units") or {}).get("unit_col"), time_col=(doc.get("units") or {}).get("time_col"),
        )

    def describe_kind(self) -> str:
        """The model kind in words, e.g. "full, robust" or "full, shrinkage 0.12"."""
        parts = [self.kind]
        if self.density.robust:
            parts.append("robust")
        if self.density.shrinkage_:
            parts.append(f"shrinkage {self.density.shrinkage_:.3g}")
        if self.imported:
            parts.append("imported")
        return ", ".join(parts)


def load_model(path) -> Model:
    """Read a model file (clear error for anything that is not one)."""
    return Model.from_dict(model_file.read_model_document(path), source_path=str(path))


def training_summary(X: np.ndarray, names: list[str], quantiles: bool = True,
                     moments: RowMoments | None = None) -> tuple[dict, np.ndarray | None]:
    """Per-feature statistics and (optionally) the quantile grid of the normal rows.

    ``moments``: :meth:`RowMoments.of` of the same rows when the caller has
    them (the fit does); the standard deviation comes from the scatter's
    diagonal, which agrees with ``numpy.std`` to rounding (about 1e-16 relative).
    """
    if moments is None:
        X = np.asfortranarray(X, dtype=np.float64)  # columns contiguous, as the fit keeps them
        moments = RowMoments.of(X, full=False)
    sd = moments.std()
    stats = {name: {"mean": float(moments.mean[j]), "std": float(sd[j]), "min": float(moments.minimum[j]),
                    "max": float(moments.maximum[j])}
             for j, name in enumerate(names)}
    if not quantiles:
        return stats, None
    return stats, quantile_grid(X, QUANTILE_POINTS)


def _columns_of(obj) -> Mapping[str, np.ndarray]:
    if isinstance(obj, pd.DataFrame):
        return _FrameColumns(obj)
    return obj


class _FrameColumns(Mapping):
    """Lazy numeric view of a DataFrame's columns (only the used ones are converted)."""

    def __init__(self, frame: pd.DataFrame):
        self.frame = frame
        self.n_rows = len(frame)
        self.extra: dict = {}  # the rows' unit and time (reserved keys), when the model names them

    def __getitem__(self, key):
        if key in self.extra:
            return self.extra[key]
        if key not in self.frame.columns:
            raise KeyError(key)
        col = self.frame[key]
        if isinstance(col, pd.Series) and col.dtype == np.float64:
            # Already float64 (NaN for missing): a read-only view of the frame's
            # values, where numeric_column's conversion would copy them.
            view = col.to_numpy(copy=False).view()
            view.flags.writeable = False
            return view
        return numeric_column(self.frame, key)

    def __contains__(self, key):
        return key in self.extra or key in self.frame.columns

    def __iter__(self):
        return iter(self.frame.columns)

    def __len__(self):
        return len(self.frame.columns)
