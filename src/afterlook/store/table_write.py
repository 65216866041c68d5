"""Writing a table (CSV, TSV or Parquet by extension), atomically: whole, or chunk by chunk."""

from __future__ import annotations

import os
from collections.abc import Iterable
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

__all__ = ["write_table", "write_table_chunks"]


def write_table(frame: pd.DataFrame, path: str | os.PathLike[str]) -> None:
    """Write *frame* (without its index) as CSV, TSV or Parquet, by extension.

    Written through :func:`afterlook.store.atomic.atomic_file` (temp file in
    the same folder, fsync, rename, fsync the folder), so readers never see
    half a file.
    """
    name, kind, delimiter = _target(path)
    if not isinstance(frame, pd.DataFrame):
        raise _fail(f"cannot write {name}: expected a pandas DataFrame, got {type(frame).__name__}", _WRITE_TITLE)

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


def write_table_chunks(chunks: Iterable[pd.DataFrame | pa.Table], path: str | os.PathLike[str]) -> int:
    """Write DataFrames (or Arrow tables) one after another as one CSV, TSV or Parquet table; return the rows
    written.

    For tables larger than memory: only one chunk is converted at a time
    (pyarrow's ``CSVWriter`` / ``ParquetWriter`` append to the open file).
    The first chunk fixes the column types (a column with no value in it is
    text); a later chunk is converted to them. The file is written under a
    temp name and replaces ``path`` only when every chunk is in
    (:func:`~afterlook.store.atomic.atomic_file`): an error while reading,
    scoring or writing any chunk leaves no file at ``path`` (or the old one).
    Errors from ``chunks`` itself propagate unchanged.
    """
    name, kind, delimiter = _target(path)
    rows = 0
    writer = None
    schema = None
    with atomic_file(Path(name)) as fh:
        try:
            for frame in chunks:
                if isinstance(frame, pa.Table):  # already converted (by a Dask worker)
                    if schema is None:
                        _check_column_names(name, [str(c) for c in frame.column_names], _WRITE_TITLE)
                        schema = _text_for_null(frame.schema)
                    arrow = frame.cast(schema)
                else:
                    frame = frame.reset_index(drop=True)
                    frame.columns = [str(c) for c in frame.columns]
                    if schema is None:
                        _check_column_names(name, list(frame.columns), _WRITE_TITLE)
                        schema = _arrow_schema(name, frame)
                    arrow = _chunk_as(name, frame, schema)
                if writer is None:
                    writer = (pq.ParquetWriter(fh, schema) if kind == "parquet" else pacsv.CSVWriter(
                        fh, schema, write_options=pacsv.WriteOptions(delimiter=delimiter, quoting_style="needed")))
                writer.write_table(arrow)
                rows += len(frame)
            if writer is None:
                raise _fail(f"cannot write {name}: no rows to write", _WRITE_TITLE)
            writer.close()
            writer = None
        except (pa.ArrowException, TypeError, ValueError) as exc:
            raise _fail(f"cannot write {name}: {_arrow_message(exc)}", _WRITE_TITLE) from None
        finally:
            if writer is not None:  # an error: close quietly, the temp file is removed
                try:
                    writer.close()
                except (pa.ArrowException, OSError, ValueError):
                    pass
    return rows


def _arrow_schema(name: str, frame: pd.DataFrame) -> pa.Schema:
    """The first chunk's arrow schema; a column with no value in it (null type) becomes text."""
    try:
        schema = pa.Schema.from_pandas(frame, preserve_index=False)
    except (pa.ArrowException, TypeError, ValueError) as exc:
        bad = _first_unconvertible(frame)
        what = f"column {bad!r} mixes value types" if bad is not None else _arrow_message(exc)
        raise _fail(f"cannot write {name}: {what}", _WRITE_TITLE) from None
    return _text_for_null(schema)


def _text_for_null(schema: pa.Schema) -> pa.Schema:
    for i, fld in enumerate(schema):
        if pa.types.is_null(fld.type):
            schema = schema.set(i, pa.field(fld.name, pa.string()))
    return schema


def _chunk_as(name: str, frame: pd.DataFrame, schema: pa.Schema) -> pa.Table:
    try:
        return pa.Table.from_pandas(frame, schema=schema, preserve_index=False)
    except (pa.ArrowException, TypeError, ValueError):
        for fld in schema:
            try:
                pa.array(frame[fld.name], type=fld.type, from_pandas=True)
            except (pa.ArrowException, TypeError, ValueError, KeyError):
                raise _fail(f"cannot write {name}: column {fld.name!r} of a later chunk does not fit the type "
                            f"its first rows set ({fld.type})", _WRITE_TITLE) from None
        raise


def _target(path: str | os.PathLike[str]) -> tuple[str, str, str]:
    """The path shown in messages, the format ("csv" or "parquet") and the CSV delimiter; one line if unwritable."""
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
    folder = os.path.dirname(os.path.abspath(name))
    if not os.path.isdir(folder):
        raise _fail(f"cannot write {name}: folder {folder} does not exist", _WRITE_TITLE)
    return name, kind, delimiter


def _first_unconvertible(frame: pd.DataFrame) -> str | None:
    for col in frame.columns:
        try:
            pa.array(frame[col], from_pandas=True)
        except (pa.ArrowException, TypeError, ValueError):
            return col
    return None
