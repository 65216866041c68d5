"""Writing a table (CSV, TSV or Parquet by extension), atomically."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from afterlook.core.errors import AfterlookError
from afterlook.store.atomic import atomic_file
from afterlook.store.table_files import (
    _CSV_EXTS,
    _PARQUET_EXTS,
    _WRITE_TITLE,
    _arrow_message,
    _check_column_names,
    _display,
    _fail,
    _short,
)

__all__ = ["write_table"]


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
