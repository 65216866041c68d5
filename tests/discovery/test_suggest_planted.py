"""``suggest`` on fleets with a planted relation break, and the chance guard.

Expected results come from the planted structure (which pair is broken,
which cases are planted) or from independent computations written here with
numpy and scipy.stats, never from afterlook's own output.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

import afterlook
from afterlook.core import candidates as cand
from afterlook.analysis.discovery import suggest

RELATION_KINDS = ("ratio", "difference", "square")
SEEDS = (0, 1, 2)
NULL_SEEDS = (0, 1, 2, 3, 4, 5)
CHANCE = 0.05  # the documented chance level
ALARM_RATE = 0.01  # the documented default alarm rate for "other anomalies separated"


def relation_statistic(kind: str, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """The planted relation as one number per row (constant up to noise on normal rows)."""
    if kind == "ratio":
        return a / b
    if kind == "difference":
        return a - b
    return b / a**2  # square, signed_square


def numpy_eval(expression: str, columns: dict, normal: dict | None = None) -> np.ndarray:
    """Evaluate a candidate's text with plain numpy, as a reference for afterlook's own engine.

    The candidate texts are Python-compatible arithmetic over plain column
    names; the input is produced by the test itself, so ``eval`` with no
    builtins is acceptable here (the product never evaluates this way).
    ``zscore(x)`` standardises by the mean and sd (ddof 0) of ``x`` over the
    ``normal`` rows (default: ``columns`` themselves), as a fit freezes them;
    ``boxcox(x, p)`` is (x ** p - 1) / p, log at p = 0 (Box and Cox 1964).
    """
    frozen: list[tuple[float, float]] = []

    def boxcox(x, p):
        return np.log(x) if p == 0 else (x**p - 1) / p

    def record(x):
        frozen.append((x.mean(), x.std()))
        return (x - frozen[-1][0]) / frozen[-1][1]

    def run(cols, zscore):
        env = {"__builtins__": {}, "log": np.log, "sqrt": np.sqrt, "abs": np.abs, "exp": np.exp,
               "boxcox": boxcox, "zscore": zscore}
        with np.errstate(all="ignore"):
            return np.asarray(eval(expression, env, dict(cols)), dtype=np.float64)  # noqa: S307

    run(columns if normal is None else normal, record)
    replay = iter(list(frozen))

    def use(x):
        mean, sd = next(replay)
        return (x - mean) / sd

    return run(columns, use)


def columns_of(frame, names="abcdef") -> dict:
    return {n: frame[n].to_numpy(dtype=np.float64) for n in names}


def _target(fitted, ids) -> str:
    miss = fitted.unflagged(ids)
    assert miss, "the scenario should leave planted failures unflagged"
    return miss[0]


# --------------------------------------------------------------------------
# the scenarios themselves (so a broken generator cannot pass for a working tool)
# --------------------------------------------------------------------------


@pytest.mark.parametrize("kind", RELATION_KINDS + ("signed_square",))
def test_planted_failures_are_in_range_relation_breaks_that_the_independent_model_misses(fleet_factory, kind):
    fitted = fleet_factory(kind)
    fleet = fitted.fleet
    train = fleet.train
    planted = fleet.cases.set_index("id").loc[fleet.planted]
    for col in ("a", "b"):
        lo, hi = np.quantile(train[col], [0.05, 0.95])
        assert planted[col].between(lo, hi).all(), col
    normal_stat = relation_statistic(kind, train["a"].to_numpy(), train["b"].to_numpy())
    med = np.median(normal_stat)
    cut = np.quantile(np.abs(normal_stat - med), 0.999)
    planted_stat = relation_statistic(kind, planted["a"].to_numpy(), planted["b"].to_numpy())
    assert np.all(np.abs(planted_stat - med) > 2 * cut)  # well beyond anything normal
    # a per-column Gaussian leaves every planted failure unflagged, and flags the loud ones
    assert fitted.unflagged(fleet.planted) == fleet.planted
    assert fitted.unflagged(fleet.loud) == []


# --------------------------------------------------------------------------
# planted relations are found first, beyond chance
# --------------------------------------------------------------------------


@pytest.mark.parametrize("seed", SEEDS)
@pytest.mark.parametrize("kind", RELATION_KINDS)
def test_planted_pair_ranks_first_beyond_chance(fleet_factory, kind, seed):
    fitted = fleet_factory(kind, seed)
    fleet = fitted.fleet
    target = _target(fitted, fleet.planted)
    result = suggest(fitted.model, fitted.cases, train=fitted.train, case_ids=[target])
    assert result.cases == [target]
    top = result.candidates[0]
    ranking = [(c.expression, c.inputs) for c in result.candidates[:5]]
    assert set(top.inputs) == {"a", "b"}, f"planted pair not first: {ranking}"
    assert top.beyond_chance
    assert top.adjusted_tail < CHANCE
    assert result.any_beyond_chance

    # other anomalies separated: an independent count with the planted relation itself,
    # at the documented alarm rate (beyond the 99th percentile of |stat - median| over normal rows)
    train = fleet.train
    normal_stat = relation_statistic(kind, train["a"].to_numpy(), train["b"].to_numpy())
    med = np.median(normal_stat)
    cut = np.quantile(np.abs(normal_stat - med), 1.0 - ALARM_RATE)
    others = [i for i in fleet.anomalies if i != target]
    rows = fleet.cases.set_index("id").loc[others]
    sep = np.abs(relation_statistic(kind, rows["a"].to_numpy(), rows["b"].to_numpy()) - med) > cut
    planted_others = np.isin(others, fleet.planted)
    # planted structure: every other planted failure breaks the relation far beyond the cut
    assert sep[planted_others].all()
    assert top.other_anomalies == len(others)
    assert top.other_anomalies_separated == int(sep.sum())
    assert top.other_anomalies_separated >= len(fleet.planted) - 1


def test_square_relation_over_a_signed_column_is_found(fleet_factory):
    fitted = fleet_factory("signed_square")
    target = _target(fitted, fitted.fleet.planted)
    result = suggest(fitted.model, fitted.cases, train=fitted.train, case_ids=[target])
    top = result.candidates[0]
    assert set(top.inputs) == {"a", "b"} and top.beyond_chance


# --------------------------------------------------------------------------
# null fleets: nothing beats chance, and the tool says so
# --------------------------------------------------------------------------


@pytest.mark.parametrize("seed", NULL_SEEDS)
def test_null_fleet_nothing_beats_chance(fleet_factory, seed):
    fitted = fleet_factory("null", seed)
    target = _target(fitted, fitted.fleet.null_anomalies)
    result = suggest(fitted.model, fitted.cases, train=fitted.train, case_ids=[target])
    assert len(result.candidates) >= 3
    for c in result.candidates[:3]:
        assert not c.beyond_chance, c.expression
        assert c.adjusted_tail >= CHANCE
    assert result.any_beyond_chance is False
    assert "nothing beats chance" in result.verdict()
    assert result.to_dict()["any_beyond_chance"] is False


def test_null_fleet_cli_table_says_nothing_beats_chance(fleet_files, run_cli):
    files = fleet_files("null", 0)
    found = afterlook.misses(afterlook.load_model(files.model), afterlook.load_table(files.cases))
    null_misses = [m.case for m in found.misses if m.case in files.fleet.null_anomalies]
    assert null_misses
    code, out, err = run_cli("suggest", files.model, files.cases, null_misses[0])
    assert code == 0, err
    flat = " ".join(out.split())
    assert "nothing beats chance" in flat
    assert "finding" not in flat.replace("is a finding", "")  # no row is labelled a finding


# --------------------------------------------------------------------------
# the chance guard
# --------------------------------------------------------------------------


PER_TARGET = 0.05  # the documented per-target level of the count test


def expected_guard(tails: list[float], tried: int) -> float:
    """The documented guard, computed here with scipy.stats.binomtest for the count of exposed targets."""
    if len(tails) == 1:
        return min(1.0, tails[0] * tried)
    exposed = sum(t <= PER_TARGET for t in tails)
    count = stats.binomtest(exposed, len(tails), PER_TARGET, alternative="greater").pvalue if exposed else 1.0
    return min(1.0, 2 * min(min(tails) * len(tails), count) * tried)


@pytest.mark.parametrize("kind, n_targets", [("ratio", 2), ("null", 1), ("difference", 3)])
def test_adjusted_tail_follows_the_documented_guard(fleet_factory, kind, n_targets):
    fitted = fleet_factory(kind)
    ids = fitted.fleet.planted or fitted.fleet.null_anomalies
    targets = fitted.unflagged(ids)[:n_targets]
    assert len(targets) == n_targets
    result = suggest(fitted.model, fitted.cases, train=fitted.train, case_ids=targets, top=15)
    assert result.tried > 50
    for c in result.candidates:
        tails = [c.tail_by_case[t] for t in targets]
        assert min(tails) == c.tail
        assert c.adjusted_tail == pytest.approx(expected_guard(tails, result.tried), rel=1e-9, abs=0)
        assert c.beyond_chance == (c.adjusted_tail < CHANCE)
        assert c.targets_exposed == sum(t <= PER_TARGET for t in tails)


def test_empirical_tail_is_add_one_count(fleet_factory):
    """Inside the range: tail = (1 + #{normal |v - med| >= |t - med|}) / (n + 1) (North, Curtis and Sham 2002)."""
    fitted = fleet_factory("null", 0)
    target = _target(fitted, fitted.fleet.null_anomalies)
    result = suggest(fitted.model, fitted.cases, train=fitted.train, case_ids=[target], top=15)
    train_cols = columns_of(fitted.train)
    target_cols = columns_of(fitted.cases.set_index("id").loc[[target]])
    n = len(fitted.train)
    checked = 0
    for c in result.candidates:
        v = numpy_eval(c.expression, train_cols)
        t = float(numpy_eval(c.expression, target_cols, normal=train_cols)[0])
        med = np.median(v)
        count = int(np.sum(np.abs(v - med) >= abs(t - med)))
        if c.tail_method == "empirical":
            assert count >= cand.MIN_TAIL_COUNT
            assert c.tail == pytest.approx((1 + count) / (n + 1), rel=1e-12)
            checked += 1
        else:  # the extrapolated tail is used only where the count is too small to trust
            assert count < cand.MIN_TAIL_COUNT
            assert c.tail <= (1 + count) / (n + 1) * (1 + 1e-12)
    assert checked >= 3


@pytest.mark.parametrize("c_shape, scale", [(0.2, 1.5), (0.0, 1.0), (-0.2, 2.0)])
def test_gpd_pwm_recovers_scipy_genpareto(c_shape, scale):
    # reference: scipy.stats.genpareto (shape c, scale); PWM estimator of Hosking and Wallis (1987)
    sample = stats.genpareto(c=c_shape, scale=scale).rvs(size=200_000, random_state=np.random.default_rng(7))
    xi, sigma = cand.gpd_pwm(sample)
    assert xi == pytest.approx(c_shape, abs=0.05)
    assert sigma == pytest.approx(scale, abs=0.1)


@pytest.mark.parametrize("seed", range(12))
def test_tail_beyond_range_is_no_thinner_than_gaussian(seed):
    """Far beyond the range of a Gaussian sample, the clamped (exponential at thinnest) tail
    is at least the true two-sided tail of scipy.stats.norm. An unclamped PWM fit of Gaussian
    excesses has a negative shape (a finite endpoint), which would give 0 or NaN out there."""
    rng = np.random.default_rng(seed)
    dist = stats.norm(10.0, 2.0)
    v = dist.rvs(size=5000, random_state=rng)
    med = np.median(v)
    widest = np.max(np.abs(v - med))
    for factor in (2.0, 3.0):
        for side in (1.0, -1.0):
            d = factor * widest
            tail, method, count = cand.tail_probability(v, med + side * d)
            true = dist.sf(med + d) + dist.cdf(med - d)  # P(|X - med| >= d) under the population
            assert count == 0 and method == "pareto tail"
            assert math.isfinite(tail) and tail > 0
            assert tail >= true, (factor, side, tail, true)


def test_gpd_tail_clamps_a_bounded_tail_to_exponential():
    """Uniform deviations have a bounded tail (PWM shape < 0); beyond the sample the tail must be
    the exponential with the mean excess as scale, computed here independently."""
    rng = np.random.default_rng(3)
    dev = rng.uniform(0.0, 1.0, 4000)
    n = dev.size
    n_tail = max(20, math.ceil(cand.TAIL_FRACTION * n))
    d = np.sort(dev)
    u = d[n - n_tail - 1]
    excess = d[n - n_tail:] - u
    # the unclamped fit is bounded: this is what the clamp guards against
    assert cand.gpd_pwm(excess)[0] < -0.3
    for target in (1.2, 2.0):
        expected = (n_tail / n) * math.exp(-(target - u) / excess.mean())
        assert cand.gpd_tail(dev, target) == pytest.approx(expected, rel=1e-12)


# --------------------------------------------------------------------------
# the moment pass agrees with direct evaluation
# --------------------------------------------------------------------------

SHAPED_TEXT = {"e": "log(e)", "a": "a ** 0.5"}
SHAPED_NUMPY = {"e": np.log, "a": np.sqrt}


def _definition(kind: str, x: str, y: str, sample: dict, target: dict):
    """(values over the sample, value of the target) of a candidate from its documented definition."""
    def pair(cols):
        return cols[x], cols[y]

    if kind in ("standardized_difference", "shaped_difference"):
        fx = SHAPED_NUMPY.get(x) if kind == "shaped_difference" else None
        fy = SHAPED_NUMPY.get(y) if kind == "shaped_difference" else None
        sx = fx(sample[x]) if fx else sample[x]
        sy = fy(sample[y]) if fy else sample[y]
        tx = fx(target[x]) if fx else target[x]
        ty = fy(target[y]) if fy else target[y]
        r = np.corrcoef(sx, sy)[0, 1]
        sign = -1.0 if r >= 0 else 1.0
        mx, sdx, my, sdy = sx.mean(), sx.std(), sy.mean(), sy.std()  # ddof=0 as documented
        return (sx - mx) / sdx + sign * (sy - my) / sdy, (tx - mx) / sdx + sign * (ty - my) / sdy
    fn = {
        "ratio": lambda p, q: p / q,
        "log_ratio": lambda p, q: np.log(p / q),
        "product": lambda p, q: p * q,
        "square_ratio": lambda p, q: p**2 / q,
    }[kind]
    return fn(*pair(sample)), fn(*pair(target))


@pytest.mark.parametrize("kind", ("ratio", "difference", "null"))
def test_first_pass_z_equals_direct_evaluation(fleet_factory, kind):
    fitted = fleet_factory(kind)
    names = list("abcdef")
    sample = columns_of(fitted.train)
    target_id = (fitted.fleet.planted or fitted.fleet.null_anomalies)[0]
    target = columns_of(fitted.cases.set_index("id").loc[[target_id]])
    T = np.array([[target[n][0] for n in names]])
    candidates, tried, _ = cand.generate_and_screen(names, sample, T, SHAPED_TEXT, cand.Settings())
    assert tried == len(candidates) > 50
    rng = np.random.default_rng(0)
    chosen = candidates if len(candidates) <= 300 else [candidates[i] for i in rng.choice(len(candidates), 300, replace=False)]
    kinds = set()
    for c in chosen:
        kinds.add(c.kind)
        v, t = _definition(c.kind, *c.inputs, sample, target)
        z = abs((t[0] - v.mean()) / v.std())
        assert c.first_pass_z == pytest.approx(z, rel=1e-6), (c.kind, c.expression)
        # the text is what `try` will use: it must describe the same feature (z-scores frozen on the
        # same normal sample the screen used, so no rounded constant is left in the text)
        vt = numpy_eval(c.expression, sample)
        tt = numpy_eval(c.expression, target, normal=sample)
        zt = abs((tt[0] - vt.mean()) / vt.std())
        assert zt == pytest.approx(z, rel=1e-9), (c.kind, c.expression)
    # the unit kinds need a unit column (tests/discovery/test_fleet_search.py checks their first pass)
    from afterlook.core.unit_candidates import UNIT_KINDS

    assert kinds == set(cand.KINDS) - set(UNIT_KINDS)
