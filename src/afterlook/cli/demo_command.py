"""`afterlook demo`: write the invented pump-station scenario and walk through it.

With a terminal the workbench opens; without one, or with ``--no-tui``, the
same analysis (:func:`afterlook.demo.writer.analysis`) is printed as text.
"""

from __future__ import annotations

import sys
from pathlib import Path

from ..demo.writer import analysis, write_demo
from ..core.errors import EXIT_OK
from .output import emit_json


def run(args) -> int:
    folder = Path(args.dir)
    train_path, cases_path, model_path = write_demo(folder, seed=args.seed)
    interactive = sys.stdout.isatty() and sys.stdin.isatty() and not args.no_tui and not args.json
    if interactive:
        # The workbench computes what it shows itself, in workers: open it at once.
        from ..tui import launch

        return launch(model_path, cases_path, train_path=train_path, casebook=None, demo=True)
    doc, model, cases, result, extras = analysis(model_path, cases_path, train_path)
    if args.json:
        emit_json(doc)
        return EXIT_OK
    return print_analysis(doc, model, cases, result, folder, extras)


def print_analysis(doc, model, cases, result, folder: Path, extras: dict) -> int:
    from ..analysis.evidence import explain
    from . import render

    out = render.console()
    out.rule("afterlook demo: booster pump stations (invented data)")
    out.print(f"wrote {folder / 'train.csv'}, {folder / 'cases.csv'}, {folder / 'model.json'}")
    out.print(render.model_line(model, doc["model"]))
    out.print()
    out.rule("1. misses: labelled failures the model scored as normal")
    out.print(render.misses_table(result, limit=10))
    if result.misses:
        worst = result.misses[0]
        out.print()
        out.rule(f"2. why did {worst.case} look normal?")
        out.print(render.explain_table(explain(model, cases, worst.case)))
        out.print()
        out.print("Every single feature sits inside its normal range, so a model that scores features one "
                  "at a time sees nothing unusual. The break is in a relation between features.")
        found = extras.get("suggest")
        if found is not None:
            from .discovery_commands import suggest_table, try_table

            out.print()
            out.rule("3. which derived feature would have exposed it?")
            out.print(suggest_table(found))
            tried = extras.get("try")
            if tried is not None:
                out.print()
                out.rule("4. try the best finding: re-fit, re-pick the threshold, re-score")
                out.print(try_table(tried))
    out.print()
    out.print("next: afterlook suggest / try / explain on these files (add --json for scripts); "
              "afterlook --help lists every command", style="dim")
    return EXIT_OK
