"""The numbers the workbench shows (afterlook.analysis.workbench) against the API and naive recomputations.

References: :func:`afterlook.analysis.evidence.misses`, :func:`afterlook.analysis.evidence.explain`,
:func:`afterlook.analysis.trial.try_features` and :func:`afterlook.analysis.shape.shape` (the
CLI's functions: a number on the screen must equal the one the CLI prints),
plus numpy written out here for what those do not cover.
"""

from __future__ import annotations

import numpy as np
import pytest

import afterlook
from afterlook.analysis.session import scored_cases
from afterlook.core.errors import AfterlookError
from afterlook.core.histograms import histogram_counts
from afterlook.analysis.trial import try_features
from afterlook.analysis import workbench as wd


@pytest.fixture(scope="module")
def frames(demo):
    model = afterlook.load_model(demo.model)
    cases = afterlook.load_table(demo.cases, require_labels=True)
    train = afterlook.load_table(demo.train)
    return model, cases, train


def test_open_session_rejects_bad_input_with_one_line(demo, tmp_path):
    with pytest.raises(AfterlookError, match="no such file"):
        wd.open_session(demo.model, tmp_path / "missing.csv")
    with pytest.raises(AfterlookError, match="no label column"):
        wd.open_session(demo.model, demo.train)  # training rows carry no labels: misses need them
    with pytest.raises(AfterlookError, match="is a folder"):
        wd.open_session(demo.model, demo.cases, casebook=tmp_path)


def test_default_casebook_sits_next_to_the_cases(demo):
    s = wd.open_session(demo.model, demo.cases, train_path=demo.train)
    assert s.casebook_path == str(demo.cases.resolve().parent / "casebook.json")


def test_status_summary_equals_the_misses_document(session, frames):
    model, cases, _ = frames
    doc = afterlook.misses(model, cases).to_dict()
    s = wd.status_summary(session)
    assert s.threshold == doc["threshold"] == model.threshold
    assert (s.n_cases, s.n_anomalies, s.n_misses) == (doc["n_cases"], doc["n_anomalies"], doc["n_misses"])
    m = doc["metrics"]
    assert s.n_false_alarms == m["fp"]
    assert (s.precision, s.recall, s.f1) == (m["precision"], m["recall"], m["f1"])
    assert s.policy == model.policy.describe() and s.chosen_on == model.threshold_basis
    assert s.model_file == "model.json" and s.n_features == len(model.features)


def test_case_list_misses_come_worst_margin_first_as_the_api_lists_them(session, frames):
    model, cases, _ = frames
    rows = wd.case_rows(session)
    listed = afterlook.misses(model, cases).misses
    assert [r.case for r in rows] == [m.case for m in listed]
    assert all(r.kind == wd.KIND_MISS for r in rows)
    margins = [r.margin for r in rows]
    assert margins == sorted(margins, reverse=True) and margins[0] > 0


def test_near_catches_and_false_alarms_follow_their_definitions(session, frames):
    model, cases, _ = frames
    sc = scored_cases(model, cases)
    ld, y, thr = sc.log_density, cases.labels, model.threshold
    gap = float(np.median(ld[~y])) - thr  # a typical normal case's distance above the threshold
    assert wd.near_catch_gap(session) == pytest.approx(gap)
    expect_near = {str(cases.ids[i]) for i in range(len(y)) if y[i] and ld[i] < thr and ld[i] - thr >= -gap}
    expect_fa = {str(cases.ids[i]) for i in range(len(y)) if not y[i] and ld[i] < thr}
    rows = wd.case_rows(session, near=True, false_alarms=True)
    assert {r.case for r in rows if r.kind == wd.KIND_NEAR} == expect_near
    assert {r.case for r in rows if r.kind == wd.KIND_FALSE_ALARM} == expect_fa
    assert expect_near, "the demo should have at least one near catch for this test to mean something"
    near = [r for r in rows if r.kind == wd.KIND_NEAR]
    assert all(-gap <= r.margin < 0 for r in near)
    assert [r.margin for r in near] == sorted((r.margin for r in near), reverse=True)
    counts = wd.case_counts(session)
    assert counts == {wd.KIND_MISS: len(wd.case_rows(session)), wd.KIND_NEAR: len(expect_near),
                      wd.KIND_FALSE_ALARM: len(expect_fa)}


def test_text_filter_matches_id_and_context_case_insensitively(session):
    everything = wd.case_rows(session, near=True, false_alarms=True)
    station = everything[0].context["station"]
    kept = wd.case_rows(session, near=True, false_alarms=True, text=station.lower())
    assert kept and len(kept) < len(everything)
    assert all(station in r.case or station in r.context.values() for r in kept)
    assert wd.case_rows(session, text="no such text anywhere") == []


def test_evidence_equals_explain_and_shares_add_up(session, frames):
    model, cases, _ = frames
    case = wd.case_rows(session)[0].case
    view = wd.case_evidence(session, case)
    ref = afterlook.explain(model, cases, case).to_dict()
    assert view.explain.to_dict() == ref
    by_name = {f["name"]: f for f in ref["features"]}
    for r in view.rows:
        f = by_name[r.name]
        assert (r.value, r.z, r.percentile, r.contribution) == (f["value"], f["z"], f["percentile"],
                                                                 f["contribution"])
    total = sum(f["contribution"] for f in ref["features"])
    for r in view.rows:
        assert r.share == pytest.approx(100.0 * by_name[r.name]["contribution"] / total)
    assert sum(r.share for r in view.rows) == pytest.approx(100.0)
    assert [r.contribution for r in view.rows] == sorted(r.contribution for r in view.rows)
    assert view.standing.startswith("miss")
    transformed = [r for r in view.rows if r.transform]
    assert [r.name for r in transformed] == list(model.recipe.transforms)
    row = cases.frame.iloc[cases.row_index(case)]
    for r in view.rows:
        if r.name in cases.frame.columns:  # a reading straight from the table, untransformed
            assert r.raw_value == pytest.approx(float(row[r.name]), rel=1e-12)
        if not r.transform:
            assert r.raw_value == pytest.approx(r.value, rel=1e-12)
    hours = next(r for r in view.rows if r.name == "hours_since_service")
    assert hours.value == pytest.approx(np.log(hours.raw_value + 1), rel=1e-12)  # the demo recipe's log


@pytest.mark.parametrize("z, words", [(0.0, "typical"), (-0.99, "typical"), (1.5, "a little high"),
                                      (-2.5, "low"), (3.0, "very high"), (-7.0, "very low"),
                                      (float("nan"), "n/a"), (None, "n/a")])
def test_z_in_words(z, words):
    assert wd.reading(z) == words


def test_relation_words_and_bar_cells():
    assert wd.relation_words(0.5, 4.0) == "relation broken"
    assert wd.relation_words(3.5, -4.0) == "off for the others"
    assert wd.relation_words(0.5, 1.0) == "" and wd.relation_words(0.5, None) == ""
    assert wd.bar_cells(2.0, 6) == (3, False)  # half of full scale 4 -> half of 6 cells
    assert wd.bar_cells(-9.0, 6) == (6, True)
    assert wd.bar_cells(float("nan"), 6) == (0, False)


def test_standing_in_words():
    assert wd.standing(True, False, -1.0).startswith("miss")
    assert wd.standing(True, True, -1.0).startswith("caught")
    assert wd.standing(False, True, -1.0).startswith("false alarm")
    assert wd.standing(False, False, -1.0).startswith("normal")
    assert wd.standing(True, False, float("nan")).startswith("not scored")


@pytest.mark.parametrize("text, message", [
    ("motor_current_a / hydraulik_power", "unknown column 'hydraulik_power'"),
    ("motor_current_a /", "cannot parse"),
    ("station / 2", "not numeric"),
    ("hydraulic_power = flow_m3h * 2", "clashes"),
    ("", "type an expression"),
])
def test_check_expression_says_what_is_wrong(session, text, message):
    with pytest.raises(AfterlookError, match=message):
        wd.check_expression(session, text)


def test_check_expression_names_and_keeps_the_text(session):
    assert wd.check_expression(session, "amps_per_power = motor_current_a / hydraulic_power") == (
        "amps_per_power", "motor_current_a / hydraulic_power")
    assert wd.check_expression(session, "motor_current_a / flow_m3h") == ("typed_feature",
                                                                         "motor_current_a / flow_m3h")
    assert wd.check_expression(session, "flow_m3h / 2", taken=["typed_feature"])[0] == "typed_feature_2"


def test_try_candidate_equals_try_features(session, frames):
    model, cases, train = frames
    case = wd.case_rows(session)[0].case
    derive = {"amps_per_power": "motor_current_a / hydraulic_power"}
    fast = wd.try_candidate(session, derive, focus=[case])
    ref = try_features(model, cases, derive, train=train, focus=[case])
    assert fast.to_dict() == ref.to_dict()
    assert fast.model.fingerprint() == ref.model.fingerprint()


def test_trial_view_margins_changes_and_flips(session):
    case = wd.case_rows(session)[0].case
    result = wd.try_candidate(session, {"amps_per_power": "motor_current_a / hydraulic_power"}, focus=[case])
    v = wd.trial_view(result, case)
    d = result.to_dict()
    row = next(r for r in d["cases"] if r["case"] == case)
    assert v.case.log_density_before == row["before"]["log_density"]
    assert v.margin_before == pytest.approx(row["before"]["log_density"] - d["before"]["threshold"])
    assert v.margin_after == pytest.approx(row["after"]["log_density"] - d["after"]["threshold"])
    assert v.case.words == wd.flip_words(row["before"]["flagged"], row["after"]["flagged"])
    by_name = {m.name: m for m in v.metrics}
    assert by_name["F1"].change == pytest.approx(d["after"]["f1"] - d["before"]["f1"])
    assert by_name["false alarms (fp)"].change == d["after"]["fp"] - d["before"]["fp"] == v.false_alarms_added
    flipped_on = {r["case"] for r in d["cases"] if r["after"]["flagged"] and not r["before"]["flagged"]}
    assert {c.case for c in v.now_flagged} == flipped_on
    assert v.counts(v.now_flagged) == (len(flipped_on),
                                       sum(1 for r in d["cases"] if r["case"] in flipped_on and r["label"] == "anomaly"),
                                       sum(1 for r in d["cases"] if r["case"] in flipped_on and r["label"] == "normal"))
    assert v.misses_caught == d["misses_caught"]


def test_flip_words():
    assert wd.flip_words(False, True) == "now flagged"
    assert wd.flip_words(True, False) == "no longer flagged"
    assert wd.flip_words(True, True) == "still flagged"
    assert wd.flip_words(False, False) == "still not flagged"


def _normal_train(frames):
    model, _, train = frames
    return train.frame.loc[~train.labels] if train.labels is not None else train.frame


def test_feature_histogram_counts_the_model_features(session, frames):
    model, cases, _ = frames
    case = wd.case_rows(session)[0].case
    name = "hours_since_service"  # transformed by the demo recipe: drawn as the model sees it
    view = wd.histogram_view(session, wd.HistogramSource("feature", name), case, bins=30)
    j = model.features.index(name)
    normal = model.feature_matrix(_normal_train(frames)).values[:, j]
    every = model.feature_matrix(cases.frame).values[:, j]
    i = cases.row_index(case)
    others = every[cases.labels & (np.arange(len(every)) != i)]
    ref = histogram_counts(normal, every[i], others, bins=30)
    assert view.counts.normal.tolist() == ref.normal.tolist()
    assert view.counts.others.tolist() == ref.others.tolist()
    assert view.counts.case_bin == ref.case_bin and view.counts.case_value == every[i]
    assert view.normal_below_case == pytest.approx(100.0 * np.mean(normal < every[i]))
    assert "log(hours_since_service + 1)" in view.scale


def test_shaped_histogram_uses_the_transform_shape_picks(session, frames):
    case = wd.case_rows(session)[0].case
    name = "flow_m3h"
    view = wd.histogram_view(session, wd.HistogramSource("feature", name), case, shaped=True, bins=20)
    picked = afterlook.shape(_normal_train(frames), columns=[name]).features[0]
    assert picked.transform is not None, "the demo's flow is skewed; shape should pick a transform"
    assert view.shape_note == f"shaped: {picked.description}"
    from afterlook.core.recipe import apply_transform

    normal = apply_transform(picked.transform, name, _normal_train(frames)[name].to_numpy(float))
    assert view.counts.n_normal == np.isfinite(normal).sum()
    ref = histogram_counts(normal, view.counts.case_value, [], bins=20)
    assert view.counts.normal.tolist() == ref.normal.tolist()


def test_candidate_histogram_evaluates_the_expression(session, frames):
    _, cases, _ = frames
    case = wd.case_rows(session)[0].case
    src = wd.HistogramSource("candidate", "amps_per_power", "motor_current_a / hydraulic_power")
    view = wd.histogram_view(session, src, case, bins=25)
    f = _normal_train(frames)
    normal = f["motor_current_a"] / (f["flow_m3h"] * (f["discharge_bar"] - f["suction_bar"]))
    row = cases.frame.iloc[cases.row_index(case)]
    value = row["motor_current_a"] / (row["flow_m3h"] * (row["discharge_bar"] - row["suction_bar"]))
    assert view.counts.case_value == pytest.approx(value, rel=1e-12)
    ref = histogram_counts(normal.to_numpy(), view.counts.case_value, [], bins=25)
    np.testing.assert_allclose(view.counts.edges, ref.edges, rtol=1e-12)
    assert view.counts.normal.tolist() == ref.normal.tolist()
    assert view.counts.n_others == int(cases.labels.sum()) - 1


def test_histogram_of_an_unknown_feature_is_a_clear_error(session):
    case = wd.case_rows(session)[0].case
    with pytest.raises(AfterlookError, match="not a feature"):
        wd.histogram_view(session, wd.HistogramSource("feature", "nope"), case)


def test_histogram_sources_list_features_then_candidates(session):
    class C:  # the two fields the list needs
        def __init__(self, name, expression):
            self.name, self.expression = name, expression

    class R:
        candidates = [C("a_per_b", "flow_m3h / motor_current_a")]

    out = wd.histogram_sources(session, R())
    assert [s.name for s in out[:-1]] == session.model.features
    assert out[-1] == wd.HistogramSource("candidate", "a_per_b", "flow_m3h / motor_current_a")


def test_casebook_ids_and_save(demo, tmp_path):
    from afterlook.store.casebook_file import Casebook

    book = tmp_path / "book.json"
    s = wd.open_session(demo.model, demo.cases, train_path=demo.train, casebook=book)
    assert wd.casebook_case_ids(book) == set()
    case = wd.case_rows(s)[0].case
    entry = wd.save_case(s, case, "explained", note="ratio exposes it",
                         derive=("amps_per_power", "motor_current_a / hydraulic_power"))
    assert entry["status"] == "explained" and entry["note"] == "ratio exposes it"
    assert wd.casebook_case_ids(book) == {case}
    stored = Casebook.open(book).entries[case]
    assert stored["derived_feature"] == {"name": "amps_per_power", "expression": "motor_current_a / hydraulic_power"}
    assert stored["after"]["flagged"] is True
    assert "open" in wd.casebook_statuses() and "explained" in wd.casebook_statuses()


def test_candidate_verdict_words():
    from afterlook.core.candidates import Candidate

    from afterlook.core.heldout import HeldOut
    from afterlook.core.thresholds import Confusion

    def c(beyond, fa, gain=None, low=None):
        held = None if gain is None else HeldOut("kfold", 5, 0.5, 0.5 + gain, gain, low, gain, 0.01, 0.4, 0.5,
                                                 Confusion(1, 1, 1, 1), Confusion(1, 1, 1, 1),
                                                 improved=6 if gain > 0 else 0, worsened=0 if gain > 0 else 3)
        cand = Candidate("a / b", "ratio", ("a", "b"), 0.5, beyond_chance=beyond, false_alarms_added=fa, heldout=held)
        cand.judge()
        return cand

    assert wd.candidate_verdict(c(True, 2, 0.05, 0.01)) == "holds up"
    assert wd.candidate_verdict(c(True, 2, 0.05, -0.02)) == "exposes only"  # a fold lost
    assert wd.candidate_verdict(c(True, None)) == "exposes only (not re-fitted)"
    assert wd.candidate_verdict(c(True, 0)) == "exposes only (no held-out estimate)"
    assert wd.candidate_verdict(c(False, 0, 0.05, 0.01)) == "could be chance"
    assert wd.candidate_verdict(c(True, 0, -0.01, -0.03)) == "hurts"
    noisy = c(True, 2, 0.05, 0.01)
    noisy.heldout = noisy.heldout.__class__(**{**noisy.heldout.__dict__, "improved": 2, "worsened": 1})
    assert noisy.judge() == "exposes-only"  # 2 right vs 1 wrong is no evidence of a gain
    assert wd.candidate_verdict(c(False, 0, -0.01, -0.03)) == "hurts"
