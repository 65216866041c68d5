"""Table columns as float arrays: the one conversion every layer uses."""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from ..core.errors import AfterlookError

__all__ = ["numeric_column", "numeric_columns_of"]


def numeric_column(frame: pd.DataFrame, name: str) -> np.ndarray:
    """Column ``name`` of ``frame`` as float64 (missing values NaN); ``name`` must be present.

    Raises :class:`AfterlookError` when the column appears twice or holds
    values that are not numbers.
    """
    col = frame[name]
    if isinstance(col, pd.DataFrame):
        raise AfterlookError(f"column '{name}' appears more than once in the table")
    if col.dtype == np.float64:  # already floats, missing values already NaN
        values = col.to_numpy(copy=False)
        if not values.flags.c_contiguous:  # a strided view (a frame made from a row-major array): one copy
            return np.ascontiguousarray(values)
        values = values.view()
        values.flags.writeable = False  # the caller's own column, read-only: never changes their table
        return values
    try:
        return pd.to_numeric(col, errors="raise").to_numpy(dtype=np.float64, na_value=np.nan)
    except (ValueError, TypeError):
        raise AfterlookError(f"column '{name}' must be numeric for the model") from None


def numeric_columns_of(frame: pd.DataFrame, names: Sequence[str]) -> dict[str, np.ndarray]:
    """Columns ``names`` of ``frame`` as float64 arrays, by name (see :func:`numeric_column`).

    Raises :class:`AfterlookError` naming the column when one is absent.
    """
    out = {}
    for name in names:
        if name not in frame.columns:
            raise AfterlookError(f"the table has no column '{name}', which the model uses")
        out[name] = numeric_column(frame, name)
    return out
