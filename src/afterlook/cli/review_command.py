"""`afterlook review MODEL CASES`: open the workbench (Textual) on a model and its labelled cases.

Bad input (a missing file, cases without labels, an unknown column ...) is
reported before anything is drawn, as one line with exit code 2, like every
other command. Without a terminal the workbench cannot run; the command says
so and points at the scriptable commands. ``--json`` prints what the
workbench would open on (the status line's numbers) and does not start it.
"""

from __future__ import annotations

import sys

from ..core.errors import AfterlookError
from ..core.errors import EXIT_OK
from .output import emit_json

DESCRIPTION = (
    "Open the workbench: misses worst margin first, the evidence for each, candidate derived features "
    "computed in the background, histograms, a try (re-fit and re-score) with a before/after comparison, "
    "and saving reviewed cases to the casebook. Press ? inside for every key."
)


def register(sub, add_common, add_table_opts, caution) -> dict:
    p = sub.add_parser("review", help="the workbench (terminal UI) for reviewing misses",
                       description=DESCRIPTION, epilog=caution)
    p.add_argument("model", metavar="MODEL")
    p.add_argument("cases", metavar="CASES", help="labelled cases (CSV or Parquet)")
    p.add_argument("--train", metavar="TRAIN",
                   help="normal population for re-fits (default: the model's recorded training file)")
    p.add_argument("--casebook", metavar="BOOK", help="casebook file (default: casebook.json next to CASES)")
    add_table_opts(p)
    add_common(p)
    return {"review": run}


def run(args) -> int:
    from ..tui import create_app

    from ..store.outputs import refuse_input_as_book
    from .inputs import table_options

    refuse_input_as_book(args.casebook, [args.model, args.cases, args.train])
    app = create_app(args.model, args.cases, train_path=args.train, casebook=args.casebook, **table_options(args),
                     unit_col=args.unit_col, time_col=args.time_col)
    if args.json:
        from ..analysis.workbench import status_summary

        doc = status_summary(app.session).to_dict()
        doc["casebook"] = app.session.casebook_path
        emit_json(doc)
        return EXIT_OK
    if not (sys.stdin.isatty() and sys.stdout.isatty()):
        raise AfterlookError("afterlook review needs a terminal; for scripts use afterlook misses, explain, "
                             "suggest, try or casebook add (each with --json)")
    from ..tui import run_workbench

    return run_workbench(app)
