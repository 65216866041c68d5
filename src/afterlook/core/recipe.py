"""The model's feature pipeline: base columns, derived features, transforms.

Order of application:

1. derived features are computed from the table's raw columns (a derived
   feature may also use the derived features defined before it);
2. the feature vector is ``base columns + derived features``;
3. per-feature transforms are applied (to a base column or a derived one).

Transforms are an expression over the feature's own name
(``hours_since_service=log(hours_since_service + 1)``), or a Box-Cox /
Yeo-Johnson power transform with a fixed or fitted lambda. Fitted lambdas
are the maximum-likelihood values of ``scipy.stats.boxcox`` and
``scipy.stats.yeojohnson`` on the finite training values.

Derived features may call functions whose statistics are frozen at fit
(``zscore(x)``, see :mod:`afterlook.core.frozen`): :meth:`Recipe.fit`
computes them on the training rows and keeps them in ``Recipe.frozen`` (the
model file's ``recipe.frozen``); every later evaluation uses them. A
transform cannot call them (write a derived feature instead).

Columns are passed as a mapping of name -> 1-D array so the core stays free
of pandas.
"""

from __future__ import annotations

import re
from collections import ChainMap
from dataclasses import dataclass, field
from typing import Mapping

import numpy as np

from . import expressions
from .frozen import frozen_from_list, frozen_to_list
from .errors import AfterlookError

POWER_KINDS = ("boxcox", "yeojohnson")
_POWER_RE = re.compile(r"^\s*(boxcox|yeojohnson|box-cox|yeo-johnson)\s*(?:\(\s*([^)]*)\s*\))?\s*$", re.I)
_NAME_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


@dataclass(frozen=True)
class Transform:
    """A per-feature transform.

    ``kind`` is "expression" (``expression`` holds the text, written over the
    feature's own name), "boxcox" or "yeojohnson" (``lmbda`` None until fitted).
    """

    kind: str
    expression: str | None = None
    lmbda: float | None = None

    def parsed(self) -> "expressions.Expression":
        """The expression transform, parsed on first use and kept (the text never changes)."""
        expr = self.__dict__.get("_parsed")
        if expr is None:
            expr = expressions.parse(self.expression)
            _refuse_stateful_transform(expr, self.expression)
            object.__setattr__(self, "_parsed", expr)  # a cache on a frozen instance; not a field
        return expr

    def describe(self, feature: str) -> str:
        if self.kind == "expression":
            return self.expression
        lam = "fitted" if self.lmbda is None else f"{self.lmbda:.6g}"
        return f"{self.kind}({lam})"

    def to_dict(self) -> dict:
        out = {"kind": self.kind}
        if self.kind == "expression":
            out["expression"] = self.expression
        else:
            out["lambda"] = self.lmbda
        return out

    @classmethod
    def from_dict(cls, data: dict) -> "Transform":
        kind = data.get("kind")
        if kind == "expression":
            return cls("expression", expression=str(data["expression"]))
        if kind in POWER_KINDS:
            lam = data.get("lambda")
            return cls(kind, lmbda=None if lam is None else float(lam))
        raise AfterlookError(f"unknown transform kind {kind!r}")


def parse_transform(feature: str, text: str) -> Transform:
    """Parse the right-hand side of ``--transform FEATURE=TEXT``."""
    m = _POWER_RE.match(text)
    if m and "," not in (m.group(2) or ""):  # boxcox(x, 0.5) is the expression function, not a lambda
        kind = m.group(1).lower().replace("-", "")
        arg = m.group(2)
        if arg is None or not arg.strip():
            return Transform(kind)
        try:
            lam = float(arg)
        except ValueError:
            raise AfterlookError(f"transform '{feature}={text}': lambda '{arg}' is not a number") from None
        if not np.isfinite(lam):
            raise AfterlookError(f"transform '{feature}={text}': lambda must be finite")
        return Transform(kind, lmbda=lam)
    expr = expressions.parse(text)
    _refuse_stateful_transform(expr, f"{feature}={text}")
    if set(expr.columns) - {feature}:
        other = sorted(set(expr.columns) - {feature})[0]
        raise AfterlookError(
            f"transform '{feature}={text}' may only use '{feature}' itself, not '{other}' (use a derived feature for that)"
        )
    t = Transform("expression", expression=expr.text)
    object.__setattr__(t, "_parsed", expr)  # already parsed: Transform.parsed() reuses it
    return t


def _refuse_stateful_transform(expr: "expressions.Expression", text: str) -> None:
    if expr.calls:
        raise AfterlookError(f"transform '{text}': {expr.calls[0]} needs statistics frozen at fit, which a "
                             "transform does not keep (use a derived feature, --derive)")


def apply_transform(t: Transform, feature: str, values: np.ndarray) -> np.ndarray:
    """The transform ``t`` of ``feature`` applied to its values (non-finite results are NaN)."""
    values = np.asarray(values, dtype=np.float64)
    # An infinite reading is a broken sensor, not a value: never let a power
    # transform map it to a finite number (lambda < 0 would give -1/lambda).
    values = np.where(np.isfinite(values), values, np.nan)
    if t.kind == "expression":
        return t.parsed().evaluate({feature: values})
    if t.lmbda is None:
        raise AfterlookError(f"transform of '{feature}' is not fitted")
    from scipy import special, stats  # here, not at the top: scipy.stats costs ~0.5 s to import

    with np.errstate(all="ignore"):
        if t.kind == "boxcox":
            out = np.where(values > 0, special.boxcox(np.where(values > 0, values, 1.0), t.lmbda), np.nan)
        else:
            out = stats.yeojohnson(values, lmbda=t.lmbda)
    out = np.asarray(out, dtype=np.float64)
    out[~np.isfinite(out)] = np.nan
    return out


def fit_power_lambda(kind: str, values: np.ndarray) -> float:
    """Maximum-likelihood lambda of scipy.stats.boxcox / yeojohnson on finite values."""
    from scipy import stats
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x)]
    if kind == "boxcox":
        x = x[x > 0]
        if x.size < 3:
            raise AfterlookError("Box-Cox needs at least 3 positive values")
        if np.ptp(x) == 0:
            raise AfterlookError("Box-Cox needs a column that varies")
        return float(stats.boxcox(x)[1])
    if x.size < 3 or np.ptp(x) == 0:
        raise AfterlookError("Yeo-Johnson needs at least 3 values that vary")
    return float(stats.yeojohnson(x)[1])


@dataclass
class FeatureMatrix:
    """Model features of a table after the recipe, with NaN bookkeeping."""

    values: np.ndarray  # (n, d) float64
    names: list[str]
    nan_by_feature: dict[str, int]

    @property
    def finite_rows(self) -> np.ndarray:
        return np.all(np.isfinite(self.values), axis=1)

    def column(self, name: str) -> np.ndarray:
        """The values of one feature, by name."""
        return self.values[:, self.names.index(name)]


@dataclass
class Recipe:
    """Base columns, derived features (name, expression), transforms and frozen statistics.

    ``frozen`` maps a stateful call's key (``zscore(x)``) to the statistics
    :meth:`fit` froze on the training rows.
    """

    base: list[str]
    derived: list[tuple[str, str]] = field(default_factory=list)
    transforms: dict[str, Transform] = field(default_factory=dict)
    frozen: dict[str, dict] = field(default_factory=dict)

    def __post_init__(self) -> None:
        # Each derived expression is parsed here, once; apply, raw_features and
        # required_columns reuse the parsed form.
        self._parsed: dict[str, expressions.Expression] = {}
        self.base = list(self.base)
        self.derived = [(str(n), str(e)) for n, e in self.derived]
        seen = set()
        for name in self.base:
            if name in seen:
                raise AfterlookError(f"column '{name}' is listed twice")
            seen.add(name)
        known = list(self.base)
        for name, text in self.derived:
            if not _NAME_RE.match(name):
                raise AfterlookError(f"derived feature name '{name}' must be letters, digits and underscores")
            if name in seen:
                raise AfterlookError(f"derived feature '{name}' clashes with an existing feature name")
            seen.add(name)
            # syntax and whitelist now; columns on apply; frozen statistics bound (any missing: error on apply)
            self._parsed[name] = expressions.parse(text).with_frozen(self.frozen)
            known.append(name)
        for name in self.transforms:
            if name not in seen:
                raise AfterlookError(f"transform for '{name}', which is not a feature of the model")

    @property
    def features(self) -> list[str]:
        return self.base + [n for n, _ in self.derived]

    @property
    def derived_names(self) -> list[str]:
        return [n for n, _ in self.derived]

    def required_columns(self) -> list[str]:
        """Raw table columns the recipe reads."""
        need = list(self.base)
        defined = set(self.base)
        for name, _text in self.derived:
            for col in self._parsed[name].columns:
                if col not in defined and col not in need:
                    need.append(col)
            defined.add(name)
        return need

    def with_derived(self, extra: list[tuple[str, str]]) -> "Recipe":
        """A new recipe with ``extra`` (name, expression) pairs appended to the derived features."""
        return Recipe(self.base, self.derived + list(extra), dict(self.transforms), dict(self.frozen))

    @property
    def stateful_calls(self) -> list[str]:
        """Keys of the calls whose statistics :meth:`fit` freezes, in order of use."""
        return list(dict.fromkeys(k for name, _ in self.derived for k in self._parsed[name].calls))

    @property
    def history(self) -> int:
        """Earlier readings of its unit a row needs for every feature (lag, rolling_median; an upper bound)."""
        return sum(self._parsed[name].history for name, _ in self.derived)

    @property
    def reads_units(self) -> bool:
        """Whether a feature reads each row's unit (a baseline: unit_median, unit_scale) or its past (lag,
        rolling_median). A model can record a unit column that its recipe never reads."""
        from .units import BASELINES

        return self.history > 0 or any(k.split("(", 1)[0] in BASELINES for k in self.stateful_calls)

    def needs_fit(self) -> bool:
        """Whether :meth:`fit` has something to compute: a lambda or a frozen statistic."""
        return (any(t.kind in POWER_KINDS and t.lmbda is None for t in self.transforms.values())
                or bool(self.stateful_calls))

    def raw_features(self, columns: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """Base columns and derived features by name, before any transform.

        ``columns`` maps raw table column names to arrays; a derived feature may
        read earlier derived features and any column of ``columns``."""
        env: dict[str, np.ndarray] = {}
        for name in self.base:
            if name not in columns:
                raise AfterlookError(f"the table has no column '{name}', which the model uses")
            env[name] = np.asarray(columns[name], dtype=np.float64)
        # Layered lookup: derived values first, then the table's columns, read
        # lazily so text columns of the table are never converted.
        scope = ChainMap({}, columns)
        scope.n_rows = len(next(iter(env.values()))) if env else getattr(columns, "n_rows", None)
        for name, text in self.derived:
            expr = self._parsed[name]
            missing = [c for c in expr.columns if c not in scope]
            if missing:
                raise AfterlookError(
                    f"derived feature '{name} = {text}' needs column '{missing[0]}', which the table lacks"
                )
            values = expr.evaluate(scope)
            env[name] = values
            scope.maps[0][name] = values
        return env

    def fit(self, columns: Mapping[str, np.ndarray]) -> "Recipe":
        """Freeze statistics and resolve fitted lambdas on training columns; returns a new recipe.

        Every stateful call (``zscore``) is fitted afresh on ``columns`` (the
        normal rows: a re-fit on new rows freezes new statistics), each on
        the finite values of its argument.
        """
        frozen: dict[str, dict] = {}
        if self.stateful_calls:
            scope = _DerivedScope(frozen, columns, self)
            for name, _text in self.derived:
                expr = self._parsed[name]
                if expr.calls:
                    frozen.update(expr.with_frozen({}).fit(scope).frozen)
                scope.earlier.add(name)  # later features may read this one (with what is frozen so far)
        recipe = Recipe(self.base, self.derived, dict(self.transforms), frozen) if self.stateful_calls else self
        env = recipe.raw_features(columns)
        fitted = {}
        for name, t in self.transforms.items():
            if t.kind in POWER_KINDS and t.lmbda is None:
                try:
                    fitted[name] = Transform(t.kind, lmbda=fit_power_lambda(t.kind, env[name]))
                except AfterlookError as exc:
                    raise AfterlookError(f"transform of '{name}': {exc.message}") from None
            else:
                fitted[name] = t
        return Recipe(self.base, self.derived, fitted, dict(recipe.frozen))

    def apply(self, columns: Mapping[str, np.ndarray]) -> FeatureMatrix:
        """Model features of ``columns``: derived features, then the per-feature transforms."""
        return self.transform_features(self.raw_features(columns))

    def transform_features(self, env: Mapping[str, np.ndarray]) -> FeatureMatrix:
        """The per-feature transforms applied to :meth:`raw_features`' output."""
        names = self.features
        n = len(next(iter(env.values()))) if env else 0
        X = np.empty((n, len(names)))
        columns = []
        for name in names:
            t = self.transforms.get(name)
            columns.append(apply_transform(t, name, env[name]) if t is not None else env[name])
        # Filled in blocks of rows: writing whole columns of a (n, d) matrix one
        # after the other strides through memory d times and was most of the cost.
        block = 8192
        for start in range(0, n, block):
            rows = slice(start, start + block)
            for j, values in enumerate(columns):
                X[rows, j] = values[rows] if np.ndim(values) else values
        bad = ~np.isfinite(X)
        counts = bad.sum(axis=0)  # one pass over the matrix, not one strided pass per column
        if counts.any():
            X[bad] = np.nan
        nan_by = {name: int(counts[j]) for j, name in enumerate(names)}
        return FeatureMatrix(X, names, nan_by)

    def feature_columns(self, env: Mapping[str, np.ndarray]) -> list[np.ndarray]:
        """The features of :meth:`transform_features` as d separate float64 columns, without the (n, d) matrix:
        a feature without a transform is the caller's own array (no copy). Unlike :meth:`transform_features`,
        an infinite value of an untransformed feature is left as it is (a caller checks finiteness)."""
        out = []
        for name in self.features:
            t = self.transforms.get(name)
            out.append(apply_transform(t, name, env[name]) if t is not None else np.asarray(env[name], dtype=np.float64))
        return out

    def describe(self) -> list[str]:
        lines = [f"{n} = {e}" for n, e in self.derived]
        lines += [f"{n} -> {t.describe(n)}" for n, t in self.transforms.items()]
        return lines

    def to_dict(self) -> dict:
        out = {
            "base": list(self.base),
            "derived": [{"name": n, "expression": e} for n, e in self.derived],
            "transforms": {n: t.to_dict() for n, t in self.transforms.items()},
        }
        if self.frozen:  # absent otherwise: a recipe without them writes (and fingerprints) as before
            out["frozen"] = frozen_to_list(self.frozen)
        return out

    @classmethod
    def from_dict(cls, data: dict) -> "Recipe":
        try:
            recipe = cls(
                base=[str(c) for c in data["base"]],
                derived=[(d["name"], d["expression"]) for d in data.get("derived", [])],
                transforms={n: Transform.from_dict(t) for n, t in data.get("transforms", {}).items()},
                frozen=frozen_from_list(data.get("frozen", [])),
            )
        except (KeyError, TypeError) as exc:
            raise AfterlookError(f"model recipe is malformed ({exc})") from None
        missing = [k for k in recipe.stateful_calls if k not in recipe.frozen]
        if missing:
            raise AfterlookError(f"model recipe: {missing[0]} has no frozen statistics (recipe.frozen)")
        return recipe


class _DerivedScope(Mapping):
    """Table columns and the derived features computed so far with ``frozen`` (for :meth:`Recipe.fit`)."""

    def __init__(self, frozen: dict, columns: Mapping[str, np.ndarray], recipe: Recipe):
        self.frozen, self.columns, self.recipe = frozen, columns, recipe
        self.cache: dict[str, np.ndarray] = {}
        self.n_rows = getattr(columns, "n_rows", None)
        self.earlier: set[str] = set()  # derived features defined before the one being fitted

    def __getitem__(self, key):
        if key in self.earlier:
            if key not in self.cache:
                expr = self.recipe._parsed[key].with_frozen(self.frozen)
                self.cache[key] = expr.evaluate(self)
            return self.cache[key]
        return self.columns[key]

    def __contains__(self, key):
        return key in self.earlier or key in self.columns

    def __iter__(self):
        return iter(dict.fromkeys([*self.columns, *self.earlier]))

    def __len__(self):
        return len(dict.fromkeys([*self.columns, *self.earlier]))


def free_name(stem: str, existing) -> str:
    """``stem``, or ``stem_2``, ``stem_3`` ... : the first that is not in ``existing``."""
    name, k = stem, 1
    while name in existing:
        k += 1
        name = f"{stem}_{k}"
    return name


def parse_assignment(text: str, what: str = "--derive") -> tuple[str, str]:
    """Split ``NAME=EXPR`` (the first '=' separates)."""
    name, sep, expr = str(text).partition("=")
    name, expr = name.strip(), expr.strip()
    if not sep or not name or not expr:
        raise AfterlookError(f"{what} expects NAME=EXPRESSION, got '{text}'")
    return name, expr
