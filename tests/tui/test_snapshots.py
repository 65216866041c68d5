"""Snapshot tests of the workbench's main views (pytest-textual-snapshot).

Seeded demo data (``write_demo``, seed 7), fixed terminal sizes, paths
shown by file name only, notifications cleared before the picture: the
screens are deterministic. The candidates view is fed a fixed search result
so that its picture checks the layout, not the ranking (the ranking has its
own tests in tests/discovery/). Update with ``pytest tests/tui --snapshot-update``
after looking at the new pictures.
"""

from __future__ import annotations

import pytest

from afterlook.core.candidates import Candidate
from afterlook.core.heldout import HeldOut
from afterlook.core.thresholds import Confusion
from afterlook.analysis.discovery import SuggestResult
from afterlook.tui import create_app
from afterlook.tui.messages import CandidatesReady

WIDE = (120, 40)
SMALL = (80, 24)


def make_app(demo, tmp_path):
    return create_app(demo.model, demo.cases, train_path=demo.train, casebook=tmp_path / "casebook.json",
                      auto_candidates=False)


async def settle(pilot) -> None:
    """Let every worker, and any work it sets off, finish; then clear the notifications."""
    for _ in range(3):
        await pilot.pause()
        await pilot.app.workers.wait_for_complete()
    pilot.app.clear_notifications()
    await pilot.pause()


def fixed_candidates(case_id: str) -> SuggestResult:
    def held(gain, low, high, found):
        return HeldOut("kfold", 5, 0.48, 0.48 + gain, gain, low, high, 0.01, 0.3, 0.3 + gain,
                       Confusion(10, 4, 12, 200), Confusion(11, 4, 11, 200), found_in_folds=found, stability_folds=5,
                       improved=9 if gain > 0.05 else 2, worsened=1)

    def c(expression, kind, inputs, z, tail, beyond, separated, fa, caught, heldout=None):
        cand = Candidate(expression, kind, inputs, 0.9, case_z=z, adjusted_tail=tail, beyond_chance=beyond,
                         other_anomalies_separated=separated, other_anomalies=59, false_alarms_added=fa,
                         catches_targets=caught, heldout=heldout)
        cand.judge()
        return cand

    return SuggestResult(
        cases=[case_id], tried=238, sample_rows=6000, training_source="train.csv", chance_level=0.05,
        heldout_method="kfold", heldout_folds=5, beyond_chance_total=3,
        candidates=[
            c("motor_current_a / hydraulic_power", "ratio", ("motor_current_a", "hydraulic_power"),
              10.4, 8.1e-10, True, 24, 2, 1, held(0.067, 0.01, 0.12, 4)),
            c("log(motor_current_a / hydraulic_power)", "log_ratio", ("motor_current_a", "hydraulic_power"),
              8.4, 7.5e-9, True, 24, 8, 1, held(0.012, -0.02, 0.05, 3)),
            c("vibration_mm_s * bearing_temp_c", "product", ("vibration_mm_s", "bearing_temp_c"),
              2.1, 0.61, False, 3, None, None),
            c("motor_current_a / flow_m3h", "ratio", ("motor_current_a", "flow_m3h"), 6.8, 3.1e-6, True, 20, 5, 0,
              held(-0.031, -0.08, 0.01, 1)),
        ],
    )


SIZES = pytest.mark.parametrize("size", [WIDE, SMALL], ids=["120x40", "80x24"])


@SIZES
def test_evidence_view(snap_compare, demo, tmp_path, size):
    assert snap_compare(make_app(demo, tmp_path), terminal_size=size, run_before=settle)


@SIZES
def test_candidates_view(snap_compare, demo, tmp_path, size):
    async def run_before(pilot):
        app = pilot.app
        await pilot.pause()
        app.post_message(CandidatesReady(app.selected_case, fixed_candidates(app.selected_case)))
        await pilot.pause()
        await pilot.press("c")
        await settle(pilot)

    assert snap_compare(make_app(demo, tmp_path), terminal_size=size, run_before=run_before)


@SIZES
def test_try_result_view(snap_compare, demo, tmp_path, wait_until, size):
    async def run_before(pilot):
        await pilot.pause()
        await pilot.press("t", *"amps_per_power = motor_current_a / hydraulic_power", "enter")
        await settle(pilot)
        assert pilot.app.trial_view is not None  # the picture must show a finished try
        # The panel scrolls the comparison into view once it is laid out; under
        # load that can land a few frames later. Wait for it (bounded), and fail
        # with that reason rather than with an unexplained picture mismatch.
        await wait_until(pilot, lambda: pilot.app.try_panel.scroll_offset.y > 0,
                         what="the try panel scrolled to show the before/after comparison")

    assert snap_compare(make_app(demo, tmp_path), terminal_size=size, run_before=run_before)


@SIZES
def test_typing_an_expression_keeps_help_and_quit_in_the_footer(snap_compare, demo, tmp_path, size):
    async def run_before(pilot):
        await pilot.pause()
        await pilot.press("t", *"motor_current_a / hydraulic_power")
        from textual.widgets import Input

        for box in pilot.app.query(Input):  # a blinking cursor would make the picture depend on the moment
            box.cursor_blink = False
        await settle(pilot)

    assert snap_compare(make_app(demo, tmp_path), terminal_size=size, run_before=run_before)


@SIZES
def test_histogram_view(snap_compare, demo, tmp_path, size):
    async def run_before(pilot):
        await pilot.pause()
        await pilot.press("h")
        await settle(pilot)
        app = pilot.app
        assert app.histogram is not None and app.histogram.counts.bins == app.histogram_panel.bins

    assert snap_compare(make_app(demo, tmp_path), terminal_size=size, run_before=run_before)


@SIZES
def test_help_view(snap_compare, demo, tmp_path, size):
    assert snap_compare(make_app(demo, tmp_path), terminal_size=size, press=["question_mark"],
                        run_before=settle)


@SIZES
def test_pair_view(snap_compare, demo, tmp_path, size):
    async def run_before(pilot):
        app = pilot.app
        await pilot.pause()
        app.post_message(CandidatesReady(app.selected_case, fixed_candidates(app.selected_case)))
        await pilot.pause()
        await pilot.press("c")
        await settle(pilot)
        await pilot.press("p")
        await settle(pilot)
        assert app.pair is not None and app.pair.expression == "motor_current_a / hydraulic_power"

    assert snap_compare(make_app(demo, tmp_path), terminal_size=size, run_before=run_before)
