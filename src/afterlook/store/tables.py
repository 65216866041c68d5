"""Reading and writing tables of cases (CSV, TSV, Parquet).

A *table* is one row per case: numeric feature columns, an optional id
column, an optional label column and any other (text, date ...) columns,
which are kept as context for display and never modelled.

Decisions worth knowing about
-----------------------------
* **Format** comes from the extension: ``.csv``, ``.tsv``/``.tab``,
  ``.parquet``/``.pq``/``.parq``; CSV/TSV may be compressed (``.csv.gz``,
  ``.bz2``, ``.zst``, ``.lz4``). A file that starts with the Parquet magic
  bytes is read as Parquet whatever its name; any other extension is tried
  as CSV.
* **Reading** goes through pyarrow (multi-threaded CSV parser, Parquet
  reader) and then ``Table.to_pandas()``. Parquet pandas metadata is
  ignored so that a CSV and a Parquet file of the same frame load alike; a
  named index saved by pandas comes back as an ordinary column.
* **id column**: ``id_col`` if given, else a column called ``id`` (exact,
  then case-insensitive), else the row number ``"0", "1", ...``. Ids are
  strings; integral float ids lose their ``.0``. A missing id is an error.
  Duplicate ids are a warning (lookups by id use the first row) unless
  ``require_unique_ids`` is set, then an error.
* **label column**: ``label_col`` if given, else ``label`` (exact, then
  case-insensitive). Every value must be one of :data:`LABEL_VALUES`
  (case-insensitive, surrounding spaces ignored; numbers 1 and 0 and true
  booleans also count). Anything else, a missing value included, is an error.
* **Numeric columns** are integer and float columns other than the id and
  label columns. **True/false columns are not modelled**: a Gaussian on a
  0/1 flag says little and swamps the log-density, so they go to the context
  columns with a warning (``Table.numeric`` still returns them as 0/1 when
  asked by name). Columns without a name (a saved row index such as
  ``Unnamed: 0``) are not modelled either.
* **Missing and infinite values** in numeric columns are not an error here;
  the table carries a warning with the number of affected rows and callers
  decide what to do.
"""

from __future__ import annotations

import difflib
import hashlib
import os
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

import numpy as np
import pandas as pd

from afterlook.core.errors import AfterlookError
from afterlook.core.names import closest_name
from afterlook.store.table_files import (
    _UNNAMED,
    _arrow_to_pandas,
    _check_column_names,
    _check_file,
    _fail,
    _read_decimal_commas,
    _looks_numeric_text,
    _text_kind,
    check_delimiter,
    check_encoding,
    _format_of,
    _quote_list,
    _read_csv,
    _read_parquet,
    _schema_names,
    _short,
)

__all__ = [
    "LABEL_VALUES",
    "Table",
    "load_table",
    "table_from_frame",
    "sha256_file",
    "write_table",
]

#: Accepted label spellings (compared after ``strip().lower()``):
#: ``True`` means anomaly, ``False`` means normal.
LABEL_VALUES: Mapping[str, bool] = MappingProxyType(
    {
        "1": True,
        "0": False,
        "1.0": True,
        "0.0": False,
        "true": True,
        "false": False,
        "anomaly": True,
        "normal": False,
        "yes": True,
        "no": False,
    }
)


# --------------------------------------------------------------------------
# Table
# --------------------------------------------------------------------------


@dataclass(eq=False)
class Table:
    """A loaded table of cases.

    Attributes
    ----------
    frame : pandas.DataFrame
        The full table as read (default integer index).
    path : str or None
        Where it came from.
    ids : numpy.ndarray
        One ``str`` id per row (object dtype).
    id_col : str or None
        The id column, or ``None`` when ids are row numbers.
    labels : numpy.ndarray or None
        ``True`` for anomaly, ``False`` for normal; ``None`` without labels.
    label_col : str or None
        The label column used.
    numeric_columns : list of str
        Integer and float columns other than the id and label columns.
    context_columns : list of str
        Other columns (text, dates, true/false ...), shown but not modelled.
    warnings : list of str
        One line each.
    finite_columns : frozenset of str
        The numeric columns with no missing or infinite value (seen while the table was read).

    Treat a Table as read-only: the fit and the search trust ``finite_columns``, so a value changed
    in ``frame`` later goes unseen (for other data, build a new Table or pass the DataFrame itself).
    """

    frame: pd.DataFrame = field(repr=False)
    path: str | None
    ids: np.ndarray = field(repr=False)
    id_col: str | None
    labels: np.ndarray | None = field(repr=False)
    label_col: str | None
    numeric_columns: list[str]
    context_columns: list[str]
    warnings: list[str] = field(default_factory=list)
    finite_columns: frozenset = field(default_factory=frozenset, repr=False)
    _first_row: dict[str, int] | None = field(default=None, init=False, repr=False, compare=False)

    @property
    def n_rows(self) -> int:
        return len(self.frame)

    def __len__(self) -> int:
        return len(self.frame)

    @property
    def _where(self) -> str:
        return self.path if self.path is not None else "the table"

    def numeric(self, columns: str | Iterable[str]) -> np.ndarray:
        """Return *columns* as a float64 array of shape ``(n_rows, len(columns))``.

        Any integer, float or true/false column can be asked for by name;
        missing values come back as NaN.
        """
        if isinstance(columns, str):
            columns = [columns]
        columns = list(columns)
        out = np.empty((len(self.frame), len(columns)), dtype=np.float64)
        for j, col in enumerate(columns):
            if col not in self.frame.columns:
                hint = difflib.get_close_matches(str(col), [str(c) for c in self.frame.columns], n=1)
                extra = f" (did you mean {hint[0]!r}?)" if hint else ""
                raise AfterlookError(f"unknown column {col!r} in {self._where}{extra}", title="Unknown column")
            series = self.frame[col]
            if not (pd.api.types.is_numeric_dtype(series) or pd.api.types.is_bool_dtype(series)):
                raise AfterlookError(
                    f"column {col!r} in {self._where} is not numeric ({series.dtype})", title="Not a number column"
                )
            try:
                out[:, j] = series.to_numpy(dtype=np.float64, na_value=np.nan)
            except (TypeError, ValueError):
                raise AfterlookError(
                    f"column {col!r} in {self._where} cannot be read as numbers", title="Not a number column"
                ) from None
        return out

    def row_index(self, case_id: str) -> int:
        """Row position of *case_id* (the first row when ids repeat)."""
        if self._first_row is None:
            # object dtype: pandas 3 would otherwise convert a million Python
            # strings to its arrow string type before hashing them
            first = ~pd.Series(self.ids, dtype=object).duplicated(keep="first").to_numpy()
            self._first_row = dict(zip(self.ids[first].tolist(), np.flatnonzero(first).tolist()))
        key = str(case_id)
        try:
            return self._first_row[key]
        except KeyError:
            pass
        hint = self._close_id(key)
        extra = f" (did you mean {hint!r}?)" if hint is not None else ""
        raise AfterlookError(f"unknown case id {key!r} in {self._where}{extra}", title="Unknown case")

    def _close_id(self, key: str) -> str | None:
        return closest_name(key, self._first_row or {})


def _get_ids(self) -> np.ndarray:
    ids = self.__dict__.get("_ids")
    if ids is None:
        # Row numbers as text: ~50 ms for 200,000 rows, so made only when read.
        ids = np.array([str(i) for i in range(len(self.frame))], dtype=object)
        self.__dict__["_ids"] = ids
    return ids


def _set_ids(self, value) -> None:
    self.__dict__["_ids"] = value  # None: row numbers, made when first read


# Set after the dataclass is made, so that ``ids`` stays an __init__ field.
Table.ids = property(_get_ids, _set_ids, doc="One ``str`` id per row (object dtype).")


# --------------------------------------------------------------------------
# load_table
# --------------------------------------------------------------------------


def _pick_column(frame: pd.DataFrame, wanted: str | None, default: str, what: str, name: str) -> str | None:
    columns = [str(c) for c in frame.columns]
    if wanted is not None:
        if wanted in frame.columns:
            return wanted
        hint = difflib.get_close_matches(str(wanted), columns, n=1)
        extra = f" (did you mean {hint[0]!r}?)" if hint else f" (columns: {_quote_list(columns)})"
        raise _fail(f"{name} has no {what} column {wanted!r}{extra}")
    if default in frame.columns:
        return default
    folded = [c for c in columns if c.strip().casefold() == default]
    return folded[0] if len(folded) == 1 else None


def _make_ids(frame: pd.DataFrame, id_col: str | None, name: str) -> np.ndarray | None:
    if id_col is None:
        return None  # row numbers, made when first read (Table.ids): a training table never needs them
    series = frame[id_col]
    missing = series.isna().to_numpy()
    if missing.any():
        first = int(np.flatnonzero(missing)[0])
        raise _fail(
            f"{name}: id column {id_col!r} has {int(missing.sum())} missing value(s), first in row {first}; "
            "every case needs an id"
        )
    if pd.api.types.is_float_dtype(series):
        values = series.to_numpy(dtype=np.float64)
        if np.all(np.isfinite(values)) and np.all(values == np.round(values)) and np.all(np.abs(values) < 2**53):
            series = pd.Series(values.astype(np.int64))
    return series.astype(str).to_numpy(dtype=object)


def _label_of(value: Any) -> bool | None:
    if value is None:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, float, np.integer, np.floating)):
        if value != value:  # NaN
            return None
        if value == 1:
            return True
        if value == 0:
            return False
        return None
    if isinstance(value, str):
        return LABEL_VALUES.get(value.strip().lower())
    return None


def _make_labels(frame: pd.DataFrame, label_col: str, name: str) -> np.ndarray:
    series = frame[label_col]
    codes, uniques = pd.factorize(series, use_na_sentinel=True)
    mapped = [_label_of(u) for u in uniques]
    bad = [u for u, m in zip(uniques, mapped) if m is None]
    n_missing = int((codes < 0).sum())
    if bad or n_missing:
        bad_rows = n_missing + int(np.isin(codes, [i for i, m in enumerate(mapped) if m is None]).sum())
        shown = [_short(v, 24) for v in bad[:3]]
        if n_missing and len(shown) < 3:
            shown.append("a missing value")
        accepted = "/".join(k for k in LABEL_VALUES)
        raise _fail(
            f"{name}: label column {label_col!r} has {bad_rows} value(s) that are not labels, e.g. "
            f"{', '.join(shown)}; accepted (any case): {accepted}"
        )
    lookup = np.array(mapped, dtype=bool)
    return lookup[codes] if len(lookup) else np.zeros(len(frame), dtype=bool)


def load_table(
    path: str | os.PathLike[str],
    *,
    id_col: str | None = None,
    label_col: str | None = None,
    require_labels: bool = False,
    require_unique_ids: bool = False,
    encoding: str | None = None,
    delimiter: str | None = None,
    decimal: str | None = None,
) -> Table:
    """Read a CSV/TSV/Parquet table of cases.

    ``encoding`` (default UTF-8) and ``delimiter`` (default by extension)
    apply to CSV text; ``decimal=","`` reads text columns such as ``10,5``
    as numbers. Raises :class:`~afterlook.core.errors.AfterlookError` (one
    line naming the file) for any file or content problem.
    """
    codec = check_encoding(encoding)
    chosen = check_delimiter(delimiter)
    if decimal not in (None, ".", ","):
        raise _fail(f"--decimal must be '.' or ',', got {_short(decimal)!r}")
    name, head, size = _check_file(path)
    kind, found, compressed = _format_of(name, head)
    if kind == "parquet":
        arrow = _read_parquet(name, head, size)
    else:
        if chosen is not None and chosen == decimal:
            raise _fail("--delimiter and --decimal cannot both be ','")
        arrow = _read_csv(name, head, chosen or found, compressed, codec)
    names = _schema_names(name, arrow.schema)
    _check_column_names(name, names)
    if arrow.num_columns == 0:
        raise _fail(f"cannot read {name}: the table has no columns")
    if arrow.num_rows == 0:
        raise _fail(f"{name} has a header but no rows")
    frame = _arrow_to_pandas(name, arrow, kind)
    del arrow
    if decimal == ",":
        frame = _read_decimal_commas(frame)
    return _build_table(frame, name, id_col=id_col, label_col=label_col,
                        require_labels=require_labels, require_unique_ids=require_unique_ids)


def table_from_frame(
    frame: pd.DataFrame,
    *,
    id_col: str | None = None,
    label_col: str | None = None,
    require_labels: bool = False,
    require_unique_ids: bool = False,
    name: str = "the table",
) -> Table:
    """A :class:`Table` from an in-memory DataFrame, with the same rules as :func:`load_table`."""
    if not isinstance(frame, pd.DataFrame):
        raise _fail(f"expected a DataFrame, got {type(frame).__name__}")
    names = [str(c) for c in frame.columns]
    _check_column_names(name, names)
    if frame.shape[1] == 0:
        raise _fail(f"{name} has no columns")
    if frame.shape[0] == 0:
        raise _fail(f"{name} has no rows")
    frame = frame.reset_index(drop=True)
    frame.columns = names
    table = _build_table(frame, name, id_col=id_col, label_col=label_col,
                         require_labels=require_labels, require_unique_ids=require_unique_ids)
    table.path = None
    return table


def _build_table(frame: pd.DataFrame, name: str, *, id_col, label_col, require_labels, require_unique_ids) -> Table:
    id_name = _pick_column(frame, id_col, "id", "id", name)
    label_name = _pick_column(frame, label_col, "label", "label", name)
    if id_name is not None and id_name == label_name:
        raise _fail(f"{name}: column {id_name!r} cannot be both the id and the label column")
    if require_labels and label_name is None:
        raise _fail(
            f"{name} has no label column (looked for 'label'; columns: {_quote_list(frame.columns)}); "
            "say which column holds the labels"
        )

    warnings: list[str] = []
    ids = _make_ids(frame, id_name, name)
    if id_name is None:
        dup = None
    elif pd.api.types.is_integer_dtype(frame[id_name]):
        dup = frame[id_name].duplicated(keep="first").to_numpy()
    else:
        dup = pd.Series(ids, dtype=object).duplicated(keep="first").to_numpy()
    n_dup = int(dup.sum()) if dup is not None else 0
    if n_dup:
        example = ids[dup][0]
        if require_unique_ids:
            raise _fail(f"{name}: id {example!r} appears more than once ({n_dup} duplicate ids); ids must be unique")
        warnings.append(
            f"{n_dup} duplicate ids in {name} (e.g. {example!r}); looking a case up by id uses its first row"
        )
    labels = _make_labels(frame, label_name, name) if label_name is not None else None

    numeric_columns: list[str] = []
    context_columns: list[str] = []
    for col in frame.columns:
        if col in (id_name, label_name):
            continue
        series = frame[col]
        if _UNNAMED.match(str(col)):
            context_columns.append(col)
            warnings.append(f"column {col!r} in {name} has no name (a saved row index?); not modelled")
        elif pd.api.types.is_bool_dtype(series):
            context_columns.append(col)
            warnings.append(f"column {col!r} in {name} is true/false; kept as context, not modelled")
        elif pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_complex_dtype(series):
            numeric_columns.append(col)
        else:
            context_columns.append(col)
            if series.isna().all():
                warnings.append(f"column {col!r} in {name} is empty; kept as context, not modelled")
            elif pd.api.types.is_string_dtype(series) or series.dtype == object:
                found = _looks_numeric_text(series)
                text_kind = _text_kind(series)
                if text_kind == "numbers":
                    warnings.append(f"column {col!r} in {name} holds numbers stored as text (e.g. "
                                    f"{_short(series.dropna().iloc[0], 24)}); kept as context, not modelled: "
                                    "store it as a numeric column to model it")
                elif text_kind == "decimal-comma":
                    warnings.append(f"column {col!r} in {name} looks like numbers with a decimal comma (e.g. "
                                    f"{_short(series.dropna().iloc[0], 24)}); kept as context, not modelled: "
                                    "read it with --decimal ','")
                elif found is not None:
                    n_bad, example = found
                    warnings.append(
                        f"column {col!r} in {name} is mostly numbers but {n_bad} value(s) are not "
                        f"(e.g. {_short(example, 24)}); kept as context, not modelled"
                    )

    if not numeric_columns:
        hint = ""
        if len(frame.columns) == 1 and any(sep in str(frame.columns[0]) for sep in (";", "\t", "|")):
            hint = " (is it separated by ';', tab or '|' rather than commas? pass --delimiter)"
        commas = [c for c in context_columns if _text_kind(frame[c]) == "decimal-comma"]
        if commas:
            hint = f" ({_quote_list(commas)} look like numbers with a decimal comma: add --decimal ',')"
        raise _fail(f"{name} has no numeric columns (columns: {_quote_list(frame.columns)}){hint}")

    finite = np.ones(len(frame), dtype=bool)
    per_column: list[tuple[int, str]] = []
    finite_columns = set()
    for col in numeric_columns:
        series = frame[col]
        # float64 holds NaN for missing: read it in place instead of converting a copy
        column = (series.to_numpy(copy=False) if series.dtype == np.float64
                  else series.to_numpy(dtype=np.float64, na_value=np.nan))
        with np.errstate(over="ignore", invalid="ignore"):  # a sum that overflows is checked value by value
            total = np.add.reduce(column)
        if np.isfinite(total):  # NaN and infinities carry into the sum: a finite one has none
            finite_columns.add(col)
            continue
        ok = np.isfinite(column)
        n_bad = len(ok) - np.count_nonzero(ok)
        if n_bad:
            per_column.append((n_bad, col))
            finite &= ok
        else:
            finite_columns.add(col)
    if per_column:
        n_rows = int(len(finite) - finite.sum())
        per_column.sort(key=lambda t: (-t[0], str(t[1])))
        detail = ", ".join(f"{c!r}: {n}" for n, c in per_column[:3])
        more = f" and {len(per_column) - 3} more columns" if len(per_column) > 3 else ""
        warnings.append(
            f"{n_rows} rows in {name} have missing or infinite values in numeric columns ({detail}{more})"
        )

    return Table(
        frame=frame,
        path=name,
        ids=ids,
        id_col=id_name,
        labels=labels,
        label_col=label_name,
        numeric_columns=numeric_columns,
        context_columns=context_columns,
        warnings=warnings,
        finite_columns=frozenset(finite_columns),
    )


# --------------------------------------------------------------------------
# sha256_file
# --------------------------------------------------------------------------


def sha256_file(path: str | os.PathLike[str]) -> str:
    """Hex SHA-256 of a file's bytes (an empty file is fine)."""
    name, _, _ = _check_file(path, allow_empty=True)
    try:
        with open(name, "rb") as fh:
            return hashlib.file_digest(fh, "sha256").hexdigest()
    except OSError as exc:
        raise _fail(f"cannot read {name}: {exc.strerror or exc}") from None


def __getattr__(name: str):
    # write_table is re-exported from table_write, imported when first asked for: it loads
    # pyarrow.parquet (~20 ms), which a command that only reads a CSV never needs.
    if name == "write_table":
        from afterlook.store.table_write import write_table

        return write_table
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
