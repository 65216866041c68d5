"""Casebook at the API level: review a case into an entry, add it to a book, check a book against a model.

An entry is built from the same functions as ``explain`` and ``try``
(:func:`afterlook.api.explain`, :func:`afterlook.discovery.try_features`), so
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
                 over the normal population (numpy.histogram, 30 bins)
    warnings     [str]  what the re-fit had to assume (e.g. no training file found)
    history      [previous decisions], newest last (kept by the file layer)

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
from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import Callable

import numpy as np
import pandas as pd

from .api import as_table, case_context, explain, numeric_columns_of, scored_cases, table_name
from .core.errors import AfterlookError
from .core.thresholds import flag
from .model import Model, load_model
from .store.atomic import check_writable
from .store.casebook import STATUSES, Casebook, CasebookConflict, check_status, clean_number

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
    if isinstance(model, (str, os.PathLike)):
        path = os.fspath(model)
        return load_model(path), (model_path if model_path is not None else path)
    if not isinstance(model, Model):
        raise AfterlookError(f"expected an afterlook Model or a model file path, got {type(model).__name__}")
    return model, (model_path if model_path is not None else model.source_path)


# --------------------------------------------------------------------------
# review_entry
# --------------------------------------------------------------------------


def review_entry(model, cases, case_id, status, *, derive=None, note: str = "", reviewer: str | None = None,
                 train=None, model_path=None, clock: Clock | None = None) -> dict:
    """The casebook entry for one reviewed case (see the module docstring for its keys).

    Parameters
    ----------
    model : Model or model file path
    cases : path, DataFrame or Table holding the case
    case_id : the case's id
    status : one of :data:`STATUSES`
    derive : {name: expression}, or a list of "NAME=EXPR" / (name, expression)
        The derived feature(s) chosen; the model is re-fitted with them
        (:func:`afterlook.discovery.try_features`) for the "after" numbers.
    note, reviewer : free text; reviewer defaults to the OS user ("unknown" if none)
    train : the normal population for the re-fit and the histogram
        (default: the model's recorded training file, see
        :func:`afterlook.discovery.resolve_training`)
    model_path : stored as given (default: where the model was loaded from)
    clock : callable returning the current time (tests and reproducible files)
    """
    from .discovery import derive_pairs, resolve_training, try_features

    check_status(status)
    if not isinstance(note, str):
        raise AfterlookError("note must be text")
    model, model_path = _model_and_path(model, model_path)
    table = as_table(cases)
    i = table.row_index(str(case_id))
    cid = str(table.ids[i])
    pairs = derive_pairs(derive)
    stamp = _stamp(clock)
    warnings: list[str] = []

    before = explain(model, table, cid)
    before_scored = scored_cases(model, table)
    metrics_before = None
    if table.labels is not None:
        metrics_before = {"threshold": model.threshold, **before_scored.confusion().to_dict()}

    after = tried = None
    if pairs:
        tried = try_features(model, table, pairs, train=train, focus=[cid])
        warnings += tried.warnings
        after = explain(tried.model, table, cid)
    recipe_model = tried.model if tried is not None else model

    # The normal population, for the deciding feature's histogram.
    try:
        training = resolve_training(model, table, train)
        population = training.table
        if not pairs:
            warnings += training.warnings
    except AfterlookError as exc:
        if pairs:  # pragma: no cover - try_features above would have raised the same
            raise
        population = None
        warnings.append(f"histogram drawn from the model's quantile grid: {exc.message}")

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
    deciding.update({"value": clean_number(ev.value), "z": clean_number(ev.z),
                     "percentile": clean_number(ev.percentile)})
    deciding["histogram"] = _histogram(source_model, ev.name, population)

    entry = {
        "case": cid,
        "label": None if table.labels is None else ("anomaly" if table.labels[i] else "normal"),
        "status": status,
        "note": note,
        "reviewer": reviewer if reviewer else _os_user(),
        "created": stamp,
        "updated": stamp,
        "model": {
            "path": None if model_path is None else os.fspath(model_path),
            "fingerprint": model.fingerprint(),
            "kind": model.describe_kind(),
            "features": list(model.features),
        },
        "model_after": None if tried is None else {
            "fingerprint": tried.model.fingerprint(),
            "kind": tried.model.describe_kind(),
            "features": list(tried.model.features),
        },
        "derived_feature": {"name": pairs[0][0], "expression": pairs[0][1]} if pairs else None,
        "derived_features": [{"name": n, "expression": e} for n, e in pairs],
        "snapshot": _snapshot(recipe_model, table, i),
        "before": _score_summary(before),
        "after": None if after is None else _score_summary(after),
        "metrics": {
            "before": metrics_before,
            "after": None if tried is None else {"threshold": tried.threshold_after, **tried.after.to_dict()},
        },
        "evidence": [f.to_dict() for f in before.features],
        "evidence_after": None if after is None else [f.to_dict() for f in after.features],
        "deciding_feature": deciding,
        "warnings": list(dict.fromkeys(warnings)),
        "history": [],
    }
    return entry


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
    ld = clean_number(result.log_density)
    return {
        "log_density": ld,
        "threshold": clean_number(result.threshold),
        "margin": None if ld is None else clean_number(result.log_density - result.threshold),
        "flagged": bool(result.flagged),
    }


def _snapshot(model: Model, table, i: int) -> dict:
    frame = table.frame
    columns = {}
    for col in table.numeric_columns:
        columns[str(col)] = clean_number(pd.to_numeric(frame[col].iloc[i], errors="coerce"))
    row = frame.iloc[[i]]
    raw = model.recipe.raw_features(numeric_columns_of(row, model.recipe.required_columns()))
    features = {name: clean_number(raw[name][0]) for name in model.features}
    return {"columns": columns, "features": features, "context": case_context(table, i)}


def _histogram(model: Model, feature: str, population) -> dict:
    """Counts of ``feature`` (model space, after transforms) over the normal population."""
    j = model.features.index(feature)
    if population is not None:
        normal = np.ones(len(population.frame), bool) if population.labels is None else ~population.labels
        frame = population.frame.loc[normal]
        values = model.recipe.apply(numeric_columns_of(frame, model.recipe.required_columns())).values[:, j]
        where = (f"normal rows of {os.path.basename(population.path)}" if population.path
                 else "cases labelled normal")
    else:
        values = model.quantiles[:, j]
        where = f"the model's quantile grid ({model.quantiles.shape[0]} points)"
    values = values[np.isfinite(values)]
    if values.size == 0:
        return {"edges": [], "counts": [], "bins": 0, "rows": 0, "population": where}
    counts, edges = np.histogram(values, bins=HISTOGRAM_BINS)
    return {
        "edges": [float(e) for e in edges],
        "counts": [int(c) for c in counts],
        "bins": HISTOGRAM_BINS,
        "rows": int(values.size),
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
class CheckResult:
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


def check_casebook(book, model, cases) -> CheckResult:
    """Re-score every entry's case; an ``explained`` case left unflagged is regressed.

    Parameters
    ----------
    book : Casebook or casebook path (must exist)
    model : Model or model file path
    cases : path, DataFrame or Table; cases missing from it are scored from
        the entry's stored snapshot (see the module docstring)
    """
    if not isinstance(book, Casebook):
        book = Casebook.open(book, create=False)
    model, _ = _model_and_path(model, None)
    table = as_table(cases)
    scored = scored_cases(model, table)
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
            "log_density": clean_number(ld),
            "threshold": model.threshold,
            "margin": clean_number(ld - model.threshold),
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
    try:
        return float(model.log_density(frame)[0])
    except AfterlookError as exc:
        raise AfterlookError(f"case {cid!r} of the casebook is not in {where} and its stored snapshot cannot be "
                             f"scored: {exc.message}", title="Unknown case") from None
    except (TypeError, ValueError):
        raise AfterlookError(f"case {cid!r} of the casebook is not in {where} and its stored snapshot is not "
                             "numeric", title="Unknown case") from None
