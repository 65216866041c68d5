"""Casebook entries, adding and checking at the API level, on the invented demo fleet.

Outside references: the ``csv`` module reads the tables (snapshot values,
hand-computed z scores); the CLI's ``explain --json`` and ``try --json``
documents (separate processes) give the numbers an entry must repeat;
histogram counts are recounted naively with plain comparisons.
"""

from __future__ import annotations

import csv
import json
import math
import re
from datetime import datetime, timedelta, timezone

import numpy as np
import pandas as pd
import pytest

import afterlook
from afterlook.analysis.review import STATUSES, CheckResult, add_to_casebook, check_casebook, review_entry
from afterlook.core.errors import AfterlookError
from afterlook.store.casebook_file import Casebook

STAMP = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ$")


def csv_rows(path) -> list[dict]:
    with open(path, newline="", encoding="utf-8") as fh:  # csv module: independent reader
        return list(csv.DictReader(fh))


class Clock:
    def __init__(self):
        self.t = datetime(2026, 6, 2, 9, 0, tzinfo=timezone.utc)

    def __call__(self):
        self.t += timedelta(minutes=5)
        return self.t


@pytest.fixture(scope="module")
def explained(demo):
    model = afterlook.load_model(demo.model)
    return review_entry(model, demo.cases, demo.worst, "explained", derive={demo.name: demo.expression},
                        note="worn impeller", reviewer="tester", train=demo.train, model_path="model.json")


@pytest.fixture(scope="module")
def bearing(demo):
    model = afterlook.load_model(demo.model)
    misses = afterlook.misses(model, afterlook.load_table(demo.cases)).misses
    case = next(m.case for m in misses if demo.kinds.get(m.case) == "bearing_wear")
    return review_entry(model, demo.cases, case, "needs-signal", train=demo.train, reviewer="tester")


def test_entry_repeats_what_explain_and_try_print(demo, explained, run_cli, parse_json):
    code, out, err = run_cli("explain", demo.model, demo.cases, demo.worst, "--json")
    assert code == 0, err
    shown = parse_json(out)
    assert explained["evidence"] == shown["features"]
    assert explained["before"]["log_density"] == shown["log_density"]
    assert explained["before"]["threshold"] == shown["threshold"]
    assert explained["before"]["flagged"] is False  # the worst miss

    code, out, err = run_cli("try", demo.model, demo.cases, "--derive", f"{demo.name}={demo.expression}",
                             "--train", demo.train, "--case", demo.worst, "--json")
    assert code == 0, err
    tried = parse_json(out)
    for when in ("before", "after"):  # try also counts unscored and out-of-domain cases; the entry keeps the metrics
        assert explained["metrics"][when] == {k: tried[when][k] for k in explained["metrics"][when]}
    row = next(c for c in tried["cases"] if c["case"] == demo.worst)
    assert explained["after"]["log_density"] == row["after"]["log_density"]
    assert explained["after"]["flagged"] is row["after"]["flagged"] is True
    assert explained["after"]["threshold"] == tried["after"]["threshold"]


def test_entry_bookkeeping(demo, explained):
    assert explained["case"] == demo.worst and explained["status"] == "explained"
    assert explained["label"] == "anomaly"
    assert explained["derived_feature"] == {"name": demo.name, "expression": demo.expression}
    assert explained["deciding_feature"]["name"] == demo.name
    assert explained["model"]["path"] == "model.json"
    assert explained["model"]["fingerprint"] == afterlook.load_model(demo.model).fingerprint()
    assert explained["model_after"]["fingerprint"] != explained["model"]["fingerprint"]
    assert demo.name in explained["model_after"]["features"]
    assert STAMP.match(explained["created"]) and explained["updated"] == explained["created"]
    assert explained["reviewer"] == "tester" and explained["note"] == "worn impeller"


def test_snapshot_is_the_table_row(demo, explained):
    row = next(r for r in csv_rows(demo.cases) if r["id"] == demo.worst)
    columns = explained["snapshot"]["columns"]
    numeric = ["flow_m3h", "suction_bar", "discharge_bar", "motor_current_a", "vibration_mm_s", "bearing_temp_c",
               "ambient_temp_c", "hours_since_service"]
    assert set(numeric) <= set(columns)
    for col in numeric:
        assert columns[col] == float(row[col])
    # the demo recipe's derived feature, by hand: flow * (discharge - suction), before any transform
    hand = float(row["flow_m3h"]) * (float(row["discharge_bar"]) - float(row["suction_bar"]))
    assert explained["snapshot"]["features"]["hydraulic_power"] == pytest.approx(hand, rel=1e-12)
    assert explained["snapshot"]["features"]["hours_since_service"] == float(row["hours_since_service"])
    assert demo.name in explained["snapshot"]["features"]
    assert explained["snapshot"]["context"]["station"] == row["station"]


def test_histogram_counts_the_normal_population(demo, explained, bearing):
    train = csv_rows(demo.train)
    for entry in (explained, bearing):
        h = entry["deciding_feature"]["histogram"]
        assert len(h["edges"]) == len(h["counts"]) + 1 == 31
        assert sum(h["counts"]) == h["rows"] == len(train)
        assert h["population"] == "normal rows of train.csv"
    # bearing temperature is a plain column: recount it with plain comparisons
    h = bearing["deciding_feature"]["histogram"]
    assert bearing["deciding_feature"]["name"] == "bearing_temp_c"
    values = [float(r["bearing_temp_c"]) for r in train]
    edges = h["edges"]
    naive = [sum(1 for v in values if edges[k] <= v < edges[k + 1] or (k == len(edges) - 2 and v == edges[-1]))
             for k in range(len(edges) - 1)]
    assert naive == h["counts"]


def test_deciding_feature_without_derive_is_the_most_negative_contribution(demo, bearing):
    # Independent model: contribution = -z^2 / 2, so the deciding feature is the largest |z|.
    # z by hand from the training rows (maximum-likelihood sd), on the model's features.
    train = pd.DataFrame(csv_rows(demo.train)).astype({c: float for c in ("flow_m3h", "suction_bar", "discharge_bar",
                                                                          "motor_current_a", "vibration_mm_s",
                                                                          "bearing_temp_c", "ambient_temp_c",
                                                                          "hours_since_service")})
    feats = {c: train[c].to_numpy() for c in ("flow_m3h", "suction_bar", "discharge_bar", "motor_current_a",
                                              "vibration_mm_s", "bearing_temp_c", "ambient_temp_c")}
    feats["hours_since_service"] = np.log(train["hours_since_service"].to_numpy() + 1)
    feats["hydraulic_power"] = train["flow_m3h"].to_numpy() * (train["discharge_bar"] - train["suction_bar"]).to_numpy()
    cols = bearing["snapshot"]["columns"]
    case = {c: cols[c] for c in feats if c in cols}
    case["hours_since_service"] = math.log(cols["hours_since_service"] + 1)
    case["hydraulic_power"] = cols["flow_m3h"] * (cols["discharge_bar"] - cols["suction_bar"])
    z = {c: (case[c] - feats[c].mean()) / feats[c].std() for c in feats}
    by_name = {f["name"]: f for f in bearing["evidence"]}
    for c in feats:
        assert by_name[c]["z"] == pytest.approx(z[c], rel=1e-9, abs=1e-9)
    assert bearing["deciding_feature"]["name"] == max(z, key=lambda c: abs(z[c]))
    assert bearing["after"] is None and bearing["metrics"]["after"] is None


def test_reviewer_defaults_to_the_os_user_or_unknown(demo, monkeypatch):
    import getpass

    model = afterlook.load_model(demo.model)
    monkeypatch.setattr(getpass, "getuser", lambda: "site-engineer")
    assert review_entry(model, demo.cases, demo.worst, "open")["reviewer"] == "site-engineer"

    def no_user():
        raise OSError("no user")

    monkeypatch.setattr(getpass, "getuser", no_user)
    assert review_entry(model, demo.cases, demo.worst, "open")["reviewer"] == "unknown"


def test_bad_status_and_unknown_case_are_refused(demo):
    model = afterlook.load_model(demo.model)
    with pytest.raises(AfterlookError) as info:
        review_entry(model, demo.cases, demo.worst, "fixed")
    assert all(s in info.value.message for s in STATUSES)
    with pytest.raises(AfterlookError, match="unknown case id"):
        review_entry(model, demo.cases, "PS-99/never", "open")


def test_add_twice_updates_with_history_and_keeps_created(demo, tmp_path):
    book = tmp_path / "book.json"
    clock = Clock()
    model = afterlook.load_model(demo.model)
    first = add_to_casebook(book, model, demo.cases, demo.worst, "open", reviewer="a", clock=clock)
    second = add_to_casebook(book, model, demo.cases, demo.worst, "accepted-risk", note="rare", reviewer="b",
                             clock=clock)
    assert second["created"] == first["created"] == "2026-06-02T09:05:00Z"
    assert second["updated"] == "2026-06-02T09:10:00Z"
    assert [h["status"] for h in second["history"]] == ["open"]
    assert second["history"][0]["reviewer"] == "a"
    assert Casebook.open(book).entries[demo.worst] == second
    assert (tmp_path / "book.json.bak").exists()


def test_check_regresses_explained_cases_the_model_leaves_unflagged(demo, explained, bearing):
    book = Casebook("unused.json")
    book.upsert(explained)
    book.upsert(bearing)
    old = check_casebook(book, afterlook.load_model(demo.model), demo.cases)
    assert isinstance(old, CheckResult)
    assert old.regressed == [demo.worst] and not old.ok
    assert old.to_dict()["entries"] == 2 and old.to_dict()["ok"] is False
    # the needs-signal case is unflagged too, but that is no regression
    assert {d["case"]: d["regressed"] for d in old.details} == {demo.worst: True, bearing["case"]: False}


def test_check_reads_entries_recorded_with_the_earlier_exact_fingerprint(demo, explained):
    """Entries written before fingerprints were rounded carry the exact-JSON digest; check still matches them."""
    import copy

    from afterlook.core.fingerprint import exact_fingerprint
    from afterlook.analysis.trial import try_features

    model = afterlook.load_model(demo.model)
    new = try_features(model, demo.cases, {demo.name: demo.expression}, train=demo.train).model
    old_entry = copy.deepcopy(explained)
    for key, m in (("model", model), ("model_after", new)):
        old_entry[key]["fingerprint"] = exact_fingerprint(m.recipe.to_dict(), m.density.to_dict(), m.threshold)
        assert old_entry[key]["fingerprint"] != m.fingerprint()
    book = Casebook("unused.json")
    book.upsert(old_entry)
    assert {d["case"]: d["model_recorded"] for d in check_casebook(book, new, demo.cases).details} == {demo.worst: "after"}
    assert {d["case"]: d["model_recorded"] for d in check_casebook(book, model, demo.cases).details} == {demo.worst: "before"}


def test_check_scores_the_stored_snapshot_of_a_case_missing_from_the_table(demo, explained, bearing):
    from afterlook.analysis.trial import try_features

    model = afterlook.load_model(demo.model)
    new = try_features(model, demo.cases, {demo.name: demo.expression}, train=demo.train).model
    book = Casebook("unused.json")
    book.upsert(explained)
    book.upsert(bearing)
    full = check_casebook(book, new, demo.cases)
    assert full.ok and all(d["source"] == "cases" for d in full.details)
    assert {d["case"]: d["model_recorded"] for d in full.details}[demo.worst] == "after"

    cases = pd.read_csv(demo.cases)
    without = cases[cases["id"] != demo.worst]
    partial = check_casebook(book, new, without)
    d_full = {d["case"]: d for d in full.details}
    d_part = {d["case"]: d for d in partial.details}
    assert d_part[demo.worst]["source"] == "snapshot"
    assert d_part[demo.worst]["log_density"] == pytest.approx(d_full[demo.worst]["log_density"], rel=1e-12)
    assert partial.ok

    # no snapshot to fall back on: refused, naming the case
    stripped = dict(explained)
    stripped.pop("snapshot")
    book.upsert(stripped)
    with pytest.raises(AfterlookError) as info:
        check_casebook(book, new, without)
    assert demo.worst in info.value.message


def test_a_snapshot_without_its_unit_scores_when_the_recipe_reads_no_unit(demo, explained):
    # The demo model records station and hour but no feature reads them: a snapshot whose context lacks
    # the station (an entry written before the demo had units) scores as one with it. Reference: the
    # same snapshot scored with its context (the test above checks that one against the table's row).
    from afterlook.analysis.trial import try_features

    model = afterlook.load_model(demo.model)
    assert model.unit_col == "station" and not model.recipe.reads_units
    new = try_features(model, demo.cases, {demo.name: demo.expression}, train=demo.train).model
    cases = pd.read_csv(demo.cases)
    without = cases[cases["id"] != demo.worst]
    book = Casebook("unused.json")
    book.upsert(explained)
    with_context = check_casebook(book, new, without).details[0]["log_density"]
    bare = json.loads(json.dumps(explained))
    bare["snapshot"]["context"] = {}
    book.upsert(bare)
    assert check_casebook(book, new, without).details[0]["log_density"] == pytest.approx(with_context, rel=1e-12)
    # a recipe that reads the unit cannot score a snapshot without it: one clear line naming the case
    reads = try_features(model, demo.cases, {"s": "suction_bar - unit_median(suction_bar)"}, train=demo.train).model
    with pytest.raises(AfterlookError) as info:
        check_casebook(book, reads, without)
    assert demo.worst in info.value.message and "unit column" in info.value.message
