"""The workbench's casebook: which cases are in it, and saving the case under review (a modal, then a worker).

A mixin of :class:`afterlook.tui.app.WorkbenchApp`, which owns the state it
reads (the session, the selected case, the last try) and the widgets it
updates.
"""

from __future__ import annotations

import os

from textual import work

from ..analysis import workbench as wd
from ..core.errors import AfterlookError
from . import messages as msg
from .failures import describe, internal_error
from .screens.save_case import SaveCaseScreen, SaveRequest


class CasebookFlow:
    """Loading the casebook's case ids and saving a reviewed case."""

    @work(thread=True, exclusive=True, group="casebook-read")
    def load_casebook(self) -> None:
        try:
            ids = wd.casebook_case_ids(self.session.casebook_path)
        except AfterlookError as exc:
            self.post_message(msg.WorkFailed("casebook", f"{exc.message}; entries are not marked"))
            return
        except Exception as exc:
            self.post_message(msg.WorkFailed("casebook", internal_error(exc)))
            return
        self.post_message(msg.CasebookLoaded(ids))

    def on_casebook_loaded(self, message: msg.CasebookLoaded) -> None:
        self.book_ids = set(message.case_ids)
        self.book_loaded = True
        self.case_list.mark(book=self.book_ids, flips=self._flips())

    def action_save_case(self) -> None:
        case = self.selected_case
        if case is None:
            self.notify("select a case first", title="casebook", severity="warning")
            return
        if self.saving:
            self.notify("still saving the previous entry", title="casebook", severity="warning")
            return
        statuses = wd.casebook_statuses()
        derive = None
        status = "open"
        if self.trial is not None and self.trial_case == case and len(self.trial.derive) == 1:
            derive = tuple(self.trial.derive[0])
            c = self.trial_view.case if self.trial_view is not None else None
            if c is not None and c.flagged_after and not c.flagged_before:
                status = "explained"
        screen = SaveCaseScreen(case, os.path.basename(self.session.casebook_path), statuses, status, derive,
                                already=case in self.book_ids)
        self.push_screen(screen, callback=lambda request: self._save_requested(case, request))

    def _save_requested(self, case_id: str, request: SaveRequest | None) -> None:
        # Back to the case list whatever the answer: never leave the focus in
        # the filter box, where the next key would silently filter the list.
        self.case_list.focus_table()
        self.flush_notes()
        if request is None:
            return
        self.saving = True
        self.run_save(case_id, request)

    @work(thread=True, exclusive=True, group="casebook")
    def run_save(self, case_id: str, request: SaveRequest) -> None:
        try:
            entry = wd.save_case(self.session, case_id, request.status, note=request.note, derive=request.derive)
        except AfterlookError as exc:
            self.post_message(msg.WorkFailed("casebook", exc.message, case_id))
            return
        except Exception as exc:  # e.g. the file changed on disk since it was opened: never overwrite silently
            self.post_message(msg.WorkFailed("casebook", describe(exc), case_id))
            return
        self.post_message(msg.CasebookSaved(case_id, request.status, entry))

    def on_casebook_saved(self, message: msg.CasebookSaved) -> None:
        self.saving = False
        self.book_ids.add(message.case_id)
        self.saved_this_session.append(message.case_id)
        self.case_list.mark(book=self.book_ids, flips=self._flips())
        earlier = len((message.entry or {}).get("history") or [])
        kept = f"; {earlier} earlier review(s) kept in its history" if earlier else ""
        self.say(f"saved {message.case_id} as {message.status} to {os.path.basename(self.session.casebook_path)}"
                 + kept, title="casebook")
