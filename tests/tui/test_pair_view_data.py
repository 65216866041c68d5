"""The pair view's data for the workbench: a ratio and a standardised (zscore) pair, on the demo session.

Reference: numpy.quantile of the candidate computed directly from the demo's
training columns with pandas (the zscore with the training mean and sd, as
the frozen statistics are defined: ddof 0).
"""

from __future__ import annotations

import numpy as np
import pytest

from afterlook.analysis.pair_view import pair_view

WORST = "PS-01/2026-05-21T17:00"


def power(frame):
    return frame["flow_m3h"] * (frame["discharge_bar"] - frame["suction_bar"])  # the demo's derived feature


def test_a_standardised_pair_gets_its_band_from_the_training_rows(session):
    text = "zscore(motor_current_a) - zscore(hydraulic_power)"
    v = pair_view(session, "std_gap", text, ("motor_current_a", "hydraulic_power"), WORST, nx=30, ny=10)
    train = session.training.table.frame
    a, b = train["motor_current_a"].to_numpy(), power(train).to_numpy()
    values = (a - a.mean()) / a.std() - (b - b.mean()) / b.std()
    assert v.counts.band == pytest.approx(tuple(np.quantile(values, [0.01, 0.99])), rel=1e-9)
    col, row = v.counts.case_cell
    assert not v.counts.in_band[row, col]  # the worn impeller sits outside the band


def test_a_candidate_reading_a_third_column_has_no_band(session):
    v = pair_view(session, "x", "motor_current_a / hydraulic_power + 0 * flow_m3h",
                  ("motor_current_a", "hydraulic_power"), WORST)
    assert v.counts.band is None and v.counts.in_band is None


def test_a_unit_relative_pair_has_no_band_but_its_readings_are_drawn(session):
    # its value depends on each row's station (the demo model records it), not on the two readings alone
    text = ("(suction_bar - unit_median(suction_bar)) / unit_scale(suction_bar) - "
            "(ambient_temp_c - unit_median(ambient_temp_c)) / unit_scale(ambient_temp_c)")
    v = pair_view(session, "s", text, ("suction_bar", "ambient_temp_c"), WORST)
    assert v.counts.band is None and "own baseline" in v.band_words
    assert v.case_xy == (session.scope("cases")["ambient_temp_c"][session.row(WORST)],
                         session.scope("cases")["suction_bar"][session.row(WORST)])
