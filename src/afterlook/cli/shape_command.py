"""`afterlook shape DATA`: which per-column transform makes a skewed column look Gaussian.

The search and the selection rule live in :mod:`afterlook.core.shaping`;
this module parses arguments and renders the result (a table, ASCII
histograms before/after, and the exact ``afterlook fit`` option to apply).
"""

from __future__ import annotations

import math
import shlex

from ..core.errors import AfterlookError
from ..core.errors import EXIT_OK
from .inputs import table_options
from .output import emit_json, warn

DESCRIPTION = (
    "Search per numeric column for a transform (log(x + c), powers x ** p, Box-Cox, Yeo-Johnson) "
    "under which the column looks most Gaussian, judged by a normality statistic on a seeded sample "
    "(lower is more Gaussian). Rows labelled anomaly are left out, as fit does. A column that is "
    "already near-Gaussian, or that no transform improves clearly, is left alone."
)


def _sample_size(text: str) -> int:
    try:
        n = int(text)
    except ValueError:
        raise AfterlookError(f"--sample expects a whole number of rows, got '{text}'") from None
    if n < 8:
        raise AfterlookError(f"--sample must be at least 8 rows, got {n}")
    return n


def register(sub, add_common, add_table_opts, caution) -> dict:
    p = sub.add_parser("shape", help="transform suggestions per column, with before/after normality",
                       description=DESCRIPTION, epilog=caution)
    p.add_argument("data", metavar="DATA", help="table (CSV or Parquet), usually the training table")
    p.add_argument("--columns", nargs="+", metavar="COL", help="columns to shape (default: every numeric column)")
    p.add_argument("--statistic", default="dagostino", choices=["dagostino", "anderson"],
                   help="normality statistic: dagostino (D'Agostino-Pearson K^2, default) or anderson "
                        "(Anderson-Darling A^2)")
    p.add_argument("--sample", type=_sample_size, default=5000, metavar="N",
                   help="rows sampled (seeded) for the statistics (default 5000)")
    p.add_argument("--no-hist", action="store_true", help="do not draw the before/after histograms")
    p.add_argument("--cases", metavar="CASES",
                   help="labelled cases: judge each transform by how many anomalies the column alone separates "
                        "at a 1%% false-alarm rate, and never recommend one that separates fewer")
    add_table_opts(p)
    add_common(p)
    return {"shape": run}


def _fmt(x, significant: int | None = None) -> str:
    """Two decimals (skewness), or ``significant`` digits without exponent (statistics)."""
    if x is None or not math.isfinite(x):
        return "n/a"
    if significant is None or abs(x) < 1:
        return f"{x:.2f}"
    digits = max(0, significant - 1 - int(math.floor(math.log10(abs(x)))))
    return f"{x:,.{digits}f}"


def _short_transform(result) -> str:
    """Table text for the transform: fitted lambdas shortened (the hint line keeps every digit)."""
    t = result.transform
    if t is None:
        return "none"
    if t.kind != "expression":
        return t.describe(result.name)
    return result.description


def run(args) -> int:
    from ..analysis.shape import shape
    from ..store.tables import load_table
    from .render import console

    table = load_table(args.data, **table_options(args))
    cases = None
    if args.cases:
        cases = load_table(args.cases, **table_options(args), require_labels=True)
    from .progress import busy

    with busy(args, "searching transforms"):
        report = shape(table, columns=args.columns, statistic=args.statistic, sample_size=args.sample, cases=cases)
    warn(report.warnings)
    if args.json:
        emit_json(report.to_dict())
        return EXIT_OK

    from rich import box
    from rich.table import Table
    from rich.text import Text

    from ..core.shaping import STATISTIC_LABELS
    from .text_histogram import side_by_side

    out = console()
    stat_label = STATISTIC_LABELS[report.statistic]
    n_sample = max((r.sample_before.size for r in report.features), default=0)
    out.print(Text.assemble(("shape ", "dim"), (args.data, "bold"), (f"  {report.rows_used} rows", "")))
    out.print(f"{stat_label} on a seeded sample of {n_sample} rows; lower is more Gaussian", style="dim")
    short = {"dagostino": "K^2", "anderson": "A^2"}[report.statistic]
    grid = Table(box=box.SIMPLE_HEAD, show_edge=False)
    grid.add_column("column", no_wrap=True, overflow="ellipsis", max_width=24)
    grid.add_column("transform / verdict", overflow="fold", min_width=16)
    grid.add_column("skew\nbefore -> after", justify="right", no_wrap=True)
    grid.add_column(f"{short}\nbefore -> after", justify="right", no_wrap=True)
    for r in report.features:
        cell = Text(_short_transform(r), style="bold" if r.recommended else "dim")
        cell.append("\n" + r.verdict, style="italic")
        if r.separation_before is not None and r.transform is not None:
            cell.append(f"\nanomalies separated alone: {r.separation_before:.0%} -> {r.separation_after:.0%}",
                        style="dim")
        if r.held_back:
            cell.append("\n" + r.held_back, style="yellow")
        grid.add_row(
            Text(r.name),
            cell,
            f"{_fmt(r.skew_before)} -> {_fmt(r.skew_after)}",
            f"{_fmt(r.normality_before, 3)} -> {_fmt(r.normality_after, 3)}",
        )
    out.print(grid)

    chosen = [r for r in report.features if r.recommended]
    if not chosen:
        out.print("No transform to recommend." if any(r.held_back for r in report.features)
                  else "No column needs a transform.")
        return EXIT_OK
    if not args.no_hist:
        for r in chosen:
            out.print(side_by_side(r.sample_before, r.sample_after, title_before=f"before: {r.name}",
                                   title_after=f"after: {_short_transform(r)}"))
            out.print()
    table_opts = "".join(f" {flag} {shlex.quote(value)}" for flag, value in
                         (("--id-col", args.id_col), ("--label-col", args.label_col)) if value)
    lines = [f"afterlook fit {shlex.quote(args.data)} --out MODEL.json{table_opts}"]
    lines += [f"  --transform {shlex.quote(r.fit_option)}" for r in chosen]
    out.print("To apply, fit with (keep one --transform per column you accept):", style="dim")
    out.print(Text(" \\\n".join(lines)), soft_wrap=True)
    return EXIT_OK
