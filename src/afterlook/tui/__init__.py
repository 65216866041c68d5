"""The afterlook workbench (Textual).

One app factory, :func:`create_app`, is shared by the CLI (``afterlook
review``, ``afterlook demo``) and the tests, so what the tests drive is what
users run.
"""

from __future__ import annotations

__all__ = ["create_app", "launch"]


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


def launch(model_path, cases_path, train_path=None, casebook=None, *, id_col=None, label_col=None, **table) -> int:
    """Run the workbench in this terminal until the user quits; returns the exit code (0)."""
    app = create_app(model_path, cases_path, train_path=train_path, casebook=casebook, id_col=id_col,
                     label_col=label_col, **table)
    code = app.run()
    return 0 if code is None else int(code)
