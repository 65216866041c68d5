"""What the terminal shows after the workbench closes: what was saved, and the next commands.

The workbench draws on the alternate screen, so once it closes nothing of it
remains; these lines are printed on the normal screen so that a user leaving
it knows where their casebook is and how to go on from the shell.
"""

from __future__ import annotations

import os
import shlex

__all__ = ["closing_lines", "shell_path"]


def shell_path(path) -> str:
    """``path`` as a user would type it here: relative to the working folder when inside it, shell-quoted."""
    text = os.fspath(path)
    try:
        rel = os.path.relpath(text)
        if not rel.startswith(os.pardir):
            text = rel
    except ValueError:  # another drive (Windows)
        pass
    return shlex.quote(text)


def closing_lines(saved: list[str], book_path, book_size: int, *, reused: int | None = None,
                  model_path=None, cases_path=None, tried: str | None = None) -> list[str]:
    """Lines to print once the workbench has closed.

    ``saved``: case ids saved during the session (in order, repeats removed
    by the caller or here); ``book_size``: entries in the book now;
    ``reused``: entries the book already held when the session began (None
    when it was new); ``tried``: the last ``NAME=EXPR`` tried, if any.
    """
    book = shell_path(book_path)
    seen = list(dict.fromkeys(saved))
    lines = []
    if seen:
        shown = ", ".join(seen[:3]) + (f" and {len(seen) - 3} more" if len(seen) > 3 else "")
        lines.append(f"workbench closed: {len(seen)} case(s) saved to {book} this session ({shown}); "
                     f"the book holds {book_size} case(s)")
    elif book_size:
        lines.append(f"workbench closed: nothing saved this session; {book} holds {book_size} case(s)")
    else:
        lines.append("workbench closed: nothing saved (no casebook written)")
    if reused:
        lines.append(f"the casebook {book} already held {reused} case(s) from an earlier session; "
                     "delete or move it to start afresh")
    lines.append("next:")
    if book_size:
        lines.append(f"  afterlook casebook list {book}")
        lines.append(f"  afterlook casebook report {book} --format html --out review.html")
    if model_path is not None and cases_path is not None:
        model, cases = shell_path(model_path), shell_path(cases_path)
        if tried:
            lines.append(f"  afterlook try {model} {cases} --derive {shlex.quote(tried)} --out model-new.json")
            if book_size:
                lines.append(f"  afterlook casebook check {book} --model model-new.json --cases {cases}")
        else:
            lines.append(f"  afterlook suggest {model} {cases}")
    lines.append("  afterlook --help")
    return lines
