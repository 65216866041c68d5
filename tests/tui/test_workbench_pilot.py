"""The workbench driven by a Pilot, as a user would: keys in, state and screen text out.

Every test builds the App with :func:`afterlook.tui.create_app`, the factory
the CLI uses, on the demo written by ``write_demo`` (seed 7), at 120 x 40.
Expected values come from the API (``afterlook.analysis``)
or the casebook file, never from the App itself.
"""

from __future__ import annotations

import threading

import pytest
from textual.widgets import DataTable, Input, Static

import afterlook
from afterlook.core.errors import AfterlookError
from afterlook.analysis.trial import try_features
from afterlook.store.casebook_file import Casebook
from afterlook.tui import create_app
from afterlook.tui.keys import WORKBENCH_KEYS
from afterlook.tui.screens.help import HelpScreen
from afterlook.tui.screens.save_case import SaveCaseScreen

SIZE = (120, 40)


def worst_miss(demo) -> str:
    model = afterlook.load_model(demo.model)
    return afterlook.misses(model, afterlook.load_table(demo.cases, require_labels=True)).misses[0].case


def quiet_app(demo, tmp_path):
    """The workbench on the demo with a casebook of its own and no search started by itself."""
    return create_app(demo.model, demo.cases, train_path=demo.train, casebook=tmp_path / "b.json",
                      auto_candidates=False)


def cell(app, table_id: str, row_key: str, column_key: str) -> str:
    table = app.workbench.query_one(f"#{table_id}", DataTable)
    value = table.get_cell(row_key, column_key)
    return getattr(value, "plain", str(value))


def text_of(widget: Static) -> str:
    return str(widget.render())


@pytest.mark.asyncio
async def test_main_flow_worst_miss_candidates_apply_flip_and_save(demo, tmp_path, monkeypatch, wait_until):
    book = tmp_path / "casebook.json"
    worst = worst_miss(demo)
    app = create_app(demo.model, demo.cases, train_path=demo.train, casebook=book)

    stages = []
    from afterlook.tui.widgets.candidates_panel import CandidatesPanel

    original_progress = CandidatesPanel.progress
    monkeypatch.setattr(CandidatesPanel, "progress",
                        lambda self, stage, fraction: (stages.append((stage, fraction)),
                                                       original_progress(self, stage, fraction)))

    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        # the worst miss is selected and its evidence shown
        assert app.selected_case == worst
        table = app.workbench.query_one("#cases", DataTable)
        assert table.cursor_row == 0 and table.coordinate_to_cell_key((0, 0)).row_key.value == worst
        assert worst in text_of(app.workbench.query_one("#evidence-head", Static))

        # candidates arrive from the worker, with progress shown on the way
        await wait_until(pilot, lambda: worst in app.candidates, what="candidates for the worst miss")
        result = app.candidates[worst]
        assert result.cases == [worst] and result.candidates
        assert stages and stages[-1][1] == 1.0
        top = result.candidates[0]

        # apply the top one: the worst miss flips to flagged
        await pilot.press("a")
        await wait_until(pilot, lambda: app.trial_view is not None, what="the try result")
        assert app.trial.derive == [(top.name, top.expression)]
        ref = try_features(afterlook.load_model(demo.model), afterlook.load_table(demo.cases), {top.name: top.expression},
                           train=afterlook.load_table(demo.train), focus=[worst])
        ref_row = next(r for r in ref.to_dict()["cases"] if r["case"] == worst)
        assert ref_row["before"]["flagged"] is False and ref_row["after"]["flagged"] is True
        assert app.trial_view.case.flagged_after is True and app.trial_view.case.flagged_before is False
        assert app.trial.to_dict()["after"] == ref.to_dict()["after"]
        assert cell(app, "cases", worst, "trial") == "now flagged"
        assert "NOW FLAGGED" in text_of(app.workbench.query_one("#trial-case", Static))

        # save to the casebook from a key: status (defaults to explained after the flip) and a note
        await pilot.press("b")
        await pilot.pause()
        assert isinstance(app.screen, SaveCaseScreen)
        await pilot.press(*"impeller worn; current per power exposes it")
        await pilot.press("enter")
        await wait_until(pilot, lambda: worst in app.book_ids, what="the casebook entry saved")
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert cell(app, "cases", worst, "book") == "[book]"

    entry = Casebook.open(book).entries[worst]
    assert entry["status"] == "explained"
    assert entry["note"] == "impeller worn; current per power exposes it"
    assert entry["derived_feature"] == {"name": top.name, "expression": top.expression}
    assert entry["before"]["flagged"] is False and entry["after"]["flagged"] is True

    # what the terminal shows once the workbench has closed: the save, the book, the next commands
    from afterlook.tui.closing import closing_lines, shell_path

    assert app.saved_this_session == [worst]
    lines = closing_lines(app.saved_this_session, book, 1, model_path=demo.model, cases_path=demo.cases,
                          tried=f"{top.name}={top.expression}")
    said = "\n".join(lines)
    assert f"1 case(s) saved to {shell_path(book)} this session ({worst})" in said
    assert f"afterlook casebook report {shell_path(book)}" in said
    assert "--derive " in said and top.expression in said
    assert app.return_code in (None, 0)


@pytest.mark.asyncio
async def test_bad_expression_shows_the_error_and_changes_nothing(demo, tmp_path):
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        model_before = app.session.model.fingerprint()
        rows_before = [r.case for r in app.rows]
        await pilot.press("t")
        assert isinstance(app.focused, Input) and app.focused.id == "expression"
        status = app.workbench.query_one("#expression-status", Static)

        await pilot.press(*"motor_current_a / hydraulik_power")
        assert "✗" in text_of(status) and "unknown column 'hydraulik_power'" in text_of(status)
        await pilot.press("enter")
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert app.trial is None and app.trial_running is None
        assert not [w for w in app.workers if w.group == "trial"]
        assert app.session.model.fingerprint() == model_before
        assert [r.case for r in app.rows] == rows_before
        assert all(cell(app, "cases", c, "trial") == "" for c in rows_before)

        # a syntax error is named as such while typing
        app.focused.value = ""
        await pilot.press(*"motor_current_a /")
        assert "cannot parse" in text_of(status)

        # and a good expression is accepted as you type (nothing runs until enter)
        app.focused.value = ""
        await pilot.press(*"amps_per_power = motor_current_a / hydraulic_power")
        assert "✓" in text_of(status) and "amps_per_power" in text_of(status)
        assert app.trial is None


@pytest.mark.asyncio
async def test_toggles_and_filter_change_the_list(demo, session, tmp_path):
    from afterlook.analysis import workbench as wd

    counts = wd.case_counts(session)
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        table = app.workbench.query_one("#cases", DataTable)
        assert table.row_count == counts[wd.KIND_MISS]
        await pilot.press("n")
        assert table.row_count == counts[wd.KIND_MISS] + counts[wd.KIND_NEAR]
        kinds = {cell(app, "cases", r.case, "kind") for r in app.rows}
        assert kinds == {"miss", "near catch"}
        await pilot.press("n")
        assert table.row_count == counts[wd.KIND_MISS]

        station = app.rows[0].context["station"]
        await pilot.press("slash")
        assert app.focused.id == "filter"
        await pilot.press(*station)
        assert 0 < table.row_count < counts[wd.KIND_MISS]
        assert all(r.context["station"] == station for r in app.rows)
        await pilot.press("escape")
        assert app.focused is table


@pytest.mark.asyncio
async def test_histogram_of_the_highlighted_feature_and_the_shaped_switch(demo, tmp_path, wait_until):
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        ev = app.workbench.query_one("#evidence-table", DataTable)
        ev.focus()
        await pilot.press("down")
        feature = app.evidence.rows[1].name
        assert app.feature == feature
        await pilot.press("h")
        await wait_until(pilot, lambda: app.histogram is not None, what="the histogram")
        assert app.tabs.active == "histogram"
        assert app.histogram.source.name == feature and not app.histogram.shaped
        assert app.histogram.case == app.selected_case
        await pilot.press("s")
        await wait_until(pilot, lambda: app.histogram.shaped, what="the shaped histogram")
        assert app.histogram.shape_note
        await pilot.press("right_square_bracket")
        await wait_until(pilot, lambda: app.histogram.source.name != feature, what="the next feature")


@pytest.mark.asyncio
async def test_help_lists_every_key_and_q_quits(demo, tmp_path):
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        await pilot.press("question_mark")
        assert isinstance(app.screen, HelpScreen)
        shown = " ".join(text_of(s) for s in app.screen.query(Static))
        for key in WORKBENCH_KEYS:
            assert key.shown in shown
        await pilot.press("escape")
        assert not isinstance(app.screen, HelpScreen)
        await pilot.press("q")
        await pilot.pause()
    assert app.return_code == 0


@pytest.mark.asyncio
@pytest.mark.parametrize("panel", ["histogram", "pair", "try", "candidates"])
async def test_a_panel_mounted_while_the_workbench_is_taken_down_is_ignored(demo, tmp_path, panel):
    # Seen in a benchmark: quitting right at start-up, a panel's 'mounted' message arrived after the
    # tabs were gone and the app ended with a NoMatches traceback instead of exiting cleanly.
    from textual.widgets import TabbedContent

    from afterlook.tui.messages import PanelMounted

    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        await app.workbench.query_one(TabbedContent).remove()
        app.post_message(PanelMounted(panel))
        await pilot.pause()
        await pilot.press("q")
        await pilot.pause()
    assert app.return_code == 0


@pytest.mark.asyncio
async def test_the_evidence_sets_a_strainer_miss_against_its_own_station(demo, tmp_path):
    # The demo's blocked-strainer miss (invented data, seed 7) is ordinary for the fleet and far from its own
    # station's suction pressure; the panel's unit line says so with explain's numbers.
    from afterlook.analysis.evidence import explain
    from afterlook.analysis import shown

    case = "PS-11/2026-04-20T17:00"
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        app.select_case(case)
        await pilot.pause()
        line = app.workbench.query_one("#evidence-unit", Static)
        assert line.display
        text = text_of(line)
        ctx = explain(afterlook.load_model(demo.model), demo.cases, case).unit_context
        top = ctx.by_distance()[0]
        assert "vs own PS-11" in text and "far only from its own" in text
        assert f"{top.feature} z {shown.z(top.unit_z)}" in text and f"fleet {shown.z(top.fleet_z)}" in text


@pytest.mark.asyncio
async def test_stale_candidate_runs_are_dropped(demo, tmp_path, monkeypatch, wait_until):
    from afterlook.analysis import workbench as wd

    first_may_finish = threading.Event()
    real = wd.find_candidates

    def gated(session, case_id, *, top=10, progress=None):
        if case_id == first:
            first_may_finish.wait(timeout=60)
            progress("screening candidates", 0.5)  # the worker was cancelled meanwhile: this stops it
        return real(session, case_id, top=top, progress=progress)

    monkeypatch.setattr(wd, "find_candidates", gated)
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        first = app.selected_case
        await pilot.press("c")  # starts the (held) search for the first miss
        assert app.candidates_running == first
        app.case_list.focus_table()
        await pilot.press("down")
        second = app.selected_case
        assert second != first
        await pilot.press("c")  # a new search: the first run is cancelled
        first_may_finish.set()
        await wait_until(pilot, lambda: second in app.candidates, what="candidates for the second miss")
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert first not in app.candidates
        assert app.candidates_panel.case_id == second


@pytest.mark.asyncio
async def test_apply_without_candidates_and_save_cancel_change_nothing(demo, tmp_path):
    book = tmp_path / "b.json"
    app = create_app(demo.model, demo.cases, train_path=demo.train, casebook=book, auto_candidates=False)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        await pilot.press("a")
        await pilot.pause()
        assert app.trial is None and app.trial_running is None
        assert any("no candidates" in n.message for n in app._notifications)
        await pilot.press("b")
        await pilot.pause()
        assert isinstance(app.screen, SaveCaseScreen)
        await pilot.press("escape")
        await app.workers.wait_for_complete()
        await pilot.pause()
    assert not book.exists()


def test_create_app_rejects_bad_input_before_drawing(demo, tmp_path):
    with pytest.raises(AfterlookError, match="no such file"):
        create_app(demo.model, tmp_path / "nope.csv")
    bad_model = tmp_path / "model.json"
    bad_model.write_text("{not json")
    with pytest.raises(AfterlookError):
        create_app(bad_model, demo.cases)


@pytest.mark.asyncio
async def test_a_try_that_cannot_be_fitted_is_a_notification_not_a_crash(demo, tmp_path, wait_until):
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        # valid as typed (known columns, good syntax) but constant: the re-fit refuses it
        await pilot.press("t", *"flat = flow_m3h * 0", "enter")
        await wait_until(pilot, lambda: app.trial_running is None, what="the failed try reported")
        assert app.trial is None
        assert any("zero variance" in n.message for n in app._notifications)
        assert "could not try" in text_of(app.workbench.query_one("#trial-head", Static))
        # the workbench carries on: a good expression still works afterwards
        await pilot.press("t")
        app.focused.value = ""
        await pilot.press(*"amps = motor_current_a / hydraulic_power", "enter")
        await wait_until(pilot, lambda: app.trial is not None, what="the next try")
        assert app.trial.derive == [("amps", "motor_current_a / hydraulic_power")]


@pytest.mark.asyncio
async def test_the_mouse_selects_cases_and_tabs_and_z_zooms(demo, tmp_path):
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        third = app.rows[2].case
        assert app.selected_case != third
        await pilot.click("#cases", offset=(12, 3))  # header on line 0, then one line per case
        await pilot.pause()
        assert app.selected_case == third
        assert app.evidence.explain.case == third
        await pilot.click("#detail Tab#--content-tab-histogram")
        await pilot.pause()
        assert app.tabs.active == "histogram"
        await pilot.press("e")
        assert app.tabs.active == "evidence"
        await pilot.press("z")
        await pilot.pause()
        assert not app.case_list.display or app.case_list.size.height == 0
        await pilot.press("z")
        await pilot.pause()
        assert app.case_list.size.height > 0


@pytest.mark.asyncio
async def test_full_model_evidence_shows_conditional_z(demo, tmp_path):
    from afterlook.demo.writer import DEMO_DERIVE, DEMO_TRANSFORM

    train, cases = afterlook.load_table(demo.train), afterlook.load_table(demo.cases, require_labels=True)
    # the full model, without the derived column (it would be collinear with the base readings)
    model = afterlook.fit(train, cases=cases, kind="full", threshold="f1", transform=DEMO_TRANSFORM)
    assert DEMO_DERIVE  # the demo's own recipe derives; this one deliberately does not
    path = tmp_path / "full.json"
    model.save(path)
    app = create_app(path, demo.cases, train_path=demo.train, casebook=tmp_path / "b.json", auto_candidates=False)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        case = app.selected_case
        ref = {f["name"]: f for f in afterlook.explain(model, cases, case).to_dict()["features"]}
        table = app.workbench.query_one("#evidence-table", DataTable)
        keys = [c.key.value for c in table.ordered_columns]
        assert "cond_z" in keys and "relation" in keys
        for name, f in ref.items():
            assert cell(app, "evidence-table", name, "cond_z") == f"{f['conditional_z']:+.2f}"


@pytest.mark.asyncio
async def test_save_key_still_works_after_apply_and_after_a_cancelled_save(demo, tmp_path, wait_until):
    # Found by hand in tmux: after applying a candidate the focus was lost, and
    # after a cancelled save it landed in the filter box, so the next 'b'
    # filtered the list instead of opening the save dialog.
    app = create_app(demo.model, demo.cases, train_path=demo.train, casebook=tmp_path / "book.json")
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        worst = app.selected_case
        await pilot.press("c")  # look at the candidates tab (its table takes the focus)
        await wait_until(pilot, lambda: worst in app.candidates, what="candidates")
        await pilot.press("a")
        await wait_until(pilot, lambda: app.trial_view is not None, what="the try result")
        await pilot.press("b")
        await wait_until(pilot, lambda: isinstance(app.screen, SaveCaseScreen), what="the save dialog")
        await pilot.press("tab", "tab", "enter")  # note -> save -> cancel, pressed
        await wait_until(pilot, lambda: not isinstance(app.screen, SaveCaseScreen), what="the dialog closed")
        assert not isinstance(app.focused, Input)
        await pilot.press("b")
        await wait_until(pilot, lambda: isinstance(app.screen, SaveCaseScreen), what="the save dialog again")
        assert app.workbench.query_one("#filter", Input).value == ""
        assert app.selected_case == worst


@pytest.mark.asyncio
async def test_q_during_a_search_exits_and_the_search_stops_at_its_next_report(demo, tmp_path, monkeypatch,
                                                                               wait_until):
    # The real search runs; it is held at its first screening report until q was
    # pressed, then it must stop at the very next report instead of running on
    # (an exiting app waits for its worker threads).
    from afterlook.analysis import workbench as wd

    started, quit_pressed = threading.Event(), threading.Event()
    seen = {"reports after q": [], "outcome": None}
    real = wd.find_candidates

    def held(session, case_id, *, top=10, progress=None):
        from textual.worker import get_current_worker

        seen["worker"] = get_current_worker()

        def report(stage, fraction):
            if not started.is_set() and stage.startswith("screening"):
                started.set()
                quit_pressed.wait(timeout=60)
            if quit_pressed.is_set():
                seen["reports after q"].append(stage)
            progress(stage, fraction)

        try:
            result = real(session, case_id, top=top, progress=report)
        except BaseException as exc:
            seen["outcome"] = type(exc).__name__
            raise
        seen["outcome"] = "finished"
        return result

    monkeypatch.setattr(wd, "find_candidates", held)
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        case = app.selected_case
        await pilot.press("c")
        await wait_until(pilot, started.is_set, what="the search to reach its screening pass")
        assert app.candidates_running == case
        await pilot.press("q")
        await wait_until(pilot, lambda: seen["worker"].is_cancelled, what="the exit to cancel the search")
        quit_pressed.set()
        await wait_until(pilot, lambda: seen["outcome"] is not None, what="the search to end")
    assert app.return_code == 0
    assert seen["outcome"] == "_Stale"  # stopped by the cancelled worker, not run to the end
    assert seen["reports after q"] == ["screening candidates"]  # the held report itself, then none
    assert case not in app.candidates


@pytest.mark.asyncio
async def test_a_filter_matching_nothing_clears_the_last_case(demo, tmp_path):
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        worst = app.selected_case
        assert worst in text_of(app.workbench.query_one("#evidence-head", Static))
        await pilot.press("slash", *"no-such-case-zzz")
        await pilot.pause()
        assert app.selected_case is None
        head = text_of(app.workbench.query_one("#evidence-head", Static))
        assert worst not in head and "no case matches the filter" in head
        assert app.workbench.query_one("#evidence-table", DataTable).row_count == 0
        for _ in "no-such-case-zzz":
            await pilot.press("backspace")
        await pilot.pause()
        # the list is back and a case is selected again (the one the narrowing filter landed on)
        assert app.selected_case is not None
        assert app.selected_case in text_of(app.workbench.query_one("#evidence-head", Static))


@pytest.mark.asyncio
async def test_a_notification_waits_while_the_help_is_open(demo, tmp_path):
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        app.clear_notifications()
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        app.say("saved PS-01 as open to b.json", title="casebook")
        await pilot.pause()
        assert not app._notifications and app.held_notes  # nothing drawn over the dialog
        await pilot.press("escape")
        await pilot.pause()
        assert not app.held_notes and len(app._notifications) == 1


@pytest.mark.asyncio
async def test_the_candidate_detail_keeps_its_verdict_on_an_80_column_screen(demo, tmp_path, wait_until):
    # The strainer miss's unit-pair candidates are the demo's longest (invented data, seed 7): name,
    # expression and verdict need four lines at 80 columns, where the detail shows three.
    from afterlook.analysis.wording import candidate_verdict
    from afterlook.tui.widgets.candidates_panel import DETAIL_LINES, CandidatesPanel

    case = "PS-11/2026-04-20T17:00"
    app = create_app(demo.model, demo.cases, train_path=demo.train, casebook=tmp_path / "b.json")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        app.select_case(case)
        await wait_until(pilot, lambda: case in app.candidates, what="candidates for the strainer miss")
        await pilot.press("c")
        await pilot.pause()
        panel = app.workbench.query_one(CandidatesPanel)
        detail = panel.query_one("#cand-detail", Static)
        result = app.candidates[case]
        dropped_a_name = False
        for i, c in enumerate(result.candidates[:6]):
            panel._detail(i)
            await pilot.pause()
            from rich.text import Text

            text = Text(detail.render().plain)  # wrapped as the Static wraps it (style does not change it)
            assert len(text.wrap(app.console, detail.size.width)) <= DETAIL_LINES, text.plain
            assert candidate_verdict(c) in text.plain and c.expression in text.plain
            dropped_a_name |= c.name not in text.plain
        assert dropped_a_name  # the case this guards: at least one needed the shorter form


def test_every_is_true_first_then_once_per_interval():
    from afterlook.tui.pace import Every

    now = [100.0]
    due = Every(0.1, clock=lambda: now[0])
    seen = []
    for step in (0.0, 0.04, 0.05, 0.02, 0.2, 0.0):  # clock readings 100, 100.04, 100.09, 100.11, 100.31, 100.31
        now[0] += step
        seen.append(due())
    assert seen == [True, False, False, True, True, False]


@pytest.mark.asyncio
async def test_a_search_redraws_its_bar_a_few_times_a_second_not_at_every_report(demo, tmp_path, monkeypatch,
                                                                               wait_until):
    # Every progress message redraws the bar in the interface's thread, which the search then waits for
    # (Python's interpreter lock): with the interval made endless, only the first report and the end are
    # shown, while the search itself keeps reporting (and so can still be stopped at any report).
    from afterlook.analysis import workbench as wd
    from afterlook.tui import pace
    from afterlook.tui.widgets.candidates_panel import CandidatesPanel

    monkeypatch.setattr(pace, "PROGRESS_EVERY", 1e9)
    reports, shown = [], []
    real = wd.find_candidates

    def counted(session, case_id, *, top=10, progress=None):
        def report(stage, fraction):
            reports.append((stage, fraction))
            progress(stage, fraction)

        return real(session, case_id, top=top, progress=report)

    monkeypatch.setattr(wd, "find_candidates", counted)
    original_progress = CandidatesPanel.progress
    monkeypatch.setattr(CandidatesPanel, "progress",
                        lambda self, stage, fraction: (shown.append((stage, fraction)),
                                                       original_progress(self, stage, fraction)))
    app = quiet_app(demo, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        case = app.selected_case
        await pilot.press("c")
        await wait_until(pilot, lambda: case in app.candidates, what="the candidates")
    assert len(reports) > 10
    assert shown == [reports[0], reports[-1]] and reports[-1][1] == 1.0


def test_the_workbench_does_not_animate_unless_the_user_asks(demo, tmp_path, monkeypatch):
    # Every animation frame is a redraw that a running search waits for (tui/pace.py); Textual's own
    # TEXTUAL_ANIMATIONS, when the user sets it, is left in charge.
    monkeypatch.delenv("TEXTUAL_ANIMATIONS", raising=False)
    app = quiet_app(demo, tmp_path)
    assert app.animation_level == "none"
    monkeypatch.setenv("TEXTUAL_ANIMATIONS", "full")
    import textual.constants

    monkeypatch.setattr(textual.constants, "TEXTUAL_ANIMATIONS", "full", raising=False)
    app = quiet_app(demo, tmp_path)
    assert app.animation_level == "full"
