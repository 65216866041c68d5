"""Table files: finding the format, reading CSV and Parquet through pyarrow, and the one-line errors.

The private helpers of :mod:`afterlook.store.tables` (reading whole tables)
and :mod:`afterlook.store.table_stream` (reading them in chunks); see
:mod:`afterlook.store.tables` for the decisions behind them.
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterable
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from afterlook.core.errors import AfterlookError

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


def _open_parquet(name: str, head: bytes, size: int) -> "pq.ParquetFile":
    """The Parquet file, after checking its header and footer magic (one-line errors)."""
    import pyarrow.parquet as pq  # here: ~20 ms to import, and a CSV never needs it

    if not head.startswith(_PARQUET_MAGIC):
        raise _fail(f"cannot read {name}: it is named like a Parquet file but is not one (no Parquet header)")
    if size < 12 or _tail_bytes(name, 4) != _PARQUET_MAGIC:
        raise _fail(f"cannot read {name}: the Parquet file is truncated or damaged (its footer is missing)")
    try:
        return pq.ParquetFile(name)
    except (pa.ArrowException, OSError, ValueError, TypeError, IndexError, KeyError, MemoryError) as exc:
        raise _fail(f"cannot read {name} as Parquet: {_arrow_message(exc)}") from None


def _read_parquet(name: str, head: bytes, size: int) -> pa.Table:
    pfile = _open_parquet(name, head, size)
    try:
        _check_column_names(name, _schema_names(name, pfile.schema_arrow))
        return pfile.read()
    except (pa.ArrowException, OSError, ValueError, TypeError, IndexError, KeyError, MemoryError) as exc:
        raise _fail(f"cannot read {name} as Parquet: {_arrow_message(exc)}") from None


_FIXABLE_TYPES = (pa.float64(), pa.int64(), pa.string(), pa.bool_())


# pyarrow reads CSV in blocks and a single value may not straddle two of them: a file whose longest
# field exceeds the default block is read again with blocks up to this size, then refused in words.
_MAX_BLOCK = 64 << 20


def _csv_options(delimiter: str, newlines_in_values: bool, types: dict[str, pa.DataType] | None,
                 encoding: str = "utf8", block_size: int | None = None) -> dict[str, Any]:
    read = {"use_threads": True, "encoding": encoding}
    if block_size:
        read["block_size"] = block_size
    return {
        "read_options": pacsv.ReadOptions(**read),
        "parse_options": pacsv.ParseOptions(delimiter=delimiter, newlines_in_values=newlines_in_values),
        "convert_options": pacsv.ConvertOptions(strings_can_be_null=True, column_types=types or {}),
    }


def check_encoding(encoding: str | None) -> str:
    """The codec name for ``--encoding`` (default UTF-8); an unknown name is one clear line."""
    import codecs

    if encoding is None:
        return "utf8"
    try:
        return codecs.lookup(encoding).name
    except (LookupError, TypeError):
        raise _fail(f"unknown --encoding {_short(encoding)} (e.g. utf-8, latin-1, cp1252)") from None


def check_delimiter(delimiter: str | None) -> str | None:
    """The one-character ``--delimiter`` (``tab`` and ``\\t`` name the tab), or None to decide by extension."""
    if delimiter is None:
        return None
    d = {"tab": "\t", "\\t": "\t"}.get(delimiter, delimiter)
    if len(d) != 1 or d in "\r\n\"":
        raise _fail(f"--delimiter must be one character such as ',' ';' '|' or 'tab', got {_short(delimiter)}")
    return d


def _legacy_text(head: bytes) -> bool:
    """Bytes that are not UTF-8 but read as text in a single-byte code page (Latin-1, Windows-1252)."""
    if b"\x00" in head:
        return False
    try:
        head[:4096].decode("utf-8")
        return False
    except UnicodeDecodeError as exc:
        if exc.start >= len(head[:4096]) - 3:
            return False  # only a character cut at the end of the sample
    text = head[:4096].decode("latin-1")
    bad = sum(1 for ch in text if not ch.isprintable() and ch not in "\r\n\t")
    return bad <= max(8, len(text) // 20)


def _probe_csv_types(name: str, delimiter: str, encoding: str = "utf8") -> dict[str, pa.DataType] | None:
    """Column types pyarrow infers from the first block, or None.

    Reading with these types fixed is about twice as fast as letting every
    block be inferred; when a later row does not fit, the caller reads the
    file again with full inference, so the result is the same either way.
    """
    try:
        reader = pacsv.open_csv(name, **_csv_options(delimiter, False, None, encoding))
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


def _read_csv(name: str, head: bytes, delimiter: str, compressed: bool, encoding: str = "utf8") -> pa.Table:
    if encoding == "utf-8" or encoding == "utf8":
        encoding = "utf8"
        if not compressed and _legacy_text(head):
            raise _fail(f"cannot read {name}: it is not UTF-8 text but looks like a single-byte encoding "
                        "(Latin-1, Windows-1252); pass --encoding latin-1 (or cp1252), or save it as UTF-8")
        if not compressed and _looks_binary(head):
            raise _fail(f"cannot read {name}: it looks like a binary file, not CSV text")
    types = _probe_csv_types(name, delimiter, encoding)
    newlines = False
    block = None
    try:
        while True:
            try:
                return pacsv.read_csv(name, **_csv_options(delimiter, newlines, types, encoding, block))
            except pa.ArrowInvalid as exc:
                text = str(exc)
                if "straddl" in text:
                    if (block or 1 << 20) >= _MAX_BLOCK:
                        raise _fail(f"cannot read {name}: a single value is longer than {_MAX_BLOCK >> 20} MB; "
                                    "afterlook reads values up to that size (is a quote left open?)") from None
                    block = min(_MAX_BLOCK, (block or 1 << 20) * 8)  # a long field: larger blocks
                elif "CSV parse error" in text and not newlines:
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
            raise _fail(f"cannot read {name}: it is not UTF-8 text; save it as UTF-8 CSV or pass --encoding "
                        "(e.g. latin-1)") from None
        first = head.split(b"\n", 1)[0]
        hint = next((f" (is it separated by {sep.decode()!r}? pass --delimiter '{sep.decode()}')"
                     for sep in (b";", b"|", b"\t") if sep in first and delimiter.encode() not in first), "")
        raise _fail(f"cannot read {name} as CSV: {_arrow_message(exc)}{hint}") from None


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


_DECIMAL_COMMA = re.compile(r"^\s*[-+]?(\d+|\d{1,3}(\.\d{3})+)?,\d+([eE][-+]?\d+)?\s*$")


def _read_decimal_commas(frame: pd.DataFrame) -> pd.DataFrame:
    """Text columns whose every value is a decimal-comma number (``10,5``, ``1.234,5``) as floats."""
    for col in frame.columns:
        series = frame[col]
        if not (pd.api.types.is_string_dtype(series) or series.dtype == object):
            continue
        values = series.dropna()
        if values.empty or not values.map(lambda v: isinstance(v, str) and bool(_DECIMAL_COMMA.match(v)) or
                                          (isinstance(v, str) and v.strip().lstrip("+-").isdigit())).all():
            continue
        text = values.str.replace(".", "", regex=False).str.replace(",", ".", regex=False)
        converted = pd.to_numeric(text, errors="coerce")
        if converted.notna().all():
            frame[col] = pd.to_numeric(series.str.replace(".", "", regex=False).str.replace(",", ".", regex=False),
                                       errors="coerce")
    return frame


def _looks_numeric_text(series: pd.Series) -> tuple[int, Any] | None:
    """For a text column that is mostly numbers, return (bad count, example)."""
    values = series.dropna()
    if values.empty:
        return None
    sample = values.iloc[:1000]
    try:
        # when more than a tenth of the sample fails among its first values, 90% cannot be reached: a text
        # column of names or dates is settled there, without parsing the rest
        head = sample.iloc[: len(sample) // 10 + 1]
        if pd.to_numeric(head.astype(str), errors="coerce").isna().all():
            return None
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


def _text_kind(series: pd.Series) -> str | None:
    """'numbers' when every value of a text column is a plain number, 'decimal-comma' for ``10,5``."""
    values = series.dropna()
    if values.empty:
        return None
    # pandas' string dtype holds only str once NA is dropped: no need to look at each value
    if not isinstance(values.dtype, pd.StringDtype) and not values.map(lambda v: isinstance(v, str)).all():
        return None
    sample = values.iloc[:2000]
    if (pd.to_numeric(sample.iloc[:1], errors="coerce").notna().all()  # a first value that is no number settles it
            and pd.to_numeric(sample, errors="coerce").notna().all()
            and pd.to_numeric(values, errors="coerce").notna().all()):
        return "numbers"
    # At least 90% must match: when more than a tenth of the sample already fails among its first
    # values, the rest cannot change the answer (a text column of names is settled in a few hundred).
    allowed_misses = int(0.1 * len(sample))
    head = sample.iloc[: allowed_misses + 1]
    if not head.map(lambda v: bool(_DECIMAL_COMMA.match(v))).any() and len(head) > allowed_misses:
        return None
    if sample.map(lambda v: bool(_DECIMAL_COMMA.match(v))).mean() >= 0.9:
        return "decimal-comma"
    return None
