"""--unit-col / --time-col on the CLI: recorded at fit, used later unless overridden, bad input exit 2.

The demo's tables (invented pump-station fleet) carry the station of each
row and its hour (ISO 8601): the unit and the time.
"""

from __future__ import annotations

import json
import shutil

import pandas as pd
import pytest


@pytest.fixture(scope="module")
def fitted(demo_written, tmp_path_factory, run_cli):
    folder = tmp_path_factory.mktemp("units")
    for name in ("train.csv", "cases.csv"):
        shutil.copy(demo_written.folder / name, folder / name)
    code, out, err = run_cli("fit", str(folder / "train.csv"), "--out", str(folder / "m.json"), "--cases",
                             str(folder / "cases.csv"), "--kind", "independent", "--unit-col", "station",
                             "--time-col", "hour", "--derive", "suction_rel=suction_bar - unit_median(suction_bar)",
                             "--derive", "current_step=motor_current_a - lag(motor_current_a, 1)", "--json")
    assert code == 0, err
    return folder


def test_fit_records_the_columns_and_misses_uses_them(fitted, run_cli, one_json):
    doc = json.loads((fitted / "m.json").read_text())
    assert doc["units"] == {"unit_col": "station", "time_col": "hour"}
    code, out, err = run_cli("misses", str(fitted / "m.json"), str(fitted / "cases.csv"), "--json")
    assert code == 0, err
    stations = pd.read_csv(fitted / "cases.csv")["station"].nunique()
    # each station's first case has no earlier reading for lag: not scored, said once
    assert f"{stations} case(s) lack the 1 earlier reading(s) of their unit" in err
    assert one_json(out)["n_cases"] == 2400


@pytest.mark.parametrize("args, message", [
    (["--time-col", "no_such"], "has no time column 'no_such'"),
    (["--unit-col", "no_such"], "has no unit column 'no_such'"),
    (["--time-col", "flow_m3h"], "repeat a (unit, time) pair"),
])
def test_an_override_is_used_and_checked(fitted, run_cli, args, message):
    code, out, err = run_cli("misses", str(fitted / "m.json"), str(fitted / "cases.csv"), *args)
    assert code == 2 and message in err and len(err.strip().splitlines()) == 1


def test_time_without_unit_and_the_streamed_engine_are_refused(fitted, run_cli):
    code, _, err = run_cli("fit", str(fitted / "train.csv"), "--out", str(fitted / "x.json"), "--time-col", "hour")
    assert code == 2 and "--time-col needs --unit-col" in err
    code, _, err = run_cli("fit", str(fitted / "train.csv"), "--out", str(fitted / "y.json"), "--unit-col",
                           "station", "--engine", "chunked")
    assert code == 2 and "need the memory engine" in err


def test_context_gives_the_cases_their_units_past(fitted, run_cli, one_json, tmp_path):
    cases = pd.read_csv(fitted / "cases.csv").sort_values("hour", kind="mergesort")
    half = len(cases) // 2
    cases.iloc[:half].to_csv(tmp_path / "early.csv", index=False)
    cases.iloc[half:].to_csv(tmp_path / "late.csv", index=False)
    model = str(fitted / "m.json")

    def scores(*args):
        code, out, err = run_cli("score", model, *args, "--json")
        assert code == 0, err
        return {r["case"]: r["log_density"] for r in one_json(out)["rows"]}, err

    full, _ = scores(str(fitted / "cases.csv"))
    alone, err = scores(str(tmp_path / "late.csv"))
    with_past, err_past = scores(str(tmp_path / "late.csv"), "--context", str(tmp_path / "early.csv"))
    assert sum(v is None for v in alone.values()) > 0  # a unit's first late reading has no past alone
    assert all(v is not None for v in with_past.values()) and "NaN" not in err_past
    for case, value in with_past.items():  # the same numbers as scoring the whole table at once
        assert value == pytest.approx(full[case], rel=1e-12)
    code, out, err = run_cli("try", model, str(tmp_path / "late.csv"), "--context", str(tmp_path / "early.csv"),
                             "--derive", "vib=rolling_median(vibration_mm_s, 3)", "--json")
    assert code == 0, err
    doc = one_json(out)
    assert doc["before"]["unscored"] == 0 and doc["after"]["unscored"] == 0


def test_the_streamed_engine_takes_a_model_that_records_units_but_reads_none(fitted, demo_written, run_cli,
                                                                           tmp_path):
    # the demo model records station and hour, and no feature reads them: chunked scoring is the same
    code, out, err = run_cli("score", str(demo_written.model), str(demo_written.cases), "--out",
                             str(tmp_path / "a.csv"), "--engine", "chunked")
    assert code == 0, err
    # a model whose features read a unit's baseline and past needs the whole table: refused in one line
    code, out, err = run_cli("score", str(fitted / "m.json"), str(fitted / "cases.csv"), "--out",
                             str(tmp_path / "b.csv"), "--engine", "chunked")
    assert code == 2 and "the memory engine" in err and len(err.strip().splitlines()) == 1
