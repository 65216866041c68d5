"""The files a command reads, loaded the same way for every command."""

from __future__ import annotations

from ..analysis.model import load_model
from ..analysis.session import Session
from ..store.tables import load_table


def open_session(args, *, require_labels: bool = True) -> Session:
    """The session of ``MODEL CASES [--train TRAIN]`` with the shared table options."""
    model = load_model(args.model)
    cases = load_table(args.cases, id_col=args.id_col, label_col=args.label_col, require_labels=require_labels)
    train = getattr(args, "train", None)
    train = load_table(train, id_col=args.id_col, label_col=args.label_col) if train else None
    return Session(model, cases, train)
