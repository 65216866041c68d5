"""`afterlook demo`: write the invented pump-station scenario and walk through it.

With a terminal (and once the workbench exists) the workbench opens; without
one, or with ``--no-tui``, the same analysis is printed as text. The demo
model is the *independent* Gaussian, the kind that misses failures whose
single features stay in range while their relations break.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

from ..core.errors import AfterlookError
from .exit_codes import EXIT_OK

DEMO_KIND = "independent"


def write_demo(folder: Path, seed: int = 7):
    """Write train.csv, cases.csv and model.json into ``folder``; return the paths."""
    from .. import api
    from ..demo import generate

    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise AfterlookError(f"cannot create demo folder {folder}: {exc.strerror or exc}") from None
    if not os.access(folder, os.W_OK):
        raise AfterlookError(f"cannot write into demo folder {folder}: permission denied")
    scenario = generate(seed=seed)
    train_path, cases_path, model_path = folder / "train.csv", folder / "cases.csv", folder / "model.json"
    from ..store.tables import write_table

    write_table(scenario.train, train_path)
    write_table(scenario.cases, cases_path)
    train = api.load_table(train_path)
    cases = api.load_table(cases_path, require_labels=True)
    model = api.fit(train, cases=cases, kind=DEMO_KIND, threshold="f1")
    model.save(model_path)
    return train_path, cases_path, model_path


def analysis(model_path: Path, cases_path: Path, train_path: Path) -> dict:
    """The demo's analysis as data: misses and the explanation of the worst."""
    from .. import api

    model = api.load_model(model_path)
    cases = api.load_table(cases_path, require_labels=True)
    result = api.misses(model, cases)
    doc = {"model": str(model_path), "cases": str(cases_path), "train": str(train_path),
           "misses": result.to_dict(), "worst": None}
    if result.misses:
        doc["worst"] = api.explain(model, cases, result.misses[0].case).to_dict()
    return doc, model, cases, result


def run(args) -> int:
    folder = Path(args.dir)
    train_path, cases_path, model_path = write_demo(folder, seed=args.seed)
    doc, model, cases, result = analysis(model_path, cases_path, train_path)
    if args.json:
        import json

        sys.stdout.write(json.dumps(doc, indent=2, allow_nan=False) + "\n")
        return EXIT_OK
    interactive = sys.stdout.isatty() and sys.stdin.isatty() and not args.no_tui
    if interactive:
        try:
            from ..tui import launch  # the workbench, when installed
        except ImportError:
            launch = None
        if launch is not None:
            return launch(model_path, cases_path, train_path=train_path, casebook=None)
    return print_analysis(doc, model, cases, result, folder)


def print_analysis(doc, model, cases, result, folder: Path) -> int:
    from .. import api
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
        out.print(render.explain_table(api.explain(model, cases, worst.case)))
        out.print()
        out.print("Every single feature is inside its normal range, so a model that scores features one at a "
                  "time sees nothing. Compare the relations between them:")
        full = api.fit(api.load_table(doc["train"]), cases=cases, kind="full", threshold="f1")
        out.print(render.explain_table(api.explain(full, cases, worst.case)))
    out.print()
    out.print(f"next: afterlook explain {doc['model']} {doc['cases']} CASE_ID   (or --json)", style="dim")
    return 0
