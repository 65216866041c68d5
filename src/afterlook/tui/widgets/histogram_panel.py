"""Histogram of a feature or candidate: normal population as bars, the case marked, other anomalies below.

Counts come from :func:`afterlook.core.histograms.histogram_counts` (through
:func:`afterlook.analysis.workbench.histogram_view`) and bar heights from
:func:`afterlook.core.histograms.bar_heights`; this widget only lays out glyphs.
"""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.widgets import Button, Static

from ...core.histograms import STEPS_PER_CELL, bar_heights
from ...analysis import shown
from .. import format as fmt
from ..messages import HistogramResized, HistogramShapedToggled, HistogramStep, PanelMounted

EIGHTHS = " ▁▂▃▄▅▆▇█"
FIXED_LINES = 5  # scale line, axis labels, case marker, others strip, one spare
MIN_BAR_ROWS = 3
MARGIN = 2  # columns left free on the right
WIDE = 100  # panel width from which each bin is two characters wide


# One character per bin leaves no room between counts (``1127`` reads as a number), so
# narrow panels mark each bin by a three-step scale whose legend names the steps shown.
NARROW_MARKS = (("·", 1, 1), ("•", 2, 9), ("●", 10, None))


def others_glyph(n: int, cell: int = 2) -> str:
    """Other anomalies in a bin: a digit ('+' for ten or more) on two-character bins, else a mark; blank for none."""
    if n <= 0:
        return " "
    if cell >= 2:
        return str(n) if n < 10 else "+"
    return next(mark for mark, low, high in NARROW_MARKS if n >= low and (high is None or n <= high))


def others_legend(counts, cell: int) -> str:
    """What the strip under the axis means, naming only the marks that appear."""
    if cell >= 2:
        return "digits: other labelled anomalies per bin (+ = ten or more)"
    present = {others_glyph(int(n), cell) for n in counts if n > 0}
    words = {"·": "· 1", "•": "• 2-9", "●": "● 10 or more"}
    steps = ", ".join(words[m] for m, _, _ in NARROW_MARKS if m in present)
    return "marks: other labelled anomalies per bin" + (f" ({steps})" if steps else "")


class HistogramPanel(Vertical):
    COMPONENT_CLASSES = {"histogram--normal", "histogram--case", "histogram--others", "histogram--dim",
                         "histogram--link"}

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.view = None
        self.message = "press h on a feature (evidence) or a candidate"

    def compose(self) -> ComposeResult:
        with Horizontal(id="hist-nav"):
            yield Button("◂ prev [", id="hist-prev", compact=True)
            yield Static("", id="hist-name")
            yield Button("next ] ▸", id="hist-next", compact=True)
            yield Button("shaped: off [s]", id="hist-shaped", compact=True)
        yield Static("", id="hist-plot")
        yield Static("", id="hist-legend")

    def on_mount(self) -> None:
        self.post_message(PanelMounted("histogram"))
        for button in self.query(Button):
            button.can_focus = False

    def on_button_pressed(self, event: Button.Pressed) -> None:
        event.stop()
        if event.button.id == "hist-shaped":
            self.post_message(HistogramShapedToggled())
        else:
            self.post_message(HistogramStep(-1 if event.button.id == "hist-prev" else 1))

    def _style(self, name: str):
        return self.get_component_rich_style(name, partial=True)

    @property
    def cell(self) -> int:
        """Characters per bin: two on a wide panel (smoother counts), else one."""
        return 2 if self.size.width >= WIDE else 1

    @property
    def bins(self) -> int:
        return max(10, (self.size.width - MARGIN) // self.cell)

    def _cell_for(self, bins: int) -> int:
        return max(1, self.cell if bins * self.cell <= self.size.width else 1)

    def on_resize(self) -> None:
        self.post_message(HistogramResized(self.bins))
        self._draw()

    def loading(self, label: str) -> None:
        self.message = f"counting {fmt.plain(label)} …"
        self.view = None
        self._draw()

    def failed(self, message: str) -> None:
        self.message = message
        self.view = None
        self._draw()

    def show(self, view) -> None:
        self.view = view
        self._draw()

    def _draw(self) -> None:
        plot = self.query_one("#hist-plot", Static)
        legend = self.query_one("#hist-legend", Static)
        name = self.query_one("#hist-name", Static)
        if self.view is None:
            name.update("")
            plot.update(Text(self.message, style=self._style("histogram--dim")))
            legend.update("")
            return
        v = self.view
        name.update(Text(fmt.plain(v.source.label), style="bold", no_wrap=True, overflow="ellipsis"))
        self.query_one("#hist-shaped", Button).label = f"shaped: {'on' if v.shaped else 'off'} [s]"
        h = v.counts
        legend.update(Text(
            f"bars: normal population, {v.n_normal} rows ({h.normal_below} left, {h.normal_above} right of the "
            f"range) · ┊▲ this case · {others_legend(h.others, self._cell_for(h.bins))}, {h.n_others} in all "
            f"({h.others_below} left, {h.others_above} right)", style=self._style("histogram--dim")))
        plot.update(self.render_plot(plot.size.height or (self.size.height - 4)))

    def render_plot(self, height: int) -> Text:
        v = self.view
        h = v.counts
        bins = h.bins
        rows = max(MIN_BAR_ROWS, height - FIXED_LINES)
        heights = bar_heights(h.normal, rows)
        normal_style, case_style = self._style("histogram--normal"), self._style("histogram--case")
        others_style, dim = self._style("histogram--others"), self._style("histogram--dim")
        out = Text(no_wrap=True, overflow="crop")
        out.append(v.scale, style=dim)
        if v.shape_note:
            out.append(f" · {v.shape_note}", style=dim)
        out.append(f" · tallest bar {int(h.normal.max())} normal rows\n", style=dim)
        cell = self._cell_for(bins)
        for r in range(rows - 1, -1, -1):
            for k in range(bins):
                level = int(min(max(heights[k] - r * STEPS_PER_CELL, 0), STEPS_PER_CELL))
                if k == h.case_bin:
                    out.append((EIGHTHS[level] if level else "┊") * cell, style=case_style)
                else:
                    out.append(EIGHTHS[level] * cell, style=normal_style)
            out.append("\n")
        width = bins * cell
        lo, hi = shown.reading(float(h.edges[0])), shown.reading(float(h.edges[-1]))
        out.append(lo + " " * max(1, width - len(lo) - len(hi)) + hi + "\n", style=dim)
        # the case marker line: ▲ under the case's bin, its description after it (or before, near the right)
        at = h.case_bin * cell
        label = f"▲ {fmt.plain(v.case)} = {shown.reading(h.case_value)}, {fmt.percent(v.normal_below_case)} of normal below"
        if h.case_bin < 0:
            out.append(f"this case has no value here ({fmt.MISSING})\n", style=case_style)
        elif at + len(label) <= width:
            out.append(" " * at + label + "\n", style=case_style)
        else:
            left = label[2:] + " ▲"
            out.append(" " * max(0, at - len(left) + 1) + left + "\n", style=case_style)
        for k in range(bins):
            out.append(others_glyph(int(h.others[k]), cell).ljust(cell), style=others_style)
        out.append("\n")
        return out
