"""The workbench App: owns the state, runs the slow work in workers, tells the widgets what to show.

State lives here and only here (the selected case, toggles, candidates per
case, the last try, the casebook's case ids). Widgets post messages up
(:mod:`afterlook.tui.messages`); the App answers by calling their ``show``
methods or setting their attributes. Slow work (the candidate search, a
re-fit, histogram counts, casebook reads and writes) runs in
``@work(thread=True, exclusive=True)`` workers, one group per kind, so a new
request cancels the stale one; a cancelled worker's result is dropped.

Every number comes from :mod:`afterlook.analysis.workbench` or the API; the
widgets only format it.
"""

from __future__ import annotations

import os

from textual import on, work
from textual.app import App
from textual.binding import Binding
from textual.theme import Theme
from textual.widgets import Input, TabbedContent
from textual.worker import get_current_worker

from ..analysis import workbench as wd
from ..core.errors import AfterlookError
from . import format as fmt
from . import messages as msg
from .casebook_flow import CasebookFlow
from .histogram_flow import HistogramFlow
from .pair_flow import PairFlow
from .failures import internal_error
from . import pace
from .screens.help import HelpScreen
from .screens.workbench_screen import WorkbenchScreen
from .widgets.candidates_panel import CandidatesPanel
from .widgets.case_list import CaseList, context_widths
from .widgets.evidence_panel import EvidencePanel
from .widgets.histogram_panel import HistogramPanel
from .widgets.pair_panel import PairPanel
from .widgets.status_line import StatusLine
from .widgets.try_panel import TryPanel

#: Our own palette: copper and teal on a dark slate.
THEME = Theme(
    name="afterlook",
    primary="#C9853A",
    secondary="#3F8F8A",
    accent="#D9B44A",
    warning="#D9A441",
    error="#D2584F",
    success="#6BAF72",
    foreground="#E4E1D8",
    background="#15171C",
    surface="#1C1F26",
    panel="#262A33",
    dark=True,
)

#: Seconds the cursor must rest on a miss before its candidate search starts.
CANDIDATE_DELAY = 0.4


class _Stale(Exception):
    """Raised inside a worker's progress callback once the worker was cancelled."""


class WorkbenchApp(CasebookFlow, HistogramFlow, PairFlow, App[int]):
    CSS_PATH = "app.tcss"
    TITLE = "afterlook"
    ENABLE_COMMAND_PALETTE = False
    # not a priority binding: while a box has the focus the screen's ctrl+q (shown in the footer there)
    # answers first; elsewhere this one does (keys.py)
    BINDINGS = [Binding("ctrl+q", "quit", "quit", show=False)]

    def __init__(self, session: wd.WorkbenchSession, *, auto_candidates: bool = True,
                 candidate_delay: float = CANDIDATE_DELAY, candidates_top: int = 10) -> None:
        super().__init__()
        if pace.ANIMATIONS_ENV not in os.environ:
            self.animation_level = "none"  # see tui/pace.py; the user's TEXTUAL_ANIMATIONS wins
        self.session = session
        self.auto_candidates = auto_candidates
        self.candidate_delay = candidate_delay
        self.candidates_top = candidates_top
        self.summary = wd.status_summary(session)
        self.counts = wd.case_counts(session)
        self.context_columns = context_widths(session.cases.frame, session.cases.context_columns)
        # case list
        self.show_near = False
        self.show_false_alarms = False
        self.filter_text = ""
        self.rows: list[wd.CaseRow] = []
        self.selected_case: str | None = None
        self.evidence: wd.EvidenceView | None = None
        self.feature: str | None = None
        # candidates, per case
        self.candidates: dict[str, object] = {}
        self.candidates_running: str | None = None
        self.candidate_index = 0
        self._candidate_timer = None
        # histogram
        self.hist_source: wd.HistogramSource | None = None
        self.hist_shaped = False
        self.histogram: wd.HistogramView | None = None
        # the last try
        self.trial = None
        self.trial_view: wd.TrialView | None = None
        self.trial_case: str | None = None
        self.trial_running: str | None = None
        # casebook
        self.book_ids: set[str] = set()
        self.saved_this_session: list[str] = []
        self.held_notes: list[tuple[str, dict]] = []  # notifications waiting for a dialog to close (say)  # for the lines printed after the workbench closes
        self.book_loaded = False
        self.saving = False
        self.zoomed = False
        self.register_theme(THEME)
        self.theme = "afterlook"

    def notify(self, message: str, *, title: str = "", severity="information", timeout: float | None = None,
               markup: bool = False) -> None:
        """Every notification is plain text made printable: messages quote case ids, names and file paths."""
        super().notify(fmt.plain(message), title=fmt.plain(title), severity=severity, timeout=timeout, markup=False)

    def get_default_screen(self) -> WorkbenchScreen:
        # the case column fits the longest id, within reason (formatting, not statistics)
        case_width = min(max([len(str(c)) for c in self.session.ids] + [4]), 28)
        self.workbench = WorkbenchScreen(self.context_columns, case_width, id="workbench")
        return self.workbench

    # -- widgets (found on the workbench screen even under a modal) -----------
    @property
    def case_list(self) -> CaseList:
        return self.workbench.query_one(CaseList)

    @property
    def evidence_panel(self) -> EvidencePanel:
        return self.workbench.query_one(EvidencePanel)

    # The three hidden tabs are mounted just after the first paint (faster first
    # screen): until then these are None, the App keeps the state and hands it
    # over when each panel announces itself (on_panel_mounted).
    @property
    def candidates_panel(self) -> CandidatesPanel | None:
        return next(iter(self.workbench.query(CandidatesPanel)), None)

    @property
    def histogram_panel(self) -> HistogramPanel | None:
        return next(iter(self.workbench.query(HistogramPanel)), None)

    @property
    def pair_panel(self) -> PairPanel | None:
        return next(iter(self.workbench.query(PairPanel)), None)

    @property
    def try_panel(self) -> TryPanel | None:
        return next(iter(self.workbench.query(TryPanel)), None)

    def on_panel_mounted(self, message: msg.PanelMounted) -> None:
        tabs = next(iter(self.workbench.query(TabbedContent)), None)
        if tabs is None:  # the message arrived after the workbench was taken down (quitting at start-up)
            return
        if message.panel == "candidates":
            self._show_candidates_state()
        elif message.panel == "try":
            self._try_status_hint()
            if self.try_panel is None:
                return
            if self.trial_view is not None:
                self.try_panel.show(self.trial_view)
            elif self.trial_running:
                self.try_panel.running(self.trial_running)
        elif message.panel == "histogram" and tabs.active == "histogram":
            self.request_histogram()
        elif message.panel == "pair" and tabs.active == "pair":
            self.request_pair()

    def _try_status_hint(self) -> None:
        if self.try_panel is not None:
            self.try_panel.set_expression_status(
                None, "columns: " + ", ".join(self.session.cases.numeric_columns
                                              + self.session.model.recipe.derived_names))

    @property
    def tabs(self) -> TabbedContent:
        return self.workbench.query_one(TabbedContent)

    # -- start ----------------------------------------------------------------
    def on_workbench_ready(self, _: msg.WorkbenchReady) -> None:
        self.workbench.query_one(StatusLine).summary = self.summary
        self._try_status_hint()
        self.refresh_cases()
        self.case_list.focus_table()
        self.load_casebook()

    def refresh_cases(self) -> None:
        self.rows = wd.case_rows(self.session, near=self.show_near, false_alarms=self.show_false_alarms,
                                 text=self.filter_text)
        landed = self.case_list.show(
            self.rows, selected=self.selected_case, book=self.book_ids, flips=self._flips(), counts=self.counts,
            near=self.show_near, false_alarms=self.show_false_alarms, filter_text=self.filter_text,
            book_file=os.path.basename(self.session.casebook_path), book_loaded=self.book_loaded)
        if landed is not None and landed != self.selected_case:
            self.select_case(landed)
        elif not self.rows and self.selected_case is not None:
            self._select_nothing("no case matches the filter" if self.filter_text else "no case to show")

    def _select_nothing(self, why: str) -> None:
        """The list is empty: nothing is selected and no panel keeps showing the last case."""
        self.selected_case, self.evidence = None, None
        if self._candidate_timer is not None:
            self._candidate_timer.stop()
            self._candidate_timer = None
        self.evidence_panel.clear(why)
        if self.candidates_panel is not None:
            self.candidates_panel.idle(None, why)

    def _flips(self) -> dict[str, str]:
        v = self.trial_view
        if v is None:
            return {}
        return {c.case: c.words for c in v.now_flagged + v.no_longer_flagged}

    def _kind(self, case_id: str | None) -> str | None:
        return next((r.kind for r in self.rows if r.case == case_id), None)

    # -- selecting a case --------------------------------------------------------
    def on_case_highlighted(self, message: msg.CaseHighlighted) -> None:
        self.select_case(message.case_id)

    def select_case(self, case_id: str | None) -> None:
        if case_id is None or case_id == self.selected_case:
            return
        self.selected_case = case_id
        try:
            self.evidence = wd.case_evidence(self.session, case_id)
        except AfterlookError as exc:
            self.notify(exc.message, title="evidence", severity="error")
        else:
            self.evidence_panel.show(self.evidence)
            if self.feature not in [r.name for r in self.evidence.rows]:
                self.feature = self.evidence.rows[0].name if self.evidence.rows else None
        self.candidate_index = 0
        self._show_candidates_state()
        if self._candidate_timer is not None:
            self._candidate_timer.stop()
            self._candidate_timer = None
        if (self.auto_candidates and self._kind(case_id) == wd.KIND_MISS and case_id not in self.candidates
                and self.candidates_running != case_id):
            self._candidate_timer = self.set_timer(self.candidate_delay, lambda: self.start_candidates(case_id))
        if self.tabs.active == "histogram":
            self.request_histogram()
        elif self.tabs.active == "pair":
            self.request_pair()

    # -- filter and toggles -------------------------------------------------------
    def on_filter_changed(self, message: msg.FilterChanged) -> None:
        self.filter_text = message.text
        self.refresh_cases()

    def action_filter(self) -> None:
        if self.zoomed:
            self.action_zoom()
        self.case_list.focus_filter()

    def action_leave_input(self) -> None:
        if self.zoomed:
            self.action_zoom()
        self.case_list.focus_table()

    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        # "esc: back to the list" is offered (and shown in the footer) only while typing in a box
        if action in ("leave_input", "help_while_typing", "quit_while_typing"):
            return isinstance(self.focused, Input)
        return True

    def action_toggle_near(self) -> None:
        self.show_near = not self.show_near
        self.refresh_cases()

    def action_toggle_false_alarms(self) -> None:
        self.show_false_alarms = not self.show_false_alarms
        self.refresh_cases()

    def action_zoom(self) -> None:
        self.zoomed = not self.zoomed
        self.workbench.set_class(self.zoomed, "-zoomed")
        if not self.zoomed:
            self.case_list.focus_table()

    def action_show_tab(self, tab: str) -> None:
        self.tabs.active = tab
        if tab == "histogram":
            self._ensure_histogram()

    @on(TabbedContent.TabActivated)
    def _tab_activated(self, event: TabbedContent.TabActivated) -> None:
        if event.pane.id == "histogram":
            self._ensure_histogram()
        elif event.pane.id == "pair":
            self.request_pair()

    def action_help(self) -> None:
        self.push_screen(HelpScreen(), callback=lambda _: self.flush_notes())

    def say(self, message: str, **kwargs) -> None:
        """A notification, held back while a dialog is open (it would draw over it) and shown on return."""
        if self.screen is self.workbench:
            self.notify(message, **kwargs)
        else:
            self.held_notes.append((message, kwargs))

    def flush_notes(self) -> None:
        notes, self.held_notes = self.held_notes, []
        for message, kwargs in notes:
            self.notify(message, **kwargs)

    def action_quit(self) -> None:
        self.exit(0)

    def action_help_while_typing(self) -> None:
        self.action_help()

    def action_quit_while_typing(self) -> None:
        self.action_quit()

    # -- evidence -------------------------------------------------------------------
    def on_feature_highlighted(self, message: msg.FeatureHighlighted) -> None:
        self.feature = message.name

    # -- candidates ---------------------------------------------------------------
    def _show_candidates_state(self) -> None:
        case = self.selected_case
        panel = self.candidates_panel
        if panel is None or case is None:
            return
        if case in self.candidates:
            panel.show(case, self.candidates[case])
        elif self.candidates_running == case:
            panel.running(case)
        elif self.auto_candidates and self._kind(case) == wd.KIND_MISS:
            panel.idle(case, f"the candidate search for {case} starts when the cursor rests here (or press c)")
        else:
            panel.idle(case, f"press c to search candidates for {case}")

    def action_candidates(self) -> None:
        self.tabs.active = "candidates"
        case = self.selected_case
        if case is not None and case not in self.candidates and self.candidates_running != case:
            if self._candidate_timer is not None:
                self._candidate_timer.stop()
                self._candidate_timer = None
            self.start_candidates(case)
        if self.candidates_panel is not None:
            self.candidates_panel.focus_table()

    def start_candidates(self, case_id: str) -> None:
        self._candidate_timer = None
        if case_id != self.selected_case or case_id in self.candidates:
            return
        self.candidates_running = case_id
        if self.candidates_panel is not None:
            self.candidates_panel.running(case_id)
        self.run_candidates(case_id)

    @work(thread=True, exclusive=True, group="candidates")
    def run_candidates(self, case_id: str) -> None:
        worker = get_current_worker()
        due = pace.Every(pace.PROGRESS_EVERY)

        def progress(stage: str, fraction: float) -> None:
            if worker.is_cancelled:  # every report: a stale search stops at its next one
                raise _Stale()
            if due() or fraction >= 1.0:  # the bar: a few frames a second, and the end
                self.post_message(msg.CandidatesProgress(case_id, stage, fraction))

        try:
            result = wd.find_candidates(self.session, case_id, top=self.candidates_top, progress=progress)
        except _Stale:
            return
        except AfterlookError as exc:
            if not worker.is_cancelled:
                self.post_message(msg.WorkFailed("candidates", exc.message, case_id))
            return
        except Exception as exc:  # a bug, not bad input: say so, keep the workbench alive
            self.post_message(msg.WorkFailed("candidates", internal_error(exc), case_id))
            return
        if not worker.is_cancelled:
            self.post_message(msg.CandidatesReady(case_id, result))

    def on_candidates_progress(self, message: msg.CandidatesProgress) -> None:
        if message.case_id == self.candidates_running == self.selected_case and self.candidates_panel is not None:
            self.candidates_panel.progress(message.stage, message.fraction)

    def on_candidates_ready(self, message: msg.CandidatesReady) -> None:
        self.candidates[message.case_id] = message.result
        if self.candidates_running == message.case_id:
            self.candidates_running = None
        if message.case_id == self.selected_case:
            self.candidate_index = 0
            self._show_candidates_state()

    def on_candidate_highlighted(self, message: msg.CandidateHighlighted) -> None:
        self.candidate_index = message.index
        self.request_pair()

    def on_candidate_chosen(self, message: msg.CandidateChosen) -> None:
        self.candidate_index = message.index
        self.action_apply_candidate()

    def action_apply_candidate(self) -> None:
        case = self.selected_case
        result = self.candidates.get(case)
        if result is None:
            self.notify(f"no candidates for {case} yet: press c and wait for the search", title="apply",
                        severity="warning")
            return
        if not result.candidates:
            self.notify("the search found no candidate to apply", title="apply", severity="warning")
            return
        index = self.candidate_index if 0 <= self.candidate_index < len(result.candidates) else 0
        c = result.candidates[index]
        self.start_trial({c.name: c.expression}, f"{c.name} = {c.expression}")
        # The candidates table is hidden by the switch to the try tab: give the
        # focus back to the case list so keys such as b (save) keep working.
        self.case_list.focus_table()

    # -- try --------------------------------------------------------------------------
    def action_type_expression(self) -> None:
        self.tabs.active = "try"
        if self.try_panel is not None:
            self.try_panel.focus_expression()

    def _check(self, text: str) -> tuple[str, str]:
        return wd.check_expression(self.session, text)

    def on_expression_edited(self, message: msg.ExpressionEdited) -> None:
        if not message.text.strip():
            self.try_panel.set_expression_status(None, "type NAME = EXPR or EXPR; enter tries it")
            return
        try:
            name, expr = self._check(message.text)
        except AfterlookError as exc:
            self.try_panel.set_expression_status(False, exc.message)
        else:
            self.try_panel.set_expression_status(True, f"enter re-fits with {name} = {expr}")

    def on_expression_submitted(self, message: msg.ExpressionSubmitted) -> None:
        try:
            name, expr = self._check(message.text)
        except AfterlookError as exc:
            self.try_panel.set_expression_status(False, exc.message)
            self.bell()
            return
        self.case_list.focus_table()  # the keys work again; t comes back to the (kept) text
        self.start_trial({name: expr}, f"{name} = {expr}")

    def start_trial(self, derive: dict[str, str], label: str) -> None:
        case = self.selected_case
        if case is None:
            return
        self.trial_running = label
        self.tabs.active = "try"
        if self.try_panel is not None:
            self.try_panel.running(label)
        self.run_trial(case, derive, label)

    @work(thread=True, exclusive=True, group="trial")
    def run_trial(self, case_id: str, derive: dict[str, str], label: str) -> None:
        worker = get_current_worker()
        try:
            result = wd.try_candidate(self.session, derive, focus=[case_id])
            view = wd.trial_view(result, case_id)
        except AfterlookError as exc:
            if not worker.is_cancelled:
                self.post_message(msg.WorkFailed("try", exc.message, case_id))
            return
        except Exception as exc:
            self.post_message(msg.WorkFailed("try", internal_error(exc), case_id))
            return
        if not worker.is_cancelled:
            self.post_message(msg.TrialReady(case_id, label, result, view))

    def on_trial_ready(self, message: msg.TrialReady) -> None:
        if message.label != self.trial_running:
            return  # a newer try was asked for
        self.trial_running = None
        self.trial, self.trial_view = message.result, message.view
        self.trial_case = message.case_id
        if self.try_panel is not None:
            self.try_panel.show(message.view)
        self.case_list.mark(book=self.book_ids, flips=self._flips())
        c = message.view.case
        # the try tab shows these numbers itself: a toast there would only cover them
        if c is not None and self.tabs.active != "try":
            self.say(f"{c.case}: {c.words}; misses caught {message.view.misses_caught}, false alarms added "
                     f"{message.view.false_alarms_added:+d}", title="try")

    # -- failures ------------------------------------------------------------------------
    def on_work_failed(self, message: msg.WorkFailed) -> None:
        self.say(message.message, title=message.what, severity="error", timeout=8)
        if message.what == "candidates":
            if self.candidates_running == message.case_id:
                self.candidates_running = None
            if message.case_id == self.selected_case and self.candidates_panel is not None:
                self.candidates_panel.failed(message.case_id, message.message)
        elif message.what == "try":
            label = self.trial_running or ""
            self.trial_running = None
            if self.try_panel is not None:
                self.try_panel.failed(label, message.message)
        elif message.what == "histogram":
            if self.histogram_panel is not None:
                self.histogram_panel.failed(message.message)
        elif message.what == "pair":
            if self.pair_panel is not None:
                self.pair_panel.failed(message.message)
        elif message.what == "casebook":
            self.saving = False
