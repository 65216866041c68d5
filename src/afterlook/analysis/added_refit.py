"""The exact re-fit with one added derived feature, without re-fitting the rest (suggest's third pass).

:class:`AddedFeatureRefit` is used by :func:`afterlook.analysis.discovery.suggest`
(and tested against the full re-fit of ``try``).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ..core import expressions
from ..core.errors import AfterlookError
from ..core.added_column import added_column, with_added_column
from ..core.gaussian import GaussianModel
from ..core.search_inputs import centred_cross, column_means, same_fit
from ..core.thresholds import choose_threshold, confusion, flag
from .model import Model
from .session import Session

__all__ = ["AddedFeatureRefit", "Refitted"]


class Refitted(NamedTuple):
    """The cases after a re-fit with one candidate added."""

    threshold: float
    flagged: np.ndarray
    confusion: object
    log_density: np.ndarray


class AddedFeatureRefit:
    """Exact re-fit with one added derived feature, without re-fitting the rest.

    A re-fit with one more column changes nothing about the other columns'
    maximum-likelihood estimates as long as the same rows are used
    (:func:`afterlook.core.added_column.added_column`). The threshold is then
    re-picked by the model's policy on the re-scored cases, exactly as
    :func:`afterlook.analysis.trial.try_features` does. Used when the fit is
    classical or has a fixed shrinkage (not robust, no Ledoit-Wolf, whose
    intensity depends on all columns) and the candidate is finite on every
    training row the fit uses; otherwise :meth:`evaluate` returns None and
    the caller re-fits in full. A test checks it against the full re-fit.
    """

    def __init__(self, model: Model, columns: list, raw_train, case_features, case_raw, labels, base: GaussianModel,
                 means: np.ndarray | None = None):
        # the training features as d columns (the caller's arrays where a feature has no transform): the
        # conditional update reads them column by column, so the (n, d) matrix is made only when needed
        self.model, self.columns, self.raw_train = model, columns, raw_train
        self.case_features, self.case_raw, self.labels, self.base = case_features, case_raw, labels, base
        self._matrix = None
        self._means = means  # the training columns' means (column_means), when the caller has them
        # log p(x) of the current features, reused: with one added column y,
        # log p(x, y) = log p(x) + log N(y; E[y | x], var(y | x)) exactly.
        # the session's scores already carry the model's undefined-value policy (-inf outside a domain)
        self.case_ld = model.with_undefined_policy(base.log_density(case_features), case_raw)
        self.train_ld = base.log_density(columns) if model.policy.kind == "rate" else None
        self.precision = base.precision() if base.kind == "full" else None
        self._ready: dict = {}  # expression text -> (training values, case values, cross-covariance)

    @property
    def X(self) -> np.ndarray:
        """The training features as an (n, d) matrix (made on first use: the fixed-shrinkage re-fit)."""
        if self._matrix is None:
            self._matrix = np.column_stack(self.columns)
        return self._matrix

    @classmethod
    def prepare(cls, session: Session, progress=None):
        """The re-fit for the session's model and cases, or None when the fast path does not apply."""
        model = session.model
        d = model.density
        if d.robust or d.shrinkage == "ledoit-wolf" or session.labels is None:
            return None
        raw = session.raw_features("normal")
        columns = model.recipe.feature_columns(raw)
        if progress is not None:
            progress(0.5)
        known = session.finite_base_columns("normal")  # finite as read: an untransformed one is not looked at again
        every = all((name in known and c is raw[name]) or bool(np.isfinite(c).all())
                    for name, c in zip(model.recipe.features, columns))  # the usual case: no copy of the rows
        if not every:
            fm = model.recipe.transform_features(raw)
            keep = fm.finite_rows
            columns = [np.ascontiguousarray(c) for c in fm.values[keep].T]
        if len(columns[0]) < 2:
            return None
        means = column_means(columns)
        base = same_fit(d, columns, means)
        if base is None:
            try:
                base = GaussianModel(kind=d.kind, shrinkage=d.shrinkage).fit(np.column_stack(columns), list(model.recipe.features))
            except AfterlookError:
                return None
        if progress is not None:
            progress(1.0)
        scope = session.scope("normal")
        raw_train = scope if every else {k: v[keep] for k, v in scope.items()}
        return cls(model, columns, raw_train, session.scored.features, session.scope("cases"), session.labels, base,
                   means=means)

    def _parsed(self, expression) -> expressions.Expression:
        """``expression`` parsed; zscore(...) frozen on the training rows it is re-fitted on when it is not yet."""
        expr = expression if isinstance(expression, expressions.Expression) else expressions.parse(expression)
        return expr if expr.is_fitted else expr.fit(self.raw_train)

    def prefetch(self, many, progress=None) -> None:
        """Evaluate several candidates (text or parsed) on the training rows and, for the classical full
        model, their cross-covariances with the features in one blocked pass (:func:`centred_cross`), for
        :meth:`evaluate` to use."""
        ready = {}
        for k, expression in enumerate(many):
            if progress is not None and k % 2 == 0:
                progress(k / max(len(many), 1))
            if (expression if isinstance(expression, str) else expression.text) in self._ready:
                continue  # prepared by an earlier call (a spare of the first re-fits)
            try:
                expr = self._parsed(expression)
                y = expr.evaluate(self.raw_train)
            except AfterlookError:
                continue
            if np.all(np.isfinite(y)):
                ready[expr.text] = y
        cross = None
        if ready and self.base.kind == "full" and not self.base.shrinkage_:
            cross = centred_cross(self.columns, list(ready.values()), x_means=self._means)
        for k, (text, y) in enumerate(ready.items()):
            self._ready[text] = (y, None if cross is None else cross[:, k])

    def evaluate(self, expression):
        """:class:`Refitted` cases after adding ``expression`` (text or parsed), or None."""
        try:
            expr = self._parsed(expression)
            y, cross = self._ready.pop(expr.text, (None, None))  # prefetched: finite on every row
            if y is None:
                y = expr.evaluate(self.raw_train)
                if not np.all(np.isfinite(y)):
                    return None  # a full re-fit would drop rows: parameters of every column change
            y_cases = expr.evaluate(self.case_raw)
        except AfterlookError:
            return None
        base = self.base
        if base.kind == "full" and base.shrinkage_:
            new = with_added_column(base, self.X, y, "candidate")
            if new is None:
                return None
            ld = new.log_density(np.column_stack([self.case_features, y_cases]))
            ld = np.where(np.isneginf(self.case_ld), -np.inf, ld)
            train_ld = new.log_density([*self.columns, y]) if self.train_ld is not None else None
        else:
            column = added_column(base, self.columns, y, precision=self.precision, cross=cross)
            if column is None:
                return None  # the full re-fit refuses a constant or collinear column too
            with np.errstate(invalid="ignore"):
                cond = column.conditional_log_density(self.case_features, y_cases)
                ld = np.where(np.isneginf(self.case_ld), -np.inf, self.case_ld + cond)
            ld[np.isnan(ld) | np.isposinf(ld)] = np.nan
            train_ld = None if self.train_ld is None else self.train_ld + column.conditional_log_density(self.columns, y)
        if self.model.undefined == "flag":
            # the candidate undefined on a case whose readings are finite: outside its domain, flagged
            readings_ok = np.all(np.column_stack([np.isfinite(self.case_raw[c]) for c in expr.columns]), axis=1) \
                if expr.columns else np.ones(len(ld), bool)
            ld = np.where(np.isnan(ld) & ~np.isfinite(y_cases) & readings_ok & ~np.isnan(self.case_ld), -np.inf, ld)
        threshold = choose_threshold(self.model.policy, case_log_density=ld, case_is_anomaly=self.labels,
                                     normal_log_density=train_ld)
        flagged = flag(ld, threshold)
        return Refitted(threshold, flagged, confusion(flagged, self.labels), ld)
