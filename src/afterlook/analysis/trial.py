"""Try: re-fit a model with extra derived features, re-score the cases, compare before and after."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .frames import Tabular
from ..core import expressions
from ..core.errors import AfterlookError
from ..core.numbers import finite_or_none
from ..core.recipe import Recipe
from ..core.heldout import DEFAULT_FOLDS, DEFAULT_SEED, HeldOut, flagged_rate, holdout_gain, kfold_gain
from ..core.thresholds import Confusion
from ..core.blas import with_limited_blas
from ..store.tables import Table
from .fitting import refit
from .model import Model
from .session import ScoredCases, Session, TrainingRows, as_table, derive_pairs, prepare, table_name
from .wording import flip_words

__all__ = ["TryResult", "try_features", "TrialView", "trial_view", "MetricChange", "CaseChange"]


@dataclass
class TryResult(Tabular):
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
    heldout: HeldOut | None = None  # F1 before/after on cases the threshold was not picked on
    outside_domain: tuple[int, int] = (0, 0)  # cases with a feature undefined on finite readings, before/after
    unscored: tuple[int, int] = (0, 0)  # cases with no log-density, before/after

    @property
    def false_alarms_added(self) -> int:
        return self.after.fp - self.before.fp

    def to_dict(self) -> dict:
        return {
            "derive": [{"name": n, "expression": e} for n, e in self.derive],
            "training": self.training_source,
            "before": {"threshold": self.threshold_before, **self.before.to_dict(),
                       "outside_domain": self.outside_domain[0], "unscored": self.unscored[0]},
            "after": {"threshold": self.threshold_after, **self.after.to_dict(),
                      "outside_domain": self.outside_domain[1], "unscored": self.unscored[1]},
            "false_alarms_added": self.false_alarms_added,
            "misses_caught": sum(1 for c in self.cases if c["label"] == "anomaly" and c["after"]["flagged"] and not c["before"]["flagged"]),
            "heldout": self.heldout.to_dict() if self.heldout is not None else None,
            "cases": self.cases,
        }


@with_limited_blas
def try_features(model, cases, derive, train=None, *, focus: list[str] | None = None,
                 training: TrainingRows | None = None, before: ScoredCases | None = None,
                 holdout=None, folds: int = DEFAULT_FOLDS) -> TryResult:
    """Re-fit with extra derived features and compare before/after.

    Parameters
    ----------
    model, cases : a Model and the cases (path, DataFrame or Table), or a prepared
        :class:`~afterlook.analysis.session.Session` and ``None``
    derive : {name: expression} or list of "NAME=EXPR" / (name, expression)
    focus : case ids always listed in ``cases`` (e.g. the miss under review),
        besides every case whose flag changed.
    training, before : the resolved normal population and ``model``'s scores of
        ``cases``, when the caller already has them (the workbench keeps both
        for its session, which makes a re-score on 100,000 cases quick).
    holdout : labelled cases (path, DataFrame or Table) kept apart: the threshold
        is picked on ``cases`` and the held-out metrics are counted on these.
        Default: stratified ``folds``-fold over ``cases`` (see
        :mod:`afterlook.core.heldout`). The in-sample metrics re-pick the
        threshold on the cases they report on and are optimistic; the held-out
        estimate is what to expect on cases the tool never saw.
    """
    session = prepare(model, cases, train)
    session.require_labels("try")
    model, table = session.model, session.cases
    pairs = derive_pairs(derive)
    if not pairs:
        raise AfterlookError("nothing to try: give at least one --derive NAME=EXPR")
    for cid in focus or []:
        table.row_index(str(cid))  # unknown id: the usual one-line error
    recipe = model.recipe.with_derived(pairs)
    _check_columns(recipe, table, pairs)
    training = training or session.training
    new = refit(model, recipe, training, table)
    before = before or session.scored
    after = Session(new, table, training=training).scored
    rows = _flip_rows(before, after, focus or [])
    warnings = training.warnings + new.warnings
    heldout = _heldout(model, new, session, before, after, holdout, folds, warnings)
    domain = tuple(int(s.outside_domain.sum()) if s.outside_domain is not None else 0 for s in (before, after))
    unscored = tuple(int(s.unscored.sum()) for s in (before, after))
    if domain[1] > domain[0]:
        how = "flagged as outside its domain" if new.undefined == "flag" else "left unscored (--undefined skip)"
        warnings.append(f"{domain[1] - domain[0]} more case(s) have a feature undefined on finite readings "
                        f"after the change (e.g. a zero divisor): {how}")
    return TryResult(before.confusion(), after.confusion(), model.threshold, new.threshold, rows, pairs,
                     training.source, new, warnings, heldout, domain, unscored)


def _heldout(model: Model, new: Model, session: Session, before: ScoredCases, after: ScoredCases, holdout,
             folds: int, warnings: list[str]) -> HeldOut | None:
    """Held-out F1 before/after: on a holdout table when given, else stratified K-fold over the cases."""
    labels = session.labels
    rate = flagged_rate(before.log_density, model.threshold, labels)
    if holdout is not None:
        hold = Session(model, as_table(holdout))
        if hold.labels is None:
            raise AfterlookError(f"{table_name(hold.cases)}: the holdout table needs a label column")
        hold_after = Session(new, hold.cases).scored
        return holdout_gain(before.log_density, after.log_density, labels, hold.scored.log_density,
                            hold_after.log_density, hold.labels, model.policy, false_alarm_rate=rate)
    try:
        return kfold_gain(before.log_density, after.log_density, labels, model.policy, false_alarm_rate=rate,
                          k=folds, seed=DEFAULT_SEED)
    except AfterlookError as exc:
        warnings.append(f"no held-out estimate: {exc.message}")
        return None


def _check_columns(recipe: Recipe, table: Table, pairs) -> None:
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
            "before": {"log_density": finite_or_none(before.log_density[i]), "flagged": bool(before.flagged[i])},
            "after": {"log_density": finite_or_none(after.log_density[i]), "flagged": bool(after.flagged[i])},
        })
    rows.sort(key=lambda r: (r["label"] != "anomaly", r["case"]))
    return rows


# --------------------------------------------------------------------------
# the before/after comparison, laid out for a screen
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class MetricChange:
    """One metric before and after a try, and its change."""
    name: str
    before: float
    after: float
    change: float
    integer: bool


@dataclass(frozen=True)
class CaseChange:
    """One case before and after a try: log-densities, flags and the flip in words."""
    case: str
    label: str
    log_density_before: float | None
    log_density_after: float | None
    flagged_before: bool
    flagged_after: bool
    words: str


@dataclass(frozen=True)
class TrialView:
    """A try result laid out for the before/after comparison."""

    derive: list[tuple[str, str]]
    training_source: str
    metrics: list[MetricChange]
    misses_caught: int
    false_alarms_added: int
    case: CaseChange | None  # the case under review
    threshold_before: float
    threshold_after: float
    margin_before: float | None
    margin_after: float | None
    now_flagged: list[CaseChange]
    no_longer_flagged: list[CaseChange]
    warnings: list[str]

    @staticmethod
    def counts(rows: list[CaseChange]) -> tuple[int, int, int]:
        """(cases, labelled anomaly, labelled normal) among ``rows``."""
        n_anomaly = sum(1 for r in rows if r.label == "anomaly")
        return len(rows), n_anomaly, len(rows) - n_anomaly


def trial_view(result: TryResult, case_id: str | None = None) -> TrialView:
    """Before/after metrics with their change, the case's log-density against each threshold, flips."""
    d = result.to_dict()
    b, a = d["before"], d["after"]
    metrics = []
    for key, name, integer in (("threshold", "threshold", False), ("tp", "caught (tp)", True),
                               ("fp", "false alarms (fp)", True), ("fn", "misses (fn)", True),
                               ("tn", "normal, not flagged (tn)", True), ("precision", "precision", False),
                               ("recall", "recall", False), ("f1", "F1", False)):
        metrics.append(MetricChange(name, b[key], a[key], a[key] - b[key], integer))
    changes = [CaseChange(r["case"], r["label"], r["before"]["log_density"], r["after"]["log_density"],
                          r["before"]["flagged"], r["after"]["flagged"],
                          flip_words(r["before"]["flagged"], r["after"]["flagged"])) for r in d["cases"]]
    case = next((c for c in changes if c.case == str(case_id)), None) if case_id is not None else None
    mb = ma = None
    if case is not None:
        mb = None if case.log_density_before is None else case.log_density_before - result.threshold_before
        ma = None if case.log_density_after is None else case.log_density_after - result.threshold_after
    return TrialView(
        derive=list(result.derive), training_source=result.training_source, metrics=metrics,
        misses_caught=d["misses_caught"], false_alarms_added=d["false_alarms_added"], case=case,
        threshold_before=result.threshold_before, threshold_after=result.threshold_after,
        margin_before=mb, margin_after=ma,
        now_flagged=[c for c in changes if c.flagged_after and not c.flagged_before],
        no_longer_flagged=[c for c in changes if c.flagged_before and not c.flagged_after],
        warnings=list(result.warnings),
    )
