"""Discovery: ranked candidate derived features that would expose the misses.

Three passes (see :mod:`afterlook.core.candidates`): a moment screen of
every pair candidate on a seeded sample of the normal population, exact
statistics for the best, and an exact re-fit of the top few for the false
alarms each adds.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .frames import Tabular
from ..core import candidates as cand
from ..core import expressions
from ..core.collinear import LinearSpan
from ..core.errors import AfterlookError
from ..core.heldout import DEFAULT_FOLDS, DEFAULT_SEED, flagged_rate, kfold_gain, stratified_folds
from ..core.numbers import sample_rows
from ..core.search_inputs import finite_sample, seeded_subset
from ..core.recipe import free_name
from ..core.blas import with_limited_blas
from . import shaping_choices
from .added_refit import AddedFeatureRefit, Refitted
from .fleet_search import FleetSearch, merged
from .fitting import refit
from .model import Model
from .session import Session, prepare

#: Re-fitted at least this many candidates by default: with fewer (``--top 3``) a candidate ranked
#: 4th before its re-fit could never be judged ``holds-up``, so the recommendation changed with --top.
EXACT_AT_LEAST = 10
#: Candidates after the first ``exact`` whose training columns and cross-covariances are prepared with theirs:
#: a verdict that demotes a re-fitted one brings the next in, and one pass over the training rows serves both.
SPARE_REFITS = 2

__all__ = ["SuggestResult", "suggest", "AddedFeatureRefit"]


@dataclass
class SuggestResult(Tabular):
    """Ranked candidates for one or more misses."""

    cases: list[str]
    tried: int
    candidates: list[cand.Candidate]
    training_source: str
    sample_rows: int
    chance_level: float
    warnings: list[str] = field(default_factory=list)
    beyond_chance_total: int = 0  # candidates beyond chance among all exactly scored, listed or not
    dropped_collinear: int = 0  # linear combinations of the model's features (cannot join a full model)
    dropped_refit: int = 0  # candidates whose re-fit failed
    heldout_method: str | None = None  # "kfold" when held-out gains were estimated
    heldout_folds: int | None = None

    @property
    def any_beyond_chance(self) -> bool:
        return any(c.beyond_chance for c in self.candidates)

    @property
    def recommended(self) -> str | None:
        """Name of the best ``holds-up`` candidate (the list is ranked), or None."""
        return next((c.name for c in self.candidates if c.verdict == "holds-up"), None)

    def recommended_reason(self) -> str:
        if self.recommended is not None:
            best = next(c for c in self.candidates if c.name == self.recommended)
            h = best.heldout
            return (f"{best.name} = {best.expression} is beyond chance and raised F1 on held-out cases (gain "
                    f"{h.gain:+.3f}, no fold lower; {h.improved} held-out calls turned right, {h.worsened} wrong)")
        if not self.candidates:
            return "no candidate could be evaluated"
        if self.heldout_method is None:
            return "held-out gains could not be estimated (too few labelled cases), so nothing is recommended"
        if not any(c.beyond_chance for c in self.candidates):
            return "no listed candidate beats chance"
        return ("no candidate that beats chance also raised F1 on held-out cases by more than noise, "
                "with no fold lower")

    def verdict(self) -> str:
        if not self.candidates:
            return "no candidate could be evaluated"
        n = self.beyond_chance_total or sum(c.beyond_chance for c in self.candidates)
        if n:
            return (f"{n} of the {self.tried} candidates tried expose the case(s) beyond what chance explains"
                    + (f" ({sum(c.beyond_chance for c in self.candidates)} listed)"
                       if n != sum(c.beyond_chance for c in self.candidates) else ""))
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
            "beyond_chance_total": int(self.beyond_chance_total),
            "verdict": self.verdict(),
            "recommended": self.recommended,
            "recommended_reason": self.recommended_reason(),
            "heldout": {"method": self.heldout_method, "folds": self.heldout_folds},
            "dropped": {"collinear": int(self.dropped_collinear), "refit_failed": int(self.dropped_refit)},
            "candidates": [c.to_dict() for c in self.candidates],
        }


@with_limited_blas
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
    exact : candidates re-fitted exactly for false alarms added (default ``top``, at least
        :data:`EXACT_AT_LEAST`, so that the verdicts, the ranking and the recommendation do
        not depend on how many rows are listed)
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
    miss_mask = labels & ~before.flagged & ~np.isnan(before.log_density)
    idx, warnings = _targets(session, case_ids, miss_mask)
    target_ids = [str(table.ids[i]) for i in idx]
    _report(progress, "normal population", 0.03)
    training = session.training
    _report(progress, "normal population", 0.05)
    warnings += training.warnings

    names = model.recipe.features
    raw_normal = session.raw_features("normal")
    _report(progress, "normal population", 0.08)  # every report is also where the workbench can stop a search
    A = finite_sample(raw_normal, names, settings.sample_size, settings.random_state,
                      known_finite=session.finite_base_columns("normal"))
    sample = {n: A[:, k] for k, n in enumerate(names)}
    raw_cases = session.raw_features("cases")
    C = np.column_stack([raw_cases[n] for n in names])
    T = C[idx]
    if not np.all(np.isfinite(T)):
        raise AfterlookError("a target case has NaN or infinite features; it cannot be searched")

    # The shaping choices are made in a second thread while this one screens the candidates that need none
    # and prepares the re-fits (on a free core the two overlap); the shaped candidates wait for them.
    _report(progress, "screening candidates", 0.1)
    shaping_job = (shaping_choices.Choices(model.recipe.transforms, sample, model.training.get("shaping"))
                   if shaping else None)
    try:
        screened = seeded_subset(sample, SCREEN_ROWS, settings.random_state)
        screen = cand.Screen(names, screened, T, progress=_stage(progress, "screening candidates", 0.1, 0.3))
        # with a unit column: unit-relative and change candidates (analysis/fleet_search.py), counted as tried
        fleet = FleetSearch.prepare(session, names, settings)
        fleet_found = fleet.screen(idx) if fleet is not None else []
        exact = max(top, EXACT_AT_LEAST) if exact is None else exact
        fold_warnings: list[str] = []
        folds = _folds(session, fold_warnings)
        refitter = _Refitter(session, idx, folds, progress, max(exact, 0), stage=("screening candidates", 0.22))
        shaped = (shaping_job.result(check=lambda: _report(progress, "shaping columns", 0.22))
                  if shaping_job is not None else {})
    finally:
        if shaping_job is not None:
            shaping_job.stop()  # a no-op once the choices are made; else (an error, a stale search) stops them
    candidates, tried, _ = screen.finish(shaped, settings, select=True)
    _report(progress, "screening candidates", 0.3)
    tried += fleet.tried if fleet is not None else 0
    _report(progress, "exact statistics", 0.3)  # the stage starts where the second pass reports from
    candidates_other = labels & np.all(np.isfinite(C), axis=1)
    candidates_other[idx] = False
    other = np.flatnonzero(candidates_other)
    other_cols = {n: C[other, k] for k, n in enumerate(names)}
    other_is_miss = miss_mask[other] if len(other) else np.zeros(0, bool)
    target_cols = {n: T[:, k] for k, n in enumerate(names)}
    measure = cand.RobustMeasure(sample, target_cols, target_ids, other_cols, other_is_miss, tried, settings)
    ranked = cand.second_pass(candidates, tried, sample, target_cols, target_ids, other_cols, other_is_miss, settings,
                              progress=_stage(progress, "exact statistics", 0.3, 0.35), measure=measure,
                              exact_first=max(exact, top))
    ranked, dropped_collinear = _addable(model, sample, ranked, progress)
    if fleet is not None:  # the same exact pass on the fleet's own mappings, merged into the one ranking
        more, dropped = fleet.addable(fleet.exact(fleet_found, tried, idx, target_ids, other, other_is_miss, settings,
                                                  progress=_stage(progress, "exact statistics", 0.35, 0.35)))
        ranked, dropped_collinear = merged(ranked, more, settings), dropped_collinear + dropped
    if dropped_collinear:
        warnings.append(f"left out {dropped_collinear} candidate(s) that are linear combinations of the model's "
                        "features (a full covariance cannot take them)")
    beyond_total = sum(c.beyond_chance for c in ranked)

    warnings += fold_warnings
    _report(progress, "preparing the re-fits", 0.4)
    n_exact = max(exact, 0)
    ranked = cand.measured_whole(ranked, max(exact, top), settings)  # again after the affine check dropped some
    refitter.refit_many(ranked[:n_exact], spare=ranked[n_exact: n_exact + SPARE_REFITS])
    while True:  # the list is ranked by verdict, which needs the re-fit: re-fit what would be listed
        ranked = [c for c in ranked if id(c) not in refitter.failed]
        for c in ranked:
            c.judge()
        ranked.sort(key=lambda c: c.rank_key(settings.min_correlation))
        if not all(cand.is_whole(c) for c in ranked[:top]):
            ranked = cand.measured_whole(ranked, top, settings)
            continue
        final = ranked[:top]
        pending = [c for c in final if id(c) not in refitter.attempted] if exact >= top else []
        if not pending:
            break
        refitter.refit_many(pending)
    warnings += refitter.warnings
    failed = refitter.failed
    if folds is not None and len(idx) > 1:
        _stability(final, names, sample, screened, C, idx, folds, shaped, settings, top, progress, fleet=fleet)
    _report(progress, "done", 1.0)
    return SuggestResult(target_ids, tried, final, training.source, A.shape[0], settings.chance_level, warnings,
                         beyond_chance_total=beyond_total, dropped_collinear=dropped_collinear,
                         dropped_refit=len(failed), heldout_method=None if folds is None else "kfold",
                         heldout_folds=None if folds is None else int(folds.max()) + 1)


#: Rows of the normal sample the moment screen reads (a seeded subset, when the sample has more than twice
#: this many): the first-pass z of a candidate is its target's distance from the mean in sds, and a few
#: thousand rows pin a mean and an sd down to a few per cent of the sd; the candidates it passes on are
#: measured on the whole sample (:func:`afterlook.core.candidates.second_pass`).
SCREEN_ROWS = 16384

#: Rows of the sample the affine-dependence check looks at (at least 8 per model feature).
ADDABLE_ROWS = 512


def _addable(model: Model, sample: dict, ranked: list, progress=None) -> tuple[list, int]:
    """Drop the candidates a full-covariance model cannot take (affine in its features); count them.

    The check runs on a seeded subset of the sample's rows: a candidate affine in
    the features is affine on every subset of rows (its unexplained share there is
    rounding, far under the floor), and one that is not shows it on a random subset
    of many more rows than features almost surely, with about the same share (a
    test compares the subset rule with the check on every row).
    """
    if model.density.kind != "full" or not ranked:
        return ranked, 0
    n = len(next(iter(sample.values())))
    rows = sample_rows(n, max(ADDABLE_ROWS, 8 * len(model.recipe.features)), 0)
    sample = {k: v[rows] for k, v in sample.items()}
    fm = model.recipe.transform_features(sample)
    span = LinearSpan(fm.values)
    keep = []
    for k, c in enumerate(ranked):
        if k % 20 == 0:  # a report is also where the workbench can stop a stale search
            _report(progress, "checking candidates can join the model", 0.35 + 0.05 * k / len(ranked))
        values = (c.parsed or expressions.parse(c.expression).fit(sample)).evaluate(sample)
        if span.contains(values):
            continue
        keep.append(c)
    return keep, len(ranked) - len(keep)


def _folds(session: Session, warnings: list[str]):
    """Stratified folds of the labelled cases for held-out gains, or None (with a warning) when too few."""
    try:
        return stratified_folds(session.labels, DEFAULT_FOLDS, DEFAULT_SEED)
    except AfterlookError as exc:
        warnings.append(f"no held-out gains: {exc.message}")
        return None


def _stability(final: list, names, sample, screened, C, idx, folds, shaped, settings, top: int, progress=None,
               fleet: FleetSearch | None = None) -> None:
    """In how many folds each listed candidate is found again (in the top ``top``) from the other folds' misses."""
    listed = {c.expression for c in final}
    found = dict.fromkeys(listed, 0)
    searched = 0
    n_folds = int(folds.max()) + 1
    for f in range(n_folds):
        _report(progress, f"stability over folds {f + 1}/{n_folds}", 0.95 + 0.05 * f / n_folds)
        keep = [i for i in idx if folds[i] != f]
        if not keep:
            continue
        searched += 1
        T = C[keep]
        cands, tried, _ = cand.generate_and_screen(names, screened, T, shaped, settings, select=True)
        more = fleet.screen(keep) if fleet is not None else []
        tried += fleet.tried if fleet is not None else 0
        again = cand.second_pass(cands, tried, sample, {n: T[:, k] for k, n in enumerate(names)},
                                 [str(i) for i in keep], None, None, settings, exact_first=top)
        if fleet is not None:
            again = merged(again, fleet.exact(more, tried, keep, [str(i) for i in keep], None, None, settings,
                                              exact_first=top), settings)
            again = cand.measured_whole(again, top, settings)
        for c in again[:top]:
            if c.expression in found:
                found[c.expression] += 1
    for c in final:
        if c.heldout is not None:
            c.heldout = c.heldout.with_stability(found[c.expression], searched)


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
            raise AfterlookError("no misses to explain among the scored cases ('misses' lists anomalies not scored)")
    warnings = []
    for i in idx:
        if not table.labels[i]:
            warnings.append(f"case {table.ids[i]} is labelled normal; searching anyway")
        elif session.scored.flagged[i]:
            warnings.append(f"case {table.ids[i]} is already flagged; searching anyway")
    return idx, warnings


class _Refitter:
    """Third pass: an exact re-fit of a candidate, for the false alarms it adds and its held-out gain.

    A failed re-fit drops the candidate (it could not be added): its id goes to
    ``failed`` and a warning says why.
    """

    def __init__(self, session: Session, idx: list[int], folds, progress, planned: int,
                 stage: tuple[str, float] = ("preparing the re-fits", 0.4)):
        self.session, self.idx, self.folds, self.progress, self.planned = session, idx, folds, progress, planned
        self.failed: set[int] = set()
        self.attempted: set[int] = set()
        self.warnings: list[str] = []
        scored = session.scored
        self.base_conf = scored.confusion()
        labels = session.labels
        self.rate = flagged_rate(scored.log_density, session.model.threshold, labels) if labels is not None else 0.0
        # ``stage``: what its preparation reports (the search prepares it while the screen waits for shaping)
        self.fast = AddedFeatureRefit.prepare(session, progress=_stage(progress, stage[0], stage[1], stage[1]))

    def refit_many(self, cands: list, spare: tuple | list = ()) -> None:
        """:meth:`refit` each, their training columns and cross-covariances computed together (with those
        of ``spare``: the next in the ranking, which the verdicts may yet bring into the listed ones)."""
        if self.fast is not None:
            self.fast.prefetch([c.parsed or c.expression for c in [*cands, *spare]],
                               progress=_stage(self.progress, "preparing the re-fits", 0.4, 0.4))
        for c in cands:
            self.refit(c)

    def refit(self, c) -> None:
        if id(c) in self.attempted:
            return
        self.attempted.add(id(c))
        n = len(self.attempted)
        _report(self.progress, f"re-fitting {n}/{max(self.planned, n)}", 0.4 + 0.5 * min(n / max(self.planned, 1), 1))
        session, model = self.session, self.session.model
        outcome = self.fast.evaluate(c.parsed or c.expression) if self.fast is not None else None
        if outcome is None:  # not expressible as an added column: full re-fit
            recipe = model.recipe.with_derived([(free_name("candidate", model.recipe.features), c.expression)])
            try:
                new = refit(model, recipe, session.training, session.cases, quantiles=False)
            except AfterlookError as exc:
                self.failed.add(id(c))
                self.warnings.append(f"left out {c.expression}: its re-fit failed ({exc.message})")
                return
            after = Session(new, session.cases, training=session.training).scored
            outcome = Refitted(new.threshold, after.flagged, after.confusion(), after.log_density)
        c.false_alarms_added = outcome.confusion.fp - self.base_conf.fp
        c.catches_targets = int(outcome.flagged[self.idx].sum())
        if self.folds is not None:
            c.heldout = kfold_gain(session.scored.log_density, outcome.log_density, session.labels, model.policy,
                                   false_alarm_rate=self.rate, k=DEFAULT_FOLDS, seed=DEFAULT_SEED)


def _stage(progress, stage: str, start: float, end: float):
    """A progress callback for one stage (fraction 0..1 of it), or None."""
    if progress is None:
        return None
    return lambda done: progress(stage, start + (end - start) * done)


def _report(progress, stage: str, fraction: float) -> None:
    if progress is not None:
        progress(stage, fraction)
