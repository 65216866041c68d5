"""The afterlook workbench (Textual).

One app factory, :func:`create_app`, is shared by the CLI (``afterlook
review``, ``afterlook demo``) and the tests, so what the tests drive is what
users run.
"""

from __future__ import annotations

__all__ = ["create_app", "launch", "run_workbench"]


def create_app(model_path, cases_path, *, train_path=None, casebook=None, id_col=None, label_col=None,
               auto_candidates: bool = True, **table):
    """Load everything the workbench needs and return the (not yet running) App.

    Raises :class:`~afterlook.core.errors.AfterlookError` for bad input before
    anything is drawn, so the CLI can print one line and exit 2.
    ``casebook`` defaults to ``casebook.json`` next to the cases file;
    ``table`` holds the other table options (encoding, delimiter, decimal).
    """
    from ..analysis.workbench import open_session
    from .app import WorkbenchApp

    session = open_session(model_path, cases_path, train_path=train_path, casebook=casebook, id_col=id_col,
                           label_col=label_col, **table)
    return WorkbenchApp(session, auto_candidates=auto_candidates)


def launch(model_path, cases_path, train_path=None, casebook=None, *, id_col=None, label_col=None,
           demo: bool = False, **table) -> int:
    """Run the workbench in this terminal until the user quits; returns the exit code (0)."""
    app = create_app(model_path, cases_path, train_path=train_path, casebook=casebook, id_col=id_col,
                     label_col=label_col, **table)
    return run_workbench(app, demo=demo)


def run_workbench(app, *, demo: bool = False, out=None) -> int:
    """Run ``app``; once it closes, print what was saved and the next commands (see :mod:`.closing`).

    ``demo``: the book sits in the demo folder, so a book left by an earlier
    demo session is pointed out (a user's own book never is).
    """
    import sys

    from .closing import closing_lines

    session = app.session
    book = session.casebook_path
    before = _book_size(book)
    code = app.run()
    trial = getattr(app, "trial", None)
    tried = "=".join(trial.derive[0]) if trial is not None and len(trial.derive) == 1 else None
    lines = closing_lines(getattr(app, "saved_this_session", []), book, _book_size(book) or 0,
                          reused=before if demo else None, model_path=session.model_path,
                          cases_path=session.cases_path, tried=tried)
    stream = out or sys.stdout
    for line in lines:
        print(line, file=stream)
    return 0 if code is None else int(code)


def _book_size(path) -> int | None:
    """Entries in the casebook at ``path``; None when there is no readable book there."""
    import os

    from ..core.errors import AfterlookError
    from ..store.casebook_file import Casebook

    if not os.path.isfile(path):
        return None
    try:
        return len(Casebook.open(path, create=False))
    except AfterlookError:
        return None
