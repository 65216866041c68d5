"""Scoring a table larger than memory: chunk by chunk here, or partition by partition on Dask.

Both engines yield the scored rows in file order, one chunk at a time (a
pandas frame, or an Arrow table from a Dask worker), for
:func:`afterlook.store.table_write.write_table_chunks` to append to the
output. What scores a chunk is the caller's ``score_table(table) ->
(scored_frame, counts)``: the same function the in-memory score applies to
the whole table, so the columns, numbers, undefined-value policy and id /
label rules are the same; this module only decides how rows reach it.

Memory. The chunked engine holds one chunk at a time: about
``chunk_rows x columns`` values in pyarrow, in pandas and in the scored
copy, plus the model's feature matrix of that chunk (``chunk_rows x
features`` float64, two or three copies inside the recipe and the Cholesky
solve). The Dask engine holds at most ``window`` scored partitions on the
driver (each one :data:`BLOCK_BYTES` block of the CSV, or one Parquet row
group, in pandas), and each worker one partition.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable, Iterator
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from ..core.blas import with_limited_blas
from ..core.errors import AfterlookError

# pyarrow's CSV types as pandas dtypes: integers nullable, so a later empty cell is not an error.
_PANDAS_TYPES = {"double": "float64", "int64": "Int64", "bool": "boolean", "string": "string"}
BLOCK_BYTES = 32 << 20
"""Bytes of CSV text a Dask partition reads (a Parquet partition is a row group or a file)."""

ScoreTable = Callable[[Any], "tuple[pd.DataFrame, Any]"]
Progress = Callable[[int, int], None]
"""``progress(rows_done, chunks_done)`` after each chunk (or partition) is scored."""


def score_chunked(path, float_columns: list[str], score_table: ScoreTable, *, chunk_rows: int = 262_144,
                  id_col: str | None = None, label_col: str | None = None,
                  progress: Progress | None = None) -> tuple[int | None, Iterator[tuple[pd.DataFrame, Any]]]:
    """``(total rows if known ahead, generator of (scored frame, counts) per chunk in file order)``.

    The file and its columns are checked before this returns; reading starts
    when the generator is first asked.
    """
    from ..store.table_stream import iter_table_chunks

    chunks = iter_table_chunks(path, float_columns, chunk_rows, id_col=id_col, label_col=label_col)

    def scored() -> Iterator[tuple[pd.DataFrame, Any]]:
        rows = 0
        for k, table in enumerate(chunks, start=1):
            frame, counts = score_table(table)
            rows += len(frame)
            if progress is not None:
                progress(rows, k)
            yield frame, counts

    return chunks.total_rows, scored()


@with_limited_blas  # runs in a worker process: the caller's limit does not reach it
def _score_partition(frame: pd.DataFrame, score_table: ScoreTable, name: str, id_col, label_col,
                     text_features: list[str]):
    from ..store.tables import table_from_frame

    for col in text_features:  # read as text, so a value that is not a number is named with its column
        text = pa.array(frame[col], type=pa.string(), from_pandas=True)
        try:  # pyarrow's own number parsing: the chunked engine's CSV reader parses alike
            values = pc.cast(text, pa.float64())
        except pa.ArrowInvalid:
            parsed = pd.to_numeric(frame[col], errors="coerce")  # only to find the first bad value
            bad = frame[col].notna().to_numpy() & parsed.isna().to_numpy()
            raise AfterlookError(f"{name}: column {col!r} has a value that is not a number: "
                                 f"{frame[col][bad].iloc[0]!r}") from None
        frame[col] = values.to_numpy(zero_copy_only=False)
    scored, counts = score_table(table_from_frame(frame, id_col=id_col, label_col=label_col, name=name))
    # Sent back as an Arrow table: distributed moves it as buffers, where a pandas frame of text
    # columns is pickled value by value (measured: several times slower on the demo-like file).
    return pa.Table.from_pandas(scored, preserve_index=False), counts


def _is_parquet(path: str) -> bool:
    return path.lower().endswith((".parquet", ".pq", ".parq"))


def _read_all(path: str, float_columns: list[str]):
    import dask.dataframe as dd

    from ..store.table_stream import csv_column_types

    try:
        if _is_parquet(path):
            return dd.read_parquet(path, split_row_groups=True)  # a partition a row group: bounded memory
        # The chunked engine's column types (pyarrow's, from the first block), so both engines read a
        # column alike; dask's own guess from a sample would refuse a text column empty at the start.
        types = csv_column_types(path, float_columns)
        dtype = {c: _PANDAS_TYPES.get(str(t), "string") for c, t in types.items()}
        dtype.update({c: "string" for c in float_columns})  # made numbers in _score_partition
        import pyarrow.csv as pacsv

        # pyarrow's texts for a missing value, so the two readers agree on what is missing
        return dd.read_csv(path, dtype=dtype, blocksize=BLOCK_BYTES, keep_default_na=False,
                           na_values=pacsv.ConvertOptions().null_values)
    except (ValueError, OSError, KeyError, TypeError) as exc:
        raise AfterlookError(f"dask cannot read {path}: {' '.join(str(exc).split())[:200]}") from None


def score_dask(path, float_columns: list[str], score_table: ScoreTable, *, scheduler: str | None = None,
               id_col: str | None = None, label_col: str | None = None, progress: Progress | None = None,
               window: int = 3) -> tuple[int | None, Iterator[tuple[pd.DataFrame, Any]]]:
    """As :func:`score_chunked`, each partition scored by a Dask worker.

    At most ``window`` partitions are in flight or waiting on the driver, and
    they are handed on in partition order, so the output is in file order and
    the driver's memory stays bounded however large the file. The cluster
    (a local one unless ``scheduler`` is given) lives as long as the
    generator.
    """
    from .dask_engine import dask_client

    name = str(path)
    ddf = _read_all(name, float_columns)
    text_features = [] if _is_parquet(name) else list(float_columns)
    missing = [c for c in float_columns if c not in ddf.columns]
    if missing:
        raise AfterlookError(f"{name} has no column {', '.join(repr(c) for c in missing)}")

    def scored() -> Iterator[tuple[pd.DataFrame, Any]]:
        import dask

        rows = 0
        with dask_client(scheduler) as client:
            pending: deque = deque()
            parts = iter(ddf.to_delayed())
            done = 0
            while True:
                for part in parts:
                    task = dask.delayed(_score_partition)(part, score_table, name, id_col, label_col, text_features)
                    pending.append(client.compute(task))
                    if len(pending) >= window:
                        break
                if not pending:
                    break
                future = pending.popleft()
                try:
                    frame, counts = future.result()
                except AfterlookError:
                    raise
                except (ValueError, TypeError, OSError, KeyError) as exc:
                    raise AfterlookError(f"dask could not read {name}: "
                                         f"{' '.join(str(exc).split())[:200]}") from None
                done += 1
                rows += len(frame)
                if progress is not None:
                    progress(rows, done)
                yield frame, counts

    return None, scored()
