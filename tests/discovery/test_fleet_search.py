"""The search with a unit column: unit-relative and change candidates (core/unit_candidates.py, analysis/fleet_search.py).

Planted fleets here are invented data whose expected answer follows from
their construction (said at each one). The demo checks use the invented
pump-station fleet, whose blocked-strainer failures are built to be visible
only against their station's own normal (src/afterlook/demo/scenario.py).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import afterlook
from afterlook.analysis.discovery import suggest
from afterlook.analysis.session import Session, as_table
from afterlook.analysis.trial import try_features
from afterlook.core import candidates as cand
from afterlook.core.chance import CHANCE_LEVEL
from afterlook.core.unit_candidates import UNIT_KINDS
from afterlook.demo import generate

N_UNITS = 8
TRAIN_PER_UNIT = 250
CASES_PER_UNIT = 40
N_PLANTED = 6
N_LOUD = 4
UNIT_SD = 0.5
SHIFT_SD = 9.0  # a planted failure: the unit's pressure 9 of its own sd low


def _fleet(seed: int, planted: bool):
    """Units that differ only in their pressure level ``p`` (offsets 10, 12, ..., 24; sd 0.5 within a unit);
    ``q`` and ``r`` are unrelated readings shared by the fleet.

    Planted failures (``planted=True``) sit at the three highest units with ``p`` lowered by 9 of the
    unit's own sd (4.5): still well inside the fleet's range of ``p`` (about 9 to 25), so the fleet's
    per-column model misses them, while against the unit's own median they are 9 sd out. A null fleet
    instead labels ordinary rows (drawn like every normal row) as anomalies: nothing is there to find.
    Loud anomalies (``q`` far out) let the best-F1 threshold sit sensibly. Time ``t`` runs per unit.
    """
    rng = np.random.default_rng(seed)
    offsets = {f"U{k + 1}": 10.0 + 2.0 * k for k in range(N_UNITS)}

    def rows(per_unit: int, start: int):
        units = np.repeat(list(offsets), per_unit)
        hours = np.tile(np.arange(start, start + per_unit), N_UNITS)
        # text times (ISO 8601), so the time column is context, never a modelled reading
        t = (pd.Timestamp("2026-01-01") + pd.to_timedelta(hours, unit="h")).strftime("%Y-%m-%dT%H:%M")
        p = np.array([offsets[u] for u in units]) + rng.normal(0.0, UNIT_SD, units.size)
        return pd.DataFrame({"unit": units, "t": t, "p": p, "q": rng.normal(50.0, 5.0, units.size),
                             "r": np.exp(rng.normal(1.0, 0.3, units.size))})

    train = rows(TRAIN_PER_UNIT, 0)
    train.insert(0, "id", [f"tr{k}" for k in range(len(train))])
    cases = rows(CASES_PER_UNIT, TRAIN_PER_UNIT)
    cases.insert(0, "id", [f"c{k}" for k in range(len(cases))])
    cases["label"] = "normal"
    high = cases.index[cases["unit"].isin(["U6", "U7", "U8"])].to_numpy()
    chosen = rng.choice(high, N_PLANTED + N_LOUD, replace=False)
    targets, loud = chosen[:N_PLANTED], chosen[N_PLANTED:]
    if planted:
        cases.loc[targets, "p"] -= SHIFT_SD * UNIT_SD
    cases.loc[targets, "label"] = "anomaly"
    cases.loc[loud, "q"] += 60.0
    cases.loc[loud, "label"] = "anomaly"
    return train, cases, [str(cases.loc[i, "id"]) for i in targets]


def _fitted(seed: int, planted: bool, unit_col="unit", time_col="t"):
    train, cases, targets = _fleet(seed, planted)
    tr, cs = as_table(train), as_table(cases)
    model = afterlook.fit(tr, cases=cs, kind="independent", unit_col=unit_col, time_col=time_col)
    return model, cs, tr, targets


@pytest.mark.parametrize("seed", [1, 2])
def test_a_failure_only_visible_against_its_unit_is_found_by_a_unit_relative_candidate(seed):
    model, cs, tr, targets = _fitted(seed, planted=True)
    session = Session(model, cs, tr)
    misses = {str(cs.ids[i]) for i in np.flatnonzero(cs.labels & ~session.scored.flagged)}
    # construction: inside the fleet's range, so the per-column model misses (at least most of) them
    missed = [t for t in targets if t in misses]
    assert len(missed) >= N_PLANTED - 1
    result = suggest(session, None, case_ids=[missed[0]], top=5)
    top3 = result.candidates[:3]
    assert any(c.kind in ("unit_relative", "unit_standardized") and c.inputs == ("p",) for c in top3), \
        [(c.kind, c.expression) for c in top3]
    best = next(c for c in top3 if c.kind in ("unit_relative", "unit_standardized"))
    assert best.beyond_chance and best.verdict == "holds-up"
    assert best.to_dict()["kind"] in UNIT_KINDS


@pytest.mark.parametrize("seed", [3, 4])
def test_a_null_fleet_with_unit_offsets_claims_nothing(seed):
    model, cs, tr, targets = _fitted(seed, planted=False)
    session = Session(model, cs, tr)
    target = next(t for t in targets if not session.scored.flagged[session.row(t)])
    result = suggest(session, None, case_ids=[target], top=10)
    assert any(c.kind in UNIT_KINDS for c in result.candidates)  # the unit candidates were looked at
    for c in result.candidates:
        assert not c.beyond_chance and c.adjusted_tail >= CHANCE_LEVEL, c.expression
        assert c.verdict != "holds-up"
    assert result.recommended is None and "nothing beats chance" in result.verdict()


def test_without_a_unit_column_no_unit_candidate_is_made_and_with_one_they_are_counted():
    plain, cs, tr, targets = _fitted(1, planted=True, unit_col=None, time_col=None)
    target = targets[0]
    without = suggest(plain, cs, train=tr, case_ids=[target], top=50)
    assert not any(c.kind in UNIT_KINDS for c in without.candidates)
    units_only, cs2, tr2, _ = _fitted(1, planted=True, time_col=None)
    with_units = suggest(units_only, cs2, train=tr2, case_ids=[target], top=50)
    # construction: 3 columns -> 3 unit_relative + 3 unit_standardized + 3 differences + 6 ratios (p, q, r
    # positive); no change candidates without a time column
    assert with_units.tried == without.tried + 3 + 3 + 3 + 6
    assert {c.kind for c in with_units.candidates} & set(UNIT_KINDS) <= set(UNIT_KINDS) - {"change"}
    timed, cs3, tr3, _ = _fitted(1, planted=True)
    assert suggest(timed, cs3, train=tr3, case_ids=[target], top=5).tried == with_units.tried + 3


def test_first_pass_z_of_unit_candidates_equals_a_direct_evaluation():
    # reference: the candidate's text evaluated by afterlook on the whole tables (as try does), then the plain
    # z of the target against the sample's values (numpy mean and sd)
    from afterlook.analysis.fleet_search import FleetSearch

    model, cs, tr, targets = _fitted(2, planted=True)
    session = Session(model, cs, tr)
    names = model.recipe.features
    fleet = FleetSearch.prepare(session, names, cand.Settings(sample_size=1000))  # a real subsample of 2000 rows
    i = session.row(targets[0])
    found = fleet.screen([i])
    assert {c.kind for c in found} == set(UNIT_KINDS) and fleet.tried == len(found)
    normal, cases = session.scope("normal"), session.scope("cases")
    rows = _sample_rows(session, fleet)
    for c in found:
        v = c.parsed.evaluate(normal)[rows]
        t = c.parsed.evaluate(cases)[i]
        v = v[np.isfinite(v)]
        assert c.first_pass_z == pytest.approx(abs(t - v.mean()) / v.std(), rel=1e-9), c.expression


def _sample_rows(session, fleet):
    """Row positions of the fleet's sample in the normal rows (its unit and time identify each row)."""
    from afterlook.core.units import TIMES, UNITS

    normal = session.scope("normal")
    where = {(u, t): k for k, (u, t) in enumerate(zip(normal[UNITS], normal[TIMES]))}
    return np.array([where[(u, t)] for u, t in zip(fleet.sample[UNITS], fleet.sample[TIMES])])


def test_unit_kinds_are_named_in_json_and_names_are_identifiers():
    model, cs, tr, targets = _fitted(1, planted=True)
    result = suggest(model, cs, train=tr, case_ids=[targets[0]], top=40)
    doc = result.to_dict()
    kinds = {c["kind"] for c in doc["candidates"]}
    assert kinds & set(UNIT_KINDS)
    assert kinds <= set(cand.KINDS)
    for c in doc["candidates"]:
        assert c["name"].isidentifier(), c["name"]
        if c["kind"] in ("unit_relative", "unit_standardized", "change"):
            assert len(c["inputs"]) == 1


# --------------------------------------------------------------------------
# the demo: a blocked strainer, only visible against its station's own normal
# --------------------------------------------------------------------------


@pytest.fixture(scope="module")
def strainer_miss(demo_written, demo_scenario):
    model = afterlook.load_model(demo_written.model)
    cases = afterlook.load_table(demo_written.cases)
    session = Session(model, cases, afterlook.load_table(demo_written.train))
    missed = [m.case for m in afterlook.misses(session).misses]
    strainer = [c for c in missed if demo_scenario.kinds.get(c) == "blocked_strainer"]
    assert strainer, "the demo's blocked strainers are misses by construction"
    return session, strainer[0]


def test_demo_strainer_miss_ranks_a_unit_relative_candidate_first_and_it_holds_up(strainer_miss):
    session, case = strainer_miss
    result = suggest(session, None, case_ids=[case], top=5)
    first = result.candidates[0]
    assert first.kind in UNIT_KINDS and "unit_median(suction_bar)" in first.expression, first.expression
    assert first.verdict == "holds-up" and result.recommended == first.name


def test_demo_try_with_the_unit_relative_candidate_catches_the_strainer_miss(strainer_miss):
    session, case = strainer_miss
    best = suggest(session, None, case_ids=[case], top=5).candidates[0]
    tried = try_features(session, None, {best.name: best.expression}, focus=[case])
    row = next(r for r in tried.to_dict()["cases"] if r["case"] == case)
    assert not row["before"]["flagged"] and row["after"]["flagged"]
    # the search's exact re-fit is the try: the same false alarms added and the same held-out gain
    assert best.false_alarms_added == tried.after.fp - tried.before.fp
    assert best.heldout.gain == pytest.approx(tried.to_dict()["heldout"]["gain"], rel=1e-12, abs=1e-12)


def test_several_planted_misses_find_the_unit_candidate_and_the_fold_searches_find_it_again():
    # construction as above: the planted misses share one mechanism (p low for its own unit), so the
    # fold searches (each over the misses of the other folds) find the same unit-relative candidate
    model, cs, tr, targets = _fitted(1, planted=True)
    session = Session(model, cs, tr)
    missed = [t for t in targets if not session.scored.flagged[session.row(t)]]
    result = suggest(session, None, case_ids=missed, top=5)
    best = next(c for c in result.candidates[:3] if c.kind in ("unit_relative", "unit_standardized"))
    assert best.inputs == ("p",) and best.beyond_chance
    h = best.to_dict()["heldout"]
    assert h["found_in_folds"] is not None and h["found_in_folds"] >= 3, h
