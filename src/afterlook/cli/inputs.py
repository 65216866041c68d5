"""The files a command reads, loaded the same way for every command."""

from __future__ import annotations

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
