"""Candidates for the selected miss: progress while the search runs, then the ranked table and verdict."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.widgets import DataTable, ProgressBar, Static

from ...analysis.wording import candidate_verdict, heldout_gain_text, kind_words, stability_text
from ...analysis import shown
from ...core.expressions import FUNCTIONS
from .. import format as fmt
from ..messages import CandidateChosen, CandidateHighlighted, PanelMounted

VERDICT_WIDTH = 25
NARROW_VERDICT_WIDTH = 10
#: Lines of the highlighted candidate's detail (app.tcss: #cand-detail max-height).
DETAIL_LINES = 3
# narrow panels: the verdict in one word that fits its column (the detail line below has it in full)
SHORT_VERDICTS = {"holds-up": "holds up", "exposes-only": "exposes", "chance": "chance", "hurts": "hurts"}
NARROW = 100  # panel width below which the verdict column is cut short
# the columns other than the expression and the verdict, two cells of padding each, and the scrollbar
FIXED_COLUMNS = 2 + 6 + 8 + 7 + 5 + 4 + 2 * 8 + 2

LEGEND = ("case z: robust z of the case among normal rows · adj tail: chance of a value this extreme over every "
          "candidate tried · ΔF1 out: F1 change on held-out cases · found: fold searches that found it again · "
          "+FA: false alarms that re-fit adds · ✓ holds up, ? not · enter or a: apply")


class CandidatesPanel(Vertical):
    COMPONENT_CLASSES = {"candidates--finding", "candidates--chance", "candidates--dim", "candidates--stage"}

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.result = None
        self.case_id: str | None = None

    def compose(self) -> ComposeResult:
        yield Static("", id="cand-head")
        with Horizontal(id="cand-progress-row"):
            yield ProgressBar(total=100, show_eta=False, id="cand-progress")
            yield Static("", id="cand-stage")
        yield DataTable(id="cand-table", cursor_type="row", zebra_stripes=True)
        yield Static("", id="cand-detail")
        yield Static("", id="cand-verdict")
        yield Static("", id="cand-verdict-short")  # under 30 rows, in place of the two lines above
        yield Static(LEGEND, id="cand-legend")

    def on_mount(self) -> None:
        self.post_message(PanelMounted("candidates"))

    def _style(self, name: str):
        return self.get_component_rich_style(name, partial=True)

    def _progress_visible(self, visible: bool) -> None:
        self.query_one("#cand-progress-row").display = visible

    def idle(self, case_id: str | None, message: str) -> None:
        self.result, self.case_id = None, case_id
        self.query_one("#cand-head", Static).update(Text(fmt.plain(message), style=self._style("candidates--dim")))
        self._progress_visible(False)
        self.query_one("#cand-table", DataTable).clear(columns=True)
        self.query_one("#cand-detail", Static).update("")
        self._verdict("", "")

    def running(self, case_id: str) -> None:
        self.result, self.case_id = None, case_id
        self.query_one("#cand-head", Static).update(Text(f"searching candidates for {fmt.plain(case_id)} …"))
        self._progress_visible(True)
        self.query_one("#cand-progress", ProgressBar).update(total=100, progress=0)
        self.query_one("#cand-stage", Static).update("starting")
        self.query_one("#cand-table", DataTable).clear(columns=True)
        self.query_one("#cand-detail", Static).update("")
        self._verdict("", "")

    def progress(self, stage: str, fraction: float) -> None:
        # The fraction comes from discovery.suggest; shown as a bar and the stage in words.
        self.query_one("#cand-progress", ProgressBar).update(total=1.0, progress=fraction)
        self.query_one("#cand-stage", Static).update(Text(stage, style=self._style("candidates--stage")))

    def failed(self, case_id: str, message: str) -> None:
        self.idle(case_id, f"no candidates for {case_id}: {message}")

    def show(self, case_id: str, result) -> None:
        """Draw a :class:`~afterlook.analysis.discovery.SuggestResult`."""
        self.result, self.case_id = result, case_id
        self._progress_visible(False)
        head = Text()
        head.append(f"candidates for {fmt.plain(case_id)}", style="bold")
        head.append(f"  {result.tried} tried on {result.sample_rows} normal rows", style=self._style("candidates--dim"))
        self.query_one("#cand-head", Static).update(head)
        table = self.query_one("#cand-table", DataTable)
        width = max(self.size.width, 60)
        narrow = width < NARROW
        verdict_width = NARROW_VERDICT_WIDTH if narrow else VERDICT_WIDTH
        expr_width = max(12, width - FIXED_COLUMNS - verdict_width)
        finding, chance = self._style("candidates--finding"), self._style("candidates--chance")
        n_targets = len(result.cases)
        with table.prevent(DataTable.RowHighlighted):
            table.clear(columns=True)
            for label, key, w in (("#", "rank", 2), ("expression", "expr", expr_width), ("case z", "z", 6),
                                  ("adj tail", "tail", 8), ("ΔF1 out", "heldout", 7), ("found", "found", 5),
                                  ("+FA", "fa", 4), ("verdict", "verdict", verdict_width)):
                right = key not in ("expr", "verdict")
                table.add_column(Text(label, justify="right") if right else label, key=key, width=w)
            for k, c in enumerate(result.candidates):
                words = SHORT_VERDICTS.get(c.verdict, candidate_verdict(c)) if narrow else candidate_verdict(c)
                gain = heldout_gain_text(c)
                found = stability_text(c)
                good = c.verdict == "holds-up" or (not c.verdict and c.beyond_chance)
                table.add_row(
                    Text(str(k + 1), justify="right"),
                    Text(fmt.squeeze(c.expression, expr_width, FUNCTIONS)),
                    Text(shown.z(c.case_z), justify="right"),
                    Text(shown.tail(c.adjusted_tail), justify="right"),
                    Text(fmt.MISSING if gain == "n/a" else gain, justify="right"),
                    Text(fmt.MISSING if found == "n/a" else found, justify="right"),
                    Text(fmt.count_change(c.false_alarms_added), justify="right"),
                    Text(fmt.clip(("✓ " if good else "? ") + words, verdict_width), style=finding if good else chance),
                    key=str(k),
                )
        self._detail(0)
        verdict = Text()
        verdict.append("verdict: ", style="bold")
        verdict.append(result.verdict(), style=finding if result.any_beyond_chance else chance)
        verdict.append("\nrecommended: ", style="bold")
        if result.recommended:  # the name only: the detail line above shows the highlighted expression
            best = next(c for c in result.candidates if c.name == result.recommended)
            verdict.append(f"{best.name} (holds up, held-out F1 {best.heldout.gain:+.3f}); a applies it",
                           style=finding)
        else:
            verdict.append(f"none ({result.recommended_reason()})", style=chance)
        self._verdict(verdict, self._short_verdict(result))

    def _verdict(self, long, short) -> None:
        self.query_one("#cand-verdict", Static).update(long)
        self.query_one("#cand-verdict-short", Static).update(short)

    def _short_verdict(self, result) -> Text:
        """The verdict and the recommendation in one line (the help screen and wider terminals say more)."""
        finding, chance = self._style("candidates--finding"), self._style("candidates--chance")
        n = result.beyond_chance_total or sum(c.beyond_chance for c in result.candidates)
        t = Text(no_wrap=True, overflow="ellipsis")
        t.append(f"{n} of {result.tried} beyond chance", style=finding if n else chance)
        t.append(" · recommended: ", style="bold")
        if result.recommended:
            best = next(c for c in result.candidates if c.name == result.recommended)
            t.append(f"{fmt.plain(best.name)} (held-out F1 {best.heldout.gain:+.3f}); a applies", style=finding)
        else:
            t.append("none (wider screen or ? says why)", style=chance)
        return t

    def on_resize(self) -> None:
        # the expression column takes the room left: redraw for the new width, cursor kept
        if self.result is not None and self.case_id is not None:
            table = self.query_one("#cand-table", DataTable)
            row = table.cursor_row
            self.show(self.case_id, self.result)
            if 0 <= row < table.row_count:
                table.move_cursor(row=row, animate=False)

    @property
    def highlighted_index(self) -> int:
        table = self.query_one("#cand-table", DataTable)
        return max(table.cursor_row, 0) if self.result is not None and table.row_count else 0

    def focus_table(self) -> None:
        self.query_one("#cand-table", DataTable).focus()

    def _detail(self, index: int) -> None:
        """The highlighted candidate in full: the table cuts long expressions."""
        detail = self.query_one("#cand-detail", Static)
        if self.result is None or not 0 <= index < len(self.result.candidates):
            detail.update("")
            return
        c = self.result.candidates[index]
        good = c.verdict == "holds-up" or (not c.verdict and c.beyond_chance)
        what = f"{kind_words(c.kind)}; " if kind_words(c.kind) else ""  # a unit kind, in words
        verdict_style = self._style("candidates--finding" if good else "candidates--chance")

        def line(with_name: bool) -> Text:
            t = Text()
            t.append(f"{index + 1}: {fmt.plain(c.name)} = " if with_name else f"{index + 1}: ", style="bold")
            t.append(fmt.plain(c.expression))
            t.append(f"  ({what}{candidate_verdict(c)})", style=verdict_style)
            return t

        t = line(True)
        # The line has DETAIL_LINES at most: when name, expression and verdict need more (a unit pair at 80
        # columns), the generated name goes (the recommended line and `a` carry it), never the verdict.
        width = detail.size.width or max(self.app.size.width - 4, 20)
        if len(t.wrap(self.app.console, width)) > DETAIL_LINES:
            t = line(False)
        detail.update(t)

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        event.stop()
        if self.result is not None and event.row_key is not None and event.row_key.value is not None:
            self._detail(int(event.row_key.value))
            self.post_message(CandidateHighlighted(int(event.row_key.value)))

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        event.stop()
        if self.result is not None and event.row_key is not None and event.row_key.value is not None:
            self.post_message(CandidateChosen(int(event.row_key.value)))
