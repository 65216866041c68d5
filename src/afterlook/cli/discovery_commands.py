"""`afterlook suggest` and `afterlook try`: argument parsing and output only."""

from __future__ import annotations

import math

from ..core.errors import AfterlookError
from ..analysis import shown
from ..analysis.wording import (UNIT_FUNCTIONS_WORDS, candidate_verdict, flag_word, flip_words, heldout_gain_text,
                                kind_words, stability_text)
from ..core.errors import EXIT_OK
from .inputs import table_options
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
    p.add_argument("--context", metavar="TABLE", help="readings before the cases (their units' past for lag and "
                   "rolling_median), when CASES holds only the labelled rows")
    p.add_argument("--force", action="store_true", help="replace an existing afterlook model file at --out")
    p.add_argument("--holdout", metavar="TABLE",
                   help="labelled cases kept apart: threshold picked on CASES, held-out metrics counted here "
                        "(default: stratified 5-fold over CASES)")
    p.add_argument("--folds", type=int, default=5, help="folds of the held-out estimate (default 5)")
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
    from .progress import stage_progress

    with stage_progress(args, "searching") as progress:
        result = suggest(session, None, case_ids=args.case_ids or None, top=args.top,
                         settings=settings, shaping=not args.no_shaping, progress=progress)
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
    from rich.text import Text

    head = Text()
    targets = ", ".join(result.cases[:3]) + (f" and {len(result.cases) - 3} more" if len(result.cases) > 3 else "")
    head.append(f"candidates for {targets}", style="bold")
    head.append(f"\n{result.tried} candidates tried on {result.sample_rows} normal rows ({result.training_source})")
    folds = f"{result.heldout_folds}-fold" if result.heldout_folds else "K-fold"
    note = Text(suggest_legend(result, folds), style="dim")
    verdict = Text(result.verdict(), style="bold green" if result.any_beyond_chance else "bold yellow")
    recommended = Text("recommended: ", style="bold")
    recommended.append(result.recommended_reason() if result.recommended else f"none ({result.recommended_reason()})",
                       style="bold green" if result.recommended else "yellow")
    verdict = Group(verdict, recommended)
    return Group(head, CandidateRows(result), verdict, note)


#: Widest unbreakable piece of an expression (a name with its call, e.g. ``unit_median(suction_bar))``)
#: the table keeps whole; a longer one is folded.
_TOKEN_CAP = 36
_VERDICT_STYLES = {"holds-up": "bold green", "exposes-only": "yellow", "chance": "dim", "hurts": "red"}


class CandidateRows:
    """The ranked candidates, laid out for the width they are drawn at (a Rich renderable).

    Wide enough for every number, the verdict and the longest piece of an expression: one table,
    the expression wrapped only at its spaces. Narrower (an 80-column terminal): each candidate's
    numbers and verdict on one aligned line and its expression beneath, across the whole width.
    Either way no number or verdict is cut and no name is broken (up to ``_TOKEN_CAP`` characters).
    """

    HEADERS = ("#", "case z", "adj tail", "caught", "+FA", "held-out F1", "found", "verdict")

    def __init__(self, result):
        n_targets = len(result.cases)
        self.headers = list(self.HEADERS)
        if n_targets != 1:
            self.headers[1] = "median case z"  # several targets: the median of their z
        self.rows = []
        for k, c in enumerate(result.candidates, 1):
            fa = "n/a" if c.false_alarms_added is None else f"{c.false_alarms_added:+d}"
            caught = "n/a" if c.catches_targets is None else f"{c.catches_targets}/{n_targets}"
            cells = [str(k), shown.z(c.case_z), shown.tail(c.adjusted_tail), caught, fa, heldout_gain_text(c),
                     stability_text(c), candidate_verdict(c)]
            self.rows.append((cells, _VERDICT_STYLES.get(c.verdict, "dim"), c.expression, kind_words(c.kind)))

    def _expression(self, expression: str, words: str | None):
        from rich.text import Text

        t = Text(expression, overflow="fold")
        if words:  # a unit kind: what it compares, in words
            t.append(f"\n({words})", style="dim")
        return t

    def widths(self) -> list[int]:
        return [max([len(h)] + [len(r[0][j]) for r in self.rows]) for j, h in enumerate(self.headers)]

    def longest_piece(self) -> int:
        pieces = [len(p) for r in self.rows for p in r[2].split()]
        return min(max(pieces + [10]), _TOKEN_CAP)

    def wide_width(self) -> int:
        """Columns the one-table layout needs: SIMPLE_HEAD without edge padding puts three cells between
        columns (a cell of padding, its blank divider, a cell of padding)."""
        w = self.widths()
        return sum(w) + self.longest_piece() + 3 * len(w)

    def __rich_console__(self, console, options):
        if options.max_width >= self.wide_width():
            yield self._table()
        else:
            yield from self._stacked(options.max_width)

    def _table(self):
        from rich import box
        from rich.table import Table
        from rich.text import Text

        table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
        table.add_column(self.headers[0], justify="right", style="dim")
        table.add_column("expression", ratio=1, min_width=self.longest_piece())
        for h in self.headers[1:-1]:
            table.add_column(h, justify="right", no_wrap=True)
        table.add_column(self.headers[-1], no_wrap=True)
        for cells, style, expression, words in self.rows:
            table.add_row(cells[0], self._expression(expression, words), *cells[1:-1], Text(cells[-1], style=style))
        return table

    def _stacked(self, width: int):
        from rich.padding import Padding
        from rich.text import Text

        w = self.widths()
        # Narrower still than the numbers and the verdict (under about 70 columns): the verdict gets a
        # line of its own under the numbers, never a word split from the rest.
        own_line = sum(w) + 2 * (len(w) - 1) > width
        shown_cols = len(w) - 1 if own_line else len(w)

        def line(cells, styles):
            t = Text()
            for j, (cell, st) in enumerate(zip(cells[:shown_cols], styles)):
                if j:
                    t.append("  ")
                last = j == len(w) - 1
                t.append(cell if last else (cell.ljust(w[j]) if j == 0 else cell.rjust(w[j])), style=st)
            return t

        header = line(self.headers, ["bold"] * len(self.headers))
        yield header
        yield Text("─" * min(width, header.cell_len), style="dim")
        indent = w[0] + 2
        for cells, style, expression, words in self.rows:
            yield line(cells, ["dim"] + [""] * (len(cells) - 2) + [style])
            if own_line:
                yield Padding(Text(cells[-1], style=style), (0, 0, 0, indent))
            yield Padding(self._expression(expression, words), (0, 0, 0, indent))


_VERDICT_WORDS = {
    "holds-up": "holds up = beyond chance and better on held-out cases (no fold worse, more calls turned right "
                "than noise explains)",
    "exposes-only": "exposes only = beyond chance without a held-out gain",
    "chance": "could be chance",
    "hurts": "hurts = worse on held-out cases",
}


def suggest_legend(result, folds: str) -> str:
    """The table's legend: every column, and only the verdicts that appear in it."""
    several = len(result.cases) > 1
    parts = [
        "median case z: the median over the target cases of each one's robust z (median, MAD) under the normal "
        "population (--json lists each case's)" if several else
        "case z: robust z (median, MAD) of the case under the normal population",
        "adj tail: chance of a value this extreme over every candidate tried"
        + (" (for several cases: of this many cases being this unusual)" if several else ""),
        "caught: target misses flagged after a re-fit with the feature",
        "+FA: false alarms that re-fit adds",
        f"held-out F1: F1 change on cases the threshold was not picked on ({folds})",
        "found: fold searches that found the candidate again",
    ]
    if any(kind_words(c.kind) for c in result.candidates):
        parts.append(UNIT_FUNCTIONS_WORDS)
    seen = [v for v in _VERDICT_WORDS if any(c.verdict == v for c in result.candidates)]
    if seen:
        parts.append("verdicts: " + ", ".join(_VERDICT_WORDS[v] for v in seen))
    return "; ".join(parts)


def run_try(args) -> int:
    from ..analysis.trial import try_features
    from ..core.recipe import parse_assignment
    from .inputs import open_session

    pairs = [parse_assignment(d, "--derive") for d in args.derive]
    if args.out:
        from ..store.outputs import check_output

        check_output(args.out, kind="model", inputs=[args.model, args.cases, args.train, args.holdout],
                     force=args.force)
    session = open_session(args)
    if args.folds < 2:
        raise AfterlookError(f"--folds must be at least 2, got {args.folds}")
    holdout = None
    if args.holdout:
        from ..store.tables import load_table

        holdout = load_table(args.holdout, **table_options(args), require_labels=True)
    from .progress import busy

    with busy(args, "re-fitting and the held-out estimate"):
        result = try_features(session, None, pairs, focus=args.case, holdout=holdout, folds=args.folds)
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


def heldout_line(h) -> str:
    """The held-out estimate in one line (the in-sample rows above re-pick the threshold on the same cases)."""
    if h is None:
        return "held-out: not estimated (too few labelled cases); the in-sample numbers above are optimistic"
    where = f"{h.folds}-fold over the cases" if h.method == "kfold" else "on the holdout table"
    spread = f", folds {h.gain_low:+.3f} to {h.gain_high:+.3f}" if h.method == "kfold" else ""
    return (f"held-out ({where}): F1 {h.f1_before:.3f} -> {h.f1_after:.3f} (gain {h.gain:+.3f}{spread}); "
            f"recall at the model's false-alarm rate {h.false_alarm_rate:.1%}: "
            f"{h.recall_before_at_rate:.3f} -> {h.recall_after_at_rate:.3f}")


def try_table(result):
    from rich import box
    from rich.table import Table
    from rich.text import Text

    from rich.console import Group

    d = result.to_dict()
    head = Text("try " + ", ".join(f"{n} = {e}" for n, e in result.derive), style="bold")
    head.append(f"\nre-fitted on {result.training_source}")
    t = Table(box=box.SIMPLE_HEAD, show_edge=False)
    t.add_column("")
    for col in ("threshold", "tp", "fp", "fn", "tn", "precision", "recall", "F1"):
        t.add_column(col, justify="right", no_wrap=True)
    for label, m in (("before", d["before"]), ("after", d["after"])):
        t.add_row(label, shown.threshold(m["threshold"]), str(m["tp"]), str(m["fp"]), str(m["fn"]), str(m["tn"]),
                  shown.share(m["precision"]), shown.share(m["recall"]), shown.share(m["f1"]))
    summary = Text(f"misses caught: {d['misses_caught']}; false alarms added: {d['false_alarms_added']:+d}",
                   style="bold")
    summary.append("\n" + heldout_line(result.heldout))
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
    return f"{shown.log_density(side['log_density'])} {flag_word(side['flagged'])}"
