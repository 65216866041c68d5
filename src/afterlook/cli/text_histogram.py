"""Small ASCII histograms for the terminal, before and after a transform, side by side.

Counts come from :func:`afterlook.core.histograms.range_counts`, heights from
:func:`afterlook.core.histograms.bar_heights` in half cells; Rich lays the two panels out.
Only ASCII is drawn (``#`` a full cell, ``.`` half a cell) so the picture
survives any terminal, a log file or a pasted issue. Two panels of
:data:`PANEL_WIDTH` plus the gap fit in 80 columns.
"""

from __future__ import annotations

import math

from rich.table import Table
from rich.text import Text

from ..core.histograms import bar_heights, range_counts

PANEL_WIDTH = 36  # characters per panel; 2 * 36 + GAP <= 80
GAP = 4
HEIGHT = 8  # rows of bars


def _label(x: float) -> str:
    if not math.isfinite(x):
        return "?"
    if x != 0 and (abs(x) >= 1e5 or abs(x) < 1e-3):
        return f"{x:.2e}"
    return f"{x:.4g}"


def _fit(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 3] + "..."


def histogram_panel(values, title: str, *, width: int = PANEL_WIDTH, height: int = HEIGHT) -> Text:
    """One histogram as ASCII text: title, ``height`` rows of bars, axis, min/max labels."""
    bins = max(4, width - 2)  # one character per bin, inside a one-character margin each side
    out = Text(_fit(title, width), style="bold")
    out.append("\n")
    counts, edges, n = range_counts(values, bins)
    if n == 0:
        out.append("(no finite values)".ljust(width), style="dim")
        return out
    # Heights in half cells, so a bin that is a sliver of the tallest still shows.
    halves = bar_heights(counts, height, steps=2)
    for row in range(height, 0, -1):
        line = []
        for h in halves:
            if h >= 2 * row:
                line.append("#")
            elif h == 2 * row - 1:
                line.append(".")
            else:
                line.append(" ")
        out.append(" " + "".join(line) + " ", style="cyan")
        out.append("\n")
    out.append("+" + "-" * bins + "+", style="dim")
    out.append("\n")
    lo, hi = _label(float(edges[0])), _label(float(edges[-1]))
    pad = max(1, width - len(lo) - len(hi))
    out.append(lo + " " * pad + hi, style="dim")
    return out


def side_by_side(before, after, *, title_before: str, title_after: str) -> Table:
    """Two histogram panels in one row (fits 80 columns)."""
    grid = Table.grid(padding=(0, GAP // 2))
    grid.add_column(width=PANEL_WIDTH, no_wrap=True)
    grid.add_column(width=PANEL_WIDTH, no_wrap=True)
    grid.add_row(histogram_panel(before, title_before), histogram_panel(after, title_after))
    return grid
