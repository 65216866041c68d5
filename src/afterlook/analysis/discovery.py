"""Discovery: ranked candidate derived features that would expose the misses.

Three passes (see :mod:`afterlook.core.candidates`): a moment screen of
every pair candidate on a seeded sample of the normal population, exact
statistics for the best, and an exact re-fit of the top few for the false
alarms each adds.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..core import candidates as cand
from ..core import expressions
from ..core.errors import AfterlookError
from ..core.numbers import sample_rows
from ..core.recipe import free_name
from ..core.gaussian import GaussianModel, added_column, with_added_column
from ..core.thresholds import choose_threshold, confusion, flag
from .fitting import refit
from .model import Model
from .session import Session, prepare

__all__ = ["SuggestResult", "suggest", "AddedFeatureRefit"]


@dataclass
class SuggestResult:
    """Ranked candidates for one or more misses."""

    cases: list[str]
    tried: int
    candidates: list[cand.Candidate]
    training_source: str
    sample_rows: int
    chance_level: float
    warnings: list[str] = field(default_factory=list)

    @property
    def any_beyond_chance(self) -> bool:
        return any(c.beyond_chance for c in self.candidates)

    def verdict(self) -> str:
        if not self.candidates:
            return "no candidate could be evaluated"
        if self.any_beyond_chance:
            n = sum(c.beyond_chance for c in self.candidates)
            return f"{n} candidate(s) expose the case(s) beyond what chance explains over {self.tried} tried"
        return (f"nothing beats chance: with {self.tried} candidates tried, the most extreme one is no more "
                "extreme than luck alone would give; no candidate here is a finding")

    def to_dict(self) -> dict:
        return {
            "cases": list(self.cases),
            "tried": int(self.tried),
            "training": self.training_source,
            "sample_rows": int(self.sample_rows),
            "chance_level": self.chance_level,
            "any_beyond_chance": self.any_beyond_chance,
            "verdict": self.verdict(),
            "candidates": [c.to_dict() for c in self.candidates],
        }


def suggest(model, cases, train=None, case_ids=None, top: int = 10, *,
            exact: int | None = None, settings: cand.Settings | None = None,
            shaping: bool = True, progress=None) -> SuggestResult:
    """Ranked candidate derived features that would expose the given misses.

    Parameters
    ----------
    model, cases : a Model and the cases (path, DataFrame or Table), or a prepared
        :class:`~afterlook.analysis.session.Session` and ``None``
    case_ids : ids of target misses; default every miss
    top : candidates returned
    exact : candidates re-fitted exactly for false alarms added (default ``top``)
    progress : optional callable(stage: str, fraction: float) for the workbench
    """
    settings = checked_settings(settings)
    _check_count("top", top, 1)
    if exact is not None:
        _check_count("exact", exact, 0)
    session = prepare(model, cases, train)
    labels = session.require_labels("suggest")
    model, table = session.model, session.cases
    before = session.scored
    miss_mask = labels & ~before.flagged & np.isfinite(before.log_density)
    idx, warnings = _targets(session, case_ids, miss_mask)
    target_ids = [str(table.ids[i]) for i in idx]
    _report(progress, "normal population", 0.05)
    training = session.training
    warnings += training.warnings

    names = model.recipe.features
    A = _finite_rows(session.raw_features("normal"), names)
    A = A[sample_rows(A.shape[0], settings.sample_size, settings.random_state)]
    sample = {n: A[:, k] for k, n in enumerate(names)}
    raw_cases = session.raw_features("cases")
    C = np.column_stack([raw_cases[n] for n in names])
    T = C[idx]
    if not np.all(np.isfinite(T)):
        raise AfterlookError("a target case has NaN or infinite features; it cannot be searched")

    shaped = _shaping_expressions(model, sample) if shaping else {}
    _report(progress, "screening candidates", 0.15)
    candidates, tried, _ = cand.generate_and_screen(names, sample, T, shaped, settings, select=True)
    _report(progress, "exact statistics", 0.35)
    targets = set(idx)
    other = np.array([i for i in np.flatnonzero(labels) if i not in targets and np.all(np.isfinite(C[i]))],
                     dtype=int)
    other_cols = {n: C[other, k] for k, n in enumerate(names)}
    other_is_miss = miss_mask[other] if len(other) else np.zeros(0, bool)
    ranked = cand.second_pass(candidates, tried, sample, {n: T[:, k] for k, n in enumerate(names)},
                              target_ids, other_cols, other_is_miss, settings)

    exact = top if exact is None else exact
    head = ranked[: max(exact, 0)]
    warnings += _refit_head(session, head, idx, progress)
    head.sort(key=lambda c: c.rank_key(settings.min_correlation))
    final = (head + ranked[len(head):])[:top]
    _report(progress, "done", 1.0)
    return SuggestResult(target_ids, tried, final, training.source, A.shape[0], settings.chance_level, warnings)


def checked_settings(settings: cand.Settings | None) -> cand.Settings:
    """The search settings, checked at the API edge (one-line :class:`AfterlookError`)."""
    if settings is None:
        return cand.Settings()
    if not isinstance(settings, cand.Settings):
        raise AfterlookError(f"settings must be an afterlook Settings, got {type(settings).__name__}")
    return settings.check()


def _check_count(name: str, value, low: int) -> None:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
        raise AfterlookError(f"{name} must be a whole number of at least {low}, got {value!r}")


def _targets(session: Session, case_ids, miss_mask: np.ndarray) -> tuple[list[int], list[str]]:
    """Row positions of the target cases (default: every miss) and warnings about them."""
    table = session.cases
    if case_ids:
        idx = [session.row(c) for c in case_ids]
    else:
        idx = list(np.flatnonzero(miss_mask))
        if not idx:
            raise AfterlookError("there are no misses to explain: every labelled anomaly is flagged")
    warnings = []
    for i in idx:
        if not table.labels[i]:
            warnings.append(f"case {table.ids[i]} is labelled normal; searching anyway")
        elif session.scored.flagged[i]:
            warnings.append(f"case {table.ids[i]} is already flagged; searching anyway")
    return idx, warnings


def _finite_rows(raw: dict, names: list[str]) -> np.ndarray:
    """The rows of ``raw`` (columns ``names``) whose every value is finite, as a matrix."""
    A = np.column_stack([raw[n] for n in names])
    return A[np.all(np.isfinite(A), axis=1)]


def _refit_head(session: Session, head: list, idx: list[int], progress) -> list[str]:
    """Third pass: an exact re-fit of each of ``head`` for the false alarms it adds."""
    model, table = session.model, session.cases
    warnings = []
    base_conf = session.scored.confusion()
    fast = AddedFeatureRefit.prepare(session)
    for k, c in enumerate(head):
        _report(progress, f"re-fitting {k + 1}/{len(head)}", 0.4 + 0.6 * k / max(len(head), 1))
        outcome = fast.evaluate(c.parsed or c.expression) if fast is not None else None
        if outcome is None:  # not expressible as an added column: full re-fit
            recipe = model.recipe.with_derived([(free_name("candidate", model.recipe.features), c.expression)])
            try:
                new = refit(model, recipe, session.training, table, quantiles=False)
            except AfterlookError as exc:
                warnings.append(f"could not re-fit with {c.expression}: {exc.message}")
                continue
            after = Session(new, table, training=session.training).scored
            outcome = (new.threshold, after.flagged, after.confusion())
        _threshold, flagged, conf = outcome
        c.false_alarms_added = conf.fp - base_conf.fp
        c.catches_targets = int(flagged[idx].sum())
    return warnings


class AddedFeatureRefit:
    """Exact re-fit with one added derived feature, without re-fitting the rest.

    A re-fit with one more column changes nothing about the other columns'
    maximum-likelihood estimates as long as the same rows are used
    (:func:`afterlook.core.gaussian.added_column`). The threshold is then
    re-picked by the model's policy on the re-scored cases, exactly as
    :func:`afterlook.analysis.trial.try_features` does. Used when the fit is
    classical or has a fixed shrinkage (not robust, no Ledoit-Wolf, whose
    intensity depends on all columns) and the candidate is finite on every
    training row the fit uses; otherwise :meth:`evaluate` returns None and
    the caller re-fits in full. A test checks it against the full re-fit.
    """

    def __init__(self, model: Model, X, raw_train, case_features, case_raw, labels, base: GaussianModel):
        self.model, self.X, self.raw_train = model, X, raw_train
        self.case_features, self.case_raw, self.labels, self.base = case_features, case_raw, labels, base
        # log p(x) of the current features, reused: with one added column y,
        # log p(x, y) = log p(x) + log N(y; E[y | x], var(y | x)) exactly.
        self.case_ld = base.log_density(case_features)
        self.train_ld = base.log_density(X) if model.policy.kind == "rate" else None
        self.precision = base.precision() if base.kind == "full" else None

    @classmethod
    def prepare(cls, session: Session):
        """The re-fit for the session's model and cases, or None when the fast path does not apply."""
        model = session.model
        d = model.density
        if d.robust or d.shrinkage == "ledoit-wolf" or session.labels is None:
            return None
        fm = model.recipe.transform_features(session.raw_features("normal"))
        keep = fm.finite_rows
        X = fm.values[keep]
        if X.shape[0] < 2:
            return None
        try:
            base = GaussianModel(kind=d.kind, shrinkage=d.shrinkage).fit(X, fm.names)
        except AfterlookError:
            return None
        raw_train = {k: v[keep] for k, v in session.scope("normal").items()}
        return cls(model, X, raw_train, session.scored.features, session.scope("cases"), session.labels, base)

    def evaluate(self, expression):
        """``(threshold, flagged, confusion)`` after adding ``expression`` (text or parsed), or None."""
        try:
            expr = expression if isinstance(expression, expressions.Expression) else expressions.parse(expression)
            y = expr.evaluate(self.raw_train)
            y_cases = expr.evaluate(self.case_raw)
        except AfterlookError:
            return None
        if not np.all(np.isfinite(y)):
            return None  # a full re-fit would drop rows: parameters of every column change
        base = self.base
        if base.kind == "full" and base.shrinkage_:
            new = with_added_column(base, self.X, y, "candidate")
            if new is None:
                return None
            ld = new.log_density(np.column_stack([self.case_features, y_cases]))
            train_ld = new.log_density(np.column_stack([self.X, y])) if self.train_ld is not None else None
        else:
            column = added_column(base, self.X, y, precision=self.precision)
            if column is None:
                return None  # the full re-fit refuses a constant or collinear column too
            with np.errstate(invalid="ignore"):
                ld = self.case_ld + column.conditional_log_density(self.case_features, y_cases)
            ld[~np.isfinite(ld)] = np.nan
            train_ld = None if self.train_ld is None else self.train_ld + column.conditional_log_density(self.X, y)
        threshold = choose_threshold(self.model.policy, case_log_density=ld, case_is_anomaly=self.labels,
                                     normal_log_density=train_ld)
        flagged = flag(ld, threshold)
        return threshold, flagged, confusion(flagged, self.labels)



def _shaping_expressions(model: Model, sample: dict) -> dict[str, str]:
    """Expression text of a shaping transform per column (the recipe's own, else a search)."""
    out = {}
    for name, t in model.recipe.transforms.items():
        if t.kind == "expression":
            out[name] = t.expression
    from ..core import shaping

    for name, values in sample.items():
        if name in out:
            continue
        try:
            res = shaping.search_transform(values, name=name)
        except (AfterlookError, TypeError):
            continue
        text = _as_expression(res.transform, name)
        if text:
            out[name] = text
    return out


def _as_expression(transform, name: str) -> str | None:
    from ..core.expressions import quote_name

    if transform is None:
        return None
    if transform.kind == "expression":
        return transform.expression
    lam = transform.lmbda
    q = quote_name(name)
    if transform.kind == "boxcox" and lam is not None:
        return f"log({q})" if abs(lam) < 1e-12 else f"({q} ** {lam:.6g} - 1) / {lam:.6g}"
    return None


def _report(progress, stage: str, fraction: float) -> None:
    if progress is not None:
        progress(stage, fraction)
