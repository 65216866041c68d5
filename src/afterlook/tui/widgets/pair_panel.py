"""The pair view: two readings against each other, normal rows as a density, the case and its band.

Counts come from :func:`afterlook.analysis.pair_view.pair_view`; this widget
only lays out glyphs. Meaning never rests on colour: density is a shade
(``░▒▓█``, denser darker), the band's boundary a dot, other anomalies ``x``
and the case ``◆``, each named in the legend when it appears.
"""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.widgets import Static

from ...analysis import shown
from ...core.histograms import PAIR_BAND, band_edge, density_shares
from .. import format as fmt
from ..messages import PanelMounted

SHADES = "░▒▓█"
LABEL = 8  # characters of the y-axis labels
FIXED_LINES = 4  # head, x axis, legend (two lines)
MIN_ROWS, MIN_COLUMNS = 4, 10


def shade_levels(counts: np.ndarray) -> np.ndarray:
    """0 for an empty cell, else 1..len(SHADES) from :func:`~afterlook.core.histograms.density_shares`."""
    share = density_shares(counts)
    return np.where(np.asarray(counts) > 0, np.clip(np.ceil(share * len(SHADES)), 1, len(SHADES)), 0).astype(int)


class PairPanel(Vertical):
    COMPONENT_CLASSES = {"pair--normal", "pair--case", "pair--others", "pair--band", "pair--dim"}

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.view = None
        self.message = "highlight a pair candidate (candidates tab), then press p"

    def compose(self) -> ComposeResult:
        yield Static("", id="pair-head")
        yield Static("", id="pair-plot")
        yield Static("", id="pair-legend")

    def on_mount(self) -> None:
        self.post_message(PanelMounted("pair"))

    @property
    def grid(self) -> tuple[int, int]:
        """(columns, rows) of the plot for the panel's size."""
        return (max(MIN_COLUMNS, self.size.width - LABEL - 3), max(MIN_ROWS, self.size.height - FIXED_LINES))

    def _style(self, name: str):
        return self.get_component_rich_style(name, partial=True)

    def loading(self, label: str) -> None:
        self.view, self.message = None, f"counting {fmt.plain(label)} …"
        self._draw()

    def failed(self, message: str) -> None:
        self.view, self.message = None, message
        self._draw()

    def show(self, view) -> None:
        self.view = view
        self._draw()

    def _draw(self) -> None:
        head = self.query_one("#pair-head", Static)
        plot = self.query_one("#pair-plot", Static)
        legend = self.query_one("#pair-legend", Static)
        if self.view is None:
            head.update("")
            plot.update(Text(self.message, style=self._style("pair--dim")))
            legend.update("")
            return
        v = self.view
        t = Text(no_wrap=True, overflow="ellipsis")
        t.append(fmt.plain(v.y_name), style="bold")
        t.append(" (up) against ")
        t.append(fmt.plain(v.x_name), style="bold")
        t.append(f" (across) · {fmt.plain(v.name)} = {fmt.plain(v.expression)}", style=self._style("pair--dim"))
        head.update(t)
        text, used = self.render_plot()
        plot.update(text)
        legend.update(Text(self.legend(used), style=self._style("pair--dim")))

    def render_plot(self) -> tuple[Text, set[str]]:
        v = self.view
        c = v.counts
        levels = shade_levels(c.normal)
        edge = band_edge(c.in_band) if c.in_band is not None else np.zeros(c.normal.shape, bool)
        styles = {k: self._style(f"pair--{k}") for k in ("normal", "case", "others", "band", "dim")}
        ny, nx = c.normal.shape
        y_hi, y_lo = shown.reading(float(c.y_edges[-1])), shown.reading(float(c.y_edges[0]))
        out, used = Text(no_wrap=True, overflow="crop"), set()
        for row in range(ny - 1, -1, -1):
            label = y_hi if row == ny - 1 else (y_lo if row == 0 else "")
            out.append(label.rjust(LABEL - 1)[: LABEL - 1] + "│", style=styles["dim"])
            for col in range(nx):
                if c.case_cell == (col, row):
                    out.append("◆", style=styles["case"])
                    used.add("case")
                elif c.others[row, col] > 0:
                    out.append("x", style=styles["others"])
                    used.add("others")
                elif levels[row, col] > 0:
                    out.append(SHADES[levels[row, col] - 1], style=styles["normal"])
                    used.add("normal")
                elif edge[row, col]:
                    out.append("·", style=styles["band"])
                    used.add("band")
                else:
                    out.append(" ")
            out.append("\n")
        x_lo, x_hi = shown.reading(float(c.x_edges[0])), shown.reading(float(c.x_edges[-1]))
        out.append(" " * LABEL + x_lo + " " * max(1, nx - len(x_lo) - len(x_hi)) + x_hi, style=styles["dim"])
        return out, used

    def legend(self, used: set[str]) -> str:
        """Only the symbols drawn, in few words (two lines at 80 columns)."""
        v = self.view
        c = v.counts
        parts = []
        if "normal" in used:
            parts.append(f"{SHADES} normal rows ({c.n_normal}, {c.normal_outside} outside)")
        if "band" in used:
            lo, hi = PAIR_BAND
            parts.append(f"· band edge (the candidate's {lo:.0%}-{hi:.0%} on normal rows)")
        elif c.band is None:
            parts.append("no band: the candidate reads each unit's own baseline" if v.by_unit
                         else "no band: the candidate reads other columns too")
        if "others" in used:
            parts.append("x other anomalies")
        if "case" in used:
            parts.append(f"◆ {fmt.plain(v.case)} ({shown.reading(v.case_xy[0])}, {shown.reading(v.case_xy[1])})")
        return " · ".join(parts)
