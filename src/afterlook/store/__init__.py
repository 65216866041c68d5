"""Files afterlook reads and writes: tables (CSV/Parquet, chunked), model files, casebooks.

Names are imported lazily so that the casebook and model-file layers load
without pandas and pyarrow.
"""

_EXPORTS = {
    "LABEL_VALUES": "afterlook.store.tables",
    "Table": "afterlook.store.tables",
    "iter_numeric_chunks": "afterlook.store.tables",
    "load_table": "afterlook.store.tables",
    "table_from_frame": "afterlook.store.tables",
    "sha256_file": "afterlook.store.tables",
    "write_table": "afterlook.store.tables",
}

__all__ = list(_EXPORTS)


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'afterlook.store' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value
