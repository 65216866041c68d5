"""Command line: the parser, its command registry, dispatch and one-line errors. No numerics.

Every command accepts ``--json`` (one JSON document on stdout, nothing
else; :mod:`afterlook.cli.output`). Errors are one line on stderr. Exit
codes are in :mod:`afterlook.core.errors`.
"""

from __future__ import annotations

import argparse
import os
import sys
import warnings

from .. import _version
from ..cautions import CAUTION
from ..core.blas import environment_for_new_process, limited_blas, note_environment
from ..core.heap import HUGEPAGE_ENV
from ..core.errors import EXIT_BAD_INPUT, EXIT_CHECK_FAILED, EXIT_INTERNAL, EXIT_INTERRUPTED, EXIT_OK, AfterlookError
from ..store.outputs import check_output
from .allocator import keep_freed_memory
from .inputs import table_options
from .output import emit_json, error_line, metrics_lines, saved_model_summary, warn


class _Parser(argparse.ArgumentParser):
    """argparse that reports a usage error as one line and exit code 2, and takes a command's
    positionals wherever they are written (``suggest MODEL CASES --train T CASE_ID`` as well as
    ``suggest MODEL CASES CASE_ID --train T``): plain argparse stops filling ``CASE_ID ...``
    at the first option and then calls the case id an unrecognised argument."""

    _intermixing = False

    def error(self, message: str):  # noqa: D401 - argparse API
        where = self.prog.removeprefix("afterlook").strip()
        raise AfterlookError(f"{where + ': ' if where else ''}{message} (see '{self.prog} --help')")

    def parse_known_args(self, args=None, namespace=None):
        # argparse's intermixed parsing calls parse_known_args itself (the flag stops the recursion), and
        # refuses a parser whose positionals include sub-commands: those parse as before
        if self._intermixing or any(a.nargs in (argparse.PARSER, argparse.REMAINDER)
                                    for a in self._get_positional_actions()):
            return super().parse_known_args(args, namespace)
        self._intermixing = True
        try:
            return self.parse_known_intermixed_args(args, namespace)
        finally:
            self._intermixing = False


def _add_common(p: argparse.ArgumentParser) -> None:
    p.add_argument("--json", action="store_true", help="print one JSON document on stdout and nothing else")


#: Commands that take --unit-col / --time-col (recorded in the model at fit).
UNIT_COMMANDS = ("fit", "suggest", "try", "review", "score", "misses", "explain")


def _add_table_opts(p: argparse.ArgumentParser) -> None:
    if isinstance(p, _Unused):
        return
    if p.prog.split()[-1] in UNIT_COMMANDS:
        p.add_argument("--unit-col", metavar="COL", help="the unit (machine) of each row: unit_median(x), "
                       "unit_scale(x) (default: the one recorded in the model)")
        p.add_argument("--time-col", metavar="COL", help="the time of each row (ISO 8601 or a number) ordering a "
                       "unit's readings: lag(x, k), rolling_median(x, n) (default: the one recorded in the model)")
    p.add_argument("--id-col", help="id column (default: 'id' if present, else row number)")
    p.add_argument("--label-col", help="label column (default: 'label'; values 1/0, true/false, anomaly/normal, yes/no)")
    p.add_argument("--encoding", help="text encoding of CSV tables (default utf-8; e.g. latin-1, cp1252)")
    p.add_argument("--delimiter", help="CSV field separator (default: by extension, ',' or tab for .tsv; e.g. ';')")
    p.add_argument("--decimal", choices=(".", ","), help="decimal mark of numbers written as text (',' reads 10,5)")


#: The top-level --help's examples, on the invented demo; tests/docs/test_readme_runs.py runs every
#: line that starts with "  afterlook " in order, in a fresh folder, as a reader would.
EXAMPLES = """examples (the invented pump-station demo, written to pumps/):
  afterlook demo --dir pumps --no-tui
  afterlook misses pumps/model.json pumps/cases.csv
  afterlook explain pumps/model.json pumps/cases.csv PS-01/2026-05-21T17:00
  afterlook suggest pumps/model.json pumps/cases.csv PS-01/2026-05-21T17:00 --top 5
  afterlook try pumps/model.json pumps/cases.csv --derive "ratio=motor_current_a / hydraulic_power" --out new.json
  afterlook casebook add book.json --model pumps/model.json --cases pumps/cases.csv \\
      --case PS-01/2026-05-21T17:00 --status explained --derive "ratio=motor_current_a / hydraulic_power"
  afterlook casebook check book.json --model new.json --cases pumps/cases.csv
  afterlook review pumps/model.json pumps/cases.csv   (the workbench, in a terminal)"""

#: The environment variables afterlook reads, for the top-level --help.
ENVIRONMENT = """environment:
  AFTERLOOK_BLAS_THREADS  threads for afterlook's linear algebra: N (default 1)
                          or auto, to leave the BLAS library's own setting
  AFTERLOOK_CACHE_DIR     where the candidate search (suggest, the workbench)
                          remembers its shaping choices between runs; default
                          ~/.cache/afterlook or $XDG_CACHE_HOME/afterlook, off
                          for none; safe to delete at any time
  AFTERLOOK_DEBUG         1: show the traceback of an internal error
  NUMPY_MADVISE_HUGEPAGE  numpy's own huge-page advice for large arrays;
                          afterlook turns it off (0) unless it is set
  TEXTUAL_ANIMATIONS      the workbench's animations: none unless it is set
                          (full or basic bring them back)"""


#: The module that registers each command (this one registers demo, fit, misses and explain itself).
_OWNER = {"score": "score_command", "shape": "shape_command", "suggest": "discovery_commands",
          "try": "discovery_commands", "casebook": "casebook_command", "review": "review_command",
          "model": "model_command"}
_OWN = ("demo", "fit", "misses", "explain")


class _Only:
    """Subcommands where only ``name`` gets its parser: a command line that names a command needs no other
    (building all of them and importing their modules took about 20 ms of a command's start)."""

    def __init__(self, sub, name: str):
        self._sub, self._name = sub, name

    def add_parser(self, name, **kwargs):
        return self._sub.add_parser(name, **kwargs) if name == self._name else _Unused()


class _Unused:
    """Stands in for the parser of a command that is not run: takes every call and ignores it."""

    def __getattr__(self, name):
        return lambda *args, **kwargs: self


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The whole command-line parser, or (``only``: a command's name) the same parser with that command
    alone (:func:`main` uses it when the command line names one; a test compares the two)."""
    import textwrap

    parser = _Parser(
        prog="afterlook",
        description="Find out why real failures scored as normal under a Gaussian anomaly detector, "
        "and which derived or transformed feature would have exposed them.",
        epilog=EXAMPLES + "\n\n" + ENVIRONMENT + "\n\n" + textwrap.fill(CAUTION, 79),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"afterlook {_version.__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    if only is not None:
        sub = _Only(sub, only)

    p = sub.add_parser("demo", help="write the invented pump-station demo and show the analysis", epilog=CAUTION)
    p.add_argument("--dir", default="afterlook-demo", help="folder for train.csv, cases.csv, model.json")
    p.add_argument("--no-tui", action="store_true", help="print the analysis as text instead of opening the workbench")
    p.add_argument("--seed", type=int, default=7, help="seed of the invented data (default 7)")
    _add_common(p)

    p = sub.add_parser("fit", help="fit a model on the normal rows of a table", epilog=CAUTION)
    p.add_argument("train", metavar="TRAIN", help="training table (CSV or Parquet)")
    p.add_argument("--out", required=True, metavar="MODEL", help="model file to write (JSON)")
    p.add_argument("--force", action="store_true", help="replace an existing afterlook model file at --out")
    p.add_argument("--cases", metavar="CASES", help="labelled cases on which to pick the threshold")
    p.add_argument("--kind", default="full", choices=("independent", "full"), help="independent or full (default full)")
    p.add_argument("--robust", action="store_true", help="minimum covariance determinant fit (resists masking)")
    p.add_argument("--shrinkage", help="ledoit-wolf or a number in [0, 1] (full model)")
    p.add_argument("--columns", nargs="+", metavar="COL", help="base columns (default: every numeric column)")
    p.add_argument("--derive", action="append", default=[], metavar="NAME=EXPR", help="derived feature (repeatable)")
    p.add_argument("--transform", action="append", default=[], metavar="COL=EXPR",
                   help="per-feature transform: an expression over COL, boxcox, yeojohnson, boxcox(0.3) (repeatable)")
    p.add_argument("--threshold", help="f1 | rate:R | value:V (default f1 with labelled cases, else rate:0.01)")
    p.add_argument("--undefined", choices=("flag", "skip"), default="flag",
                   help="a case whose feature is undefined on finite readings (a zero divisor, a log of a "
                        "non-positive value): flag it as outside the feature's domain (default) or leave it unscored")
    p.add_argument("--engine", default="memory", choices=("memory", "chunked", "dask"),
                   help="memory (default), chunked (files larger than memory) or dask (a Dask cluster)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="Dask scheduler address for --engine dask (default: a local cluster)")
    p.add_argument("--chunk-rows", type=int, default=262_144, help="rows per chunk for --engine chunked")
    _add_table_opts(p)
    _add_common(p)

    p = sub.add_parser("misses", help="labelled anomalies the model left unflagged, worst margin first", epilog=CAUTION)
    p.add_argument("model", metavar="MODEL")
    p.add_argument("cases", metavar="CASES")
    p.add_argument("--limit", type=int, default=30, help="rows in the table (default 30; --json lists all)")
    _add_table_opts(p)
    _add_common(p)

    p = sub.add_parser("explain", help="per-feature evidence for one case", epilog=CAUTION)
    p.add_argument("model", metavar="MODEL")
    p.add_argument("cases", metavar="CASES")
    p.add_argument("case_id", metavar="CASE_ID")
    p.add_argument("--train", metavar="TRAIN",
                   help="normal rows for the case's own-unit baseline, with --unit-col (default: the model's "
                        "recorded training file)")
    _add_table_opts(p)
    _add_common(p)

    import importlib

    # The command registry: each module adds its subcommands and returns their handlers.
    owners = dict.fromkeys(_OWNER.values()) if only is None else ([_OWNER[only]] if only in _OWNER else [])
    for name in owners:
        module = importlib.import_module(f".{name}", __package__)
        COMMANDS.update(module.register(sub, _add_common, _add_table_opts, CAUTION))
    return parser


# --------------------------------------------------------------------------
# commands
# --------------------------------------------------------------------------


def cmd_fit(args) -> int:
    from ..analysis import fitting
    from ..core.recipe import parse_assignment
    from ..store.tables import load_table

    derive = [parse_assignment(d, "--derive") for d in args.derive]
    transform = [parse_assignment(t, "--transform") for t in args.transform]
    check_output(args.out, kind="model", inputs=[args.train, args.cases], force=args.force)
    cases = load_table(args.cases, **table_options(args), require_labels=True) if args.cases else None
    if args.engine == "memory":
        if args.scheduler:
            raise AfterlookError("--scheduler needs --engine dask")
        from .progress import busy

        with busy(args, "reading and fitting"):
            train = load_table(args.train, **table_options(args))
            model = fitting.fit(train, cases=cases, kind=args.kind, robust=args.robust, shrinkage=args.shrinkage,
                                derive=derive, transform=transform, threshold=args.threshold, columns=args.columns,
                                undefined=args.undefined, unit_col=args.unit_col, time_col=args.time_col,
                                shaping=True)  # the model file carries the search's shaping choices
    else:
        if args.engine not in ("chunked", "dask"):
            raise AfterlookError(f"unknown --engine '{args.engine}' (choose: memory, chunked, dask)")
        if args.robust:
            raise AfterlookError("--robust needs every row in memory; drop --engine or --robust")
        from .inputs import check_streamed_options
        from .progress import rows_progress

        check_streamed_options(args)

        with rows_progress(args, "reading training rows") as progress:
            model = fitting.fit_streamed(args.train, engine=args.engine, scheduler=args.scheduler,
                                         chunk_rows=args.chunk_rows, cases=cases, kind=args.kind,
                                         shrinkage=args.shrinkage, derive=derive, transform=transform,
                                         threshold=args.threshold, columns=args.columns, id_col=args.id_col,
                                         label_col=args.label_col, undefined=args.undefined, progress=progress)
    model.save(args.out)
    summary, quality = saved_model_summary(model, args.out, cases, rows_used=model.training["rows_used"])
    if args.json:
        emit_json(summary)
        return EXIT_OK
    from . import render

    out = render.console()
    out.print(render.model_line(model, args.out))
    out.print(f"fitted on {model.training['rows_used']} normal rows; features: {', '.join(model.features)}")
    for line in metrics_lines(summary, quality, args.cases):
        out.print(line, markup=False)
    return EXIT_OK


def cmd_misses(args) -> int:
    from ..analysis.evidence import misses
    from .inputs import open_session

    session = open_session(args)
    result = misses(session)
    warn(result.warnings)
    return _show(args, session.model, result, lambda render: render.misses_table(result, limit=args.limit))


def cmd_explain(args) -> int:
    from ..analysis.evidence import explain
    from .inputs import open_session

    session = open_session(args, require_labels=False)
    result = explain(session, args.case_id)
    warn(session.cases.warnings)
    return _show(args, session.model, result, lambda render: render.explain_table(result))


def _show(args, model, result, table) -> int:
    """``--json``: the result's document; otherwise the model line and ``table(render)``."""
    if args.json:
        emit_json(result.to_dict())
        return EXIT_OK
    from . import render

    out = render.console()
    out.print(render.model_line(model, args.model))
    out.print(table(render))
    return EXIT_OK


def cmd_demo(args) -> int:
    from . import demo_command

    return demo_command.run(args)


COMMANDS = {
    "fit": cmd_fit,
    "misses": cmd_misses,
    "explain": cmd_explain,
    "demo": cmd_demo,
}


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; returns the exit code (never raises for bad input)."""
    try:
        words = sys.argv[1:] if argv is None else argv
        named = words[0] if words and (words[0] in _OWN or words[0] in _OWNER) else None
        parser = build_parser(only=named)
        args = parser.parse_args(argv)
        if not args.command:
            parser.print_help()
            return EXIT_BAD_INPUT
        # Python's own warnings (numpy overflow, SyntaxWarning ...) never reach stderr as they are: they
        # are recorded and, if the command succeeds, said once each in afterlook's words. A failed command
        # prints its one error line and nothing else.
        with warnings.catch_warnings(record=True) as caught, limited_blas():
            warnings.simplefilter("always", RuntimeWarning)  # every overflow counts, wherever it happens
            code = COMMANDS[args.command](args)
        warn(python_warnings(caught))
        return code
    except AfterlookError as exc:
        error_line(exc.message)
        return exc.exit_code
    except KeyboardInterrupt:
        print("afterlook: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        # e.g. `afterlook score ... | head`: the reader went away; not an error of ours.
        try:
            sys.stdout = open(os.devnull, "w")
        except OSError:
            pass
        return EXIT_OK
    except MemoryError:
        error_line("out of memory (try a smaller table or the chunked engine)")
        return EXIT_BAD_INPUT
    except Exception as exc:  # a bug in afterlook, not bad input
        if os.environ.get("AFTERLOOK_DEBUG"):
            raise
        error_line(f"{type(exc).__name__}: {exc} (please report it; set AFTERLOOK_DEBUG=1 for the traceback)",
                   "internal error")
        return EXIT_INTERNAL


def python_warnings(caught) -> list[str]:
    """Recorded Python warnings as afterlook's one-line messages, each kind once."""
    out: list[str] = []
    for w in caught:
        if issubclass(w.category, (DeprecationWarning, PendingDeprecationWarning, FutureWarning, ResourceWarning)):
            continue  # about library versions, not the user's data: nothing a user can act on
        text = " ".join(str(w.message).split())
        if issubclass(w.category, RuntimeWarning) and "overflow" in text:
            line = ("numeric overflow: some values are too large to compute with (beyond about 1e154 squared); "
                    "the cases they touch are scored as extreme")
        elif issubclass(w.category, RuntimeWarning) and ("invalid value" in text or "divide by zero" in text):
            line = "some values could not be computed (an invalid operation on a value); they are treated as missing"
        else:
            line = f"{w.category.__name__}: {text}"
        if line not in out:
            out.append(line)
    return out


def prepare_process() -> None:
    """What the console script sets up in its own process before numpy is imported (the benchmarks call it
    too, to run the workbench as ``afterlook review`` runs it)."""
    # OpenBLAS then starts with afterlook's thread count (one by default) instead of one thread per
    # core (see core/blas.py).
    os.environ.update(environment_for_new_process())
    note_environment()  # every BLAS this process loads starts with that limit: no need to look for them later
    keep_freed_memory()  # the command's own process: temporaries reused, not page-faulted anew (cli/allocator.py)
    os.environ.setdefault(HUGEPAGE_ENV, "0")  # before numpy loads: no huge-page advice (core/heap.py, small_pages)


def entry() -> None:
    prepare_process()
    sys.exit(main())


__all__ = ["main", "entry", "prepare_process", "build_parser", "EXIT_OK", "EXIT_CHECK_FAILED", "EXIT_BAD_INPUT"]
