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
import re
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from afterlook.core.errors import AfterlookError
from afterlook.store.atomic import atomic_file

__all__ = [
    "LABEL_VALUES",
    "Table",
    "load_table",
    "load_head",
    "table_from_frame",
    "sha256_file",
    "write_table",
    "iter_numeric_chunks",
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

_PARQUET_EXTS = {".parquet", ".pq", ".parq"}
_CSV_EXTS = {".csv": ",", ".tsv": "\t", ".tab": "\t"}
_COMPRESSION_EXTS = {".gz", ".bz2", ".zst", ".lz4"}
_PARQUET_MAGIC = b"PAR1"
_SNIFF_BYTES = 65_536
_UNNAMED = re.compile(r"^\s*(Unnamed: \d+)?\s*$")
_INDEX_LEVEL = re.compile(r"^__index_level_\d+__$")

_READ_TITLE = "Cannot read table"
_WRITE_TITLE = "Cannot write table"


# --------------------------------------------------------------------------
# small helpers
# --------------------------------------------------------------------------


def _fail(message: str, title: str = _READ_TITLE) -> AfterlookError:
    return AfterlookError(message, title=title)


def _quote_list(names: Iterable[Any], limit: int = 6) -> str:
    names = [repr(str(n)) if not isinstance(n, str) else repr(n) for n in names]
    if len(names) <= limit:
        return ", ".join(names)
    return ", ".join(names[:limit]) + f" and {len(names) - limit} more"


def _short(value: Any, width: int = 40) -> str:
    text = repr(value)
    return text if len(text) <= width else text[: width - 3] + "..."


def _arrow_message(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    # Never echo raw bytes of a damaged file into the user's terminal.
    text = "".join(ch if ch.isprintable() and ord(ch) != 0xFFFD else "?" for ch in text)
    return text if len(text) <= 200 else text[:197] + "..."


def _looks_binary(head: bytes) -> bool:
    """True for bytes no text table starts with: NUL, or mostly undecodable/control bytes."""
    if b"\x00" in head:
        return True
    sample = head[:4096]
    if not sample:
        return False
    text = sample.decode("utf-8", errors="replace")
    bad = sum(1 for ch in text if ch == "\ufffd" or (not ch.isprintable() and ch not in "\r\n\t"))
    return bad > max(8, len(text) // 20)


def _display(path: str | os.PathLike[str]) -> str:
    return os.fspath(path)


def _check_file(path: str | os.PathLike[str], *, allow_empty: bool = False) -> tuple[str, bytes, int]:
    """Check that *path* is a readable, non-empty file.

    Returns the path as a string, the first bytes and the file size.
    """
    try:
        name = _display(path)
    except TypeError:
        raise _fail(f"not a file path: {_short(path)}") from None
    if not name:
        raise _fail("no table file given (empty path)")
    if not os.path.exists(name):
        raise _fail(f"cannot read {name}: no such file")
    if os.path.isdir(name):
        raise _fail(f"cannot read {name}: it is a folder, not a table file")
    try:
        with open(name, "rb") as fh:
            head = fh.read(_SNIFF_BYTES)
            size = os.fstat(fh.fileno()).st_size
    except PermissionError:
        raise _fail(f"cannot read {name}: permission denied") from None
    except OSError as exc:
        raise _fail(f"cannot read {name}: {exc.strerror or exc}") from None
    if size == 0 and not head and not allow_empty:
        raise _fail(f"cannot read {name}: the file is empty")
    return name, head, size


def _tail_bytes(name: str, n: int) -> bytes:
    try:
        with open(name, "rb") as fh:
            fh.seek(0, os.SEEK_END)
            size = fh.tell()
            fh.seek(max(0, size - n))
            return fh.read()
    except OSError as exc:
        raise _fail(f"cannot read {name}: {exc.strerror or exc}") from None


def _format_of(name: str, head: bytes) -> tuple[str, str, bool]:
    """Return ``(kind, delimiter, compressed)`` with kind 'csv' or 'parquet'."""
    suffixes = [s.lower() for s in Path(name).suffixes]
    compressed = bool(suffixes) and suffixes[-1] in _COMPRESSION_EXTS
    if compressed:
        suffixes = suffixes[:-1]
    ext = suffixes[-1] if suffixes else ""
    if not compressed and head.startswith(_PARQUET_MAGIC):
        return "parquet", ",", False
    if ext in _PARQUET_EXTS and not compressed:
        return "parquet", ",", False
    if ext in _CSV_EXTS:
        return "csv", _CSV_EXTS[ext], compressed
    # Unknown extension: try CSV, tab-separated if the header says so.
    first_line = head.split(b"\n", 1)[0]
    if not compressed and b"\t" in first_line and b"," not in first_line:
        return "csv", "\t", compressed
    return "csv", ",", compressed


# --------------------------------------------------------------------------
# low-level readers (pyarrow)
# --------------------------------------------------------------------------


def _read_parquet(name: str, head: bytes, size: int) -> pa.Table:
    if not head.startswith(_PARQUET_MAGIC):
        raise _fail(f"cannot read {name}: it is named like a Parquet file but is not one (no Parquet header)")
    if size < 12 or _tail_bytes(name, 4) != _PARQUET_MAGIC:
        raise _fail(f"cannot read {name}: the Parquet file is truncated or damaged (its footer is missing)")
    try:
        pfile = pq.ParquetFile(name)
        _check_column_names(name, _schema_names(name, pfile.schema_arrow))
        return pfile.read()
    except (pa.ArrowException, OSError, ValueError, TypeError, IndexError, KeyError, MemoryError) as exc:
        raise _fail(f"cannot read {name} as Parquet: {_arrow_message(exc)}") from None


_FIXABLE_TYPES = (pa.float64(), pa.int64(), pa.string(), pa.bool_())


def _csv_options(delimiter: str, newlines_in_values: bool, types: dict[str, pa.DataType] | None) -> dict[str, Any]:
    return {
        "read_options": pacsv.ReadOptions(use_threads=True),
        "parse_options": pacsv.ParseOptions(delimiter=delimiter, newlines_in_values=newlines_in_values),
        "convert_options": pacsv.ConvertOptions(strings_can_be_null=True, column_types=types or {}),
    }


def _probe_csv_types(name: str, delimiter: str) -> dict[str, pa.DataType] | None:
    """Column types pyarrow infers from the first block, or None.

    Reading with these types fixed is about twice as fast as letting every
    block be inferred; when a later row does not fit, the caller reads the
    file again with full inference, so the result is the same either way.
    """
    try:
        reader = pacsv.open_csv(name, **_csv_options(delimiter, False, None))
        schema = reader.schema
        reader.close()
    except (pa.ArrowException, OSError, ValueError):
        return None
    names = _schema_names(name, schema)
    if len(set(names)) != len(names):
        _check_column_names(name, names)
    # Date/time-like text is context, kept exactly as written (never re-formatted).
    return {n: (pa.string() if pa.types.is_temporal(f.type) else f.type)
            for n, f in zip(names, schema) if f.type in _FIXABLE_TYPES or pa.types.is_temporal(f.type)}


def _read_csv(name: str, head: bytes, delimiter: str, compressed: bool) -> pa.Table:
    if not compressed and _looks_binary(head):
        raise _fail(f"cannot read {name}: it looks like a binary file, not CSV text")
    types = _probe_csv_types(name, delimiter)
    newlines = False
    try:
        while True:
            try:
                return pacsv.read_csv(name, **_csv_options(delimiter, newlines, types))
            except pa.ArrowInvalid as exc:
                text = str(exc)
                if "CSV parse error" in text and not newlines:
                    newlines = True  # a quoted value spans lines: slower mode
                elif "conversion error" in text and any(t != pa.string() for t in types.values()):
                    # a later row does not fit the first block's types; keep text as text
                    types = {n: t for n, t in types.items() if t == pa.string()}
                else:
                    raise
    except (pa.ArrowException, OSError, ValueError, TypeError, IndexError, KeyError, MemoryError) as exc:
        text = str(exc)
        if "Empty CSV file" in text:
            raise _fail(f"cannot read {name}: the file has no header line") from None
        if "UTF8" in text or "UTF-8" in text:
            raise _fail(f"cannot read {name}: it is not UTF-8 text; save it as UTF-8 CSV") from None
        raise _fail(f"cannot read {name} as CSV: {_arrow_message(exc)}") from None


def _schema_names(name: str, schema: pa.Schema) -> list[str]:
    try:
        return [str(n) for n in schema.names]
    except UnicodeDecodeError:
        raise _fail(f"cannot read {name}: its column names are not UTF-8 text; save it as UTF-8") from None


def _check_column_names(name: str, names: list[str], title: str = _READ_TITLE) -> None:
    counts = pd.Series(names, dtype=object).value_counts()
    dups = [n for n in names if counts[n] > 1]
    if dups:
        uniq = list(dict.fromkeys(dups))
        raise _fail(
            f"{name} has duplicate column names {_quote_list(uniq)}; give every column its own name",
            title,
        )


def _arrow_to_pandas(name: str, table: pa.Table, kind: str) -> pd.DataFrame:
    columns = []
    fields = []
    for fld, col in zip(table.schema, table.columns):
        if kind == "parquet" and _INDEX_LEVEL.match(fld.name):
            continue  # an unnamed pandas index saved with the file
        if kind == "csv" and (pa.types.is_binary(fld.type) or pa.types.is_large_binary(fld.type)):
            raise _fail(
                f"cannot read {name}: column {fld.name!r} is not UTF-8 text; save the file as UTF-8 CSV"
            )
        if pa.types.is_decimal(fld.type):
            col = pc.cast(col, pa.float64())
            fld = pa.field(fld.name, pa.float64())
        columns.append(col)
        fields.append(fld)
    table = pa.Table.from_arrays(columns, schema=pa.schema(fields))
    try:
        try:
            # Same time unit whatever the source, so CSV and Parquet load alike.
            frame = table.to_pandas(ignore_metadata=True, split_blocks=True, coerce_temporal_nanoseconds=True)
        except (pa.ArrowException, ValueError, OverflowError):
            frame = table.to_pandas(ignore_metadata=True, split_blocks=True)  # dates beyond year 2262
    except (pa.ArrowException, ValueError, TypeError, OverflowError, MemoryError) as exc:
        raise _fail(f"cannot read {name}: {_arrow_message(exc)}") from None
    return frame.reset_index(drop=True)


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
        pool = list(self._first_row or {})
        folded = key.strip().casefold()
        for candidate in pool:  # same id but for case or spaces
            if candidate.strip().casefold() == folded:
                return candidate
        if len(pool) > 20_000:  # keep the suggestion cheap on big tables
            pool = [c for c in pool if abs(len(c) - len(key)) <= 2][:20_000]
        match = difflib.get_close_matches(key, pool, n=1, cutoff=0.7)
        return match[0] if match else None


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


def _make_ids(frame: pd.DataFrame, id_col: str | None, name: str) -> np.ndarray:
    if id_col is None:
        return np.array([str(i) for i in range(len(frame))], dtype=object)
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


def _looks_numeric_text(series: pd.Series) -> tuple[int, Any] | None:
    """For a text column that is mostly numbers, return (bad count, example)."""
    values = series.dropna()
    if values.empty:
        return None
    sample = values.iloc[:1000]
    try:
        parsed = pd.to_numeric(sample.astype(str), errors="coerce")
    except (TypeError, ValueError):
        return None
    if parsed.notna().mean() < 0.9:
        return None
    full = pd.to_numeric(values.astype(str), errors="coerce")
    bad = values[full.isna().to_numpy()]
    if bad.empty:
        return None
    return len(bad), bad.iloc[0]


def load_table(
    path: str | os.PathLike[str],
    *,
    id_col: str | None = None,
    label_col: str | None = None,
    require_labels: bool = False,
    require_unique_ids: bool = False,
) -> Table:
    """Read a CSV/TSV/Parquet table of cases.

    Raises :class:`~afterlook.core.errors.AfterlookError` (one line naming
    the file) for any file or content problem.
    """
    name, head, size = _check_file(path)
    kind, delimiter, compressed = _format_of(name, head)
    if kind == "parquet":
        arrow = _read_parquet(name, head, size)
    else:
        arrow = _read_csv(name, head, delimiter, compressed)
    names = _schema_names(name, arrow.schema)
    _check_column_names(name, names)
    if arrow.num_columns == 0:
        raise _fail(f"cannot read {name}: the table has no columns")
    if arrow.num_rows == 0:
        raise _fail(f"{name} has a header but no rows")
    frame = _arrow_to_pandas(name, arrow, kind)
    del arrow
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
                if found is not None:
                    n_bad, example = found
                    warnings.append(
                        f"column {col!r} in {name} is mostly numbers but {n_bad} value(s) are not "
                        f"(e.g. {_short(example, 24)}); kept as context, not modelled"
                    )

    if not numeric_columns:
        hint = ""
        if len(frame.columns) == 1 and any(sep in str(frame.columns[0]) for sep in (";", "\t", "|")):
            hint = " (is it separated by ';', tab or '|' rather than commas?)"
        raise _fail(f"{name} has no numeric columns (columns: {_quote_list(frame.columns)}){hint}")

    values = frame[numeric_columns]
    finite = np.ones(len(frame), dtype=bool)
    per_column: list[tuple[int, str]] = []
    for col in numeric_columns:
        ok = np.isfinite(values[col].to_numpy(dtype=np.float64, na_value=np.nan))
        n_bad = int(len(ok) - ok.sum())
        if n_bad:
            per_column.append((n_bad, col))
            finite &= ok
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


# --------------------------------------------------------------------------
# write_table
# --------------------------------------------------------------------------


def write_table(frame: pd.DataFrame, path: str | os.PathLike[str]) -> None:
    """Write *frame* (without its index) as CSV, TSV or Parquet, by extension.

    Written through :func:`afterlook.store.atomic.atomic_file` (temp file in
    the same folder, fsync, rename, fsync the folder), so readers never see
    half a file.
    """
    try:
        name = _display(path)
    except TypeError:
        raise _fail(f"not a file path: {_short(path)}", _WRITE_TITLE) from None
    if os.path.isdir(name):
        raise _fail(f"cannot write {name}: it is a folder", _WRITE_TITLE)
    ext = Path(name).suffix.lower()
    if ext in _PARQUET_EXTS:
        kind, delimiter = "parquet", ","
    elif ext in _CSV_EXTS:
        kind, delimiter = "csv", _CSV_EXTS[ext]
    else:
        raise _fail(f"cannot write {name}: unknown extension {ext or '(none)'!r}; use .csv, .tsv or .parquet", _WRITE_TITLE)
    if not isinstance(frame, pd.DataFrame):
        raise _fail(f"cannot write {name}: expected a pandas DataFrame, got {type(frame).__name__}", _WRITE_TITLE)
    folder = os.path.dirname(os.path.abspath(name))
    if not os.path.isdir(folder):
        raise _fail(f"cannot write {name}: folder {folder} does not exist", _WRITE_TITLE)

    frame = frame.reset_index(drop=True)
    frame.columns = [str(c) for c in frame.columns]
    _check_column_names(name, list(frame.columns), _WRITE_TITLE)
    try:
        arrow: pa.Table | None = pa.Table.from_pandas(frame, preserve_index=False)
    except (pa.ArrowException, TypeError, ValueError) as exc:
        if kind == "parquet":
            bad = _first_unconvertible(frame)
            what = f"column {bad!r} mixes value types" if bad is not None else _arrow_message(exc)
            raise _fail(f"cannot write {name}: {what}", _WRITE_TITLE) from None
        arrow = None  # CSV: fall back to pandas, which writes anything as text

    try:
        with atomic_file(Path(name)) as fh:
            if kind == "parquet":
                pq.write_table(arrow, fh)
            elif arrow is not None:
                pacsv.write_csv(
                    arrow, fh, write_options=pacsv.WriteOptions(delimiter=delimiter, quoting_style="needed")
                )
            else:
                frame.to_csv(fh, index=False, sep=delimiter)
    except AfterlookError as exc:
        raise _fail(exc.message, _WRITE_TITLE) from None
    except (pa.ArrowException, TypeError, ValueError) as exc:
        raise _fail(f"cannot write {name}: {_arrow_message(exc)}", _WRITE_TITLE) from None


def _first_unconvertible(frame: pd.DataFrame) -> str | None:
    for col in frame.columns:
        try:
            pa.array(frame[col], from_pandas=True)
        except (pa.ArrowException, TypeError, ValueError):
            return col
    return None


# --------------------------------------------------------------------------
# iter_numeric_chunks
# --------------------------------------------------------------------------


_CSV_CONVERSION = re.compile(r"In CSV column #(\d+):.*?invalid value '(.*?)'")


def load_head(
    path: str | os.PathLike[str],
    rows: int = 2000,
    *,
    id_col: str | None = None,
    label_col: str | None = None,
) -> Table:
    """The first ``rows`` rows of a table, with the rules of :func:`load_table`.

    Used by the streamed fits to learn the columns (numeric, context, label)
    of a file too large to load whole.
    """
    name, head, size = _check_file(path)
    kind, delimiter, compressed = _format_of(name, head)
    try:
        if kind == "parquet":
            if not head.startswith(_PARQUET_MAGIC) or size < 12 or _tail_bytes(name, 4) != _PARQUET_MAGIC:
                raise _fail(f"cannot read {name}: the Parquet file is truncated or damaged")
            pfile = pq.ParquetFile(name)
            batch = next(pfile.iter_batches(batch_size=rows), None)
            arrow = pa.Table.from_batches([batch]) if batch is not None else pfile.schema_arrow.empty_table()
        else:
            if not compressed and _looks_binary(head):
                raise _fail(f"cannot read {name}: it looks like a binary file, not CSV text")
            reader = pacsv.open_csv(name, read_options=pacsv.ReadOptions(block_size=1 << 20),
                                    parse_options=pacsv.ParseOptions(delimiter=delimiter))
            try:
                batch = reader.read_next_batch()
            except StopIteration:
                batch = None
            reader.close()
            arrow = pa.Table.from_batches([batch]) if batch is not None else pa.table({})
            arrow = arrow.slice(0, rows)
    except AfterlookError:
        raise
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise _fail(f"cannot read {name}: {_arrow_message(exc)}") from None
    if arrow.num_rows == 0:
        raise _fail(f"{name} has a header but no rows")
    _check_column_names(name, [str(n) for n in arrow.schema.names])
    frame = _arrow_to_pandas(name, arrow, kind)
    return _build_table(frame, name, id_col=id_col, label_col=label_col,
                        require_labels=False, require_unique_ids=False)


def iter_numeric_chunks(
    path: str | os.PathLike[str],
    columns: str | Iterable[str],
    chunk_rows: int = 262_144,
) -> Iterator[np.ndarray]:
    """Yield float64 arrays of shape ``(<= chunk_rows, len(columns))``.

    For files larger than memory: CSV is streamed with
    ``pyarrow.csv.open_csv`` and Parquet with
    ``pyarrow.parquet.ParquetFile.iter_batches``; every chunk but the last
    has exactly ``chunk_rows`` rows. Missing values come back as NaN; a value
    that is not a number is an error naming the column. The file and the
    columns are checked before the first chunk is asked for.
    """
    if isinstance(columns, str):
        columns = [columns]
    columns = list(columns)
    name, head, size = _check_file(path)
    if not columns:
        raise _fail(f"no columns asked for from {name}")
    if len(set(columns)) != len(columns):
        raise _fail(f"columns asked for from {name} repeat: {_quote_list(columns)}")
    if isinstance(chunk_rows, bool) or not isinstance(chunk_rows, (int, np.integer)) or chunk_rows < 1:
        raise _fail(f"chunk size for {name} must be a positive whole number of rows, got {_short(chunk_rows)}")
    kind, delimiter, compressed = _format_of(name, head)
    if kind == "parquet":
        batches = _parquet_batches(name, head, size, columns, int(chunk_rows))
    else:
        batches = _csv_batches(name, head, delimiter, compressed, columns)
    return _rechunk(name, batches, columns, int(chunk_rows))


def _missing_columns(name: str, have: list[str], columns: list[str]) -> None:
    _check_column_names(name, have)
    missing = [c for c in columns if c not in have]
    if missing:
        hint = difflib.get_close_matches(str(missing[0]), have, n=1)
        extra = f" (did you mean {hint[0]!r}?)" if hint else ""
        raise _fail(f"{name} has no column {_quote_list(missing)}{extra}")


def _csv_batches(
    name: str, head: bytes, delimiter: str, compressed: bool, columns: list[str]
) -> Iterator[pa.RecordBatch]:
    if not compressed and b"\x00" in head:
        raise _fail(f"cannot read {name}: it looks like a binary file, not CSV text")
    parse = pacsv.ParseOptions(delimiter=delimiter)
    read = pacsv.ReadOptions()
    try:
        probe = pacsv.open_csv(name, read_options=pacsv.ReadOptions(block_size=1 << 16), parse_options=parse)
        have = _schema_names(name, probe.schema)
        probe.close()
    except (pa.ArrowException, OSError, ValueError) as exc:
        if "Empty CSV file" in str(exc):
            raise _fail(f"cannot read {name}: the file has no header line") from None
        raise _fail(f"cannot read {name} as CSV: {_arrow_message(exc)}") from None
    _missing_columns(name, have, columns)
    convert = pacsv.ConvertOptions(include_columns=columns, column_types={c: pa.float64() for c in columns})
    try:
        reader = pacsv.open_csv(name, read_options=read, parse_options=parse, convert_options=convert)
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise _fail(_csv_stream_message(name, exc, have)) from None

    def gen() -> Iterator[pa.RecordBatch]:
        try:
            for batch in reader:
                yield batch
        except (pa.ArrowException, OSError, ValueError) as exc:
            raise _fail(_csv_stream_message(name, exc, have)) from None
        finally:
            reader.close()

    return gen()


def _csv_stream_message(name: str, exc: BaseException, have: list[str]) -> str:
    match = _CSV_CONVERSION.search(str(exc))
    if match:
        index = int(match.group(1))
        col = have[index] if index < len(have) else f"#{index}"
        return f"{name}: column {col!r} has a value that is not a number: {match.group(2)!r}"
    return f"cannot read {name} as CSV: {_arrow_message(exc)}"


def _parquet_batches(
    name: str, head: bytes, size: int, columns: list[str], chunk_rows: int
) -> Iterator[pa.RecordBatch]:
    if not head.startswith(_PARQUET_MAGIC):
        raise _fail(f"cannot read {name}: it is named like a Parquet file but is not one (no Parquet header)")
    if size < 12 or _tail_bytes(name, 4) != _PARQUET_MAGIC:
        raise _fail(f"cannot read {name}: the Parquet file is truncated or damaged (its footer is missing)")
    try:
        pfile = pq.ParquetFile(name)
        schema = pfile.schema_arrow
    except (pa.ArrowException, OSError, ValueError, TypeError, IndexError) as exc:
        raise _fail(f"cannot read {name} as Parquet: {_arrow_message(exc)}") from None
    have = _schema_names(name, schema)
    _missing_columns(name, have, columns)
    for col in columns:
        typ = schema.field(col).type
        if not (
            pa.types.is_integer(typ)
            or pa.types.is_floating(typ)
            or pa.types.is_boolean(typ)
            or pa.types.is_decimal(typ)
            or pa.types.is_null(typ)
        ):
            raise _fail(f"{name}: column {col!r} is not numeric ({typ})")

    def gen() -> Iterator[pa.RecordBatch]:
        try:
            yield from pfile.iter_batches(batch_size=chunk_rows, columns=columns)
        except (pa.ArrowException, OSError, ValueError, TypeError, IndexError) as exc:
            raise _fail(f"cannot read {name} as Parquet: {_arrow_message(exc)}") from None
        finally:
            pfile.close()

    return gen()


def _rechunk(
    name: str, batches: Iterator[pa.RecordBatch], columns: list[str], chunk_rows: int
) -> Iterator[np.ndarray]:
    """Copy each batch's columns straight into a column-major chunk buffer
    (one copy per value; chunks are Fortran-ordered)."""
    d = len(columns)
    buf = np.empty((chunk_rows, d), order="F")
    fill = 0
    total = 0
    for batch in batches:
        if batch.num_rows == 0:
            continue
        arrays = []
        for col in columns:
            a = batch.column(col)
            arrays.append(a if a.type == pa.float64() else pc.cast(a, pa.float64()))
        start = 0
        while start < batch.num_rows:
            take = min(chunk_rows - fill, batch.num_rows - start)
            for j, a in enumerate(arrays):
                buf[fill:fill + take, j] = a.slice(start, take).to_numpy(zero_copy_only=False)
            fill += take
            start += take
            if fill == chunk_rows:
                yield buf
                total += fill
                buf = np.empty((chunk_rows, d), order="F")
                fill = 0
    if fill:
        yield buf[:fill]
        total += fill
    if total == 0:
        raise _fail(f"{name} has a header but no rows")
