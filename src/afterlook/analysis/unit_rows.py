"""The unit and time of each row (``--unit-col``, ``--time-col``), read and checked once.

The model records the unit and time columns it was fitted with; a later
command uses the recorded ones unless given others. The unit labels and
time keys reach the expression language as two reserved entries of the
column mapping (:data:`afterlook.core.units.UNITS`, ``TIMES``), which is
how ``unit_median``, ``unit_scale``, ``lag`` and ``rolling_median`` find them.

Checks (each problem one line, exit 2):

* both columns exist; a unit label is never missing;
* the time column holds numbers, or timestamps in ISO 8601 (read by
  ``pandas.to_datetime(format="ISO8601", utc=True)``; a timestamp without a
  zone is taken as UTC); never a missing value;
* no (unit, time) pair occurs twice: the rows of a unit must have one order,
  or "the previous reading" means nothing. Refused rather than warned,
  with the count and the first pair.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..core.errors import AfterlookError
from ..core.printable import printable
from ..core import units as unit_stats

__all__ = ["row_context", "apply_unit_options", "fallback_warnings", "model_columns"]


def apply_unit_options(model, unit_col: str | None = None, time_col: str | None = None, context=None):
    """``model`` using ``unit_col`` / ``time_col`` instead of the recorded ones (None: keep the recorded);
    ``context``: a table (or DataFrame) of the readings that precede the cases (``--context``)."""
    if context is not None:
        model.context_frame = getattr(context, "frame", context)
    if unit_col:
        model.unit_col = unit_col
    if time_col:
        model.time_col = time_col
    if model.time_col and not model.unit_col:
        raise AfterlookError("--time-col needs --unit-col (a time orders the readings of one unit)")
    if getattr(model, "context_frame", None) is not None and not model.time_col:
        raise AfterlookError("--context needs the unit and time columns (--unit-col, --time-col)")
    return model


def row_context(frame: pd.DataFrame, unit_col: str | None, time_col: str | None, what: str = "table",
                context: pd.DataFrame | None = None) -> dict:
    """``{UNITS: labels, TIMES: keys}`` of the rows of ``frame`` (empty when no unit column is named),
    and ``PAST``: the rows of ``context`` (the readings before them) not also in ``frame``."""
    if not unit_col:
        return {}
    if unit_col not in frame.columns:
        raise AfterlookError(f"{what} has no unit column {printable(repr(unit_col))} (--unit-col)")
    units = frame[unit_col]
    if units.isna().any():
        i = int(np.flatnonzero(units.isna().to_numpy())[0])
        raise AfterlookError(f"{what}: unit column {printable(repr(unit_col))} is empty on row {i + 1}")
    out = {unit_stats.UNITS: units.astype(str).to_numpy(dtype=object)}
    if time_col:
        times = _time_keys(frame, time_col, what)
        count, first = unit_stats.duplicate_pairs(out[unit_stats.UNITS], times)
        if count:
            shown = frame[time_col].iloc[_first_row(out[unit_stats.UNITS], times, first)]
            raise AfterlookError(f"{what}: {count} row(s) repeat a (unit, time) pair, first {printable(first[0])} at "
                                 f"{printable(str(shown))}; a unit's readings need one order by "
                                 f"{printable(repr(time_col))}")
        out[unit_stats.TIMES] = times
        if context is not None:
            out[unit_stats.PAST] = _past(context, unit_col, time_col, out)
    return out


def _past(context: pd.DataFrame, unit_col: str, time_col: str, rows: dict) -> dict:
    """The context's readings as a column mapping with its own units and times (rows of the cases left out)."""
    from ..store.columns import numeric_columns_of

    keys = row_context(context, unit_col, time_col, "--context table")
    units, times = keys[unit_stats.UNITS].astype(str), keys[unit_stats.TIMES]
    seen = set(zip(rows[unit_stats.UNITS].astype(str), rows[unit_stats.TIMES].tolist()))
    keep = np.array([(u, t) not in seen for u, t in zip(units, times.tolist())], dtype=bool)
    numeric = [c for c in context.columns if pd.api.types.is_numeric_dtype(context[c])
               and not pd.api.types.is_bool_dtype(context[c]) and c not in (unit_col, time_col)]
    past = {name: values[keep] for name, values in numeric_columns_of(context, numeric).items()}
    past[unit_stats.UNITS] = units[keep].astype(object)
    past[unit_stats.TIMES] = times[keep]
    return past


def _first_row(units, times, first) -> int:
    return int(np.flatnonzero((units.astype(str) == first[0]) & (times == first[1]))[0])


def _time_keys(frame: pd.DataFrame, time_col: str, what: str) -> np.ndarray:
    if time_col not in frame.columns:
        raise AfterlookError(f"{what} has no time column {printable(repr(time_col))} (--time-col)")
    col = frame[time_col]
    if col.isna().any():
        i = int(np.flatnonzero(col.isna().to_numpy())[0])
        raise AfterlookError(f"{what}: time column {printable(repr(time_col))} is empty on row {i + 1}")
    if pd.api.types.is_bool_dtype(col):
        raise AfterlookError(f"{what}: time column {printable(repr(time_col))} holds true/false, not times")
    if pd.api.types.is_numeric_dtype(col):
        keys = col.to_numpy(dtype=np.float64)
        if not np.isfinite(keys).all():
            raise AfterlookError(f"{what}: time column {printable(repr(time_col))} holds a value that is not finite")
        return keys
    if pd.api.types.is_datetime64_any_dtype(col):
        parsed = pd.to_datetime(col, utc=True)
    else:
        try:
            parsed = pd.to_datetime(col.astype(str), format="ISO8601", utc=True)
        except (ValueError, TypeError, OverflowError):
            bad = _first_unparsed(col)
            raise AfterlookError(f"{what}: time column {printable(repr(time_col))} holds {printable(repr(bad))}, "
                                 "neither a number nor an ISO 8601 time") from None
    return parsed.to_numpy(dtype="datetime64[ns]").astype(np.int64)


def _first_unparsed(col: pd.Series) -> str:
    for value in col.astype(str):
        try:
            pd.to_datetime(value, format="ISO8601", utc=True)
        except (ValueError, TypeError, OverflowError):
            return value
    return str(col.iloc[0])  # pragma: no cover - the whole column failed, so one value does


def model_columns(model, frame: pd.DataFrame, columns: dict, what: str = "table") -> dict:
    """``columns`` (numeric columns of ``frame``) with the rows' unit and time for ``model``."""
    if not getattr(model, "unit_col", None):
        return columns
    return {**columns, **row_context(frame, model.unit_col, model.time_col, what,
                                     getattr(model, "context_frame", None))}


def fallback_warnings(recipe, columns) -> list[str]:
    """One line per baseline call for which some rows use the fleet's statistic (unit unseen or too few rows)."""
    units = columns.get(unit_stats.UNITS) if hasattr(columns, "get") else None
    out = []
    for key, params in recipe.frozen.items():
        if params.get("function") not in unit_stats.BASELINES:
            continue
        rows, names = unit_stats.fallbacks(params, units)
        if rows:
            shown = ", ".join(names[:3]) + (f" and {len(names) - 3} more" if len(names) > 3 else "")
            out.append(f"{key}: {rows} row(s) of {len(names)} unit(s) ({printable(shown)}) use the fleet's value: "
                       f"unit not in training or under {params.get('min_rows', unit_stats.MIN_UNIT_ROWS)} training rows")
    return out
