"""Shaping: a transform per skewed column (the numerics are in :mod:`afterlook.core.shaping`)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .frames import Tabular
from ..core.errors import AfterlookError
from ..core.blas import with_limited_blas
from .session import as_table

__all__ = ["shape", "ShapeReport"]


@dataclass
class ShapeReport(Tabular):
    """Transform suggestions per column; ``to_dict()`` is ``afterlook shape --json``."""

    features: list  # list[core.shaping.ShapeResult]
    statistic: str
    rows_used: int
    warnings: list[str] = field(default_factory=list)

    def to_dict(self) -> dict:
        return {"features": [f.to_dict() for f in self.features]}


@with_limited_blas
def shape(df, columns=None, *, statistic: str = "dagostino", sample_size: int = 5000,
          random_state=0, cases=None) -> ShapeReport:
    """Search a transform per numeric column (see :mod:`afterlook.core.shaping`).

    ``df`` is a DataFrame, Table or path; rows labelled anomaly are left
    out, as ``fit`` does. ``columns`` defaults to every numeric column.
    ``cases`` (labelled): each transform is also judged by detection, the
    share of labelled anomalies the column alone separates at a 1% false-alarm
    rate before and after, and a transform that lowers it is not recommended
    (looking more Gaussian is not the goal; flagging failures is).
    """
    from ..core.shape_detection import judge_by_detection
    from ..core.shaping import shape_columns

    table = as_table(df)
    if isinstance(columns, str):
        columns = [columns]
    names = list(table.numeric_columns) if columns is None else list(dict.fromkeys(str(c) for c in columns))
    if not names:
        raise AfterlookError("no columns to shape")
    for name in names:
        if name not in table.numeric_columns:
            table.numeric(name)  # raises for an unknown or non-numeric column, with a hint
            role = {table.id_col: "the id column", table.label_col: "the label column"}.get(name, "not a numeric column")
            raise AfterlookError(f"column '{name}' is {role}; only numeric feature columns can be shaped")
    rows = np.ones(len(table), dtype=bool) if table.labels is None else ~table.labels
    if not rows.any():
        raise AfterlookError("nothing to shape: every row is labelled anomaly")
    values = table.numeric(names)[rows]
    results = shape_columns({n: values[:, j] for j, n in enumerate(names)}, names, statistic=statistic,
                            sample_size=sample_size, random_state=random_state)
    warnings = list(table.warnings)
    if cases is not None:
        case_table = as_table(cases)
        if case_table.labels is None or not case_table.labels.any():
            raise AfterlookError("shape --cases needs labelled cases with at least one anomaly")
        missing = [n for n in names if n not in case_table.numeric_columns]
        if missing:
            raise AfterlookError(f"the cases have no numeric column '{missing[0]}' to judge its transform on")
        anomalies = case_table.numeric(names)[case_table.labels]
        for j, r in enumerate(results):
            judge_by_detection(r, values[:, j], anomalies[:, j])
        warnings += [f"{r.name}: {r.held_back}" for r in results if r.held_back]
    return ShapeReport(results, results[0].statistic, int(rows.sum()), warnings)
