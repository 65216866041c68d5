"""Feature discovery: suggest candidates for misses, and try features by re-fitting.

Both operations need the normal population the model was fitted on. It is
found, in order: the ``train`` argument; the model's recorded training file
when its SHA-256 still matches (also looked for beside the model file);
else the cases labelled normal, with a warning, because those rows are then
used both to fit and to judge.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

import numpy as np

from .api import ScoredCases, as_table, fit, numeric_columns_of, scored_cases, table_name
from .core import candidates as cand
from .core.errors import AfterlookError
from .core.recipe import Recipe, parse_assignment
from .core.thresholds import Confusion
from .model import Model
from .store.tables import Table, sha256_file


# --------------------------------------------------------------------------
# the normal population
# --------------------------------------------------------------------------


@dataclass
class TrainingRows:
    table: Table
    source: str
    warnings: list[str] = field(default_factory=list)


def resolve_training(model: Model, cases: Table, train=None) -> TrainingRows:
    """The normal population for re-fits (see module docstring)."""
    if train is not None:
        t = as_table(train)
        return TrainingRows(t, t.path or "given table")
    recorded = model.training.get("path")
    digest = model.training.get("sha256")
    tried = []
    if recorded and digest:
        places = [recorded]
        if model.source_path:
            places.append(os.path.join(os.path.dirname(os.path.abspath(model.source_path)), os.path.basename(recorded)))
        for place in places:
            if os.path.isfile(place):
                tried.append(place)
                if sha256_file(place) == digest:
                    t = as_table(place)
                    return TrainingRows(t, f"{place} (recorded in the model; SHA-256 matches)")
    if cases.labels is None or not (~cases.labels).any():
        raise AfterlookError("no training rows: give --train (the model's recorded training file was not found "
                             "or has changed) or cases with labelled normal rows")
    why = ("the recorded training file changed since the fit (SHA-256 differs)" if tried
           else "the model's recorded training file was not found")
    frame = cases.frame.loc[~cases.labels]
    t = as_table(frame.drop(columns=[cases.label_col]))
    t.path = None
    return TrainingRows(t, f"cases labelled normal in {table_name(cases)}",
                        [f"{why}; fitting on the cases labelled normal instead (give --train to avoid judging on fitted rows)"])


def refit(model: Model, recipe: Recipe, train: TrainingRows, cases: Table, *, quantiles: bool = True) -> Model:
    """Re-fit the model's kind and options with another recipe, threshold by the same policy."""
    return fit(train.table, cases=cases, kind=model.density.kind, robust=model.density.robust,
               shrinkage=model.density.shrinkage, threshold=model.policy, recipe=recipe, quantiles=quantiles)


# --------------------------------------------------------------------------
# try
# --------------------------------------------------------------------------


@dataclass
class TryResult:
    """Before/after a re-fit with extra derived features."""

    before: Confusion
    after: Confusion
    threshold_before: float
    threshold_after: float
    cases: list[dict]
    derive: list[tuple[str, str]]
    training_source: str
    model: Model
    warnings: list[str] = field(default_factory=list)

    @property
    def false_alarms_added(self) -> int:
        return self.after.fp - self.before.fp

    def to_dict(self) -> dict:
        return {
            "derive": [{"name": n, "expression": e} for n, e in self.derive],
            "training": self.training_source,
            "before": {"threshold": self.threshold_before, **self.before.to_dict()},
            "after": {"threshold": self.threshold_after, **self.after.to_dict()},
            "false_alarms_added": self.false_alarms_added,
            "misses_caught": sum(1 for c in self.cases if c["label"] == "anomaly" and c["after"]["flagged"] and not c["before"]["flagged"]),
            "cases": self.cases,
        }


def try_features(model: Model, cases, derive, train=None, *, focus: list[str] | None = None,
                 training: TrainingRows | None = None, before: ScoredCases | None = None) -> TryResult:
    """Re-fit with extra derived features and compare before/after.

    Parameters
    ----------
    derive : {name: expression} or list of "NAME=EXPR" / (name, expression)
    focus : case ids always listed in ``cases`` (e.g. the miss under review),
        besides every case whose flag changed.
    training, before : the resolved normal population and ``model``'s scores of
        ``cases``, when the caller already has them (the workbench keeps both
        for its session, which makes a re-score on 100,000 cases quick).
    """
    table = as_table(cases)
    if table.labels is None:
        raise AfterlookError(f"{table_name(table)} has no label column; try needs labelled cases")
    pairs = derive_pairs(derive)
    if not pairs:
        raise AfterlookError("nothing to try: give at least one --derive NAME=EXPR")
    for cid in focus or []:
        table.row_index(str(cid))  # unknown id: the usual one-line error
    recipe = model.recipe.with_derived(pairs)
    _check_columns(recipe, table, pairs)
    training = training or resolve_training(model, table, train)
    new = refit(model, recipe, training, table)
    before = before or scored_cases(model, table)
    after = scored_cases(new, table)
    rows = _flip_rows(before, after, focus or [])
    return TryResult(before.confusion(), after.confusion(), model.threshold, new.threshold, rows, pairs,
                     training.source, new, training.warnings + new.warnings)


def derive_pairs(derive) -> list[tuple[str, str]]:
    if derive is None:
        return []
    if isinstance(derive, dict):
        return [(str(k), str(v)) for k, v in derive.items()]
    out = []
    for item in derive:
        out.append(parse_assignment(item) if isinstance(item, str) else (str(item[0]), str(item[1])))
    return out


def _check_columns(recipe: Recipe, table: Table, pairs) -> None:
    from .core import expressions

    known = list(table.frame.columns) + recipe.features
    for name, text in pairs:
        expressions.parse(text, known_columns=known)


def _flip_rows(before: ScoredCases, after: ScoredCases, focus: list[str]) -> list[dict]:
    ids = before.table.ids
    want = before.flagged != after.flagged
    for cid in focus:
        want[before.table.row_index(str(cid))] = True  # the table keeps its id index
    rows = []
    for i in np.flatnonzero(want):
        rows.append({
            "case": str(ids[i]),
            "label": "anomaly" if before.labels[i] else "normal",
            "before": {"log_density": _f(before.log_density[i]), "flagged": bool(before.flagged[i])},
            "after": {"log_density": _f(after.log_density[i]), "flagged": bool(after.flagged[i])},
        })
    rows.sort(key=lambda r: (r["label"] != "anomaly", r["case"]))
    return rows


def _f(x) -> float | None:
    return float(x) if np.isfinite(x) else None


# --------------------------------------------------------------------------
# suggest
# --------------------------------------------------------------------------


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


def suggest(model: Model, cases, train=None, case_ids=None, top: int = 10, *,
            exact: int | None = None, settings: cand.Settings | None = None,
            shaping: bool = True, progress=None) -> SuggestResult:
    """Ranked candidate derived features that would expose the given misses.

    Parameters
    ----------
    case_ids : ids of target misses; default every miss
    top : candidates returned
    exact : candidates re-fitted exactly for false alarms added (default ``top``)
    progress : optional callable(stage: str, fraction: float) for the workbench
    """
    settings = settings or cand.Settings()
    table = as_table(cases)
    if table.labels is None:
        raise AfterlookError(f"{table_name(table)} has no label column; suggest needs labelled cases")
    before = scored_cases(model, table)
    miss_mask = table.labels & ~before.flagged & np.isfinite(before.log_density)
    if case_ids:
        idx = [table.row_index(str(c)) for c in case_ids]
    else:
        idx = list(np.flatnonzero(miss_mask))
        if not idx:
            raise AfterlookError("there are no misses to explain: every labelled anomaly is flagged")
    target_ids = [str(table.ids[i]) for i in idx]
    warnings = []
    for i in idx:
        if not table.labels[i]:
            warnings.append(f"case {table.ids[i]} is labelled normal; searching anyway")
        elif before.flagged[i]:
            warnings.append(f"case {table.ids[i]} is already flagged; searching anyway")
    _report(progress, "normal population", 0.05)
    training = resolve_training(model, table, train)
    warnings += training.warnings

    names = model.recipe.features
    raw_train = model.recipe.raw_features(numeric_columns_of(training.table.frame, model.recipe.required_columns()))
    normal = np.ones(len(training.table.frame), bool) if training.table.labels is None else ~training.table.labels
    A = np.column_stack([raw_train[n] for n in names])[normal]
    A = A[np.all(np.isfinite(A), axis=1)]
    rows = cand.sample_rows(A.shape[0], settings.sample_size, settings.random_state)
    A = A[rows]
    sample = {n: A[:, k] for k, n in enumerate(names)}
    raw_cases = model.recipe.raw_features(numeric_columns_of(table.frame, model.recipe.required_columns()))
    C = np.column_stack([raw_cases[n] for n in names])
    T = C[idx]
    if not np.all(np.isfinite(T)):
        raise AfterlookError("a target case has NaN or infinite features; it cannot be searched")

    shaped = _shaping_expressions(model, sample) if shaping else {}
    _report(progress, "screening candidates", 0.15)
    candidates, tried, _ = cand.generate_and_screen(names, sample, T, shaped, settings, select=True)
    _report(progress, "exact statistics", 0.35)
    other = np.flatnonzero(table.labels)
    other = np.array([i for i in other if i not in set(idx) and np.all(np.isfinite(C[i]))], dtype=int)
    other_cols = {n: C[other, k] for k, n in enumerate(names)}
    other_is_miss = miss_mask[other] if len(other) else np.zeros(0, bool)
    ranked = cand.second_pass(candidates, tried, sample, {n: T[:, k] for k, n in enumerate(names)},
                              target_ids, other_cols, other_is_miss, settings)

    # Third pass: exact re-fit of the best few for the false alarms they add.
    exact = top if exact is None else exact
    head = ranked[: max(exact, 0)]
    base_conf = before.confusion()
    fast = AddedFeatureRefit.prepare(model, training, table)
    for k, c in enumerate(head):
        _report(progress, f"re-fitting {k + 1}/{len(head)}", 0.4 + 0.6 * k / max(len(head), 1))
        outcome = fast.evaluate(c.expression) if fast is not None else None
        if outcome is None:  # not expressible as an added column: full re-fit
            recipe = model.recipe.with_derived([(_candidate_name(names), c.expression)])
            try:
                new = refit(model, recipe, training, table, quantiles=False)
            except AfterlookError as exc:
                warnings.append(f"could not re-fit with {c.expression}: {exc.message}")
                continue
            after = scored_cases(new, table)
            outcome = (new.threshold, after.flagged, after.confusion())
        threshold, flagged, conf = outcome
        c.false_alarms_added = conf.fp - base_conf.fp
        c.catches_targets = int(flagged[idx].sum())
        c.metrics_after = {"threshold": threshold, **conf.to_dict()}
    head.sort(key=lambda c: c.rank_key(settings.min_correlation))
    final = (head + ranked[len(head):])[:top]
    _report(progress, "done", 1.0)
    return SuggestResult(target_ids, tried, final, training.source, A.shape[0], settings.chance_level, warnings)


class AddedFeatureRefit:
    """Exact re-fit with one added derived feature, without re-fitting the rest.

    A re-fit with one more column changes nothing about the other columns'
    maximum-likelihood estimates as long as the same rows are used: the new
    parameters are the old ones plus the new column's mean, variance and (full
    model) covariances with the others, one pass over the training rows. The
    threshold is then re-picked by the model's policy on the re-scored cases,
    exactly as :func:`try_features` does. Used when the fit is classical
    (not robust, no Ledoit-Wolf shrinkage, whose intensity depends on all
    columns) and the candidate is finite on every training row the fit uses;
    otherwise :meth:`evaluate` returns None and the caller re-fits in full.
    A test checks it against the full re-fit.
    """

    def __init__(self, model, X, raw_train, case_features, case_raw, labels, base):
        self.model, self.X, self.raw_train = model, X, raw_train
        self.case_features, self.case_raw, self.labels, self.base = case_features, case_raw, labels, base
        self.Xc = X - X.mean(axis=0)
        # log p(x) of the current features, reused: with one added column y,
        # log p(x, y) = log p(x) + log N(y; E[y | x], var(y | x)) exactly.
        self.case_ld = base.log_density(case_features)
        self.train_ld = base.log_density(X) if model.policy.kind == "rate" else None
        self.precision = base.precision() if base.kind == "full" else None

    @classmethod
    def prepare(cls, model: Model, training: TrainingRows, cases: Table):
        from .core.gaussian import GaussianModel

        d = model.density
        if d.robust or d.shrinkage == "ledoit-wolf" or cases.labels is None:
            return None
        frame = training.table.frame
        normal = np.ones(len(frame), bool) if training.table.labels is None else ~training.table.labels
        raw_cols = numeric_columns_of(frame.loc[normal], model.recipe.required_columns())
        fm = model.recipe.apply(raw_cols)
        keep = fm.finite_rows
        X = fm.values[keep]
        if X.shape[0] < 2:
            return None
        try:
            base = GaussianModel(kind=d.kind, shrinkage=d.shrinkage).fit(X, fm.names)
        except AfterlookError:
            return None
        raw_train = {k: v[keep] for k, v in model.recipe.raw_features(raw_cols).items()}
        raw_train.update({k: v[keep] for k, v in raw_cols.items() if k not in raw_train})
        case_cols = numeric_columns_of(cases.frame, model.recipe.required_columns())
        case_raw = dict(case_cols)
        case_raw.update(model.recipe.raw_features(case_cols))
        case_features = model.recipe.apply(case_cols).values
        return cls(model, X, raw_train, case_features, case_raw, cases.labels, base)

    def evaluate(self, expression: str):
        """``(threshold, flagged, confusion)`` after adding ``expression``, or None."""
        from .core import expressions
        from .core.gaussian import COLLINEAR_TOL, LOG_2PI
        from .core.thresholds import choose_threshold, confusion, flag

        try:
            expr = expressions.parse(expression)
            y = expr.evaluate(self.raw_train)
            y_cases = expr.evaluate(self.case_raw)
        except AfterlookError:
            return None
        if not np.all(np.isfinite(y)):
            return None  # a full re-fit would drop rows: parameters of every column change
        base = self.base
        n = self.X.shape[0]
        my = y.mean()
        yc = y - my
        vy = float(yc @ yc / n)
        if not vy > 0:
            return None
        if base.kind == "full" and base.shrinkage_:
            return self._evaluate_shrunk(y, y_cases, my, yc, vy)
        if base.kind == "independent":
            beta = None
            s2 = vy
        else:
            cxy = self.Xc.T @ yc / n
            beta = self.precision @ cxy  # regression of y on x
            s2 = vy - float(cxy @ beta)
            if not s2 / vy >= COLLINEAR_TOL:
                return None  # the full re-fit refuses a collinear column too
        def cond_ld(Xrows, yrows):
            mean = my if beta is None else my + (Xrows - base.mean_) @ beta
            return -0.5 * (LOG_2PI + np.log(s2) + (yrows - mean) ** 2 / s2)

        with np.errstate(invalid="ignore"):
            ld = self.case_ld + cond_ld(self.case_features, y_cases)
        ld[~np.isfinite(ld)] = np.nan
        train_ld = None if self.train_ld is None else self.train_ld + cond_ld(self.X, y)
        threshold = choose_threshold(self.model.policy, case_log_density=ld, case_is_anomaly=self.labels,
                                     normal_log_density=train_ld)
        flagged = flag(ld, threshold)
        return threshold, flagged, confusion(flagged, self.labels)

    def _evaluate_shrunk(self, y, y_cases, my, yc, vy):
        """Fixed shrinkage: the target trace(S)/d changes with the new column, so rebuild."""
        from .core.gaussian import GaussianModel, shrink_towards_diagonal
        from .core.thresholds import choose_threshold, confusion, flag

        base = self.base
        n = self.X.shape[0]
        raw_cov = (self.Xc.T @ self.Xc) / n
        cxy = self.Xc.T @ yc / n
        cov = np.block([[raw_cov, cxy[:, None]], [cxy[None, :], np.array([[vy]])]])
        cov = shrink_towards_diagonal(cov, base.shrinkage_)
        new = GaussianModel(kind="full", shrinkage=base.shrinkage, names=base.names + ["candidate"])
        new.mean_ = np.append(base.mean_, my)
        new.shrinkage_ = base.shrinkage_
        try:
            new.chol_ = new._cholesky(cov)
        except AfterlookError:
            return None
        new.covariance_ = cov
        ld = new.log_density(np.column_stack([self.case_features, y_cases]))
        train_ld = new.log_density(np.column_stack([self.X, y])) if self.train_ld is not None else None
        threshold = choose_threshold(self.model.policy, case_log_density=ld, case_is_anomaly=self.labels,
                                     normal_log_density=train_ld)
        flagged = flag(ld, threshold)
        return threshold, flagged, confusion(flagged, self.labels)


def _candidate_name(existing: list[str]) -> str:
    name, k = "candidate", 1
    while name in existing:
        k += 1
        name = f"candidate_{k}"
    return name


def _shaping_expressions(model: Model, sample: dict) -> dict[str, str]:
    """Expression text of a shaping transform per column (the recipe's own, else a search)."""
    out = {}
    for name, t in model.recipe.transforms.items():
        if t.kind == "expression":
            out[name] = t.expression
    try:
        from .core import shaping
    except ImportError:  # pragma: no cover - shaping lands with its own change
        return out
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
    from .core.expressions import quote_name

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
