"""Evidence for the selected case: per feature a signed z bar, percentile, share of log-density.

Every number comes from :func:`afterlook.analysis.workbench.case_evidence` (the
same values ``afterlook explain`` prints); the bar length from
:func:`afterlook.analysis.wording.bar_cells`. The layout narrows with the panel.
"""

from __future__ import annotations

import math

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Vertical
from textual.widgets import DataTable, Static

from ...analysis.wording import BAR_FULL_SCALE, bar_cells
from ...analysis import shown
from .. import format as fmt
from ..messages import FeatureHighlighted

WIDE_BAR_HALF = 6  # cells each side of the zero line on a wide panel
NARROW_BAR_HALF = 4
NARROW = 96  # panel width below which columns shrink


def signed_bar(z, half: int, style_low, style_high) -> Text:
    """``-███│`` below the normal mean, ``│███+`` above; ``◂``/``▸`` past the scale.

    The sign is drawn as a character, so the direction reads without colour.
    """
    text = Text(no_wrap=True)
    if z is None or not math.isfinite(z):
        text.append(" " * half + "?" + " " * half)
        return text
    cells, over = bar_cells(z, half)
    if z < 0 and cells:
        text.append(" " * (half - cells))
        text.append(("◂" if over else "-") + "█" * (cells - 1), style=style_low)
    else:
        text.append(" " * half)
    text.append("│")
    if z > 0 and cells:
        text.append("█" * (cells - 1) + ("▸" if over else "+"), style=style_high)
        text.append(" " * (half - cells))
    else:
        text.append(" " * half)
    return text


class EvidencePanel(Vertical):
    COMPONENT_CLASSES = {"evidence--low", "evidence--high", "evidence--extreme", "evidence--miss",
                         "evidence--flagged", "evidence--dim", "evidence--broken"}

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.view = None
        self.feature_names: list[str] = []
        self._drawn_narrow: bool | None = None

    def compose(self) -> ComposeResult:
        yield Static("select a case", id="evidence-head")
        yield Static("", id="evidence-context")
        yield DataTable(id="evidence-table", cursor_type="row", zebra_stripes=True)
        yield Static("", id="evidence-unit")
        yield Static("", id="evidence-legend")

    def _style(self, name: str):
        return self.get_component_rich_style(name, partial=True)

    @property
    def narrow(self) -> bool:
        return self.size.width < NARROW

    def on_resize(self) -> None:
        if self.view is not None and self.narrow != self._drawn_narrow:
            self.show(self.view)

    def clear(self, message: str) -> None:
        """No case selected (e.g. a filter matches nothing): say so instead of keeping the last case's numbers."""
        self.view = None
        self.query_one("#evidence-head", Static).update(Text(fmt.plain(message), style=self._style("evidence--dim")))
        self.query_one("#evidence-context", Static).update("")
        self.query_one("#evidence-table", DataTable).clear(columns=True)
        self.query_one("#evidence-unit", Static).display = False

    def show(self, view) -> None:
        """Draw an :class:`~afterlook.analysis.workbench.EvidenceView`."""
        self.view = view
        narrow = self._drawn_narrow = self.narrow
        ex = view.explain
        head = Text(no_wrap=True, overflow="ellipsis")
        head.append(fmt.plain(ex.case), style="bold")
        head.append("  ")
        head.append(view.standing, style=self._style("evidence--flagged" if ex.flagged else "evidence--miss"))
        head.append(f"\nlog-density {shown.log_density(ex.log_density)} vs threshold {shown.threshold(ex.threshold)}, "
                    f"margin {shown.margin(ex.margin)}: {'flagged' if ex.flagged else 'not flagged'}")
        self.query_one("#evidence-head", Static).update(head)
        context = Text(no_wrap=True, overflow="ellipsis", style=self._style("evidence--dim"))
        context.append(fmt.plain("  ".join([f"{ex.model_kind} model"] + [f"{k} {v}" for k, v in ex.context.items() if v])))
        self.query_one("#evidence-context", Static).update(context)

        half = NARROW_BAR_HALF if narrow else WIDE_BAR_HALF
        table = self.query_one("#evidence-table", DataTable)
        keep = self.highlighted_feature
        with table.prevent(DataTable.RowHighlighted):
            table.clear(columns=True)
            name_width = min(max([len(r.name) + 2 for r in view.rows] + [8]), 16 if narrow else 28)
            table.add_column("feature", key="feature", width=name_width)
            table.add_column(Text("value", justify="right"), key="value", width=7 if narrow else 9)
            table.add_column(Text("low│high", justify="center"), key="bar", width=2 * half + 1)
            table.add_column(Text("z", justify="right"), key="z", width=6)
            table.add_column("reads", key="reads", width=13)
            table.add_column(Text("pct", justify="right"), key="pct", width=6)
            table.add_column(Text("share", justify="right"), key="share", width=5)
            if view.full_model:
                table.add_column(Text("cond z", justify="right"), key="cond_z", width=6)
                table.add_column("relation", key="relation", width=18)
            low, high = self._style("evidence--low"), self._style("evidence--high")
            extreme = self._style("evidence--extreme")
            for r in view.rows:
                strong = r.reading.startswith("very")
                cells = [
                    Text(fmt.clip(r.name, name_width - 2) + (" *" if r.transform else "")),
                    Text(shown.reading(r.raw_value), justify="right"),
                    signed_bar(r.z, half, low + extreme if strong else low, high + extreme if strong else high),
                    Text(shown.z(r.z), justify="right"),
                    Text(r.reading, style=extreme if strong else None),
                    Text(fmt.percent(r.percentile), justify="right"),
                    Text(fmt.percent(r.share, 0), justify="right"),
                ]
                if view.full_model:
                    cells.append(Text(shown.z(r.conditional_z), justify="right"))
                    cells.append(Text(r.relation, style=self._style("evidence--broken") if r.relation else None))
                table.add_row(*cells, key=r.name)
            self.feature_names = [r.name for r in view.rows]
            if keep in self.feature_names:
                table.move_cursor(row=self.feature_names.index(keep), animate=False)
        self._show_unit(getattr(ex, "unit_context", None))
        legend = Text(style=self._style("evidence--dim"))
        pct = ("% of normal rows at or below" if getattr(view.explain, "percentiles", True)
               else "not available for an imported model")
        legend.append(f"z: sd from the normal mean (bar full at {BAR_FULL_SCALE:g}; - below, + above); pct: {pct}; "
                      "share: % of the case's log-density cost")
        if any(r.transform for r in view.rows):
            legend.append("; * transformed by the recipe: value is the reading; z, pct and share are on the "
                          "transformed scale, with + meaning a higher reading")
        if view.full_model:
            legend.append("; cond z: sd from the value expected given all other features")
        self.query_one("#evidence-legend", Static).update(legend)

    def _show_unit(self, ctx) -> None:
        """One line: the readings farthest from the case's own unit's normal, the fleet's z beside each
        (explain's unit context; shown only when the model knows each row's unit)."""
        box = self.query_one("#evidence-unit", Static)
        box.display = ctx is not None and bool(ctx.readings)
        if not box.display:
            return
        line = Text(no_wrap=True, overflow="ellipsis")
        # the most telling first: an 80-column line keeps the farthest reading and its verdict whole
        line.append(f"vs own {fmt.plain(ctx.unit)}: ", style="bold")
        for k, r in enumerate(ctx.by_distance()[:3]):
            line.append(" · " if k else "")
            line.append(f"{fmt.plain(r.feature)} z {shown.z(r.unit_z)}",
                        style=self._style("evidence--extreme") if r.only_against_its_unit else None)
            line.append(f" (fleet {shown.z(r.fleet_z)})", style=self._style("evidence--dim"))
            if r.only_against_its_unit:
                line.append(", far only from its own", style=self._style("evidence--broken"))
        box.update(line)

    @property
    def highlighted_feature(self) -> str | None:
        table = self.query_one("#evidence-table", DataTable)
        if self.feature_names and 0 <= table.cursor_row < len(self.feature_names):
            return self.feature_names[table.cursor_row]
        return None

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        event.stop()
        if event.row_key is not None and event.row_key.value is not None:
            self.post_message(FeatureHighlighted(str(event.row_key.value)))

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        event.stop()
