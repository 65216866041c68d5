"""`afterlook casebook add|list|show|report|check`: argument parsing and output only.

The entry is built by :mod:`afterlook.analysis.review`, the file is handled by
:mod:`afterlook.store.casebook_file`, reports come from :mod:`afterlook.analysis.report`.
"""

from __future__ import annotations

import sys
from pathlib import Path

from ..analysis.wording import flag_word
from ..core.errors import AfterlookError
from ..core.printable import printable, printable_lines
from ..core.errors import EXIT_CHECK_FAILED, EXIT_OK
from .output import emit_json, warn

ACTIONS = ("add", "list", "show", "report", "check")

DESCRIPTION = (
    "A casebook is a file of reviewed misses: per case the decision (status), a note, the reviewer, "
    "the evidence the decision rests on and the derived feature that exposes the case, if any. "
    "'check' re-scores the book's cases with a model and fails (exit 1) when a case marked explained "
    "is no longer flagged, so a model update cannot silently undo a review."
)


def register(sub, add_common, add_table_opts, caution) -> dict:
    from ..store.casebook_file import STATUSES

    p = sub.add_parser("casebook", help="record reviewed misses; list, show, report, regression-check",
                       description=DESCRIPTION, epilog=caution)
    actions = p.add_subparsers(dest="casebook_action", metavar="ACTION", parser_class=type(p))

    a = actions.add_parser("add", help="record a reviewed case (creates the book if missing)", epilog=caution)
    a.add_argument("book", metavar="BOOK", help="casebook file (JSON)")
    a.add_argument("--model", required=True, metavar="MODEL", help="model the case was reviewed against")
    a.add_argument("--cases", required=True, metavar="CASES", help="table holding the case")
    a.add_argument("--case", required=True, metavar="ID", help="id of the case")
    a.add_argument("--status", required=True, metavar="S", help=f"one of: {', '.join(STATUSES)}")
    a.add_argument("--derive", action="append", default=[], metavar="NAME=EXPR",
                   help="derived feature that exposes the case (repeatable; the first is the deciding one)")
    a.add_argument("--note", default="", metavar="TEXT", help="free-text note")
    a.add_argument("--reviewer", metavar="NAME", help="reviewer (default: the OS user)")
    a.add_argument("--train", metavar="TRAIN", help="normal population (default: the model's recorded training file)")
    add_table_opts(a)
    add_common(a)

    a = actions.add_parser("list", help="one line per reviewed case", epilog=caution)
    a.add_argument("book", metavar="BOOK")
    add_common(a)

    a = actions.add_parser("show", help="one case's entry with its evidence", epilog=caution)
    a.add_argument("book", metavar="BOOK")
    a.add_argument("case_id", metavar="ID")
    add_common(a)

    a = actions.add_parser("report", help="incident-review report (Markdown, or one self-contained HTML file)",
                           epilog=caution)
    a.add_argument("book", metavar="BOOK")
    a.add_argument("--format", choices=("md", "html"), help="md or html (default: from --out's extension, else md)")
    a.add_argument("--out", metavar="FILE", help="write the report here (default: stdout)")
    a.add_argument("--force", action="store_true", help="replace an existing casebook report at --out")
    a.add_argument("--title", help="report title (default: from the book's file name)")
    add_common(a)

    a = actions.add_parser("check", help="re-score the book's cases with a model; exit 1 if an explained case "
                                         "is no longer flagged", epilog=caution)
    a.add_argument("book", metavar="BOOK")
    a.add_argument("--model", required=True, metavar="MODEL")
    a.add_argument("--cases", required=True, metavar="CASES",
                   help="table holding the cases (a case missing from it is scored from its stored snapshot)")
    add_table_opts(a)
    add_common(a)
    return {"casebook": run}


def run(args) -> int:
    action = getattr(args, "casebook_action", None)
    if not action:
        raise AfterlookError(f"afterlook casebook: give an action: {', '.join(ACTIONS)} "
                             "(see 'afterlook casebook --help')")
    return {"add": run_add, "list": run_list, "show": run_show, "report": run_report, "check": run_check}[action](args)


def _fmt(x) -> str:
    """A log-density or threshold of an entry (one face: :mod:`afterlook.analysis.shown`)."""
    from ..analysis.shown import log_density

    return log_density(x)


# --------------------------------------------------------------------------
# add
# --------------------------------------------------------------------------


def run_add(args) -> int:
    from ..analysis.review import add_to_casebook
    from ..core.recipe import parse_assignment
    from ..store.casebook_file import Casebook, check_status
    from .inputs import open_session

    from ..store.outputs import refuse_input_as_book

    check_status(args.status)
    refuse_input_as_book(args.book, [args.model, args.cases, args.train])
    pairs = [parse_assignment(d, "--derive") for d in args.derive]
    existing = Casebook.open(args.book, create=True)  # refuse a bad book before the (slower) review
    previous = existing.entries.get(str(args.case))
    session = open_session(args, require_labels=False)
    entry = add_to_casebook(args.book, session, None, args.case, args.status, derive=pairs or None, note=args.note,
                            reviewer=args.reviewer, model_path=args.model)
    warn(entry.get("warnings") or [])
    final = entry.get("after") or entry.get("before") or {}
    if entry["status"] == "explained" and not final.get("flagged"):
        warn([f"case {entry['case']} is marked explained but the {'re-fitted' if entry.get('after') else 'given'} "
               "model does not flag it; 'casebook check' will report it as regressed"])
    if args.json:
        emit_json(entry)
        return EXIT_OK
    from . import render

    out = render.console()
    how = "added" if previous is None else f"updated (was {previous.get('status')})"
    out.print(f"{how} case {entry['case']} as {entry['status']} in {args.book}", markup=False)
    out.print(_score_words(entry), markup=False)
    if previous is not None:
        out.print(_kept_words(previous, entry), markup=False)
    return EXIT_OK


def _kept_words(previous: dict, entry: dict) -> str:
    """What happened to the earlier review: always kept in history; a feature not named again said so."""
    from ..analysis.case_history import dropped_feature

    n = len(entry.get("history") or [])
    text = f"the earlier review ({previous.get('status')}, {previous.get('updated')}) is kept in the case's history " \
           f"({n} earlier review(s); 'casebook show' lists them)"
    old = dropped_feature(previous, entry)
    if old:
        text += (f"; its derived feature {old.get('name')} = {old.get('expression')} is not part of this review "
                 "(give it again with --derive to keep it current)")
    return text


def _score_words(entry: dict) -> str:
    b, a = entry.get("before") or {}, entry.get("after")
    text = f"before: log-density {_fmt(b.get('log_density'))} vs threshold {_fmt(b.get('threshold'))} " \
           f"({flag_word(bool(b.get('flagged')))})"
    if a:
        d = entry.get("derived_feature") or {}
        text += (f"; after adding {d.get('name')}: {_fmt(a.get('log_density'))} vs {_fmt(a.get('threshold'))} "
                 f"({flag_word(bool(a.get('flagged')))})")
    return text


# --------------------------------------------------------------------------
# list / show
# --------------------------------------------------------------------------


def run_list(args) -> int:
    from ..store.casebook_file import Casebook

    book = Casebook.open(args.book, create=False)
    entries = [book.entries[k] for k in sorted(book.entries)]
    if args.json:
        emit_json({"book": args.book, "entries": [_list_row(e) for e in entries]})
        return EXIT_OK
    from rich import box
    from rich.table import Table
    from rich.text import Text

    from . import render

    out = render.console()
    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
    # Feature, reviewer and date become columns only when every column fits whole.
    rows = [_list_row(e) for e in entries]
    cols = [[printable(r["case"] or "") for r in rows], [printable(r["status"] or "") for r in rows],
            [printable(r["deciding_feature"] or "n/a") for r in rows], [_versus(e.get("before")) for e in entries],
            [_versus(e.get("after")) for e in entries], [printable(r["reviewer"] or "") for r in rows],
            [printable(r["updated"] or "") for r in rows]]
    heads = ["case", "status", "deciding feature", "before", "after", "reviewer", "updated"]
    need = sum(max([len(h)] + [len(v) for v in col]) + 3 for h, col in zip(heads, cols))
    wide = need <= out.width
    table.add_column("case", no_wrap=True)
    table.add_column("status", no_wrap=True)
    if wide:
        table.add_column("deciding feature", no_wrap=True)
    table.add_column("before", no_wrap=True)
    table.add_column("after", no_wrap=True)
    if wide:
        table.add_column("reviewer", no_wrap=True)
        table.add_column("updated", no_wrap=True)
    for e in entries:
        row = _list_row(e)
        cells = [_plain(row["case"]), _plain(row["status"], style=_STATUS_STYLE.get(row["status"], ""))]
        if wide:
            cells.append(_plain(row["deciding_feature"] or "n/a"))
        cells += [Text(_versus(e.get("before"))), Text(_versus(e.get("after")))]
        if wide:
            cells += [_plain(row["reviewer"] or ""), _plain(row["updated"] or "")]
        table.add_row(*cells)
    if not wide:
        features = Text("deciding feature: ", style="dim")
        features.append("; ".join(f"{_list_row(e)['case']}: {_list_row(e)['deciding_feature'] or 'n/a'}"
                                  for e in entries))
    out.print(Text(f"{args.book}: {len(entries)} reviewed case(s)"))
    out.print(table)
    if not wide and entries:
        out.print(features)
    out.print(Text("log-density vs threshold: '<' flagged, '>=' not flagged", style="dim"))
    return EXIT_OK


def _plain(value, style: str = "") -> "Text":
    """Data from the book as a Rich Text cell: never markup, every control character escaped."""
    from rich.text import Text

    return Text(printable("" if value is None else value), style=style)


_STATUS_STYLE = {"explained": "green", "needs-signal": "yellow", "label-disputed": "magenta",
                 "accepted-risk": "red", "open": "dim"}


def _list_row(e: dict) -> dict:
    b, a = e.get("before") or {}, e.get("after") or {}
    return {
        "case": e.get("case"),
        "status": e.get("status"),
        "deciding_feature": (e.get("deciding_feature") or {}).get("name"),
        "derived_feature": e.get("derived_feature"),
        "before": {"log_density": b.get("log_density"), "threshold": b.get("threshold"), "flagged": b.get("flagged")},
        "after": None if not a else {"log_density": a.get("log_density"), "threshold": a.get("threshold"),
                                     "flagged": a.get("flagged")},
        "reviewer": e.get("reviewer"),
        "updated": e.get("updated"),
    }


def _versus(part: dict | None) -> str:
    """``log_density < threshold`` when flagged, ``>=`` when not (n/a without a score)."""
    if not part:
        return "n/a"
    sign = "<" if part.get("flagged") else ">="
    return f"{_fmt(part.get('log_density'))} {sign} {_fmt(part.get('threshold'))}"


def run_show(args) -> int:
    from ..store.casebook_file import Casebook

    book = Casebook.open(args.book, create=False)
    entry = book.get(args.case_id)
    if args.json:
        emit_json(entry)
        return EXIT_OK
    from rich.markdown import Markdown

    from ..analysis import report
    from . import render

    render.console().print(Markdown(report.render_entry_markdown(entry)))
    return EXIT_OK


# --------------------------------------------------------------------------
# report
# --------------------------------------------------------------------------


def run_report(args) -> int:
    from ..analysis import report
    from ..store.casebook_file import Casebook, write_bytes_atomic

    fmt = args.format
    if fmt is None:
        fmt = "html" if args.out and Path(args.out).suffix.lower() in (".html", ".htm") else "md"
    if args.out:
        from ..store.casebook_file import backup_path
        from ..store.outputs import check_output

        check_output(args.out, kind="report", inputs=[args.book, backup_path(Path(args.book))], force=args.force)
    book = Casebook.open(args.book, create=False)
    text = (report.render_html if fmt == "html" else report.render_markdown)(book, title=args.title)
    if args.out:
        write_bytes_atomic(args.out, text.encode("utf-8"))
    if args.json:
        doc = {"book": args.book, "format": fmt, "out": args.out, "entries": len(book.entries)}
        if not args.out:
            doc["report"] = text
        emit_json(doc)
        return EXIT_OK
    if args.out:
        print(printable(f"wrote {args.out} ({fmt}, {len(book.entries)} case(s))"))
    else:
        sys.stdout.write(printable_lines(text))
    return EXIT_OK


# --------------------------------------------------------------------------
# check
# --------------------------------------------------------------------------


def run_check(args) -> int:
    from ..analysis.review import check_casebook
    from ..store.casebook_file import Casebook
    from .inputs import open_session

    book = Casebook.open(args.book, create=False)
    session = open_session(args, require_labels=False)
    result = check_casebook(book, session, None)
    warn(session.cases.warnings)
    code = EXIT_OK if result.ok else EXIT_CHECK_FAILED
    if args.json:
        emit_json(result.to_dict())
        return code
    from rich import box
    from rich.table import Table
    from rich.text import Text

    from . import render

    out = render.console()
    out.print(render.model_line(session.model, args.model))
    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
    for name, justify in (("case", "left"), ("status", "left"), ("log-density", "right"), ("threshold", "right"),
                          ("now", "left"), ("verdict", "left")):
        table.add_column(name, justify=justify, no_wrap=name == "case", min_width=6)
    for d in result.details:
        verdict = Text("regressed", style="bold red") if d["regressed"] else Text("ok", style="green")
        where = " (from snapshot)" if d["source"] == "snapshot" else ""
        table.add_row(_plain(d["case"]), _plain(d["status"]), _fmt(d["log_density"]), _fmt(d["threshold"]),
                      Text(flag_word(d["flagged"]) + where), verdict)
    out.print(table)
    if result.ok:
        out.print(f"ok: {result.entries} case(s) checked, no explained case regressed")
    else:
        out.print(f"regressed: {len(result.regressed)} explained case(s) no longer flagged: "
                  + ", ".join(result.regressed), style="bold red", markup=False)
    return code
