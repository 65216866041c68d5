"""The workbench's histogram tab: which feature or candidate to draw, and its counts from a worker.

A mixin of :class:`afterlook.tui.app.WorkbenchApp`, which owns the state it
reads (the session, the selected case and feature, the candidates) and the
widgets it updates.
"""

from __future__ import annotations

from textual import work
from textual.worker import get_current_worker

from ..analysis import workbench as wd
from ..core.errors import AfterlookError
from . import messages as msg
from .failures import internal_error


class HistogramFlow:
    """Choosing the histogram's source, asking for its counts, showing them."""

    def action_histogram(self) -> None:
        source = None
        result = self.candidates.get(self.selected_case)
        focused = self.focused
        panel = self.candidates_panel
        in_candidates = focused is not None and panel is not None and panel in focused.ancestors_with_self
        if in_candidates and result is not None and result.candidates:
            c = result.candidates[min(self.candidate_index, len(result.candidates) - 1)]
            source = wd.HistogramSource("candidate", c.name, c.expression)
        elif self.feature is not None:
            source = wd.HistogramSource("feature", self.feature)
        if source is not None:
            self.hist_source = source
        self.tabs.active = "histogram"
        self.request_histogram()

    def action_toggle_shaped(self) -> None:
        self.hist_shaped = not self.hist_shaped
        self.tabs.active = "histogram"
        self.request_histogram()

    def action_histogram_step(self, step: int) -> None:
        sources = wd.histogram_sources(self.session, self.candidates.get(self.selected_case))
        here = sources.index(self.hist_source) if self.hist_source in sources else -1
        self.hist_source = sources[(here + step) % len(sources)]
        self.tabs.active = "histogram"
        self.request_histogram()

    def on_histogram_step(self, message: msg.HistogramStep) -> None:
        self.action_histogram_step(message.step)

    def on_histogram_shaped_toggled(self, _: msg.HistogramShapedToggled) -> None:
        self.action_toggle_shaped()

    def on_histogram_resized(self, message: msg.HistogramResized) -> None:
        h = self.histogram
        if self.tabs.active == "histogram" and h is not None and h.counts.bins != message.bins:
            self.request_histogram()

    def _ensure_histogram(self) -> None:
        h = self.histogram
        if h is None or h.case != self.selected_case or h.source != self.hist_source or h.shaped != self.hist_shaped:
            self.request_histogram()

    def request_histogram(self) -> None:
        case = self.selected_case
        if case is None or self.tabs.active != "histogram":
            return
        panel = self.histogram_panel
        if panel is None:  # not mounted yet: on_panel_mounted asks again
            return
        if panel.size.width == 0:  # its tab has just opened: ask again once it is laid out
            self.call_after_refresh(self.request_histogram)
            return
        if self.hist_source is None:
            self.hist_source = wd.HistogramSource("feature", self.feature or self.session.model.features[0])
        panel.loading(self.hist_source.label)
        self.run_histogram(self.hist_source, case, self.hist_shaped, panel.bins)

    @work(thread=True, exclusive=True, group="histogram")
    def run_histogram(self, source: wd.HistogramSource, case_id: str, shaped: bool, bins: int) -> None:
        worker = get_current_worker()
        try:
            view = wd.histogram_view(self.session, source, case_id, shaped=shaped, bins=bins)
        except AfterlookError as exc:
            if not worker.is_cancelled:
                self.post_message(msg.WorkFailed("histogram", exc.message, case_id))
            return
        except Exception as exc:
            self.post_message(msg.WorkFailed("histogram", internal_error(exc), case_id))
            return
        if not worker.is_cancelled:
            self.post_message(msg.HistogramReady(view))

    def on_histogram_ready(self, message: msg.HistogramReady) -> None:
        v = message.view
        if v.case == self.selected_case and v.source == self.hist_source and v.shaped == self.hist_shaped:
            self.histogram = v
            if self.histogram_panel is not None:
                self.histogram_panel.show(v)
