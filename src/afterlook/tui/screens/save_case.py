"""Save the selected case to the casebook: status, note, and the tried feature if any."""

from __future__ import annotations

from dataclasses import dataclass

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Checkbox, Input, Label, Select

from ...core.printable import printable


@dataclass(frozen=True)
class SaveRequest:
    status: str
    note: str
    derive: tuple[str, str] | None


class SaveCaseScreen(ModalScreen[SaveRequest | None]):
    """Dismisses with a :class:`SaveRequest`, or None when cancelled."""

    BINDINGS = [Binding("escape", "cancel", "cancel")]

    def __init__(self, case_id: str, book_file: str, statuses: list[str], status: str,
                 derive: tuple[str, str] | None, already: bool) -> None:
        super().__init__()
        self.case_id = case_id
        self.book_file = book_file
        self.statuses = statuses
        self.status = status if status in statuses else statuses[0]
        self.derive = derive
        self.already = already

    def compose(self) -> ComposeResult:
        with Vertical(id="save-box"):
            yield Label(Text(printable(f"save {self.case_id} to {self.book_file}")), id="save-title")
            if self.already:
                yield Label("this case is already in the casebook; saving updates its entry", id="save-already")
            yield Label("status")
            yield Select([(s, s) for s in self.statuses], value=self.status, allow_blank=False, id="save-status",
                         compact=True)
            if self.derive is not None:
                name, expr = self.derive
                yield Checkbox(Text(printable(f"record the tried feature {name} = {expr}")), value=True, id="save-derive",
                               compact=True)
            yield Label("note (enter saves)")
            yield Input(placeholder="what was decided, and why", id="save-note", compact=True)
            with Horizontal(id="save-buttons"):
                yield Button("save", variant="primary", id="save-ok", compact=True)
                yield Button("cancel", id="save-cancel", compact=True)

    def on_mount(self) -> None:
        self.query_one("#save-note", Input).focus()

    def _request(self) -> SaveRequest:
        status = self.query_one("#save-status", Select).value
        derive = None
        if self.derive is not None and self.query_one("#save-derive", Checkbox).value:
            derive = self.derive
        return SaveRequest(str(status), self.query_one("#save-note", Input).value.strip(), derive)

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.dismiss(self._request())

    def on_button_pressed(self, event: Button.Pressed) -> None:
        event.stop()
        self.dismiss(self._request() if event.button.id == "save-ok" else None)

    def action_cancel(self) -> None:
        self.dismiss(None)
