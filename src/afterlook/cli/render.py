"""Rich rendering of results. No numerics here: every number comes from a result object."""

from __future__ import annotations

import os

import math

from rich import box
from rich.console import Console, Group
from rich.segment import Segment
from rich.table import Table
from rich.text import Text

from ..analysis.evidence import ExplainResult, MissesResult
from ..analysis.model import Model
from ..analysis import shown
from ..core.printable import printable
from ..analysis.wording import BAR_FULL_SCALE, RELATION_RULE, bar_cells, relation_broken

BAR_HALF = 5  # characters each side of zero in a z bar


def fmt(x, digits: int = 3) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    if isinstance(x, float):
        if x != 0 and (abs(x) >= 1e5 or abs(x) < 1e-3):
            return f"{x:.{digits}e}"
        return f"{x:,.{digits}f}"
    return str(x)


def z_bar(z: float | None, half: int = BAR_HALF, full_scale: float = BAR_FULL_SCALE) -> Text:
    """A signed bar centred on zero; the sign is drawn (- left, + right), not only coloured."""
    if z is None or not math.isfinite(z):
        return Text(" " * half + "?" + " " * half)
    n, over = bar_cells(z, half, full_scale)
    left = " " * half
    right = " " * half
    style = "bold red" if abs(z) >= 3 else ("yellow" if abs(z) >= 2 else "cyan")
    if z < 0:
        left = (("<" if over else "-") + "-" * (n - 1)).rjust(half) if n else left
        text = Text(left, style=style)
        text.append("|")
        text.append(right)
    else:
        right = ("+" * (n - 1) + (">" if over else "+")).ljust(half) if n else right
        text = Text(left)
        text.append("|")
        text.append(right, style=style)
    return text


def model_line(model: Model, path: str | None = None) -> Text:
    t = Text()
    t.append("model ", style="dim")
    t.append(path or model.source_path or "(in memory)", style="bold")
    t.append(f"  {model.describe_kind()}, {len(model.features)} features", style="")
    t.append("  threshold ", style="dim")
    t.append(shown.threshold(model.threshold))
    t.append(f" ({model.policy.describe()})", style="dim")
    return t


def width_of(result: MissesResult) -> int:
    return max([len(m.case) for m in result.misses] + [4]) + 2


def misses_table(result: MissesResult, limit: int | None = None, width: int | None = None) -> Group:
    m = result.metrics
    head = Text()
    head.append(f"{len(result.misses)} miss(es)", style="bold")
    head.append(f" of {result.n_anomalies} labelled anomalies in {result.n_cases} cases; ")
    head.append(f"threshold {shown.threshold(result.threshold)}; ")
    head.append(f"precision {shown.share(m.precision)}, recall {shown.share(m.recall)}, F1 {shown.share(m.f1)}; "
                f"false alarms {m.fp}")
    table = Table(box=box.SIMPLE_HEAD, show_edge=False)
    table.add_column("#", justify="right", style="dim")
    case_width = max([len(m.case) for m in result.misses] + [4])
    table.add_column("case", no_wrap=True, min_width=case_width)
    table.add_column("log-density", justify="right", no_wrap=True, min_width=11)
    table.add_column("margin", justify="right", no_wrap=True, min_width=8)
    ctx_cols = list(result.misses[0].context) if result.misses else []
    # Context columns are shown while they fit: the numbers never get squeezed.
    room = (width or console().width) - width_of(result) - 11 - 8 - 4 - 8
    kept = []
    for c in ctx_cols:
        longest = max([len(c)] + [len(m.context.get(c) or "") for m in result.misses[: limit or None]])
        need = min(max(longest, 8), 28) + 2
        if need <= room:
            kept.append(c)
            room -= need
    ctx_cols = kept
    for c in ctx_cols:
        table.add_column(c, overflow="ellipsis", no_wrap=True, max_width=28)
    listed = result.misses if limit is None else result.misses[:limit]
    for k, miss in enumerate(listed, 1):
        table.add_row(str(k), miss.case, shown.log_density(miss.log_density), shown.margin(miss.margin),
                      *[miss.context.get(c) or "" for c in ctx_cols])
    parts = [head, table]
    if limit is not None and len(result.misses) > limit:
        parts.append(Text(f"... {len(result.misses) - limit} more (use --json for all)", style="dim"))
    if result.unscored:
        parts.append(Text(f"{len(result.unscored)} labelled anomaly(ies) could not be scored (NaN features): "
                          + ", ".join(result.unscored[:5]), style="yellow"))
    q = result.quality
    if q is not None and q.roc_auc is not None:
        parts.append(Text(f"ranking on the labelled cases: ROC AUC {shown.share(q.roc_auc)}, average precision "
                          f"{shown.share(q.average_precision)} (chance: 0.5 and {shown.share(q.anomaly_share)}); "
                          f"the threshold flags "
                          f"{q.normal_flagged_share:.1%} of the labelled normal cases", style="dim"))
    for u in result.never_seen:
        parts.append(Text(u.describe(), style="yellow"))
    if not result.misses or result.unscored:
        clear = not result.misses and not result.unscored and result.n_anomalies > 0
        parts.append(Text(result.coverage(), style="green" if clear else "yellow"))
    return Group(*parts)


def explain_table(result: ExplainResult) -> Group:
    head = Text()
    head.append(f"case {result.case}", style="bold")
    if result.label is not None:
        head.append(f"  labelled {'anomaly' if result.label else 'normal'}")
    verdict = "FLAGGED" if result.flagged else "not flagged"
    head.append(f"  {verdict}", style="bold red" if result.flagged else "bold")
    head.append(f"  ({result.model_kind} model)", style="dim")
    head.append(f"\nlog-density {shown.log_density(result.log_density)} vs threshold "
                f"{shown.threshold(result.threshold)}")
    if math.isfinite(result.log_density):
        head.append(f" (margin {shown.margin(result.margin)})")
    elif result.overflow:
        head.append(" (log-density minus infinity: a reading is so extreme that it overflows; flagged)")
    elif result.log_density == -math.inf:
        head.append(" (a feature is undefined on these readings: outside its domain, flagged)")
    else:
        head.append(" (not scored: a feature is missing or undefined)")
    ctx = "  ".join(f"{k}: {v}" for k, v in result.context.items() if v)
    full = result.full_model
    table = Table(box=box.SIMPLE_HEAD, show_edge=False)
    table.add_column("feature", no_wrap=True, overflow="ellipsis", max_width=20)
    table.add_column("reading", justify="right", no_wrap=True)
    shaped = any(f.reading is not None and f.value != f.reading for f in result.features)
    if shaped:
        table.add_column("model value", justify="right", no_wrap=True)
    table.add_column("z bar", justify="center", no_wrap=True)
    table.add_column("z", justify="right", no_wrap=True)
    table.add_column("pct", justify="right", no_wrap=True)
    table.add_column("contrib", justify="right", no_wrap=True)
    if full:
        table.add_column("cond z", justify="right", no_wrap=True)
    order = result.features_by_cost()
    broken = False
    for f in order:
        reading = f.value if f.reading is None else f.reading
        row = [f.name, shown.reading(reading)]
        if shaped:
            row.append(shown.reading(f.value) if f.value != reading else "")
        row += [z_bar(f.z_reading), shown.z(f.z_reading), shown.percentile(f.percentile_reading),
                _signed(f.contribution, "")]
        if full:
            cz = f.conditional_z_reading
            mark = _relation_mark(f.z_reading, cz)
            broken = broken or bool(mark)
            row.append(shown.z(cz) + mark)
        table.add_row(*row)
    note = Text(
        f"reading: the value before any transform; z: standard deviations from the normal mean, signed as the "
        f"reading (+ = higher; bar: - left, + right, full at {BAR_FULL_SCALE:g}); "
        + ("pct: % of normal rows at or below the reading" if result.percentiles
           else "pct: not available for an imported model (no training rows)")
        + "; contrib: nats of log-density below its peak"
        + ("; model value: after the feature's transform" if shaped else ""),
        style="dim",
    )
    parts = [head]
    if ctx:
        parts.append(Text(ctx, style="dim"))
    parts += [table, note]
    if full:
        parts.append(Text("cond z: standard deviations from the value expected given all other features"
                          + (f"; ! = relation broken ({RELATION_RULE})" if broken else ""), style="dim"))
    if result.unit_context is not None:
        parts += unit_context_lines(result.unit_context)
    return Group(*parts)


#: Columns of the own-unit table in explain (the farthest from the unit's normal; --json lists all).
UNIT_ROWS_SHOWN = 5


def unit_context_lines(ctx) -> list:
    """The case against its unit's own normal (analysis.unit_evidence): the farthest columns, and a sentence
    when one is ordinary for the fleet but far from its unit's normal."""
    from ..analysis.unit_evidence import FLEET_ORDINARY, OWN_FAR

    head = Text(f"\nagainst {ctx.unit}'s own normal ({ctx.unit_rows} normal rows of {ctx.unit} in {ctx.source}):",
                style="bold")
    table = Table(box=box.SIMPLE_HEAD, show_edge=False)
    for name, justify in (("feature", "left"), ("reading", "right"), ("unit median", "right"),
                          ("unit z", "right"), ("fleet z", "right")):
        table.add_column(name, justify=justify, no_wrap=True, overflow="ellipsis", max_width=20 if name == "feature" else None)
    for r in ctx.by_distance()[:UNIT_ROWS_SHOWN]:
        table.add_row(r.feature, shown.reading(r.reading), shown.reading(r.unit_median) + (" (fleet)" if r.fallback else ""),
                      shown.z(r.unit_z), shown.z(r.fleet_z))
    lines = [head, table, Text("unit z: (reading - the unit's median) / the unit's MAD x 1.4826 over its normal "
                               "training rows, what unit_median and unit_scale freeze; fleet z: the same over every "
                               "normal training row; (fleet): the unit has too few rows of its own", style="dim")]
    only = [r for r in ctx.by_distance() if r.only_against_its_unit]
    if only:
        r = only[0]
        lines.append(Text(f"{r.feature} is ordinary for the fleet (z {shown.z(r.fleet_z)}) but far from {ctx.unit}'s own "
                          f"normal (z {shown.z(r.unit_z)}; rule of thumb: |z| >= {OWN_FAR:g} own, < {FLEET_ORDINARY:g} "
                          f"fleet): a unit-relative feature such as {r.feature} - unit_median({r.feature}) would "
                          "expose it (afterlook suggest tries them)."))
    return lines


def _signed(x: float | None, sign: str = "+") -> str:
    """Two decimals, or three significant digits in e-notation once a number is too long to read."""
    if x is None or math.isnan(x):
        return "n/a"
    if math.isinf(x):
        return "+inf" if x > 0 and sign else ("inf" if x > 0 else "-inf")
    return f"{x:{sign}.2f}" if abs(x) < 1e5 else f"{x:{sign}.2e}"


def _relation_mark(z: float, cz: float | None) -> str:
    return "!" if relation_broken(z, cz) else " "


class PlainConsole(Console):
    """A Console that never reads data as markup and never lets a control character through.

    Strings are plain text (``markup=False``, ``emoji=False``: a case id
    ``[bold]x[/]`` or ``:fire:`` shows as written), and every segment of text
    is made printable just before it is written (:func:`afterlook.core.printable.printable`),
    whether it came in as a ``str``, a ``Text`` or inside a table or Markdown.
    Rich's own control segments (cursor moves, hyperlinks it was asked for)
    are left alone; afterlook asks for none.
    """

    def render_str(self, text: str, **kwargs) -> Text:
        kwargs["markup"] = False
        kwargs["emoji"] = False
        return super().render_str(printable(text, keep_newlines=True), **kwargs)

    def render(self, renderable, options=None):
        for segment in super().render(renderable, options):
            if segment.control or segment.text.isprintable() or segment.text == "\n":
                yield segment
            else:
                yield Segment(printable(segment.text, keep_newlines=True), segment.style, segment.control)


#: Width of output that goes to a file or a pipe (no terminal to ask) when COLUMNS does not say: wide enough
#: that the tables keep their numbers whole (at Rich's default 80 a z column read "-0.…").
PIPE_WIDTH = 120


def console(stderr: bool = False) -> Console:
    c = PlainConsole(stderr=stderr, highlight=False, soft_wrap=False, markup=False, emoji=False)
    if not c.is_terminal and not os.environ.get("COLUMNS", "").strip().isdigit():
        c.width = PIPE_WIDTH
    return c
