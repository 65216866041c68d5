"""The workbench's pair tab: which candidate to draw and its counts from a worker.

A mixin of :class:`afterlook.tui.app.WorkbenchApp` (it owns the state read
here: the session, the selected case, its candidates and the highlighted one).
"""

from __future__ import annotations

from textual import work
from textual.worker import get_current_worker

from ..analysis.pair_view import pair_of, pair_view
from ..core.errors import AfterlookError
from . import messages as msg
from .failures import internal_error


class PairFlow:
    """Choosing the pair view's candidate, asking for its counts, showing them."""

    pair = None  # the PairView on screen

    def action_pair(self) -> None:
        self.tabs.active = "pair"
        self.request_pair()

    def _pair_candidate(self):
        result = self.candidates.get(self.selected_case)
        if result is None or not result.candidates:
            return None, "no candidates for this case yet: press c and wait for the search, then p"
        c = result.candidates[min(self.candidate_index, len(result.candidates) - 1)]
        if pair_of(c) is None:
            return None, f"{c.name} is not built on two readings: the pair view has nothing to draw"
        return c, ""

    def request_pair(self) -> None:
        case = self.selected_case
        panel = self.pair_panel
        if case is None or panel is None or self.tabs.active != "pair":
            return
        if panel.size.width == 0:  # its tab has just opened: ask again once it is laid out
            self.call_after_refresh(self.request_pair)
            return
        c, why = self._pair_candidate()
        if c is None:
            self.pair = None
            panel.failed(why)
            return
        v = self.pair
        if v is not None and v.case == case and v.expression == c.expression:
            return
        panel.loading(f"{c.name} = {c.expression}")
        nx, ny = panel.grid
        self.run_pair(c.name, c.expression, pair_of(c), case, nx, ny)

    @work(thread=True, exclusive=True, group="pair")
    def run_pair(self, name: str, expression: str, inputs, case_id: str, nx: int, ny: int) -> None:
        worker = get_current_worker()
        try:
            view = pair_view(self.session, name, expression, inputs, case_id, nx=nx, ny=ny)
        except AfterlookError as exc:
            if not worker.is_cancelled:
                self.post_message(msg.WorkFailed("pair", exc.message, case_id))
            return
        except Exception as exc:
            self.post_message(msg.WorkFailed("pair", internal_error(exc), case_id))
            return
        if not worker.is_cancelled:
            self.post_message(msg.PairReady(view))

    def on_pair_ready(self, message: msg.PairReady) -> None:
        v = message.view
        c, _ = self._pair_candidate()
        if v.case == self.selected_case and c is not None and c.expression == v.expression:
            self.pair = v
            if self.pair_panel is not None:
                self.pair_panel.show(v)
