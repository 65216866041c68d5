"""Unit baselines and a unit's recent past (afterlook.core.units) against pandas and scipy.stats.

References: pandas ``groupby(unit).median()``, ``groupby(unit)[x].shift(k)``
and ``groupby(unit)[x].rolling(n, min_periods=n).median()`` on a table sorted
by (unit, time); ``scipy.stats.median_abs_deviation(x, scale="normal")`` per
group. The table is invented input (seeded): every expected value is what
pandas or scipy compute on it.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from afterlook.analysis.fitting import fit
from afterlook.analysis.model import load_model
from afterlook.analysis.unit_rows import fallback_warnings, row_context
from afterlook.core import expressions
from afterlook.core.errors import AfterlookError
from afterlook.core.units import MIN_UNIT_ROWS, TIMES, UNITS, with_history


def _table(seed=4, n=900):
    rng = np.random.default_rng(seed)
    unit = rng.choice(["U1", "U2", "U3", "tiny"], n, p=[0.45, 0.3, 0.23, 0.02])
    level = pd.Series(unit).map({"U1": 2.0, "U2": 5.0, "U3": -1.0, "tiny": 0.0}).to_numpy()
    frame = pd.DataFrame({
        "unit": unit,
        "time": pd.Timestamp("2026-01-01") + pd.to_timedelta(rng.permutation(n), unit="h"),
        "x": level + rng.standard_t(4, n),
        "y": rng.normal(0, 1, n),
    })
    frame.loc[[10, 50], "x"] = np.nan
    frame["time"] = frame["time"].dt.strftime("%Y-%m-%dT%H:%M")
    return frame


def _columns(frame):
    return {"x": frame["x"].to_numpy(float), "y": frame["y"].to_numpy(float),
            **row_context(frame, "unit", "time")}


def test_unit_median_is_pandas_groupby_median_and_small_units_use_the_fleet():
    frame = _table()
    expr = expressions.parse("x - unit_median(x)").fit(_columns(frame))
    params = expr.frozen["unit_median(x)"]
    by_unit = frame.groupby("unit")["x"].median()  # pandas skips NaN, as the fit uses finite values
    counts = frame.groupby("unit")["x"].count()
    for unit, value in by_unit.items():
        if counts[unit] >= MIN_UNIT_ROWS:
            assert params["units"][unit] == pytest.approx(value, rel=1e-12)
        else:
            assert unit not in params["units"] and params["fallback_units"][unit] == counts[unit]
    assert params["fleet"] == pytest.approx(frame["x"].median(), rel=1e-12)
    got = expr.evaluate(_columns(frame))
    own = frame["unit"].map(lambda u: by_unit[u] if counts[u] >= MIN_UNIT_ROWS else frame["x"].median())
    np.testing.assert_allclose(got, frame["x"] - own, rtol=1e-12)


def test_unit_scale_is_scipy_mad_scaled_to_a_normal_sd_per_unit():
    frame = _table()
    params = expressions.parse("unit_scale(x)").fit(_columns(frame)).frozen["unit_scale(x)"]
    for unit, group in frame.groupby("unit"):
        x = group["x"].dropna().to_numpy()
        if x.size >= MIN_UNIT_ROWS:
            assert params["units"][unit] == pytest.approx(stats.median_abs_deviation(x, scale="normal"), rel=1e-12)
    assert params["fleet"] == pytest.approx(stats.median_abs_deviation(frame["x"].dropna(), scale="normal"),
                                            rel=1e-12)


def test_a_unit_unseen_in_training_uses_the_fleet_value_and_is_counted():
    train = _table()
    expr = expressions.parse("unit_median(x)").fit(_columns(train))
    new = _table(seed=9, n=60)
    new.loc[:4, "unit"] = "NEW"
    cols = _columns(new)
    got = expr.evaluate(cols)
    fleet = train["x"].median()
    assert np.all(got[:5] == pytest.approx(fleet))
    from afterlook.core.recipe import Recipe

    recipe = Recipe(["x"], [("m", "unit_median(x)")]).fit(_columns(train))
    (line,) = fallback_warnings(recipe, cols)
    tiny = int((new["unit"] == "tiny").sum())
    assert line.startswith(f"unit_median(x): {5 + tiny} row(s) of {2 if tiny else 1} unit(s)") and "NEW" in line


def test_baselines_need_the_unit_column():
    with pytest.raises(AfterlookError, match="needs the unit of each row"):
        expressions.parse("unit_median(x)").fit({"x": np.arange(50.0)})


@pytest.mark.parametrize("k", [1, 2, 5])
def test_lag_is_pandas_groupby_shift_in_time_order(k):
    frame = _table()
    got = expressions.parse(f"lag(x, {k})").evaluate(_columns(frame))
    ordered = frame.assign(t=pd.to_datetime(frame["time"])).sort_values(["unit", "t"], kind="mergesort")
    expected = ordered.groupby("unit")["x"].shift(k).reindex(frame.index)
    np.testing.assert_array_equal(np.isnan(got), expected.isna().to_numpy())
    np.testing.assert_array_equal(got[~np.isnan(got)], expected.to_numpy()[~np.isnan(got)])


@pytest.mark.parametrize("n", [1, 3, 8])
def test_rolling_median_is_pandas_groupby_rolling_median(n):
    frame = _table()
    got = expressions.parse(f"rolling_median(x, {n})").evaluate(_columns(frame))
    ordered = frame.assign(t=pd.to_datetime(frame["time"])).sort_values(["unit", "t"], kind="mergesort")
    expected = (ordered.groupby("unit")["x"].rolling(n, min_periods=n).median()
                .reset_index(level=0, drop=True).reindex(frame.index).to_numpy())
    np.testing.assert_array_equal(np.isnan(got), np.isnan(expected))
    np.testing.assert_allclose(got[~np.isnan(got)], expected[~np.isnan(expected)], rtol=1e-12)


def test_the_first_readings_of_a_unit_lack_history():
    frame = _table()
    cols = _columns(frame)
    ok = with_history(cols[UNITS], cols[TIMES], 3)
    ordered = frame.assign(t=pd.to_datetime(frame["time"])).sort_values(["unit", "t"], kind="mergesort")
    position = ordered.groupby("unit").cumcount().reindex(frame.index).to_numpy()  # pandas: 0 for the first
    np.testing.assert_array_equal(ok, position >= 3)


def test_numeric_times_order_like_timestamps():
    frame = _table()
    numeric = frame.assign(time=(pd.to_datetime(frame["time"]) - pd.Timestamp("2026-01-01")).dt.total_seconds())
    a = expressions.parse("lag(x, 1)").evaluate(_columns(frame))
    b = expressions.parse("lag(x, 1)").evaluate(_columns(numeric))
    np.testing.assert_array_equal(a, b)


def test_duplicate_unit_time_pairs_and_bad_times_are_one_line_errors():
    frame = _table()
    frame.loc[7, ["unit", "time"]] = frame.loc[3, ["unit", "time"]].to_numpy()
    with pytest.raises(AfterlookError, match=r"1 row\(s\) repeat a \(unit, time\) pair, first"):
        row_context(frame, "unit", "time")
    frame = _table()
    frame.loc[5, "time"] = "yesterday"
    with pytest.raises(AfterlookError, match="'yesterday', neither a number nor an ISO 8601 time"):
        row_context(frame, "unit", "time")


def test_a_model_records_its_unit_and_time_columns_and_scores_with_the_training_baselines(tmp_path):
    train = _table()
    model = fit(train.drop(columns=["y"]).dropna(), kind="independent", threshold="rate:0.02", columns=["x"],
                derive={"rel": "x - unit_median(x)", "past": "x - lag(x, 1)"}, unit_col="unit", time_col="time")
    path = tmp_path / "m.json"
    model.save(path)
    doc = json.loads(path.read_text())
    assert doc["units"] == {"unit_col": "unit", "time_col": "time"} and doc["version"] == 2
    loaded = load_model(path)
    new = _table(seed=12, n=300).dropna()
    fm = loaded.feature_matrix(new)
    medians = train.dropna().groupby("unit")["x"].median()
    counts = train.dropna().groupby("unit")["x"].count()
    base = new["unit"].map(lambda u: medians[u] if counts[u] >= MIN_UNIT_ROWS else train.dropna()["x"].median())
    np.testing.assert_allclose(fm.column("rel"), new["x"] - base, rtol=1e-12)
    # the scored table's own medians would differ: the baseline is the training rows'
    assert not np.allclose(fm.column("rel"), new["x"] - new.groupby("unit")["x"].transform("median"))
    ld = loaded.log_density(new)
    first = ~with_history(new["unit"].astype(str).to_numpy(object), pd.to_datetime(new["time"]).to_numpy(), 1)
    assert np.isnan(ld[first]).all() and np.isfinite(ld[~first]).all()  # no past: unscored, never flagged


def test_unit_relative_texts_read_back_as_the_robust_z_against_the_units_baseline():
    from afterlook.core.shaped_text import unit_relative_text

    frame = _table()
    cols = _columns(frame)
    assert unit_relative_text("x") == "x - unit_median(x)"
    got = expressions.parse(unit_relative_text("x", "scaled")).fit(cols).evaluate(cols)
    med = frame.groupby("unit")["x"].transform("median")
    mad = frame.groupby("unit")["x"].transform(lambda v: stats.median_abs_deviation(v.dropna(), scale="normal"))
    big = (frame.groupby("unit")["x"].transform("count") >= MIN_UNIT_ROWS).to_numpy()
    ok = big & frame["x"].notna().to_numpy()
    np.testing.assert_allclose(got[ok], ((frame["x"] - med) / mad).to_numpy()[ok], rtol=1e-12)


@pytest.mark.parametrize("share", [0.1, 0.5, 1.0])
def test_the_search_s_change_candidate_on_a_row_subset_is_pandas_shift_on_the_whole_table(share):
    # The search evaluates `x - lag(x, 1)` on a random subset of rows (its sample, the targets), with the
    # rest of the table as the units' past (core.unit_candidates.with_past). Reference: pandas
    # x - groupby(unit)[x].shift(1) on the whole table sorted by (unit, time), read at the subset's rows.
    from afterlook.core.unit_candidates import unit_relative_texts, with_past

    frame = _table()
    rng = np.random.default_rng(11)
    rows = np.sort(rng.choice(len(frame), int(share * len(frame)), replace=False))
    text = unit_relative_texts("x")["change"]
    got = expressions.parse(text).evaluate(with_past(_columns(frame), rows, ["x"]))
    ordered = frame.assign(t=pd.to_datetime(frame["time"])).sort_values(["unit", "t"], kind="mergesort")
    expected = (ordered["x"] - ordered.groupby("unit")["x"].shift(1)).reindex(frame.index).to_numpy()[rows]
    np.testing.assert_array_equal(np.isnan(got), np.isnan(expected))
    np.testing.assert_allclose(got[~np.isnan(got)], expected[~np.isnan(expected)], rtol=0, atol=0)


def test_the_search_s_change_candidate_keeps_the_context_readings_as_past():
    # Cases with --context (readings before them): the subset's past is the other cases and the context.
    # Reference: pandas shift on the concatenation of context and cases.
    from afterlook.core.unit_candidates import with_past

    frame = _table()
    context, cases = frame.iloc[:400].reset_index(drop=True), frame.iloc[400:].reset_index(drop=True)
    columns = {"x": cases["x"].to_numpy(float), **row_context(cases, "unit", "time", context=context)}
    rows = np.arange(0, len(cases), 3)
    got = expressions.parse("x - lag(x, 1)").evaluate(with_past(columns, rows, ["x"]))
    whole = pd.concat([context, cases], ignore_index=True)
    ordered = whole.assign(t=pd.to_datetime(whole["time"])).sort_values(["unit", "t"], kind="mergesort")
    expected = (ordered["x"] - ordered.groupby("unit")["x"].shift(1)).reindex(whole.index).to_numpy()[400:][rows]
    np.testing.assert_array_equal(np.isnan(got), np.isnan(expected))
    np.testing.assert_allclose(got[~np.isnan(got)], expected[~np.isnan(expected)], rtol=0, atol=0)


def test_remembered_label_codes_follow_each_array():
    # apply_baseline remembers each label array's codes (by identity); arrays made and dropped in a loop
    # reuse ids, so a stale entry would give another array's units. Reference: a plain dict lookup per row.
    from afterlook.core.units import apply_baseline

    params = {"units": {"A": 1.0, "B": 2.0, "C": 3.0}, "fleet": 9.0}
    rng = np.random.default_rng(3)
    for _ in range(200):
        labels = rng.choice(["A", "B", "C", "D"], rng.integers(1, 40)).astype(object)
        want = np.array([params["units"].get(u, params["fleet"]) for u in labels])
        np.testing.assert_array_equal(apply_baseline(params, labels, len(labels), "k"), want)
        np.testing.assert_array_equal(apply_baseline(params, labels, len(labels), "k"), want)


def test_remembered_row_orders_follow_each_pair_of_arrays():
    # lag remembers each (unit, time) pair's row order (by identity); arrays made and dropped in a loop
    # reuse ids, and one pair serves many value columns. Reference: pandas' groupby shift in time order.
    from afterlook.core.units import lag

    rng = np.random.default_rng(5)
    for _ in range(100):
        n = int(rng.integers(1, 40))
        units = rng.choice(["A", "B", "C"], n).astype(object)
        times = rng.permutation(n).astype(np.int64)
        frame = pd.DataFrame({"unit": units, "t": times})
        ordered = frame.sort_values(["unit", "t"], kind="mergesort")
        for k in (1, 2):
            values = rng.normal(size=n)
            want = ordered.assign(x=values[ordered.index]).groupby("unit")["x"].shift(k).reindex(frame.index)
            got = lag(values, k, units, times)
            np.testing.assert_array_equal(got, want.to_numpy())


def test_numeric_unit_and_time_columns_are_keys_not_readings():
    # A numeric unit id or time key groups and orders the rows; modelled, a later period's times would sit
    # beyond the training range and look anomalous. Named explicitly (--columns) they are modelled.
    frame = _table()
    numeric = frame.assign(unit=frame["unit"].map({"U1": 1, "U2": 2, "U3": 3, "tiny": 4}),
                           time=(pd.to_datetime(frame["time"]) - pd.Timestamp("2026-01-01")).dt.total_seconds())
    model = fit(numeric.dropna(), unit_col="unit", time_col="time")
    assert model.features == ["x", "y"]
    assert fit(numeric.dropna(), unit_col="unit", time_col="time", columns=["x", "time"]).features == ["x", "time"]
