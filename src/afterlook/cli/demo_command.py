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
# The demo model's recipe, as a practitioner would have set it up: hydraulic
# power as a derived feature, and the skewed service counter log-shaped.
DEMO_DERIVE = {"hydraulic_power": "flow_m3h * (discharge_bar - suction_bar)"}
DEMO_TRANSFORM = {"hours_since_service": "log(hours_since_service + 1)"}


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
    model = api.fit(train, cases=cases, kind=DEMO_KIND, threshold="f1", derive=DEMO_DERIVE,
                    transform=DEMO_TRANSFORM)
    model.save(model_path)
    return train_path, cases_path, model_path


def analysis(model_path: Path, cases_path: Path, train_path: Path) -> dict:
    """The demo's analysis as data: misses, the worst explained, candidates for it, and the try."""
    from .. import api
    from ..discovery import suggest, try_features

    model = api.load_model(model_path)
    cases = api.load_table(cases_path, require_labels=True)
    train = api.load_table(train_path)
    result = api.misses(model, cases)
    doc = {"model": str(model_path), "cases": str(cases_path), "train": str(train_path),
           "misses": result.to_dict(), "worst": None, "suggest": None, "try": None}
    extras = {}
    if result.misses:
        worst = result.misses[0].case
        doc["worst"] = api.explain(model, cases, worst).to_dict()
        found = suggest(model, cases, train=train, case_ids=[worst], top=5)
        doc["suggest"] = found.to_dict()
        extras["suggest"] = found
        best = next((c for c in found.candidates if c.beyond_chance), None)
        if best is not None:
            tried = try_features(model, cases, {best.name: best.expression}, train=train, focus=[worst])
            doc["try"] = tried.to_dict()
            extras["try"] = tried
    return doc, model, cases, result, extras


def run(args) -> int:
    folder = Path(args.dir)
    train_path, cases_path, model_path = write_demo(folder, seed=args.seed)
    interactive = sys.stdout.isatty() and sys.stdin.isatty() and not args.no_tui and not args.json
    if interactive:
        # The workbench computes what it shows itself, in workers: open it at once.
        from ..tui import launch

        return launch(model_path, cases_path, train_path=train_path, casebook=None)
    doc, model, cases, result, extras = analysis(model_path, cases_path, train_path)
    if args.json:
        import json

        sys.stdout.write(json.dumps(doc, indent=2, allow_nan=False) + "\n")
        return EXIT_OK
    return print_analysis(doc, model, cases, result, folder, extras)


def print_analysis(doc, model, cases, result, folder: Path, extras: dict) -> int:
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
    return 0
