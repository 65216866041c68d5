"""What the workbench shows, computed at the API level.

The Textual app (:mod:`afterlook.tui`) formats numbers and never computes
them: every value it draws comes from a function here or from
:mod:`afterlook.api` / :mod:`afterlook.discovery`, and each function here is
tested (``tests/tui/test_workbench_data.py``). Nothing here imports Textual
or Rich.

A :class:`Session` is loaded once (model, cases, the normal population,
the cases scored by the model) and then shared read-only by the app and its
worker threads; the few caches it keeps are filled idempotently, so a
race between two threads costs a duplicate computation, never a wrong value.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from .api import (
    ExplainResult,
    MissesResult,
    ScoredCases,
    case_context,
    numeric_columns_of,
    load_model,
    load_table,
    misses,
    scored_cases,
)
from .core import expressions
from .core.errors import AfterlookError
from .core.explain import evidence
from .core.histograms import HistogramCounts, histogram_counts
from .core.recipe import apply_transform, parse_assignment
from .core.thresholds import Confusion
from .discovery import SuggestResult, TrainingRows, TryResult, resolve_training, suggest
from .model import Model
from .store.tables import Table

#: Default casebook file name, next to the cases file.
CASEBOOK_NAME = "casebook.json"
#: |z| that fills one half of a signed bar.
BAR_FULL_SCALE = 4.0
#: Name given to a typed expression without ``NAME =``.
TYPED_NAME = "typed_feature"

_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")

KIND_MISS = "miss"
KIND_NEAR = "near catch"
KIND_FALSE_ALARM = "false alarm"


# --------------------------------------------------------------------------
# session
# --------------------------------------------------------------------------


@dataclass
class Session:
    """Everything loaded for one workbench run (read-only once built)."""

    model: Model
    model_path: str
    cases: Table
    cases_path: str
    train: Table | None  # the table the user gave with --train, if any
    training: TrainingRows  # the normal population actually used for re-fits
    scored: ScoredCases
    missed: MissesResult
    casebook_path: str
    _normal_features: np.ndarray | None = field(default=None, repr=False)
    _column_cache: dict = field(default_factory=dict, repr=False)
    _raw_cache: dict = field(default_factory=dict, repr=False)
    _shaped: dict = field(default_factory=dict, repr=False)

    @property
    def ids(self) -> np.ndarray:
        return self.scored.table.ids

    @property
    def labels(self) -> np.ndarray:
        return self.cases.labels

    def row(self, case_id: str) -> int:
        """Row position of a case id (clear error for an unknown id)."""
        return self.cases.row_index(str(case_id))

    @property
    def known_columns(self) -> list[str]:
        """Names an expression may use: the table's columns and the model's features."""
        return list(dict.fromkeys([str(c) for c in self.cases.frame.columns] + self.model.features))

    # -- the normal population and the cases, as columns, for histograms --
    def _normal_rows(self) -> np.ndarray:
        t = self.training.table
        return np.ones(len(t.frame), bool) if t.labels is None else ~t.labels

    def normal_features(self) -> np.ndarray:
        """Model features (after the recipe's transforms) of the normal training rows."""
        if self._normal_features is None:
            self._normal_features = self.model.recipe.apply(self._columns("normal", [])).values
        return self._normal_features

    def _columns(self, which: str, extra: Sequence[str]) -> dict:
        cache = self._column_cache.setdefault(which, {})
        table = self.training.table if which == "normal" else self.cases
        want = [c for c in [*self.model.recipe.required_columns(), *extra] if c not in cache]
        if want:
            frame = table.frame.loc[self._normal_rows()] if which == "normal" else table.frame
            cache.update(numeric_columns_of(frame, want))
        return cache

    def scope(self, which: str, extra: Sequence[str] = ()) -> dict:
        """Raw columns and untransformed model features by name; ``which`` is "normal" or "cases".

        "normal": the normal training rows; "cases": every case, in table order.
        """
        raw = self._raw_cache.get(which)
        if raw is None:
            raw = self._raw_cache[which] = self.model.recipe.raw_features(self._columns(which, []))
        cols = self._columns(which, [c for c in extra if c not in raw])
        return {**cols, **raw}


def default_casebook(cases_path) -> str:
    """``casebook.json`` in the folder of the cases file."""
    return str(Path(cases_path).resolve().parent / CASEBOOK_NAME)


def open_session(model_path, cases_path, *, train_path=None, casebook=None, id_col: str | None = None,
                 label_col: str | None = None) -> Session:
    """Load the model and cases, resolve the normal population, score the cases once.

    Raises :class:`AfterlookError` (one line) for any bad input, before any
    screen is drawn.
    """
    model = load_model(model_path)
    cases = load_table(cases_path, id_col=id_col, label_col=label_col, require_labels=True)
    train = load_table(train_path, id_col=id_col, label_col=label_col) if train_path else None
    training = resolve_training(model, cases, train)
    scored = scored_cases(model, cases)
    missed = misses(model, cases)
    book = str(casebook) if casebook else default_casebook(cases_path)
    if os.path.isdir(book):
        raise AfterlookError(f"casebook {book} is a folder; give a file path (--casebook FILE)")
    return Session(model, str(model_path), cases, str(cases_path), train, training, scored, missed, book)


# --------------------------------------------------------------------------
# status line
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class StatusSummary:
    """The numbers of the status line (all from the model and ``misses``)."""

    model_file: str
    model_kind: str
    n_features: int
    threshold: float
    policy: str
    chosen_on: str
    n_cases: int
    n_anomalies: int
    n_misses: int
    n_false_alarms: int
    precision: float
    recall: float
    f1: float
    n_unscored: int
    casebook_file: str

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def status_summary(session: Session) -> StatusSummary:
    m: Confusion = session.missed.metrics
    model = session.model
    return StatusSummary(
        model_file=os.path.basename(session.model_path),
        model_kind=model.describe_kind(),
        n_features=len(model.features),
        threshold=float(model.threshold),
        policy=model.policy.describe(),
        chosen_on=model.threshold_basis,
        n_cases=session.missed.n_cases,
        n_anomalies=session.missed.n_anomalies,
        n_misses=len(session.missed.misses),
        n_false_alarms=m.fp,
        precision=m.precision,
        recall=m.recall,
        f1=m.f1,
        n_unscored=len(session.missed.unscored),
        casebook_file=os.path.basename(session.casebook_path),
    )


# --------------------------------------------------------------------------
# case list
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class CaseRow:
    case: str
    kind: str  # KIND_MISS, KIND_NEAR or KIND_FALSE_ALARM
    log_density: float
    margin: float
    context: dict


def near_catch_gap(session: Session) -> float:
    """How close below the threshold a caught anomaly must sit to count as a near catch.

    The gap between the threshold and the median log-density of the cases
    labelled normal: a *near catch* is a flagged labelled anomaly that sits
    closer below the threshold than a typical normal case sits above it
    (``margin >= -gap``). It moves with the model's scale (number of
    features, units), unlike a fixed number of nats. 0 when there are no
    finite normal cases or the median normal case is itself flagged.
    """
    ld = session.scored.log_density
    normal = ~session.labels & np.isfinite(ld)
    if not normal.any():
        return 0.0
    return max(0.0, float(np.median(ld[normal])) - float(session.model.threshold))


def case_rows(session: Session, *, near: bool = False, false_alarms: bool = False, text: str = "") -> list[CaseRow]:
    """Rows of the case list.

    Misses first, worst (largest) margin first, exactly as :func:`afterlook.api.misses`;
    then, when asked, near catches (closest to the threshold first) and
    false alarms (lowest log-density first). ``text`` keeps the rows whose
    id, kind or any context value contains it (case-insensitive).
    """
    rows = [CaseRow(m.case, KIND_MISS, m.log_density, m.margin, m.context) for m in session.missed.misses]
    sc = session.scored
    y = session.labels
    finite = np.isfinite(sc.log_density)
    margin = sc.margin
    if near:
        gap = near_catch_gap(session)
        idx = np.flatnonzero(y & sc.flagged & finite & (margin >= -gap))
        idx = idx[np.argsort(-margin[idx], kind="mergesort")]
        rows += [_row(session, i, KIND_NEAR) for i in idx]
    if false_alarms:
        idx = np.flatnonzero(~y & sc.flagged & finite)
        idx = idx[np.argsort(margin[idx], kind="mergesort")]
        rows += [_row(session, i, KIND_FALSE_ALARM) for i in idx]
    needle = text.strip().lower()
    if needle:
        rows = [r for r in rows if needle in _haystack(r)]
    return rows


def _row(session: Session, i: int, kind: str) -> CaseRow:
    sc = session.scored
    return CaseRow(str(sc.table.ids[i]), kind, float(sc.log_density[i]), float(sc.margin[i]), case_context(sc.table, i))


def _haystack(row: CaseRow) -> str:
    return " ".join([row.case, row.kind, *[str(v) for v in row.context.values() if v]]).lower()


def case_counts(session: Session) -> dict:
    """How many rows each toggle of the case list would add."""
    sc = session.scored
    y = session.labels
    finite = np.isfinite(sc.log_density)
    gap = near_catch_gap(session)
    return {
        KIND_MISS: len(session.missed.misses),
        KIND_NEAR: int((y & sc.flagged & finite & (sc.margin >= -gap)).sum()),
        KIND_FALSE_ALARM: int((~y & sc.flagged & finite).sum()),
    }


# --------------------------------------------------------------------------
# evidence
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class EvidenceRow:
    name: str
    value: float  # as the model sees it (after the recipe's transform), as api.explain gives it
    raw_value: float  # before the transform: the reading itself (a derived feature: its expression's value)
    z: float
    percentile: float
    contribution: float  # nats of log-density below its peak (api.explain)
    share: float  # % of the summed contributions this feature carries
    conditional_z: float | None
    reading: str  # z in words, e.g. "very low"
    relation: str  # conditional z in words, "" when unremarkable or not a full model
    transform: str  # the recipe's transform of this feature, "" if none


@dataclass(frozen=True)
class EvidenceView:
    explain: ExplainResult
    rows: list[EvidenceRow]  # largest cost (most negative contribution) first
    standing: str  # the case in words: miss, caught, false alarm, normal, not scored
    full_model: bool


def reading(z: float | None) -> str:
    """A z in words: typical (|z| < 1), a little low/high (< 2), low/high (< 3), very low/high."""
    if z is None or not math.isfinite(z):
        return "n/a"
    size = abs(z)
    if size < 1:
        return "typical"
    side = "low" if z < 0 else "high"
    if size < 2:
        return f"a little {side}"
    if size < 3:
        return side
    return f"very {side}"


def relation_words(z: float | None, conditional_z: float | None) -> str:
    """Conditional z in words (full model): 'relation broken' when |cond z| >= 3 while |z| < 2."""
    if conditional_z is None or not math.isfinite(conditional_z):
        return ""
    if abs(conditional_z) >= 3:
        if z is not None and math.isfinite(z) and abs(z) < 2:
            return "relation broken"
        return "off for the others"
    return ""


def bar_cells(z: float | None, half: int, full_scale: float = BAR_FULL_SCALE) -> tuple[int, bool]:
    """Length in cells of one side of a signed z bar, and whether |z| is beyond the scale.

    ``cells = min(half, round(|z| / full_scale * half))``; NaN gives (0, False).
    """
    if z is None or not math.isfinite(z) or half < 1:
        return 0, False
    return min(half, int(round(abs(z) / full_scale * half))), abs(z) > full_scale


def standing(label: bool | None, flagged: bool, log_density: float) -> str:
    """Where a case stands, in words."""
    if not math.isfinite(log_density):
        return "not scored (a feature is NaN or infinite)"
    if label is None:
        return "flagged" if flagged else "not flagged"
    if label:
        return "caught: labelled anomaly, flagged" if flagged else "miss: labelled anomaly, not flagged"
    return "false alarm: labelled normal, flagged" if flagged else "normal: labelled normal, not flagged"


def case_evidence(session: Session, case_id: str) -> EvidenceView:
    """Per-feature evidence for a case; the numbers equal :func:`afterlook.api.explain`'s.

    Uses the session's scoring instead of re-scoring every case. ``raw_value``
    is the reading before the recipe's transform (equal to ``value`` for an
    untransformed feature); z, percentile and share are on the model's scale. ``share`` is
    ``contribution / sum(contributions)`` in %: how much of the case's
    log-density below the peak this feature accounts for (cross terms of
    the full model can make a share negative or above 100).
    """
    sc = session.scored
    model = session.model
    i = session.row(case_id)
    ev = evidence(model.density, sc.features[i], model.quantiles)
    label = None if sc.labels is None else bool(sc.labels[i])
    result = ExplainResult(str(sc.table.ids[i]), float(sc.log_density[i]), model.threshold, ev,
                           bool(sc.flagged[i]), label, case_context(sc.table, i), model.describe_kind())
    contributions = np.array([f.contribution for f in ev], dtype=np.float64)
    total = float(np.nansum(contributions))
    raw = session.scope("cases")
    rows = []
    for f in ev:
        share = 100.0 * f.contribution / total if total != 0 and math.isfinite(f.contribution) else math.nan
        t = model.recipe.transforms.get(f.name)
        rows.append(EvidenceRow(f.name, f.value, float(raw[f.name][i]), f.z, f.percentile, f.contribution, share, f.conditional_z,
                                reading(f.z), relation_words(f.z, f.conditional_z),
                                t.describe(f.name) if t is not None else ""))
    rows.sort(key=lambda r: r.contribution if math.isfinite(r.contribution) else 0.0)
    full = any(f.conditional_z is not None for f in ev)
    return EvidenceView(result, rows, standing(label, result.flagged, result.log_density), full)


# --------------------------------------------------------------------------
# candidates
# --------------------------------------------------------------------------


def find_candidates(session: Session, case_id: str, *, top: int = 10,
                    progress: Callable[[str, float], None] | None = None) -> SuggestResult:
    """Candidates for one case: :func:`afterlook.discovery.suggest` as the CLI calls it."""
    return suggest(session.model, session.cases, train=session.train, case_ids=[str(case_id)], top=top,
                   progress=progress)


def candidate_verdict(c) -> str:
    """A candidate's verdict in words: beyond chance or not (the CLI's wording)."""
    if c.beyond_chance:
        return "finding" if c.false_alarms_added is not None else "finding (not re-fitted)"
    return "could be chance"


# --------------------------------------------------------------------------
# try: re-fit with a derived feature, re-score, compare
# --------------------------------------------------------------------------


def check_expression(session: Session, text: str, taken: Sequence[str] = ()) -> tuple[str, str]:
    """Validate ``NAME = EXPR`` or a bare ``EXPR`` as typed; return (name, expression).

    Raises :class:`AfterlookError` with a one-line message (syntax, unknown
    column, bad or clashing name) so the workbench can show it as you type.
    A bare expression is named :data:`TYPED_NAME` (or ``typed_feature_2`` ...).
    """
    text = str(text).strip()
    if not text:
        raise AfterlookError("type an expression, e.g. flow_m3h / motor_current_a (or NAME = EXPR)")
    name, sep, expr = text.partition("=")
    if sep and _NAME.match(name.strip()) and not expr.startswith("="):
        name, expr = parse_assignment(text, "expression")
    else:
        name, expr = _free_name([*session.model.features, *taken]), text
    parsed = expressions.parse(expr, known_columns=session.known_columns)
    numeric = set(session.cases.numeric_columns) | set(session.model.features)
    for col in parsed.columns:
        if col not in numeric:
            raise AfterlookError(f"column '{col}' is not numeric (kept as context), so an expression cannot use it")
    session.model.recipe.with_derived([(name, expr)])  # name syntax and clashes
    return name, expr


def _free_name(existing: Sequence[str]) -> str:
    name, k = TYPED_NAME, 1
    while name in existing:
        k += 1
        name = f"{TYPED_NAME}_{k}"
    return name


def try_candidate(session: Session, derive: dict[str, str], focus: Sequence[str] = ()) -> TryResult:
    """:func:`afterlook.discovery.try_features` with the session's normal population and scores.

    Same re-fit, threshold policy and result; only the look-up of the
    training rows and the scoring of the unchanged model are not repeated.
    """
    from .discovery import try_features

    known = []
    for cid in focus:  # the selection may be filtered away: never an error here
        try:
            session.row(cid)
        except AfterlookError:
            continue
        known.append(cid)
    return try_features(session.model, session.cases, derive, focus=known, training=session.training,
                        before=session.scored)


@dataclass(frozen=True)
class MetricChange:
    name: str
    before: float
    after: float
    change: float
    integer: bool


@dataclass(frozen=True)
class CaseChange:
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


def flip_words(before: bool, after: bool) -> str:
    if after and not before:
        return "now flagged"
    if before and not after:
        return "now unflagged"
    return "still flagged" if after else "still not flagged"


def trial_view(result: TryResult, case_id: str | None = None) -> TrialView:
    """Before/after metrics with their change, the case's log-density against each threshold, flips."""
    d = result.to_dict()
    b, a = d["before"], d["after"]
    metrics = []
    for key, name, integer in (("threshold", "threshold", False), ("tp", "caught (tp)", True),
                               ("fp", "false alarms (fp)", True), ("fn", "misses (fn)", True),
                               ("tn", "normal, unflagged (tn)", True), ("precision", "precision", False),
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


# --------------------------------------------------------------------------
# histograms
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class HistogramSource:
    """What to draw: a model feature, or a candidate derived feature (name + expression)."""

    kind: str  # "feature" or "candidate"
    name: str
    expression: str = ""

    @property
    def label(self) -> str:
        return self.name if self.kind == "feature" else f"{self.name} = {self.expression}"


@dataclass(frozen=True)
class HistogramView:
    source: HistogramSource
    case: str
    counts: HistogramCounts
    scale: str  # what the values are, in words
    shaped: bool
    shape_note: str  # the shaping transform, or why there is none
    normal_below_case: float  # % of finite normal values strictly below the case value
    n_normal: int
    normal_source: str


def _shape_search(session: Session, key: str, values: np.ndarray):
    from .core.shaping import search_transform

    if key not in session._shaped:
        # The same defaults as afterlook.api.shape (D'Agostino K^2, 5000-row seeded sample).
        session._shaped[key] = search_transform(values, name=key)
    return session._shaped[key]


def _raw_values(session: Session, source: HistogramSource) -> tuple[np.ndarray, np.ndarray]:
    """Untransformed values of a feature or candidate: (normal rows, every case)."""
    if source.kind == "feature":
        return session.scope("normal")[source.name], session.scope("cases")[source.name]
    expr = expressions.parse(source.expression, known_columns=session.known_columns)
    normal = expr.evaluate(session.scope("normal", expr.columns))
    cases = expr.evaluate(session.scope("cases", expr.columns))
    return normal, cases


def histogram_view(session: Session, source: HistogramSource, case_id: str, *, shaped: bool = False,
                   bins: int = 40) -> HistogramView:
    """Counts for the histogram of a feature or candidate (see :mod:`afterlook.core.histograms`).

    Plain view: a model feature as the model sees it (after the recipe's
    transform), a candidate as its expression gives it. Shaped view: the
    untransformed values under the transform ``afterlook shape`` picks for
    them (:func:`afterlook.core.shaping.search_transform`, the same defaults),
    or unchanged with the reason when shaping leaves them alone. The normal
    population is the training rows labelled normal (or every training row
    without labels); the other anomalies are the cases labelled anomaly
    other than this one.
    """
    i = session.row(case_id)
    y = session.labels.copy()
    y[i] = False
    if source.kind == "feature" and source.name not in session.model.features:
        raise AfterlookError(f"'{source.name}' is not a feature of the model")
    if shaped:
        normal, cases = _raw_values(session, source)
        result = _shape_search(session, source.name if source.kind == "feature" else source.label, normal)
        if result.transform is not None:
            normal = apply_transform(result.transform, result.name, normal)
            cases = apply_transform(result.transform, result.name, cases)
            note = f"shaped: {result.description}"
        else:
            note = f"shape leaves it alone: {result.note or result.verdict or 'no clear gain'}"
        scale = "shaped by afterlook shape"
    elif source.kind == "feature":
        j = session.model.features.index(source.name)
        normal = session.normal_features()[:, j]
        cases = session.scored.features[:, j]
        t = session.model.recipe.transforms.get(source.name)
        scale = f"as the model sees it: {t.describe(source.name)}" if t is not None else "as the model sees it"
        note = ""
    else:
        normal, cases = _raw_values(session, source)
        scale = "the candidate's values"
        note = ""
    case_value = float(cases[i])
    counts = histogram_counts(normal, case_value, cases[y], bins=bins)
    finite = normal[np.isfinite(normal)]
    below = 100.0 * float((finite < case_value).mean()) if finite.size and math.isfinite(case_value) else math.nan
    return HistogramView(source, str(session.ids[i]), counts, scale, shaped, note, below, int(finite.size),
                         session.training.source)


def histogram_sources(session: Session, candidates: SuggestResult | None = None) -> list[HistogramSource]:
    """Model features, then the candidates of the case under review."""
    out = [HistogramSource("feature", n) for n in session.model.features]
    if candidates is not None:
        out += [HistogramSource("candidate", c.name, c.expression) for c in candidates.candidates]
    return out


# --------------------------------------------------------------------------
# casebook
# --------------------------------------------------------------------------


def casebook_case_ids(path) -> set[str]:
    """Case ids already in the casebook (empty when the file does not exist yet)."""
    if not os.path.exists(path):
        return set()
    from .store.casebook import Casebook

    return {str(k) for k in Casebook.open(path).entries}


def casebook_statuses() -> list[str]:
    from .store.casebook import STATUSES

    return list(STATUSES)


def save_case(session: Session, case_id: str, status: str, *, note: str = "",
              derive: tuple[str, str] | None = None) -> dict:
    """Record a reviewed case in the session's casebook (atomic write by the casebook store)."""
    from .casebook import add_to_casebook

    return add_to_casebook(session.casebook_path, session.model, session.cases, str(case_id), status,
                           derive=None if derive is None else {derive[0]: derive[1]}, note=note,
                           train=session.train, model_path=session.model_path)
