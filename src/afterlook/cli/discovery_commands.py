"""`afterlook suggest` and `afterlook try`: argument parsing and output only."""

from __future__ import annotations

import math

from rich import box
from rich.table import Table
from rich.text import Text

from ..core.errors import AfterlookError
from ..analysis.wording import flip_words
from ..core.errors import EXIT_OK
from .output import emit_json, warn


def register(sub, add_common, add_table_opts, caution) -> dict:
    p = sub.add_parser("suggest", help="ranked candidate derived features that would expose misses", epilog=caution)
    p.add_argument("model", metavar="MODEL")
    p.add_argument("cases", metavar="CASES")
    p.add_argument("case_ids", nargs="*", metavar="CASE_ID", help="target misses (default: every miss)")
    p.add_argument("--train", metavar="TRAIN", help="normal population (default: the model's recorded training file)")
    p.add_argument("--top", type=int, default=10, help="candidates to list (default 10)")
    p.add_argument("--sample", type=int, default=50_000, help="normal rows sampled for the first pass (default 50000)")
    p.add_argument("--min-correlation", type=float, default=0.3, help="pairs at |r| >= this are preferred (default 0.3)")
    p.add_argument("--alarm-rate", type=float, default=0.01,
                   help="false-alarm rate at which other anomalies count as separated (default 0.01)")
    p.add_argument("--no-shaping", action="store_true", help="skip candidates over shaped columns")
    add_table_opts(p)
    add_common(p)

    p = sub.add_parser("try", help="re-fit with derived feature(s), re-score, before/after", epilog=caution)
    p.add_argument("model", metavar="MODEL")
    p.add_argument("cases", metavar="CASES")
    p.add_argument("--derive", action="append", default=[], required=True, metavar="NAME=EXPR",
                   help="derived feature to add (repeatable)")
    p.add_argument("--train", metavar="TRAIN", help="normal population (default: the model's recorded training file)")
    p.add_argument("--case", action="append", default=[], metavar="CASE_ID", help="always list this case (repeatable)")
    p.add_argument("--out", metavar="NEW_MODEL", help="write the re-fitted model with the feature in its recipe")
    add_table_opts(p)
    add_common(p)
    return {"suggest": run_suggest, "try": run_try}


def run_suggest(args) -> int:
    from ..analysis.discovery import suggest
    from ..core.candidates import Settings
    from .inputs import open_session

    if args.top < 1:
        raise AfterlookError("--top must be at least 1")
    if not 0 < args.alarm_rate < 1:
        raise AfterlookError("--alarm-rate must lie strictly between 0 and 1")
    if args.sample < 100:
        raise AfterlookError("--sample must be at least 100 rows")
    session = open_session(args)
    settings = Settings(sample_size=args.sample, min_correlation=args.min_correlation, alarm_rate=args.alarm_rate)
    result = suggest(session, None, case_ids=args.case_ids or None, top=args.top,
                     settings=settings, shaping=not args.no_shaping)
    warn(result.warnings)
    if args.json:
        emit_json(result.to_dict())
        return EXIT_OK
    from . import render

    out = render.console()
    out.print(render.model_line(session.model, args.model))
    out.print(suggest_table(result))
    return EXIT_OK


def suggest_table(result):
    from rich.console import Group

    head = Text()
    targets = ", ".join(result.cases[:3]) + (f" and {len(result.cases) - 3} more" if len(result.cases) > 3 else "")
    head.append(f"candidates for {targets}", style="bold")
    head.append(f"\n{result.tried} candidates tried on {result.sample_rows} normal rows ({result.training_source})")
    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
    table.add_column("#", justify="right", style="dim")
    table.add_column("expression", overflow="fold", ratio=1, min_width=18)
    table.add_column("case z", justify="right", no_wrap=True)
    table.add_column("adj tail", justify="right", no_wrap=True)
    table.add_column("others", justify="right", no_wrap=True)
    table.add_column("caught", justify="right", no_wrap=True)
    table.add_column("+FA", justify="right", no_wrap=True)
    table.add_column("verdict", no_wrap=True)
    n_targets = len(result.cases)
    for k, c in enumerate(result.candidates, 1):
        fa = "n/a" if c.false_alarms_added is None else f"{c.false_alarms_added:+d}"
        caught = "n/a" if c.catches_targets is None else f"{c.catches_targets}/{n_targets}"
        z = f"{c.case_z:+.1f}" if math.isfinite(c.case_z) else "n/a"
        style = "bold green" if c.beyond_chance else "dim"
        table.add_row(str(k), c.expression, z, f"{c.adjusted_tail:.2g}",
                      f"{c.other_anomalies_separated}/{c.other_anomalies}", caught, fa,
                      Text("finding" if c.beyond_chance else "chance?", style=style))
    note = Text("case z: robust z (median, MAD) of the case under the normal population; adj. tail: chance of a "
                "value this extreme, Bonferroni-adjusted over every candidate tried; others: other labelled "
                "anomalies separated at the alarm rate; caught: target misses flagged after a re-fit with the feature; "
                "+FA: false alarms that re-fit adds; chance?: not beyond what chance explains",
                style="dim")
    verdict = Text(result.verdict(), style="bold green" if result.any_beyond_chance else "bold yellow")
    return Group(head, table, verdict, note)


def run_try(args) -> int:
    from ..analysis.trial import try_features
    from ..core.recipe import parse_assignment
    from .inputs import open_session

    pairs = [parse_assignment(d, "--derive") for d in args.derive]
    if args.out:
        from ..store.atomic import check_writable

        check_writable(args.out)
    session = open_session(args)
    result = try_features(session, None, pairs, focus=args.case)
    warn(result.warnings)
    if args.out:
        result.model.save(args.out)
    if args.json:
        doc = result.to_dict()
        if args.out:
            doc["out"] = args.out
        emit_json(doc)
        return EXIT_OK
    from . import render

    out = render.console()
    out.print(render.model_line(session.model, args.model))
    out.print(try_table(result))
    if args.out:
        out.print(f"wrote {args.out} (recipe now: {', '.join(result.model.features)})")
    return EXIT_OK


def try_table(result):
    from rich.console import Group

    d = result.to_dict()
    head = Text("try " + ", ".join(f"{n} = {e}" for n, e in result.derive), style="bold")
    head.append(f"\nre-fitted on {result.training_source}")
    t = Table(box=box.SIMPLE_HEAD, show_edge=False)
    t.add_column("")
    for col in ("threshold", "tp", "fp", "fn", "tn", "precision", "recall", "F1"):
        t.add_column(col, justify="right", no_wrap=True)
    for label, m in (("before", d["before"]), ("after", d["after"])):
        t.add_row(label, f"{m['threshold']:.3f}", str(m["tp"]), str(m["fp"]), str(m["fn"]), str(m["tn"]),
                  f"{m['precision']:.3f}", f"{m['recall']:.3f}", f"{m['f1']:.3f}")
    summary = Text(f"misses caught: {d['misses_caught']}; false alarms added: {d['false_alarms_added']:+d}",
                   style="bold")
    flips = Table(box=box.SIMPLE_HEAD, show_edge=False, title="cases listed (flag changed, or asked for)")
    flips.add_column("case", no_wrap=True)
    flips.add_column("label")
    flips.add_column("before", justify="right", no_wrap=True)
    flips.add_column("after", justify="right", no_wrap=True)
    flips.add_column("change")
    for row in d["cases"][:25]:
        b, a = row["before"], row["after"]
        change = flip_words(b["flagged"], a["flagged"])
        flips.add_row(row["case"], row["label"], _ld(b), _ld(a), change)
    parts = [head, t, summary, flips]
    if len(d["cases"]) > 25:
        parts.append(Text(f"... {len(d['cases']) - 25} more (use --json)", style="dim"))
    return Group(*parts)


def _ld(side) -> str:
    ld = side["log_density"]
    flag = "flagged" if side["flagged"] else "-"
    return ("n/a" if ld is None else f"{ld:.2f}") + f" {flag}"
