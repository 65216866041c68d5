"""The case list's table (FixedWidthTable) against Textual's own DataTable on the same rows.

FixedWidthTable skips Textual's measuring of new rows when every column has a fixed width. The reference
is Textual's DataTable itself (textual, the locked version): for the same columns and rows both tables
must give the same size and draw the same lines; with an auto-width column, a row label or an
automatic row height it must take Textual's own path (the widths and heights then come from measuring).
"""

from __future__ import annotations

import pytest
from rich.text import Text
from textual.app import App, ComposeResult
from textual.widgets import DataTable

from afterlook.tui.widgets.case_list import FixedWidthTable

ROWS = [(f"PS-{k:02d}/2026-05-{k % 28 + 1:02d}", "miss" if k % 3 else "false alarm", f"+{k * 1.25:.2f}",
         Text("note " * (k % 4), style="bold"), "wide text that is cut by the column's width " * (k % 2))
        for k in range(60)]


class Pair(App):
    def __init__(self, widths, *, label: bool = False, auto_height: bool = False):
        super().__init__()
        self.widths, self.label, self.auto_height = widths, label, auto_height

    def compose(self) -> ComposeResult:
        yield DataTable(id="plain", zebra_stripes=True, cursor_type="row")
        yield FixedWidthTable(id="fixed", zebra_stripes=True, cursor_type="row")

    def on_mount(self) -> None:
        for table in self.query(DataTable):
            for k, width in enumerate(self.widths):
                table.add_column(f"c{k}", key=f"c{k}", width=width)
            for k, row in enumerate(ROWS):
                table.add_row(*row, key=str(k), label=f"#{k}" if self.label and k % 7 == 0 else None,
                              height=None if self.auto_height and k % 5 == 0 else 1)


def lines(table: DataTable) -> list[str]:
    return ["".join(segment.text for segment in table.render_line(y)) for y in range(table.size.height)]


@pytest.mark.asyncio
@pytest.mark.parametrize("widths, label, auto_height", [
    ((20, 11, 8, 16, 18), False, False),  # the case list's own setting: every width fixed
    ((20, None, 8, 16, None), False, False),  # auto-width columns: Textual measures
    ((20, 11, 8, 16, 18), True, False),  # row labels
    ((20, 11, 8, 16, 18), False, True),  # automatic heights (the long notes wrap)
])
async def test_same_size_and_same_lines_as_textuals_table(widths, label, auto_height):
    app = Pair(widths, label=label, auto_height=auto_height)
    async with app.run_test(size=(110, 30)) as pilot:
        await pilot.pause()
        plain, fixed = app.query_one("#plain", DataTable), app.query_one("#fixed", DataTable)
        assert fixed.virtual_size == plain.virtual_size
        if None in widths:  # measured widths (Textual never reads them for a column of fixed width)
            assert [c.content_width for c in fixed.columns.values()] == [c.content_width for c in plain.columns.values()]
        assert [r.height for r in fixed.rows.values()] == [r.height for r in plain.rows.values()]
        assert lines(fixed) == lines(plain)
        for table in (plain, fixed):  # and after moving down the list
            table.move_cursor(row=45)
        await pilot.pause()
        assert lines(fixed) == lines(plain)
