"""Try a derived feature: an expression checked as you type, then the before/after comparison."""

from __future__ import annotations

from rich.table import Table
from rich.text import Text
from rich import box
from textual.app import ComposeResult
from textual.containers import VerticalScroll
from textual.widgets import Input, Static

from ...analysis.wording import flip_words
from ...analysis import shown
from .. import format as fmt
from ..messages import ExpressionEdited, ExpressionSubmitted, PanelMounted

PLACEHOLDER = "NAME = EXPR or EXPR, e.g. head_per_amp = (discharge_bar - suction_bar) / motor_current_a"
FLIPS_SHOWN = 12
# Refreshes to wait for the comparison to be laid out before giving up the scroll to it.
_SCROLL_TRIES = 200


class TryPanel(VerticalScroll):
    COMPONENT_CLASSES = {"try--ok", "try--error", "try--dim", "try--flagged", "try--unflagged", "try--running"}

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.view = None
        self._scroll_pending = False
        self._scroll_tries = 0

    def compose(self) -> ComposeResult:
        yield Input(placeholder=PLACEHOLDER, id="expression", compact=True)
        yield Static("", id="expression-status")
        yield Static("apply a candidate (a) or type an expression (t), then enter: the model is re-fitted with "
                     "the feature, the threshold re-picked by the same policy and every case re-scored.",
                     id="trial-head")
        yield Static("", id="trial-case")
        yield Static("", id="trial-metrics")
        yield Static("", id="trial-flips")

    def on_mount(self) -> None:
        self.post_message(PanelMounted("try"))

    def _style(self, name: str):
        return self.get_component_rich_style(name, partial=True)

    # -- the expression -----------------------------------------------------
    def focus_expression(self) -> None:
        self._scroll_pending = False  # typing wins over a comparison still waiting to scroll
        self.scroll_home(animate=False)  # the box sits above the last comparison
        self.query_one("#expression", Input).focus()

    def set_expression_status(self, ok: bool | None, message: str) -> None:
        """ok True: valid; False: the error as you type; None: nothing typed."""
        t = Text()
        if ok is True:
            t.append("✓ " + fmt.plain(message), style=self._style("try--ok"))
        elif ok is False:
            t.append("✗ " + fmt.plain(message), style=self._style("try--error"))
        else:
            t.append(fmt.plain(message), style=self._style("try--dim"))
        self.query_one("#expression-status", Static).update(t)

    def on_input_changed(self, event: Input.Changed) -> None:
        if event.input.id == "expression":
            event.stop()
            self.post_message(ExpressionEdited(event.value))

    def on_input_submitted(self, event: Input.Submitted) -> None:
        if event.input.id == "expression":
            event.stop()
            self.post_message(ExpressionSubmitted(event.value))

    # -- the comparison -------------------------------------------------------
    def running(self, label: str) -> None:
        self.query_one("#trial-head", Static).update(
            Text(f"re-fitting with {fmt.plain(label)} and re-scoring every case …", style=self._style("try--running")))

    def failed(self, label: str, message: str) -> None:
        self.query_one("#trial-head", Static).update(
            Text(f"could not try {fmt.plain(label)}: {fmt.plain(message)}", style=self._style("try--error")))

    def show(self, view) -> None:
        """Draw a :class:`~afterlook.analysis.workbench.TrialView`."""
        self.view = view
        head = Text()
        head.append("tried ", style="bold")
        head.append(fmt.plain(", ".join(f"{n} = {e}" for n, e in view.derive)), style="bold")
        head.append(f"\nre-fitted on {fmt.plain(fmt.short_paths(view.training_source))}", style=self._style("try--dim"))
        head.append(f"\nmisses caught: {view.misses_caught} · false alarms added: "
                    f"{fmt.count_change(view.false_alarms_added)}")
        for w in view.warnings:
            head.append(f"\nwarning: {fmt.plain(fmt.short_paths(w))}", style=self._style("try--error"))
        self.query_one("#trial-head", Static).update(head)

        t = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
        t.add_column("")
        for col in ("before", "after", "change"):
            t.add_column(col, justify="right", no_wrap=True)
        for m in view.metrics:
            if m.integer:
                t.add_row(Text(fmt.plain(m.name)), str(m.before), str(m.after), fmt.count_change(m.change))
            else:
                if m.name == "threshold":
                    cells = (shown.threshold(m.before), shown.threshold(m.after), shown.margin(m.change))
                else:
                    cells = (shown.share(m.before), shown.share(m.after), shown.share_change(m.change))
                t.add_row(Text(fmt.plain(m.name)), *cells)
        self.query_one("#trial-metrics", Static).update(t)

        case = Text()
        c = view.case
        if c is not None:
            case.append("\n")
            case.append(f"{fmt.plain(c.case)}: ", style="bold")
            case.append(f"log-density {shown.log_density(c.log_density_before)} vs threshold "
                        f"{shown.threshold(view.threshold_before)} (margin {shown.margin(view.margin_before)}, "
                        f"{'flagged' if c.flagged_before else 'not flagged'})")
            case.append(f"\n  → {shown.log_density(c.log_density_after)} vs {shown.threshold(view.threshold_after)} "
                        f"(margin {shown.margin(view.margin_after)}, {'flagged' if c.flagged_after else 'not flagged'})")
            case.append("  ")
            case.append(c.words.upper(), style=self._style("try--flagged" if c.flagged_after else "try--unflagged"))
        self.query_one("#trial-case", Static).update(case)

        flips = Text()
        for title, rows in ((flip_words(False, True), view.now_flagged),
                            (flip_words(True, False), view.no_longer_flagged)):
            n, n_anomaly, n_normal = view.counts(rows)
            flips.append(f"\n{title}: {n} ({n_anomaly} labelled anomaly, {n_normal} labelled normal)", style="bold")
            for r in rows[:FLIPS_SHOWN]:
                flips.append(f"\n  {'+' if r.flagged_after else '-'} {fmt.plain(r.case)}  {r.label:<7}  "
                             f"{shown.log_density(r.log_density_before)} → {shown.log_density(r.log_density_after)}")
            if len(rows) > FLIPS_SHOWN:
                flips.append(f"\n  … {len(rows) - FLIPS_SHOWN} more", style=self._style("try--dim"))
        self.query_one("#trial-flips", Static).update(flips)
        # On a short screen the comparison starts below the expression box: bring
        # it into view once the new content is laid out. Under load the layout can
        # land several refreshes later; a scroll asked for before then is clamped
        # to the old, shorter content, and one forced before the scrollbar is shown
        # leaves its thumb drawn at the top (both seen). So the request stays
        # pending until the panel can scroll and has scrolled to the comparison,
        # retried after refreshes (a bounded number) and on every change of the
        # panel's content or size.
        self._scroll_pending = True
        self._scroll_tries = 0
        self.call_after_refresh(self._scroll_to_result)

    def _scroll_to_result(self) -> None:
        if self.view is None or not self._scroll_pending:
            return
        head = self.query_one("#trial-head", Static).virtual_region_with_margin  # its blank line above too
        if not head.size or (self.max_scroll_y > 0 and not self.allow_vertical_scroll):
            # Not laid out yet, or the scrollbar not shown yet: after the next refresh.
            self._scroll_tries += 1
            if self._scroll_tries <= _SCROLL_TRIES:
                self.call_after_refresh(self._scroll_to_result)
            return
        target = min(head.y, self.max_scroll_y)
        self.scroll_to(y=target, animate=False, immediate=True)
        if target == head.y:  # the whole way: done; otherwise the growing content calls again
            self._scroll_pending = False

    def watch_virtual_size(self, old, new) -> None:
        self._scroll_to_result()

    def on_resize(self, event) -> None:
        self._scroll_to_result()
