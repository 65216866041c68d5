"""What the workbench shows, computed at the API level.

The Textual app (:mod:`afterlook.tui`) formats numbers and never computes
them: every value it draws comes from a function here, from the other
:mod:`afterlook.analysis` modules or from :mod:`afterlook.analysis.wording`,
and each function here is tested (``tests/tui/test_workbench_data.py``).
Nothing here imports Textual or Rich.

A :class:`WorkbenchSession` is an :class:`~afterlook.analysis.session.Session`
loaded once for the whole run (model, cases, the normal population, the
cases scored by the model) and shared read-only by the app and its worker
threads.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from ..core import expressions
from ..core.blas import with_limited_blas
from ..core.errors import AfterlookError
from ..core.histograms import HistogramCounts, histogram_counts
from ..core.recipe import apply_transform, free_name, parse_assignment
from ..core.thresholds import Confusion
from ..store.tables import load_table
from .discovery import SuggestResult, suggest
from .evidence import ExplainResult, MissesResult, explain_case, misses
from .model import load_model
from .session import Session, case_contexts
from .trial import TrialView, TryResult, trial_view, try_features  # noqa: F401 - the app's names
from .wording import (  # noqa: F401 - the app's names
    BAR_FULL_SCALE,
    bar_cells,
    candidate_verdict,
    flip_words,
    reading,
    relation_words,
    standing,
)

#: Default casebook file name, next to the cases file.
CASEBOOK_NAME = "casebook.json"
#: Name given to a typed expression without ``NAME =``.
TYPED_NAME = "typed_feature"

_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")

KIND_MISS = "miss"
KIND_NEAR = "near catch"
KIND_FALSE_ALARM = "false alarm"


# --------------------------------------------------------------------------
# session
# --------------------------------------------------------------------------


class WorkbenchSession(Session):
    """A session with the files the workbench was opened on and the misses it lists."""

    def __init__(self, model, cases, train, *, model_path: str, cases_path: str, casebook_path: str):
        super().__init__(model, cases, train)
        self.model_path = model_path
        self.cases_path = cases_path
        self.casebook_path = casebook_path
        self._missed: MissesResult | None = None
        self._shaped: dict = {}

    @property
    def missed(self) -> MissesResult:
        """The misses of the model on the cases (computed once)."""
        if self._missed is None:
            self._missed = misses(self)
        return self._missed


def default_casebook(cases_path) -> str:
    """``casebook.json`` in the folder of the cases file."""
    return str(Path(cases_path).resolve().parent / CASEBOOK_NAME)


@with_limited_blas
def open_session(model_path, cases_path, *, train_path=None, casebook=None, id_col: str | None = None,
                 label_col: str | None = None, unit_col: str | None = None, time_col: str | None = None,
                 **table) -> WorkbenchSession:
    """Load the model and cases, resolve the normal population, score the cases once.

    Raises :class:`AfterlookError` (one line) for any bad input, before any
    screen is drawn.
    """
    from .unit_rows import apply_unit_options

    model = apply_unit_options(load_model(model_path), unit_col, time_col)
    cases = load_table(cases_path, id_col=id_col, label_col=label_col, require_labels=True, **table)
    train = load_table(train_path, id_col=id_col, label_col=label_col, **table) if train_path else None
    book = str(casebook) if casebook else default_casebook(cases_path)
    session = WorkbenchSession(model, cases, train, model_path=str(model_path), cases_path=str(cases_path),
                               casebook_path=book)
    session.training  # noqa: B018 - resolved now, so a bad --train fails before any screen
    session.missed  # noqa: B018
    if os.path.isdir(book):
        raise AfterlookError(f"casebook {book} is a folder; give a file path (--casebook FILE)")
    return session


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
    roc_auc: float | None = None  # ranking quality of -log_density on the labelled cases (misses' numbers)
    average_precision: float | None = None
    warnings: tuple[str, ...] = ()  # the model itself may be the problem (AUC < 0.5, most normals flagged)

    def to_dict(self) -> dict:
        return dict(self.__dict__)


def status_summary(session: WorkbenchSession) -> StatusSummary:
    """The numbers of the status line (all from the model and the session's misses)."""
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
        roc_auc=None if session.missed.quality is None else session.missed.quality.roc_auc,
        average_precision=None if session.missed.quality is None else session.missed.quality.average_precision,
        warnings=tuple(session.missed.quality.warnings()) if session.missed.quality is not None else (),
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


def near_catch_gap(session: WorkbenchSession) -> float:
    """How close below the threshold a caught anomaly must sit to count as a near catch.

    The gap between the threshold and the median log-density of the cases
    labelled normal: a *near catch* is a flagged labelled anomaly that sits
    closer below the threshold than a typical normal case sits above it
    (``margin >= -gap``). It moves with the model's scale (number of
    features, units), unlike a fixed number of nats. 0 when there are no
    finite normal cases or the median normal case is itself flagged.
    """
    ld = session.scored.log_density
    normal = ~session.labels & np.isfinite(ld)  # the median of scored, in-domain normals
    if not normal.any():
        return 0.0
    return max(0.0, float(np.median(ld[normal])) - float(session.model.threshold))


def case_rows(session: WorkbenchSession, *, near: bool = False, false_alarms: bool = False, text: str = "") -> list[CaseRow]:
    """Rows of the case list.

    Misses first, worst (largest) margin first, exactly as :func:`afterlook.analysis.evidence.misses`;
    then, when asked, near catches (closest to the threshold first) and
    false alarms (lowest log-density first). ``text`` keeps the rows whose
    id, kind or any context value contains it (case-insensitive).
    """
    rows = [CaseRow(m.case, KIND_MISS, m.log_density, m.margin, m.context) for m in session.missed.misses]
    sc = session.scored
    y = session.labels
    finite = ~np.isnan(sc.log_density)  # -inf: outside a feature's domain or an overflowing reading, flagged
    margin = sc.margin
    if near:
        gap = near_catch_gap(session)
        idx = np.flatnonzero(y & sc.flagged & finite & (margin >= -gap))
        idx = idx[np.argsort(-margin[idx], kind="mergesort")]
        rows += _rows(sc, idx, margin, KIND_NEAR)
    if false_alarms:
        idx = np.flatnonzero(~y & sc.flagged & finite)
        idx = idx[np.argsort(margin[idx], kind="mergesort")]
        rows += _rows(sc, idx, margin, KIND_FALSE_ALARM)
    needle = text.strip().lower()
    if needle:
        rows = [r for r in rows if needle in _haystack(r)]
    return rows


def _rows(sc, idx, margin: np.ndarray, kind: str) -> list[CaseRow]:
    """Case-list rows of cases ``idx`` (``margin``: ``sc.margin``, computed once by the caller)."""
    return [CaseRow(str(sc.table.ids[i]), kind, float(sc.log_density[i]), float(margin[i]), context)
            for i, context in zip(idx, case_contexts(sc.table, idx))]


def _haystack(row: CaseRow) -> str:
    return " ".join([row.case, row.kind, *[str(v) for v in row.context.values() if v]]).lower()


def case_counts(session: WorkbenchSession) -> dict:
    """How many rows each toggle of the case list would add."""
    sc = session.scored
    y = session.labels
    finite = ~np.isnan(sc.log_density)  # scored; -inf (outside a domain, or overflow) is flagged
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


def case_evidence(session: WorkbenchSession, case_id: str) -> EvidenceView:
    """Per-feature evidence for a case; the numbers are :func:`afterlook.analysis.evidence.explain`'s.

    Uses the session's scoring instead of re-scoring every case. ``raw_value``
    is the reading before the recipe's transform (equal to ``value`` for an
    untransformed feature); z, percentile and conditional z are signed as the
    reading (a transform that reverses order flips them, so a high reading
    never reads "low"). ``share`` is
    ``contribution / sum(contributions)`` in %: how much of the case's
    log-density below the peak this feature accounts for (cross terms of
    the full model can make a share negative or above 100).
    """
    model = session.model
    i = session.row(case_id)
    result = explain_case(session, case_id)
    ev = result.features
    label = result.label
    contributions = np.array([f.contribution for f in ev], dtype=np.float64)
    total = float(np.nansum(contributions))
    raw = session.scope("cases")
    rows = []
    for f in result.features_by_cost():
        share = 100.0 * f.contribution / total if total != 0 and math.isfinite(f.contribution) else math.nan
        t = model.recipe.transforms.get(f.name)
        rows.append(EvidenceRow(f.name, f.value, float(raw[f.name][i]), f.z_reading, f.percentile_reading,
                                f.contribution, share, f.conditional_z_reading,
                                reading(f.z_reading), relation_words(f.z_reading, f.conditional_z_reading),
                                t.describe(f.name) if t is not None else ""))
    return EvidenceView(result, rows, standing(label, result.flagged, result.log_density), result.full_model)


# --------------------------------------------------------------------------
# candidates
# --------------------------------------------------------------------------


def find_candidates(session: WorkbenchSession, case_id: str, *, top: int = 10,
                    progress: Callable[[str, float], None] | None = None) -> SuggestResult:
    """Candidates for one case: :func:`afterlook.analysis.discovery.suggest` on the session."""
    return suggest(session, None, case_ids=[str(case_id)], top=top, progress=progress)


# --------------------------------------------------------------------------
# try: re-fit with a derived feature, re-score, compare
# --------------------------------------------------------------------------


def check_expression(session: WorkbenchSession, text: str, taken: Sequence[str] = ()) -> tuple[str, str]:
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
        name, expr = free_name(TYPED_NAME, [*session.model.features, *taken]), text
    parsed = expressions.parse(expr, known_columns=session.known_columns)
    numeric = set(session.cases.numeric_columns) | set(session.model.features)
    for col in parsed.columns:
        if col not in numeric:
            raise AfterlookError(f"column '{col}' is not numeric (kept as context), so an expression cannot use it")
    session.model.recipe.with_derived([(name, expr)])  # name syntax and clashes
    return name, expr




def try_candidate(session: WorkbenchSession, derive: dict[str, str], focus: Sequence[str] = ()) -> TryResult:
    """:func:`afterlook.analysis.trial.try_features` on the session; unknown focus ids are left out."""
    known = []
    for cid in focus:  # the selection may be filtered away: never an error here
        try:
            session.row(cid)
        except AfterlookError:
            continue
        known.append(cid)
    return try_features(session, None, derive, focus=known)


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


def _shape_search(session: WorkbenchSession, key: str, values: np.ndarray):
    from ..core.shaping import search_transform

    if key not in session._shaped:
        # The same defaults as afterlook.analysis.shape.shape (D'Agostino K^2, 5000-row seeded sample).
        session._shaped[key] = search_transform(values, name=key)
    return session._shaped[key]


def _raw_values(session: WorkbenchSession, source: HistogramSource) -> tuple[np.ndarray, np.ndarray]:
    """Untransformed values of a feature or candidate: (normal rows, every case)."""
    if source.kind == "feature":
        return session.scope("normal")[source.name], session.scope("cases")[source.name]
    expr = expressions.parse(source.expression, known_columns=session.known_columns)
    expr = expr.fit(session.scope("normal", expr.columns))  # zscore(...) frozen on the normal rows, as a fit does
    normal = expr.evaluate(session.scope("normal", expr.columns))
    cases = expr.evaluate(session.scope("cases", expr.columns))
    return normal, cases


def histogram_view(session: WorkbenchSession, source: HistogramSource, case_id: str, *, shaped: bool = False,
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


def histogram_sources(session: WorkbenchSession, candidates: SuggestResult | None = None) -> list[HistogramSource]:
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
    from ..store.casebook_file import Casebook

    return {str(k) for k in Casebook.open(path).entries}


def casebook_statuses() -> list[str]:
    """The statuses a casebook entry may have, in the order the save screen lists them."""
    from ..store.casebook_file import STATUSES

    return list(STATUSES)


def save_case(session: WorkbenchSession, case_id: str, status: str, *, note: str = "",
              derive: tuple[str, str] | None = None) -> dict:
    """Record a reviewed case in the session's casebook (atomic write by the casebook store)."""
    from .review import add_to_casebook

    return add_to_casebook(session.casebook_path, session, None, str(case_id), status,
                           derive=None if derive is None else {derive[0]: derive[1]}, note=note,
                           model_path=session.model_path)
