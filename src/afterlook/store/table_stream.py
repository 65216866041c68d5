"""Reading a table without loading it whole: its head, its numeric columns in chunks, or
every column in chunks of rows.

Used by the streamed fits and the streamed score (:mod:`afterlook.engines`);
the same format rules and one-line errors as :mod:`afterlook.store.tables`.
"""

from __future__ import annotations

import difflib
import os
import re
from collections.abc import Iterable, Iterator
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from afterlook.core.errors import AfterlookError
from afterlook.store.table_files import (
    _arrow_message,
    _arrow_to_pandas,
    _check_column_names,
    _check_file,
    _fail,
    _format_of,
    _legacy_text,
    _looks_binary,
    _open_parquet,
    _probe_csv_types,
    _quote_list,
    _schema_names,
    _short,
)
from afterlook.store.tables import Table, _build_table

__all__ = ["load_head", "iter_numeric_chunks", "iter_table_chunks", "TableChunks", "csv_column_types"]


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
            pfile = _open_parquet(name, head, size)
            batch = next(pfile.iter_batches(batch_size=rows), None)
            arrow = pa.Table.from_batches([batch]) if batch is not None else pfile.schema_arrow.empty_table()
        else:
            _check_utf8_text(name, head, compressed)
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
    _check_chunk_rows(name, chunk_rows)
    kind, delimiter, compressed = _format_of(name, head)
    if kind == "parquet":
        batches = _parquet_batches(name, head, size, columns, int(chunk_rows))
    else:
        batches = _csv_batches(name, head, delimiter, compressed, columns)
    return _rechunk(name, batches, columns, int(chunk_rows))


def _csv_header(name: str, delimiter: str, block_size: int) -> list[str]:
    """The column names of a CSV file (one line if it cannot be read as CSV)."""
    try:
        probe = pacsv.open_csv(name, read_options=pacsv.ReadOptions(block_size=block_size),
                               parse_options=pacsv.ParseOptions(delimiter=delimiter))
        have = _schema_names(name, probe.schema)
        probe.close()
    except (pa.ArrowException, OSError, ValueError) as exc:
        if "Empty CSV file" in str(exc):
            raise _fail(f"cannot read {name}: the file has no header line") from None
        raise _fail(f"cannot read {name} as CSV: {_arrow_message(exc)}") from None
    return have


def _check_utf8_text(name: str, head: bytes, compressed: bool) -> None:
    if not compressed and _legacy_text(head):
        raise _fail(f"cannot read {name}: it is not UTF-8 text but looks like a single-byte encoding "
                    "(Latin-1, Windows-1252); save it as UTF-8 (the streamed engines read UTF-8 only)")
    if not compressed and _looks_binary(head):
        raise _fail(f"cannot read {name}: it looks like a binary file, not CSV text")


def _check_chunk_rows(name: str, chunk_rows) -> None:
    if isinstance(chunk_rows, bool) or not isinstance(chunk_rows, (int, np.integer)) or chunk_rows < 1:
        raise _fail(f"chunk size for {name} must be a positive whole number of rows, got {_short(chunk_rows)}")


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
    have = _csv_header(name, delimiter, 1 << 16)
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


def _csv_stream_message(name: str, exc: BaseException, have: list[str], types: dict | None = None) -> str:
    match = _CSV_CONVERSION.search(str(exc))
    if match:
        index = int(match.group(1))
        col = have[index] if index < len(have) else f"#{index}"
        typ = (types or {}).get(col, pa.float64())
        if typ != pa.float64():
            return (f"{name}: column {col!r} has a value that does not fit the column's type ({typ}) set by the "
                    f"first rows: {match.group(2)!r}; use the memory engine for this file")
        return f"{name}: column {col!r} has a value that is not a number: {match.group(2)!r}"
    return f"cannot read {name} as CSV: {_arrow_message(exc)}"


def _parquet_batches(
    name: str, head: bytes, size: int, columns: list[str], chunk_rows: int
) -> Iterator[pa.RecordBatch]:
    pfile = _open_parquet(name, head, size)
    try:
        schema = pfile.schema_arrow
    except (pa.ArrowException, OSError, ValueError, TypeError, IndexError) as exc:
        raise _fail(f"cannot read {name} as Parquet: {_arrow_message(exc)}") from None
    have = _schema_names(name, schema)
    _missing_columns(name, have, columns)
    _check_numeric_fields(name, schema, columns)

    def gen() -> Iterator[pa.RecordBatch]:
        try:
            yield from pfile.iter_batches(batch_size=chunk_rows, columns=columns)
        except (pa.ArrowException, OSError, ValueError, TypeError, IndexError) as exc:
            raise _fail(f"cannot read {name} as Parquet: {_arrow_message(exc)}") from None
        finally:
            pfile.close()

    return gen()


def _check_numeric_fields(name: str, schema: pa.Schema, columns: list[str]) -> None:
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


# --------------------------------------------------------------------------
# iter_table_chunks: every column, a Table per chunk of rows
# --------------------------------------------------------------------------


@dataclass
class TableChunks:
    """A table read chunk by chunk: iterate for one :class:`Table` per chunk of rows.

    ``total_rows`` is known ahead for Parquet (from its footer), None for CSV.
    The file, its columns and their types are checked when this is made,
    before the first chunk is read.
    """

    path: str
    total_rows: int | None
    _frames: Iterator
    _id_col: str | None
    _label_col: str | None

    def __iter__(self) -> Iterator[Table]:
        for frame in self._frames:
            # The same id and label rules as a whole table (a missing id or a word that is not a
            # label is an error naming the file), applied to each chunk.
            yield _build_table(frame, self.path, id_col=self._id_col, label_col=self._label_col,
                               require_labels=False, require_unique_ids=False)


def iter_table_chunks(
    path: str | os.PathLike[str],
    float_columns: Iterable[str],
    chunk_rows: int = 262_144,
    *,
    id_col: str | None = None,
    label_col: str | None = None,
) -> TableChunks:
    """Every column of a table, ``chunk_rows`` rows at a time, each chunk a :class:`Table`.

    For scoring files larger than memory. Column types are fixed once for the
    whole file: Parquet's from its schema; CSV's from the first block, as
    :func:`load_table` infers them, except that ``float_columns`` (the
    columns a model reads) are read as float64, so a feature column that
    starts with whole numbers may hold decimals later. A later value that
    does not fit its column's type (text in a feature column) is one error
    line naming the column and the value. Peak memory is about one chunk
    of every column as pyarrow and pandas hold it (two copies), plus a
    pyarrow read block.
    """
    float_columns = list(float_columns)
    name, head, size = _check_file(path)
    _check_chunk_rows(name, chunk_rows)
    kind, delimiter, compressed = _format_of(name, head)
    if kind == "parquet":
        pfile = _open_parquet(name, head, size)
        try:
            schema = pfile.schema_arrow
            total = pfile.metadata.num_rows
        except (pa.ArrowException, OSError, ValueError, TypeError, IndexError) as exc:
            raise _fail(f"cannot read {name} as Parquet: {_arrow_message(exc)}") from None
        _missing_columns(name, _schema_names(name, schema), float_columns)
        _check_numeric_fields(name, schema, float_columns)
        if total == 0:
            raise _fail(f"{name} has a header but no rows")
        batches = _parquet_all_batches(name, pfile, int(chunk_rows))
    else:
        total = None
        batches = _csv_all_batches(name, head, delimiter, compressed, float_columns)
    frames = (_arrow_to_pandas(name, table, kind) for table in _row_chunks(name, batches, int(chunk_rows)))
    return TableChunks(name, total, frames, id_col, label_col)


def _parquet_all_batches(name: str, pfile, chunk_rows: int) -> Iterator[pa.RecordBatch]:
    try:
        yield from pfile.iter_batches(batch_size=chunk_rows)
    except (pa.ArrowException, OSError, ValueError, TypeError, IndexError) as exc:
        raise _fail(f"cannot read {name} as Parquet: {_arrow_message(exc)}") from None
    finally:
        pfile.close()


def _csv_all_batches(
    name: str, head: bytes, delimiter: str, compressed: bool, float_columns: list[str]
) -> Iterator[pa.RecordBatch]:
    _check_utf8_text(name, head, compressed)
    types = _column_types(name, delimiter, float_columns)
    have = list(types)
    # A quoted value may span lines; pyarrow can only read that in its slower mode, chosen up front
    # because a stream cannot be read again from the start.
    quoted = b'"' in head
    try:
        reader = pacsv.open_csv(
            name,
            read_options=pacsv.ReadOptions(block_size=1 << 20, use_threads=False),  # see DEVELOPERS.md
            parse_options=pacsv.ParseOptions(delimiter=delimiter, newlines_in_values=quoted),
            convert_options=pacsv.ConvertOptions(strings_can_be_null=True, column_types=types),
        )
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise _fail(_csv_stream_message(name, exc, have)) from None

    def gen() -> Iterator[pa.RecordBatch]:  # the checks above run now, the reading when asked
        try:
            for batch in reader:
                yield batch
        except (pa.ArrowException, OSError, ValueError) as exc:
            raise _fail(_csv_stream_message(name, exc, have, types)) from None
        finally:
            reader.close()

    return gen()


def csv_column_types(path: str | os.PathLike[str], float_columns: Iterable[str]) -> dict[str, pa.DataType]:
    """The type of every column of a CSV file as the streamed engines read it (see :func:`iter_table_chunks`)."""
    name, head, _ = _check_file(path)
    _, delimiter, _ = _format_of(name, head)
    return _column_types(name, delimiter, list(float_columns))


def _column_types(name: str, delimiter: str, float_columns: list[str]) -> dict[str, pa.DataType]:
    have = _csv_header(name, delimiter, 1 << 20)
    _missing_columns(name, have, float_columns)
    # load_table's types (first block; dates kept as text), feature columns as float64, and text
    # for what the first block could not type (a column empty so far), so no later block is refused
    # for a type the first one merely did not show.
    types = _probe_csv_types(name, delimiter) or {}
    types = {c: types.get(c, pa.string()) for c in have}
    types.update({c: pa.float64() for c in float_columns})
    return types


def _row_chunks(name: str, batches: Iterator[pa.RecordBatch], chunk_rows: int) -> Iterator[pa.Table]:
    """Record batches regrouped into tables of ``chunk_rows`` rows (the last one shorter)."""
    pending: list[pa.RecordBatch] = []
    held = 0
    total = 0
    for batch in batches:
        if batch.num_rows == 0:
            continue
        pending.append(batch)
        held += batch.num_rows
        while held >= chunk_rows:
            table = pa.Table.from_batches(pending)
            yield table.slice(0, chunk_rows)
            total += chunk_rows
            rest = table.slice(chunk_rows)
            pending = rest.to_batches() if rest.num_rows else []
            held = rest.num_rows
    if held:
        yield pa.Table.from_batches(pending)
        total += held
    if total == 0:
        raise _fail(f"{name} has a header but no rows")
