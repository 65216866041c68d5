"""The case list: misses worst margin first, optional near catches and false alarms, a text filter."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Horizontal, Vertical
from textual.widgets import DataTable, Input, Label, Static

from ...analysis import shown
from .. import format as fmt
from ..messages import CaseHighlighted, FilterChanged

KIND_WORDS = {"miss": "miss", "near catch": "near catch", "false alarm": "false alarm"}
CONTEXT_WIDTH = 18  # at most this many characters of a context value; the rest is cut with an ellipsis


def context_widths(frame, columns) -> dict[str, int]:
    """Column width per context column: its longest text (or name), at most CONTEXT_WIDTH."""
    out = {}
    for col in columns:
        longest = int(frame[col].astype(str).str.len().max()) if len(frame) else 0
        out[col] = max(len(col), min(longest, CONTEXT_WIDTH))
    return out


class FixedWidthTable(DataTable):
    """A DataTable whose every column is given its width: Textual measures every cell of every new row to
    widen auto-width columns, which none of these is, so new rows are not measured here (1,717 rows of
    11 cells were about 14,000 measurements: half the time of listing them).

    ``_update_dimensions`` is Textual's own step (textual 8.2.8, the locked version) run when the table is
    idle; with no new rows to look at it sets the table's size from the columns' widths and the rows'
    heights as before. Rows with a label or an automatic height, or any auto-width column, take Textual's
    own path (a test compares the two tables cell by cell and size for size).
    """

    def _update_dimensions(self, new_rows) -> None:
        new_rows = list(new_rows)
        if any(column.auto_width for column in self.columns.values()) or any(
                (row := self.rows.get(key)) is not None and (row.auto_height or row.label is not None)
                for key in new_rows):
            super()._update_dimensions(new_rows)
        else:
            super()._update_dimensions(())


class CaseList(Vertical):
    """Filter input, a line saying what is shown, and the table of cases.

    The App sets the rows with :meth:`show`; the list posts
    :class:`CaseHighlighted` when its cursor moves and :class:`FilterChanged`
    when the filter text changes.
    """

    COMPONENT_CLASSES = {"cases--miss", "cases--near", "cases--alarm", "cases--book", "cases--flip", "cases--dim"}

    def __init__(self, context_columns: dict[str, int], case_width: int = 22, **kwargs) -> None:
        super().__init__(**kwargs)
        self.context_columns = dict(context_columns)  # name -> width
        self.case_width = case_width
        self.case_ids: list[str] = []
        self._marks: dict[str, tuple[bool, str]] = {}  # case -> (in the book, after-try words) as drawn
        self._described: tuple = ()
        self._book_file = ""

    def compose(self) -> ComposeResult:
        with Horizontal(id="filter-row"):
            yield Label("filter /", id="filter-label")
            yield Input(placeholder="text in id, kind or context; enter or escape returns to the list", id="filter",
                        compact=True)
        yield Static("", id="case-toggles")
        yield FixedWidthTable(id="cases", cursor_type="row", zebra_stripes=True)

    def on_mount(self) -> None:
        table = self.query_one("#cases", DataTable)
        # Fixed widths: the table never re-measures (and never jumps) when rows change.
        table.add_column("book", key="book", width=6)
        table.add_column("case", key="case", width=self.case_width)
        table.add_column("kind", key="kind", width=11)
        table.add_column(Text("margin", justify="right"), key="margin", width=8)
        table.add_column("after try", key="trial", width=13)
        for col, width in self.context_columns.items():
            table.add_column(Text(fmt.plain(col)), key=f"ctx:{col}", width=width)

    @property
    def table(self) -> DataTable:
        return self.query_one("#cases", DataTable)

    def _style(self, name: str):
        return self.get_component_rich_style(name, partial=True)

    def show(self, rows, *, selected: str | None, book: set[str], flips: dict[str, str], counts: dict,
             near: bool, false_alarms: bool, filter_text: str, book_file: str = "",
             book_loaded: bool = True) -> str | None:
        """Replace the rows; keep the cursor on ``selected`` when it is still listed.

        Returns the case the cursor ends on (None when the list is empty).
        """
        table = self.table
        with table.prevent(DataTable.RowHighlighted):
            table.clear()
            self._marks = {}
            for r in rows:
                kind_style = {"miss": "cases--miss", "near catch": "cases--near"}.get(r.kind, "cases--alarm")
                table.add_row(
                    Text("[book]", style=self._style("cases--book")) if r.case in book else "",
                    Text(fmt.clip(r.case, self.case_width)),
                    Text(KIND_WORDS.get(r.kind, r.kind), style=self._style(kind_style)),
                    Text(shown.margin(r.margin), justify="right"),
                    Text(flips.get(r.case, ""), style=self._style("cases--flip")),
                    *[Text(fmt.clip(r.context.get(c) or "", w)) for c, w in self.context_columns.items()],
                    key=r.case,
                )
                self._marks[r.case] = (r.case in book, flips.get(r.case, ""))
            self.case_ids = [r.case for r in rows]
            target = self.case_ids.index(selected) if selected in self.case_ids else 0
            if rows:
                table.move_cursor(row=target, animate=False)
        self._described = (len(rows), counts, near, false_alarms, filter_text)
        self._book_file = book_file
        self._describe(*self._described, f"{book_file}: {len(book) if book_loaded else '…'} [book]")
        return self.case_ids[target] if rows else None

    def mark(self, *, book: set[str], flips: dict[str, str]) -> None:
        """Redraw only the book and after-try cells that changed (no rebuild: lists can be long)."""
        table = self.table
        for case, (was_in_book, was_flip) in self._marks.items():
            in_book, flip = case in book, flips.get(case, "")
            if in_book != was_in_book:
                table.update_cell(case, "book", Text("[book]", style=self._style("cases--book")) if in_book else "")
            if flip != was_flip:
                table.update_cell(case, "trial", Text(flip, style=self._style("cases--flip")))
            self._marks[case] = (in_book, flip)
        if self._described:
            self._describe(*self._described, f"{self._book_file}: {len(book)} [book]")

    def _describe(self, n_shown: int, counts: dict, near: bool, false_alarms: bool, filter_text: str,
                  book_words: str) -> None:
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append(f"{counts.get('miss', 0)} misses", style=self._style("cases--miss"))
        text.append(" · ")
        text.append(f"near catches {'shown' if near else 'hidden'} ({counts.get('near catch', 0)}) [n]")
        text.append(" · ")
        text.append(f"false alarms {'shown' if false_alarms else 'hidden'} ({counts.get('false alarm', 0)}) [f]")
        text.append(" · ")
        text.append(fmt.plain(book_words), style=self._style("cases--book"))
        if filter_text.strip():
            text.append(f" · filter '{fmt.plain(filter_text.strip())}': {n_shown} shown", style=self._style("cases--dim"))
        elif n_shown == 0:
            text.append(" · nothing to list", style=self._style("cases--dim"))
        self.query_one("#case-toggles", Static).update(text)

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        if event.data_table.id != "cases":
            return
        event.stop()
        if event.row_key is not None and event.row_key.value is not None:
            self.post_message(CaseHighlighted(str(event.row_key.value)))

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        if event.data_table.id == "cases":
            event.stop()

    def on_input_changed(self, event: Input.Changed) -> None:
        if event.input.id == "filter":
            event.stop()
            self.post_message(FilterChanged(event.value))

    def on_input_submitted(self, event: Input.Submitted) -> None:
        if event.input.id == "filter":
            event.stop()
            self.table.focus()

    def focus_filter(self) -> None:
        self.query_one("#filter", Input).focus()

    def focus_table(self) -> None:
        self.table.focus()
