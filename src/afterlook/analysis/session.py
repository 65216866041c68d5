"""The session: a model and its cases (and the normal population) loaded and prepared once.

Every operation of :mod:`afterlook.analysis` takes a :class:`Session` (or
builds one from a model and a table): the cases' numeric columns are read
once, the recipe's derived features computed once and the cases scored
once, however many operations then look at them. The workbench keeps one
session for its whole run; a CLI command or a Python API call builds one per
call. The caches are filled idempotently, so two threads racing on the same
session cost a duplicate computation, never a wrong value.

The normal population (the rows re-fits and histograms use) is found, in
order: the ``train`` argument; the model's recorded training file when its
SHA-256 still matches (also looked for beside the model file); else the
cases labelled normal, with a warning, because those rows are then used both
to fit and to judge.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from ..core.errors import AfterlookError
from ..core.units import UNITS
from ..core.recipe import parse_assignment
from ..core.thresholds import Confusion, confusion, flag, outside_domain
from ..store.columns import numeric_columns_of
from ..store.tables import Table, load_table, sha256_file, table_from_frame
from .model import Model, load_model

__all__ = [
    "Session", "prepare", "as_table", "as_model", "numeric_columns_of", "table_name", "case_context",
    "derive_pairs", "ScoredCases", "scored_cases", "TrainingRows", "resolve_training",
]


def as_table(data, *, id_col: str | None = None, label_col: str | None = None) -> Table:
    """A :class:`Table` from a Table, a DataFrame or a path."""
    if isinstance(data, Table):
        return data
    if isinstance(data, pd.DataFrame):
        return table_from_frame(data, id_col=id_col, label_col=label_col)
    if isinstance(data, (str, os.PathLike)):
        return load_table(data, id_col=id_col, label_col=label_col)
    raise AfterlookError(f"expected a table path or a DataFrame, got {type(data).__name__}")


def as_model(model) -> Model:
    """A :class:`Model` from a Model or a model file path."""
    if isinstance(model, (str, os.PathLike)):
        return load_model(os.fspath(model))
    if not isinstance(model, Model):
        raise AfterlookError(f"expected an afterlook Model or a model file path, got {type(model).__name__}")
    return model


def table_name(table: Table | None) -> str:
    """The table's file name for messages ("cases" for a table without a file)."""
    if table is None or not table.path:
        return "cases"
    return os.path.basename(table.path)


def case_context(table: Table, i: int) -> dict:
    """The context (non-numeric, non-id, non-label) columns of row ``i`` as text (None when empty)."""
    return case_contexts(table, [i])[0]


def case_contexts(table: Table, rows) -> list[dict]:
    """:func:`case_context` of every row in ``rows`` (positions), each column taken once for all of them: a
    list of 1,700 misses among 100,000 cases took 0.2 s one cell at a time. The values of a column's
    ``array.take(rows)`` are what ``Series.iloc[i]`` gives (a Timestamp for a date, the object itself for
    a list cell, NA for a missing Arrow string)."""
    rows = np.asarray(rows, dtype=np.intp)
    columns = [(col, list(table.frame[col].array.take(rows))) for col in table.context_columns]
    return [{col: context_text(values[j]) for col, values in columns} for j in range(rows.size)]


def context_text(value) -> str | None:
    """A context cell as text (None when empty); a list, array or mapping cell (Parquet) as its text."""
    if pd.api.types.is_scalar(value):
        return None if pd.isna(value) else str(value)
    if isinstance(value, (bytes, bytearray)):
        return value.decode("utf-8", errors="replace")
    if hasattr(value, "tolist"):
        return str(value.tolist())
    return str(value)


def derive_pairs(derive, what: str = "--derive") -> list[tuple[str, str]]:
    """``(name, expression)`` pairs from a mapping, or an iterable of "NAME=EXPR" texts or pairs."""
    if derive is None:
        return []
    if isinstance(derive, Mapping):
        return [(str(k), str(v)) for k, v in derive.items()]
    out = []
    for item in derive:
        out.append(parse_assignment(item, what) if isinstance(item, str) else (str(item[0]), str(item[1])))
    return out


@dataclass
class ScoredCases:
    """Cases scored by a model: what misses, explain and the workbench share."""

    model: Model
    table: Table
    features: np.ndarray  # (n, d) model features
    log_density: np.ndarray  # NaN: a reading is missing (unscored); -inf: outside a feature's domain
    flagged: np.ndarray
    outside_domain: np.ndarray | None = None  # a feature undefined on finite readings (flagged or not: policy)

    @property
    def labels(self) -> np.ndarray | None:
        return self.table.labels

    @property
    def margin(self) -> np.ndarray:
        return self.log_density - self.model.threshold

    @property
    def unscored(self) -> np.ndarray:
        """Cases with no log-density at all (a missing reading, or outside a domain under the "skip" policy)."""
        return np.isnan(self.log_density)

    def domain_ids(self, labelled: bool | None = None) -> list[str]:
        """Ids of the cases outside a feature's domain (of one label when ``labelled`` is given)."""
        if self.outside_domain is None:
            return []
        mask = self.outside_domain.copy()
        if labelled is not None and self.labels is not None:
            mask &= self.labels if labelled else ~self.labels
        return [str(self.table.ids[i]) for i in np.flatnonzero(mask)]

    def confusion(self) -> Confusion:
        """Confusion counts of the flags against the labels (one-line error without labels)."""
        if self.labels is None:
            raise AfterlookError(f"{table_name(self.table)} has no label column (--label-col)")
        return confusion(self.flagged, self.labels)


def scored_cases(model: Model, cases) -> ScoredCases:
    """``cases`` scored by ``model`` (through a session, so its columns are read once)."""
    return Session(model, as_table(cases)).scored


# --------------------------------------------------------------------------
# the normal population
# --------------------------------------------------------------------------


@dataclass
class TrainingRows:
    """The normal population for re-fits: a table, where it came from, and what that assumed."""

    table: Table
    source: str
    warnings: list[str] = field(default_factory=list)

    def normal_mask(self) -> np.ndarray:
        """Rows labelled normal (every row when the table has no labels)."""
        t = self.table
        return np.ones(len(t.frame), bool) if t.labels is None else ~t.labels


def resolve_training(model: Model, cases: Table, train=None) -> TrainingRows:
    """The normal population for re-fits (see the module docstring)."""
    if train is not None:
        t = as_table(train)
        notes = []
        if model.imported:
            notes.append("the model was imported: a re-fit is afterlook's fit of the given normal rows, compared with "
                         "the imported detector, so part of a before/after change is the re-fit itself")
        return TrainingRows(t, t.path or "given table", notes)
    if model.imported:
        # Never stand in the cases labelled normal for rows the detector was never shown to have seen.
        raise AfterlookError("this model was imported and has no training rows: give the normal rows to re-fit on "
                             "(--train TRAIN, or train= in Python)")
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


# --------------------------------------------------------------------------
# the session
# --------------------------------------------------------------------------

CASES = "cases"
NORMAL = "normal"


class Session:
    """A model and its cases, prepared once and shared by every operation.

    Parameters
    ----------
    model : Model
    cases : Table
    train : Table, optional
        The normal population the user gave (``--train``); without it the
        model's recorded training file or the cases labelled normal are used
        (:func:`resolve_training`), looked up only when an operation needs it.
    training : TrainingRows, optional
        An already resolved normal population.
    """

    def __init__(self, model: Model, cases: Table, train: Table | None = None, *,
                 training: TrainingRows | None = None):
        self.model = model
        self.cases = cases
        self.train = train
        self._training = training
        self._scored: ScoredCases | None = None
        self._normal_features: np.ndarray | None = None
        self._columns: dict[str, dict] = {CASES: {}, NORMAL: {}}
        self._raw: dict[str, dict] = {}

    # -- what the session holds -------------------------------------------
    @property
    def ids(self) -> np.ndarray:
        return self.cases.ids

    @property
    def labels(self) -> np.ndarray | None:
        return self.cases.labels

    def row(self, case_id) -> int:
        """Row position of a case id (clear error for an unknown id)."""
        return self.cases.row_index(str(case_id))

    @property
    def known_columns(self) -> list[str]:
        """Names an expression may use: the table's columns and the model's features."""
        return list(dict.fromkeys([str(c) for c in self.cases.frame.columns] + self.model.features))

    @property
    def training(self) -> TrainingRows:
        """The normal population (resolved on first use, then kept)."""
        if self._training is None:
            self._training = resolve_training(self.model, self.cases, self.train)
        return self._training

    def require_labels(self, what: str) -> np.ndarray:
        """The cases' labels, or the one-line error that ``what`` needs them."""
        if self.cases.labels is None:
            raise AfterlookError(f"{table_name(self.cases)} has no label column; {what} needs labelled cases")
        return self.cases.labels

    # -- columns and features, read once ------------------------------------
    def columns(self, which: str, extra: Sequence[str] = ()) -> dict[str, np.ndarray]:
        """Numeric columns the recipe reads (and ``extra``) of the cases or the normal rows.

        ``which`` is "cases" (every case, in table order) or "normal" (the
        normal training rows).
        """
        cache = self._columns[which]
        want = [c for c in [*self.model.recipe.required_columns(), *extra] if c not in cache]
        if want:
            if which == NORMAL:
                frame = self.training.table.frame.loc[self.training.normal_mask()]
            else:
                frame = self.cases.frame
            cache.update(numeric_columns_of(frame, want))
        if self.model.unit_col and UNITS not in cache:
            from .unit_rows import row_context

            cache.update(row_context(self._frame(which), self.model.unit_col, self.model.time_col,
                                     table_name(self.cases) if which == CASES else self.training.source,
                                     self.model.context_frame if which == CASES else None))
        return cache

    def _frame(self, which: str):
        if which == NORMAL:
            return self.training.table.frame.loc[self.training.normal_mask()]
        return self.cases.frame

    def raw_features(self, which: str) -> dict[str, np.ndarray]:
        """Base and derived features before the recipe's transforms."""
        raw = self._raw.get(which)
        if raw is None:
            raw = self._raw[which] = self.model.recipe.raw_features(self.columns(which))
        return raw

    def finite_base_columns(self, which: str) -> frozenset:
        """The model's base columns that hold no missing or infinite value on these rows: what the table
        found when it was read (a subset of its rows keeps it), so a search need not look again."""
        table = self.training.table if which == NORMAL else self.cases
        return frozenset(self.model.recipe.base) & table.finite_columns

    def scope(self, which: str, extra: Sequence[str] = ()) -> dict[str, np.ndarray]:
        """Raw columns and untransformed model features by name (what an expression may read)."""
        raw = self.raw_features(which)
        cols = self.columns(which, [c for c in extra if c not in raw])
        return {**cols, **raw}

    def normal_features(self) -> np.ndarray:
        """Model features (after the recipe's transforms) of the normal training rows."""
        if self._normal_features is None:
            self._normal_features = self.model.recipe.transform_features(self.raw_features(NORMAL)).values
        return self._normal_features

    @property
    def scored(self) -> ScoredCases:
        """The cases scored by the model (computed once)."""
        if self._scored is None:
            fm = self.model.recipe.transform_features(self.raw_features(CASES))
            ld = self.model.density.log_density(fm.values)
            inputs_ok = self.model.inputs_finite(self.columns(CASES))
            domain = outside_domain(ld, inputs_ok)
            ld = self.model.with_undefined_policy(ld, self.columns(CASES))
            self._scored = ScoredCases(self.model, self.cases, fm.values, ld, flag(ld, self.model.threshold), domain)
            if self.model.unit_col:  # said once with the table's own warnings (misses, explain, score)
                from .unit_rows import fallback_warnings

                from ..core.units import PAST, TIMES, with_history

                cols = self.columns(CASES)
                lines = fallback_warnings(self.model.recipe, cols)
                if self.model.recipe.history and TIMES in cols:
                    short = int((~with_history(cols[UNITS], cols[TIMES], self.model.recipe.history,
                                               cols.get(PAST))).sum())
                    if short:
                        lines.append(f"{short} case(s) lack the {self.model.recipe.history} earlier reading(s) of their "
                                     "unit that lag / rolling_median need: not scored (--context gives earlier "
                                     "readings)")
                for line in lines:
                    if line not in self.cases.warnings:
                        self.cases.warnings.append(line)
        return self._scored


def prepare(model, cases=None, train=None, *, id_col: str | None = None, label_col: str | None = None) -> Session:
    """A session from a model (or model path) and cases (path, DataFrame or Table).

    A :class:`Session` given as ``model`` is returned as it is, so every
    operation can be called either way.
    """
    if isinstance(model, Session):
        return model
    if cases is None:
        raise AfterlookError("no cases given: pass a table of cases (or a prepared session)")
    return Session(as_model(model), as_table(cases, id_col=id_col, label_col=label_col),
                   None if train is None else as_table(train, id_col=id_col, label_col=label_col))
