"""Help: every key, and the words the workbench uses."""

from __future__ import annotations

import textwrap

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

from ..keys import help_rows

WORDS = (
    ("miss", "a case labelled anomaly that the model leaves unflagged; margin = log-density - threshold (> 0)"),
    ("near catch", "a labelled anomaly that is flagged, but sits closer below the threshold than the median "
                   "normal case sits above it"),
    ("false alarm", "a case labelled normal that is flagged"),
    ("[book]", "the case already has an entry in the casebook"),
    ("after try", "how the last try changed the case: now flagged, or no longer flagged"),
    ("z bar", "- to the left: below the normal mean; + to the right: above; ◂ ▸: beyond 4 sd"),
    ("reads", "z in words: typical, a little low/high, low/high, very low/high"),
    ("share", "the feature's part of the case's log-density cost, in %"),
    ("candidate", "a derived feature proposed by the search, not yet in the recipe; ✓ finding, ? could be chance"),
    ("shaped", "histogram under the transform `afterlook shape` picks for the column"),
)


class HelpScreen(ModalScreen[None]):
    BINDINGS = [
        Binding("escape", "dismiss_help", "close"),
        Binding("question_mark", "dismiss_help", "close"),
        Binding("q", "dismiss_help", "close"),
    ]

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="help-box"):
            yield Static(Text("afterlook workbench: keys", style="bold"), classes="help-title")
            yield TwoColumns(help_rows(), id="help-keys")
            yield Static(Text("words", style="bold"), classes="help-title")
            yield TwoColumns(WORDS, id="help-words")
            yield Static("escape, ? or q closes this help; the mouse works on tabs, rows, buttons and fields.",
                         classes="help-foot")

    def action_dismiss_help(self) -> None:
        self.dismiss(None)


KEY_WIDTH = 16


class TwoColumns(Static):
    """``key   what it does`` rows, wrapped to the widget's own width with a hanging indent."""

    def __init__(self, rows, **kwargs) -> None:
        super().__init__(**kwargs)
        self.rows = list(rows)

    def render(self) -> Text:
        return _two_columns(self.rows, self.size.width)


def _two_columns(rows, width: int) -> Text:
    """``key   what it does`` lines, the description wrapped under itself (hanging indent)."""
    room = max(width - KEY_WIDTH, 20) if width else 10_000
    out = Text()
    for k, (left, right) in enumerate(rows):
        if k:
            out.append("\n")
        out.append(left.ljust(KEY_WIDTH), style="bold")
        out.append(("\n" + " " * KEY_WIDTH).join(textwrap.wrap(right, room, break_on_hyphens=False)))
    return out
