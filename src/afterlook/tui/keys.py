"""Every key of the workbench, in one place: the bindings and the help screen read this list."""

from __future__ import annotations

from dataclasses import dataclass

from textual.binding import Binding


@dataclass(frozen=True)
class Key:
    key: str  # Textual key name(s), comma-separated
    shown: str  # how the help screen writes it
    action: str  # action on the workbench screen ("" for keys handled by a widget)
    what: str  # footer / help text
    footer: bool = True


#: Keys of the workbench screen, in the order the help lists them.
WORKBENCH_KEYS: tuple[Key, ...] = (
    Key("", "up / down", "", "move through the list that has the focus (cases, evidence, candidates)", False),
    Key("", "tab / shift+tab", "", "move the focus between the filter, the lists and the inputs", False),
    Key("slash", "/", "filter", "filter", False),  # the filter row itself says "filter /"
    Key("escape", "esc", "leave_input", "back to the list"),  # shown only while typing (App.check_action)
    Key("n", "n", "toggle_near", "near"),
    Key("f", "f", "toggle_false_alarms", "alarms"),
    Key("e", "e", "show_tab('evidence')", "evidence", False),
    Key("c", "c", "candidates", "candidates"),
    Key("a", "a", "apply_candidate", "apply"),
    Key("", "enter", "", "on a candidate: apply it (re-fit and re-score)", False),
    Key("t", "t", "type_expression", "try"),
    Key("h", "h", "histogram", "histogram"),
    Key("p", "p", "pair", "pair", False),  # the tab's title shows the key; the footer is full at 80 columns
    Key("s", "s", "toggle_shaped", "shaped", False),
    Key("left_square_bracket", "[", "histogram_step(-1)", "previous feature in the histogram", False),
    Key("right_square_bracket", "]", "histogram_step(1)", "next feature in the histogram", False),
    Key("b", "b", "save_case", "save"),
    Key("z", "z", "zoom", "zoom", False),
    Key("question_mark", "?", "help", "help"),
    Key("q", "q", "quit", "quit"),
    # while a box has the focus, ? and q are letters to type: these two keys work there, and the
    # footer shows them only then (App.check_action), so help and quit are always on screen
    Key("f1", "f1", "help_while_typing", "help"),
    Key("ctrl+q", "ctrl+q", "quit_while_typing", "quit"),
)

HELP_WORDS = {
    "filter": "filter the case list by text (id, kind or any context column)",
    "near": "show or hide near catches: labelled anomalies flagged by a small margin",
    "alarms": "show or hide false alarms: cases labelled normal that are flagged",
    "evidence": "evidence tab: per-feature z, percentile, share of log-density",
    "candidates": "candidates tab; starts the search for the selected case if none ran",
    "apply": "apply the highlighted candidate (the top one if none is highlighted)",
    "try": "type your own derived feature (NAME = EXPR or EXPR), enter to try it",
    "histogram": "histogram of the highlighted feature or candidate",
    "pair": "pair view of the highlighted pair candidate: its two readings against each other, the normal "
            "rows as a density, the other anomalies, the case and the candidate's normal band",
    "shaped": "histogram: switch between plain and shaped (the transform shape picks)",
    "save": "save the selected case to the casebook (status and note)",
    "zoom": "hide or show the case list, for more room below",
    "back to the list": "leave the filter or the expression box, back to the case list",
    "help": "this help (f1 while typing in a box)",
    "quit": "quit (ctrl+q while typing in a box)",
}


def bindings() -> list[Binding]:
    # "app." actions: the App owns the state; bound on the workbench screen so
    # the keys are live only while it is on top (not under a modal).
    return [Binding(k.key, f"app.{k.action}", k.what, show=k.footer, key_display=k.shown)
            for k in WORKBENCH_KEYS if k.key]


def help_rows() -> list[tuple[str, str]]:
    return [(k.shown, HELP_WORDS.get(k.what, k.what)) for k in WORKBENCH_KEYS if not k.action.endswith("_while_typing")]
