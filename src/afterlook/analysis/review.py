"""Casebook at the API level: review a case into an entry, add it to a book, check a book against a model.

An entry is built from the same functions as ``explain`` and ``try``
(:func:`afterlook.analysis.evidence.explain`, :func:`afterlook.analysis.trial.try_features`), so
every number in a casebook is the number those commands print.

Entry keys (a JSON-ready dict; more may be added)::

    case, label, status, note, reviewer, created, updated   (timestamps: UTC, ISO 8601, 'Z')
    model        {path, fingerprint, kind, features}         the model reviewed against
    model_after  {fingerprint, kind, features} | None        the re-fit with the derived feature(s)
    derived_feature   {name, expression} | None              the (first) derived feature chosen
    derived_features  [{name, expression}, ...]              every derived feature given
    snapshot     {columns: {col: value}, features: {feature: value}, context: {col: text}}
                 columns: the table row's numeric values (enough to re-score the case
                 without the table); features: the recipe's base and derived features
                 before transforms (the after recipe's when a feature was derived)
    before, after     {log_density, threshold, margin, flagged}  (after: None without a derived feature)
    metrics      {before: M, after: M | None}, M = {threshold, tp, fp, fn, tn, precision, recall, f1}
                 (None without labels)
    evidence, evidence_after   [{name, value, z, percentile, contribution, conditional_z}]  (explain)
    deciding_feature {name, expression, why, value, z, percentile, histogram}
                 the derived feature when one was chosen, else the feature with the most negative
                 contribution; histogram = {edges, counts, bins, rows, population} of that feature
                 over the normal population (numpy.histogram, 30 bins); pair (a derived feature of
                 two readings): {up, across, x_edges, y_edges, normal, others, in_band, band, case,
                 rows, population}, the grids (rows from the lowest y up) of analysis.pair_view
    warnings     [str]  what the re-fit had to assume (e.g. no training file found)
    history      [earlier entries of the case, whole but for case/created/snapshot/history], newest
                 last (kept by the file layer; shown by analysis.case_history)

Checking (:func:`check_casebook`) re-scores every entry's case with a model.
An ``explained`` entry whose case is not flagged is *regressed*. A case that
is not in the cases table is scored from its stored snapshot (the raw row
values kept in the entry), and the details say ``"source": "snapshot"``;
only when the snapshot cannot be scored either (no snapshot, or it lacks a
column the model reads) is the check refused with an error naming the case.
"""

from __future__ import annotations

import getpass
import os
from dataclasses import dataclass, field, fields
from datetime import datetime, timezone
from typing import Callable

import numpy as np
import pandas as pd

from .frames import Tabular
from ..core.errors import AfterlookError
from ..core.histograms import range_counts
from ..core.numbers import finite_or_none
from ..core.thresholds import flag
from ..core.blas import with_limited_blas
from ..store.atomic import check_writable
from ..store.casebook_file import STATUSES, Casebook, CasebookConflict, check_status
from .evidence import explain_case
from .model import Model
from .session import Session, as_model, case_context, derive_pairs, numeric_columns_of, prepare, table_name
from .trial import try_features

__all__ = [
    "STATUSES",
    "Casebook",
    "CasebookConflict",
    "CheckResult",
    "review_entry",
    "add_to_casebook",
    "check_casebook",
    "utc_now",
    "HISTOGRAM_BINS",
]

HISTOGRAM_BINS = 30

Clock = Callable[[], datetime]


def utc_now() -> datetime:
    """The current time in UTC (the default clock of a review)."""
    return datetime.now(timezone.utc)


def _stamp(clock: Clock | None) -> str:
    t = (clock or utc_now)()
    if t.tzinfo is not None:
        t = t.astimezone(timezone.utc)
    return t.replace(tzinfo=None, microsecond=0).isoformat() + "Z"


def _os_user() -> str:
    try:
        name = getpass.getuser()
    except Exception:  # getpass raises OSError, KeyError or ImportError when no user can be found
        return "unknown"
    return name or "unknown"


def _model_and_path(model, model_path):
    """The model, and the path to record for it (as given, else where it was loaded from)."""
    if isinstance(model, (str, os.PathLike)):
        return as_model(model), (model_path if model_path is not None else os.fspath(model))
    model = as_model(model)
    return model, (model_path if model_path is not None else model.source_path)


# --------------------------------------------------------------------------
# review_entry
# --------------------------------------------------------------------------


@dataclass
class ReviewEntry:
    """One reviewed case, as the casebook stores it (see the module docstring for each part)."""

    case: str
    label: str | None
    status: str
    note: str
    reviewer: str
    created: str
    updated: str
    model: dict
    model_after: dict | None
    derived_feature: dict | None
    derived_features: list[dict]
    snapshot: dict
    before: dict
    after: dict | None
    metrics: dict
    evidence: list[dict]
    evidence_after: list[dict] | None
    deciding_feature: dict
    warnings: list[str]
    history: list[dict] = field(default_factory=list)

    def to_dict(self) -> dict:
        """The JSON-ready entry, keys in the order above."""
        return {f.name: getattr(self, f.name) for f in fields(self)}


@with_limited_blas
def review_entry(model, cases, case_id, status, *, derive=None, note: str = "", reviewer: str | None = None,
                 train=None, model_path=None, clock: Clock | None = None) -> dict:
    """The casebook entry for one reviewed case (see the module docstring for its keys).

    Parameters
    ----------
    model : Model, model file path, or a prepared
        :class:`~afterlook.analysis.session.Session` (then ``cases`` and
        ``train`` are its own and may be None)
    cases : path, DataFrame or Table holding the case
    case_id : the case's id
    status : one of :data:`STATUSES`
    derive : {name: expression}, or a list of "NAME=EXPR" / (name, expression)
        The derived feature(s) chosen; the model is re-fitted with them
        (:func:`afterlook.analysis.trial.try_features`) for the "after" numbers.
    note, reviewer : free text; reviewer defaults to the OS user ("unknown" if none)
    train : the normal population for the re-fit and the histogram
        (default: the model's recorded training file, see
        :func:`afterlook.analysis.session.resolve_training`)
    model_path : stored as given (default: where the model was loaded from)
    clock : callable returning the current time (tests and reproducible files)
    """
    check_status(status)
    if not isinstance(note, str):
        raise AfterlookError("note must be text")
    if isinstance(model, Session):
        session = model
        model_path = model_path if model_path is not None else session.model.source_path
    else:
        model, model_path = _model_and_path(model, model_path)
        session = prepare(model, cases, train)
    return _review(session, case_id, status, derive_pairs(derive), note=note, reviewer=reviewer,
                   model_path=model_path, stamp=_stamp(clock)).to_dict()


def _review(session: Session, case_id, status: str, pairs, *, note: str, reviewer: str | None, model_path,
            stamp: str) -> ReviewEntry:
    model, table = session.model, session.cases
    i = session.row(case_id)
    cid = str(table.ids[i])
    warnings: list[str] = []
    before = explain_case(session, cid)
    tried = after = None
    if pairs:
        tried = try_features(session, None, pairs, focus=[cid])
        warnings += tried.warnings
        after = explain_case(Session(tried.model, table, training=session.training), cid)
    population = _population(session, bool(pairs), warnings)
    deciding = _deciding_feature(model, pairs, before, after, tried, population)
    if pairs and population is not None:
        deciding["pair"] = _pair(session, pairs[0], cid)
    metrics_before = None
    if table.labels is not None:
        metrics_before = {"threshold": model.threshold, **session.scored.confusion().to_dict()}
    return ReviewEntry(
        case=cid,
        label=None if table.labels is None else ("anomaly" if table.labels[i] else "normal"),
        status=status, note=note, reviewer=reviewer if reviewer else _os_user(), created=stamp, updated=stamp,
        model={"path": None if model_path is None else os.fspath(model_path), **_model_summary(model)},
        model_after=None if tried is None else _model_summary(tried.model),
        derived_feature={"name": pairs[0][0], "expression": pairs[0][1]} if pairs else None,
        derived_features=[{"name": n, "expression": e} for n, e in pairs],
        snapshot=_snapshot(tried.model if tried is not None else model, table, i),
        before=_score_summary(before),
        after=None if after is None else _score_summary(after),
        metrics={"before": metrics_before,
                 "after": None if tried is None else {"threshold": tried.threshold_after, **tried.after.to_dict()}},
        evidence=[f.to_dict() for f in before.features],
        evidence_after=None if after is None else [f.to_dict() for f in after.features],
        deciding_feature=deciding,
        warnings=list(dict.fromkeys(warnings)),
    )


def _model_summary(model: Model) -> dict:
    return {"fingerprint": model.fingerprint(), "kind": model.describe_kind(), "features": list(model.features)}


def _population(session: Session, derived: bool, warnings: list[str]):
    """The normal population for the deciding feature's histogram, or None (then the quantile grid)."""
    try:
        training = session.training
    except AfterlookError as exc:
        if derived:  # pragma: no cover - try_features would have raised the same
            raise
        warnings.append(f"histogram drawn from the model's quantile grid: {exc.message}")
        return None
    if not derived:
        warnings += training.warnings
    return training.table


def _deciding_feature(model: Model, pairs, before, after, tried, population) -> dict:
    """The derived feature when one was chosen, else the feature with the most negative contribution."""
    if pairs:
        name = pairs[0][0]
        ev = _find(after.features, name)
        deciding = {"name": name, "expression": pairs[0][1], "why": "derived feature chosen in the review"}
        source_model = tried.model
    else:
        ev = _most_negative(before.features)
        deciding = {"name": ev.name, "expression": dict(model.recipe.derived).get(ev.name),
                    "why": "most negative contribution to the log-density"}
        source_model = model
    deciding.update({"value": finite_or_none(ev.value), "z": finite_or_none(ev.z),
                     "percentile": finite_or_none(ev.percentile)})
    deciding["histogram"] = _histogram(source_model, ev.name, population)
    return deciding


PAIR_GRID = (48, 20)  # cells across and up of the pair picture a report draws


def _pair(session: Session, pair, case_id: str) -> dict | None:
    """The derived feature's two readings against each other (the report's pair picture), or None."""
    from ..core import expressions
    from .pair_view import pair_view

    name, text = pair
    columns = expressions.parse(text, known_columns=session.known_columns).columns
    if len(columns) != 2:
        return None
    try:
        v = pair_view(session, name, text, (columns[0], columns[1]), case_id, nx=PAIR_GRID[0], ny=PAIR_GRID[1])
    except AfterlookError:
        return None
    c = v.counts
    return {
        "up": v.y_name, "across": v.x_name,
        "x_edges": [float(e) for e in c.x_edges], "y_edges": [float(e) for e in c.y_edges],
        # grids as one line of text per row (lowest y first), so a casebook diff stays readable
        "normal": grid_rows(c.normal), "others": grid_rows(c.others),
        "in_band": None if c.in_band is None else ["".join("1" if b else "0" for b in row) for row in c.in_band],
        "band": None if c.band is None else [finite_or_none(b) for b in c.band],
        "case": [finite_or_none(x) for x in v.case_xy], "rows": int(c.n_normal),
        "population": os.path.basename(v.normal_source) if v.normal_source else "normal rows",
    }


def grid_rows(grid) -> list[str]:
    """A grid of counts as text, one row per string: ``"0 0 3 12 ..."``."""
    return [" ".join(str(int(v)) for v in row) for row in np.asarray(grid)]


def _find(features, name):
    for f in features:
        if f.name == name:
            return f
    raise AfterlookError(f"feature '{name}' is not among the re-fitted model's features")  # pragma: no cover


def _most_negative(features):
    finite = [f for f in features if f.contribution is not None and np.isfinite(f.contribution)]
    if not finite:
        return features[0]
    return min(finite, key=lambda f: f.contribution)  # ties: the first in recipe order


def _score_summary(result) -> dict:
    ld = finite_or_none(result.log_density)
    return {
        "log_density": ld,
        "threshold": finite_or_none(result.threshold),
        "margin": None if ld is None else finite_or_none(result.log_density - result.threshold),
        "flagged": bool(result.flagged),
    }


def _snapshot(model: Model, table, i: int) -> dict:
    frame = table.frame
    columns = {}
    for col in table.numeric_columns:
        columns[str(col)] = finite_or_none(pd.to_numeric(frame[col].iloc[i], errors="coerce"))
    if model.unit_col:  # a unit's baseline or recent past: the row needs its unit (and the rows before it)
        from .unit_rows import model_columns

        raw = model.recipe.raw_features(model_columns(model, frame, numeric_columns_of(
            frame, model.recipe.required_columns())))
        features = {name: finite_or_none(raw[name][i]) for name in model.features}
    else:
        row = frame.iloc[[i]]
        raw = model.recipe.raw_features(numeric_columns_of(row, model.recipe.required_columns()))
        features = {name: finite_or_none(raw[name][0]) for name in model.features}
    return {"columns": columns, "features": features, "context": case_context(table, i)}


def _histogram(model: Model, feature: str, population) -> dict:
    """Counts of ``feature`` (model space, after transforms) over the normal population."""
    j = model.features.index(feature)
    if population is not None:
        normal = np.ones(len(population.frame), bool) if population.labels is None else ~population.labels
        frame = population.frame.loc[normal]
        from .unit_rows import model_columns

        values = model.recipe.apply(model_columns(model, frame, numeric_columns_of(
            frame, model.recipe.required_columns()))).values[:, j]
        where = (f"normal rows of {os.path.basename(population.path)}" if population.path
                 else "cases labelled normal")
    elif model.quantiles is None:
        return None  # an imported model without --train: no normal rows to draw (the schema allows null)
    else:
        values = model.quantiles[:, j]
        where = f"the model's quantile grid ({model.quantiles.shape[0]} points)"
    counts, edges, n = range_counts(values, HISTOGRAM_BINS)
    if n == 0:
        return {"edges": [], "counts": [], "bins": 0, "rows": 0, "population": where}
    return {
        "edges": [float(e) for e in edges],
        "counts": [int(c) for c in counts],
        "bins": HISTOGRAM_BINS,
        "rows": n,
        "population": where,
    }


# --------------------------------------------------------------------------
# add
# --------------------------------------------------------------------------


def add_to_casebook(book_path, model, cases, case_id, status, *, derive=None, note: str = "",
                    reviewer: str | None = None, train=None, model_path=None, clock: Clock | None = None) -> dict:
    """Open (or create) the book, review the case, upsert it and save; returns the stored entry."""
    check_status(status)
    book = Casebook.open(book_path, create=True)
    check_writable(book.path, "casebook")  # before the (slow) review
    entry = review_entry(model, cases, case_id, status, derive=derive, note=note, reviewer=reviewer,
                         train=train, model_path=model_path, clock=clock)
    stored = book.upsert(entry)
    book.save()
    return stored


# --------------------------------------------------------------------------
# check
# --------------------------------------------------------------------------


@dataclass
class CheckResult(Tabular):
    """Outcome of re-scoring a casebook's cases with a model."""

    entries: int
    regressed: list[str]
    details: list[dict] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.regressed

    def to_dict(self) -> dict:
        return {"entries": self.entries, "regressed": list(self.regressed), "ok": self.ok,
                "details": list(self.details)}


@with_limited_blas
def check_casebook(book, model, cases) -> CheckResult:
    """Re-score every entry's case; an ``explained`` case left unflagged is regressed.

    Parameters
    ----------
    book : Casebook or casebook path (must exist)
    model : Model or model file path (or a prepared session, then ``cases`` is None)
    cases : path, DataFrame or Table; cases missing from it are scored from
        the entry's stored snapshot (see the module docstring)
    """
    if not isinstance(book, Casebook):
        book = Casebook.open(book, create=False)
    session = model if isinstance(model, Session) else prepare(as_model(model), cases)
    model, table = session.model, session.cases
    scored = session.scored
    first_row: dict[str, int] = {}
    for k, cid in enumerate(table.ids):
        first_row.setdefault(str(cid), k)

    details, regressed = [], []
    for cid in sorted(book.entries):
        entry = book.entries[cid]
        if cid in first_row:
            ld = float(scored.log_density[first_row[cid]])
            source = "cases"
        else:
            ld = _score_snapshot(model, entry, cid, table)
            source = "snapshot"
        flagged = bool(flag(np.array([ld]), model.threshold)[0])
        expected = entry.get("status") == "explained"
        is_regressed = expected and not flagged
        if is_regressed:
            regressed.append(cid)
        recorded = [(entry.get(k) or {}).get("fingerprint") for k in ("model", "model_after")]
        details.append({
            "case": cid,
            "status": entry.get("status"),
            "source": source,
            "log_density": finite_or_none(ld),
            "threshold": model.threshold,
            "margin": finite_or_none(ld - model.threshold),
            "flagged": flagged,
            "expected_flagged": expected,
            "regressed": is_regressed,
            "model_recorded": ("after" if model.has_fingerprint(recorded[1])
                               else "before" if model.has_fingerprint(recorded[0]) else None),
        })
    return CheckResult(len(book.entries), regressed, details)


def _score_snapshot(model: Model, entry: dict, cid: str, table) -> float:
    snapshot = entry.get("snapshot")
    columns = snapshot.get("columns") if isinstance(snapshot, dict) else None
    where = table_name(table)
    if not isinstance(columns, dict) or not columns:
        raise AfterlookError(f"case {cid!r} of the casebook is not in {where} and its entry has no stored snapshot",
                             title="Unknown case")
    frame = pd.DataFrame({str(k): [np.nan if v is None else v] for k, v in columns.items()})
    context = snapshot.get("context") if isinstance(snapshot.get("context"), dict) else {}
    for col in (model.unit_col, model.time_col):  # the case's unit and time, kept with its context
        if col and col not in frame.columns and context.get(col) is not None:
            frame[col] = [context[col]]
    if model.unit_col and not model.recipe.reads_units and model.unit_col not in frame.columns:
        import dataclasses

        model = dataclasses.replace(model, unit_col=None, time_col=None)  # recorded, never read by a feature
    try:
        return float(model.log_density(frame)[0])
    except AfterlookError as exc:
        raise AfterlookError(f"case {cid!r} of the casebook is not in {where} and its stored snapshot cannot be "
                             f"scored: {exc.message}", title="Unknown case") from None
    except (TypeError, ValueError):
        raise AfterlookError(f"case {cid!r} of the casebook is not in {where} and its stored snapshot is not "
                             "numeric", title="Unknown case") from None
