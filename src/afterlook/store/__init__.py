"""Files afterlook reads and writes: tables of cases (CSV/Parquet, chunked)."""

from afterlook.store.tables import (
    LABEL_VALUES,
    Table,
    iter_numeric_chunks,
    load_table,
    table_from_frame,
    sha256_file,
    write_table,
)

__all__ = [
    "LABEL_VALUES",
    "Table",
    "iter_numeric_chunks",
    "load_table",
    "table_from_frame",
    "sha256_file",
    "write_table",
]
