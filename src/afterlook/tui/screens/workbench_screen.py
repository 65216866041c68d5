"""The workbench: status line, case list, and the evidence / candidates / histogram / try tabs."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.screen import Screen
from textual.lazy import Lazy
from textual.widgets import Footer, TabbedContent, TabPane

from ..keys import bindings
from ..messages import WorkbenchReady
from ..widgets.candidates_panel import CandidatesPanel
from ..widgets.case_list import CaseList
from ..widgets.evidence_panel import EvidencePanel
from ..widgets.histogram_panel import HistogramPanel
from ..widgets.pair_panel import PairPanel
from ..widgets.status_line import StatusLine
from ..widgets.try_panel import TryPanel

TABS = ("evidence", "candidates", "histogram", "try")


class WorkbenchScreen(Screen):
    """Lays the widgets out; every key runs an App action (the App owns the state)."""

    BINDINGS = bindings()
    # classes for the stylesheet: -narrow under 100 columns, -short under 30 rows
    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (100, "-wide")]
    VERTICAL_BREAKPOINTS = [(0, "-short"), (30, "-tall")]

    def __init__(self, context_columns: dict[str, int], case_width: int = 22, **kwargs) -> None:
        super().__init__(**kwargs)
        self.context_columns = context_columns
        self.case_width = case_width

    def compose(self) -> ComposeResult:
        yield StatusLine(id="status")
        yield CaseList(self.context_columns, self.case_width, id="case-list")
        with TabbedContent(initial="evidence", id="detail"):
            with TabPane("evidence \\[e]", id="evidence"):
                yield EvidencePanel(id="evidence-panel")
            # hidden at start: mounted just after the first paint (a faster first screen)
            with TabPane("candidates \\[c]", id="candidates"):
                yield Lazy(CandidatesPanel(id="candidates-panel"))
            with TabPane("histogram \\[h]", id="histogram"):
                yield Lazy(HistogramPanel(id="histogram-panel"))
            with TabPane("pair \\[p]", id="pair"):
                yield Lazy(PairPanel(id="pair-panel"))
            with TabPane("try \\[t]", id="try"):
                yield Lazy(TryPanel(id="try-panel"))
        yield Footer(show_command_palette=False, compact=True)

    def on_mount(self) -> None:
        self.post_message(WorkbenchReady())
