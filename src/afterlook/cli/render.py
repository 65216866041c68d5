"""Rich rendering of results. No numerics here: every number comes from a result object."""

from __future__ import annotations

import math

from rich import box
from rich.console import Console, Group
from rich.table import Table
from rich.text import Text

from ..api import ExplainResult, MissesResult
from ..model import Model

BAR_HALF = 10  # characters each side of zero in a z bar
BAR_FULL_SCALE = 4.0  # |z| that fills half a bar


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
    n = min(half, int(round(abs(z) / full_scale * half)))
    over = abs(z) > full_scale
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
    t.append(fmt(model.threshold))
    t.append(f" ({model.policy.describe()})", style="dim")
    return t


def misses_table(result: MissesResult, limit: int | None = None) -> Group:
    m = result.metrics
    head = Text()
    head.append(f"{len(result.misses)} miss(es)", style="bold")
    head.append(f" of {result.n_anomalies} labelled anomalies in {result.n_cases} cases; ")
    head.append(f"threshold {fmt(result.threshold)}; ")
    head.append(f"precision {m.precision:.3f}, recall {m.recall:.3f}, F1 {m.f1:.3f}; false alarms {m.fp}")
    table = Table(box=box.SIMPLE_HEAD, show_edge=False)
    table.add_column("#", justify="right", style="dim")
    table.add_column("case")
    table.add_column("log-density", justify="right")
    table.add_column("margin", justify="right")
    ctx_cols = list(result.misses[0].context) if result.misses else []
    for c in ctx_cols:
        table.add_column(c, overflow="fold")
    shown = result.misses if limit is None else result.misses[:limit]
    for k, miss in enumerate(shown, 1):
        table.add_row(str(k), miss.case, fmt(miss.log_density), f"+{fmt(miss.margin)}",
                      *[miss.context.get(c) or "" for c in ctx_cols])
    parts = [head, table]
    if limit is not None and len(result.misses) > limit:
        parts.append(Text(f"... {len(result.misses) - limit} more (use --json for all)", style="dim"))
    if result.unscored:
        parts.append(Text(f"{len(result.unscored)} labelled anomaly(ies) could not be scored (NaN features): "
                          + ", ".join(result.unscored[:5]), style="yellow"))
    if not result.misses:
        parts.append(Text("no misses: every labelled anomaly is flagged", style="green"))
    return Group(*parts)


def explain_table(result: ExplainResult) -> Group:
    head = Text()
    head.append(f"case {result.case}", style="bold")
    if result.label is not None:
        head.append(f"  labelled {'anomaly' if result.label else 'normal'}")
    verdict = "FLAGGED" if result.flagged else "not flagged"
    head.append(f"  {verdict}", style="bold red" if result.flagged else "bold")
    head.append(f"  log-density {fmt(result.log_density)} vs threshold {fmt(result.threshold)}")
    if math.isfinite(result.log_density):
        head.append(f" (margin {result.margin:+.3f})")
    ctx = "  ".join(f"{k}: {v}" for k, v in result.context.items() if v)
    full = any(f.conditional_z is not None for f in result.features)
    table = Table(box=box.SIMPLE_HEAD, show_edge=False)
    table.add_column("feature")
    table.add_column("value", justify="right")
    table.add_column(f"z  (-{BAR_FULL_SCALE:g} .. +{BAR_FULL_SCALE:g})", justify="center", no_wrap=True)
    table.add_column("z", justify="right")
    table.add_column("pct", justify="right")
    table.add_column("contribution", justify="right")
    if full:
        table.add_column("conditional z", justify="right")
        table.add_column("", no_wrap=True)
    order = sorted(result.features, key=lambda f: (f.contribution if math.isfinite(f.contribution) else 0.0))
    for f in order:
        row = [f.name, fmt(f.value), z_bar(f.z), f"{f.z:+.2f}", fmt(f.percentile, 1), fmt(f.contribution)]
        if full:
            cz = f.conditional_z
            row.append(f"{cz:+.2f}" if cz is not None else "n/a")
            row.append(_relation_note(f.z, cz))
        table.add_row(*row)
    note = Text(
        "z: distance from the normal mean in standard deviations; pct: share of normal rows at or below the value; "
        "contribution: the feature's share (nats) of the log-density below its peak",
        style="dim",
    )
    parts = [head]
    if ctx:
        parts.append(Text(ctx, style="dim"))
    parts += [table, note]
    if full:
        parts.append(Text("conditional z: distance from the value expected given all other features "
                          "(large while z is small = a broken relation)", style="dim"))
    return Group(*parts)


def _relation_note(z: float, cz: float | None) -> str:
    if cz is None or not math.isfinite(cz):
        return ""
    if abs(cz) >= 3 and abs(z) < 2:
        return "relation broken"
    if abs(cz) >= 3:
        return "extreme"
    return ""


def console(stderr: bool = False) -> Console:
    return Console(stderr=stderr, highlight=False, soft_wrap=False)
