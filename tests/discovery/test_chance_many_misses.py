"""The chance guard with many misses: a shared mechanism is found, unrelated candidates are not.

Planted fleets (``conftest.make_fleet``): in the ``difference`` fleet the pair
``a - b`` is shifted on every planted failure by a few noise sd, little on any
one case; in the ``null`` fleet the "anomalies" are drawn from the normal
population. Expected results come from the planted structure and from
scipy.stats.binomtest, never from afterlook's own output.
"""

from __future__ import annotations

import pytest
from scipy import stats

import afterlook
from afterlook.analysis.discovery import suggest

CHANCE = 0.05


@pytest.fixture(scope="module")
def weak_shared(fleet_builder):
    # 40 failures, each with a - b only 3 noise sd off: rare per case (two-sided tail ~0.003), never extreme
    return fleet_builder("difference", seed=0, n_planted=40, shift=3.0)


def test_a_mechanism_shared_by_many_misses_is_found_by_the_count_test(weak_shared):
    targets = weak_shared.unflagged(weak_shared.fleet.planted)
    assert len(targets) >= 30, "the independent model should miss most of the planted failures"
    result = suggest(weak_shared.model, weak_shared.cases, train=weak_shared.train, case_ids=targets, top=10)
    pair = [c for c in result.candidates if set(c.inputs) == {"a", "b"} and c.kind == "standardized_difference"]
    assert pair, [c.expression for c in result.candidates]
    c = pair[0]
    assert c.beyond_chance and c.chance_method == "count"
    # the old guard (best single target, Bonferroni over candidates x targets) would have called it chance
    assert min(1.0, c.tail * result.tried * len(targets)) >= CHANCE
    exposed = sum(t <= 0.05 for t in c.tail_by_case.values())
    assert c.targets_exposed == exposed and exposed >= 0.8 * len(targets)
    assert stats.binomtest(exposed, len(targets), 0.05, alternative="greater").pvalue * result.tried < CHANCE


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_many_misses_drawn_from_normal_operation_claim_nothing(seed, fleet_maker):
    make_fleet, _ = fleet_maker
    fleet = make_fleet("null", seed, n_planted=60)
    # a 1% false-alarm budget leaves almost every drawn-from-normal "anomaly" a miss
    model = afterlook.fit(fleet.train, cases=fleet.cases, kind="independent", threshold="rate:0.01")
    targets = [m.case for m in afterlook.misses(model, fleet.cases).misses if m.case in set(fleet.null_anomalies)]
    assert len(targets) >= 40
    result = suggest(model, fleet.cases, train=fleet.train, case_ids=targets, top=10)
    assert result.beyond_chance_total == 0, [(c.expression, c.adjusted_tail) for c in result.candidates[:3]]
    assert result.recommended is None
    assert all(c.verdict in ("chance", "hurts") for c in result.candidates)
