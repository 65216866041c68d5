"""The files a command reads, loaded the same way for every command."""

from __future__ import annotations

from ..core.errors import AfterlookError

TABLE_OPTIONS = ("id_col", "label_col", "encoding", "delimiter", "decimal")


def table_options(args) -> dict:
    """The shared table options of a command (--id-col, --label-col, --encoding, --delimiter, --decimal)."""
    return {name: getattr(args, name, None) for name in TABLE_OPTIONS}


def open_session(args, *, require_labels: bool = True):
    """The :class:`~afterlook.analysis.session.Session` of ``MODEL CASES [--train TRAIN]`` with the table options."""
    from ..analysis.model import load_model
    from ..analysis.session import Session
    from ..store.tables import load_table

    from ..analysis.unit_rows import apply_unit_options

    context = getattr(args, "context", None)
    context = load_table(context, **table_options(args)) if context else None
    model = apply_unit_options(load_model(args.model), getattr(args, "unit_col", None), getattr(args, "time_col", None),
                               context)
    cases = load_table(args.cases, **table_options(args), require_labels=require_labels)
    train = getattr(args, "train", None)
    train = load_table(train, **table_options(args)) if train else None
    return Session(model, cases, train)


def check_streamed_options(args) -> None:
    """The table options the streamed engines (``--engine chunked|dask``) cannot honour, refused in one line."""
    if args.engine == "chunked" and args.scheduler:
        raise AfterlookError("--scheduler needs --engine dask")
    if getattr(args, "unit_col", None) or getattr(args, "time_col", None):
        raise AfterlookError("--unit-col and --time-col need the memory engine; drop --engine")
    if args.encoding or args.delimiter or args.decimal:
        raise AfterlookError("--encoding, --delimiter and --decimal need the memory engine (the streamed "
                             "engines read UTF-8 CSV with its usual separator); drop --engine or save as UTF-8")
    if args.chunk_rows < 1:
        raise AfterlookError("--chunk-rows must be at least 1")
