"""Seeded fleets with planted relation breaks, for the discovery tests (suggest, try).

Every fleet has six numeric columns ``a .. f``:

* ``a`` and ``b`` carry the planted relation (one of three kinds, below);
* ``c`` and ``d`` are a second correlated pair that is *not* broken
  (``d = 0.6 c + noise``), so the search always has a decoy related pair;
* ``e`` (positive, skewed) and ``f`` are unrelated.

Relation kinds (``kind`` argument):

``ratio``
    ``b = K a (1 + 3% noise)`` with ``a`` log-normal over a wide range.
    A failure keeps ``a`` and ``b`` each inside their normal 5th-95th
    percentile but has ``a / b`` 40% off (``b = K a / 0.6`` or ``K a / 1.4``).
``difference``
    ``b = a - OFFSET + noise(sd 1)`` on the same scale (``a ~ N(100, 15)``).
    A failure keeps both in range and shifts ``a - b`` by 8 noise sd.
``square``
    ``b = a ** 2 (1 + 3% noise)``. A failure keeps both in range and has
    ``b`` 40% off ``a ** 2``.
``signed_square``
    As ``square`` but ``a`` takes both signs (``|a|`` in 3..9), as a signed
    reading such as a velocity does; ``b = a ** 2`` stays positive.
``null``
    The "anomalies" are drawn from the normal population itself: nothing
    is planted, so no candidate should be a finding.

Besides the planted failures, the cases hold a few *loud* anomalies (``e``
far beyond its range) that a per-column Gaussian does flag, so the
best-F1 threshold sits sensibly and the planted failures are misses.

The generator returns the truth (which case ids are planted) so that tests
judge the tool against the planted structure, never against its own output.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from afterlook_cli_runner import run_cli_script

N_TRAIN = 1500
N_NORMAL_CASES = 300
N_PLANTED = 8
N_LOUD = 4

RATIO_K = 0.5
DIFF_OFFSET = 30.0
RELATION_SHIFT = 0.4  # planted ratio / square breaks: 40% off
DIFF_SHIFT_SD = 8.0  # planted difference breaks: 8 noise sd


KINDS = {"ratio": 1, "difference": 2, "square": 3, "null": 4, "signed_square": 5}  # also seeds the kind


@dataclass
class Fleet:
    kind: str
    seed: int
    train: pd.DataFrame  # id + numeric columns a..f (all normal)
    cases: pd.DataFrame  # id, a..f, label ("normal" / "anomaly")
    planted: list[str]  # ids of the relation-break failures (empty for the null fleet)
    loud: list[str]  # ids of the out-of-range anomalies
    null_anomalies: list[str] = field(default_factory=list)  # null fleet: "anomalies" from the normal population

    @property
    def anomalies(self) -> list[str]:
        return self.planted + self.loud + self.null_anomalies


def _relation(kind: str, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Normal rows of the planted pair."""
    if kind in ("ratio", "null"):
        a = np.exp(rng.normal(np.log(40.0), 0.5, n))  # wide positive range (5th-95th: ~18 to ~91)
        b = RATIO_K * a * (1.0 + 0.03 * rng.standard_normal(n))
    elif kind == "difference":
        a = rng.normal(100.0, 15.0, n)
        b = a - DIFF_OFFSET + rng.normal(0.0, 1.0, n)
    elif kind in ("square", "signed_square"):
        a = rng.uniform(3.0, 9.0, n)
        if kind == "signed_square":
            a = a * rng.choice([-1.0, 1.0], n)
        b = a**2 * (1.0 + 0.03 * rng.standard_normal(n))
    else:  # pragma: no cover - test-suite misuse
        raise ValueError(kind)
    return a, b


def _others(rng: np.random.Generator, n: int) -> dict[str, np.ndarray]:
    c = rng.normal(50.0, 8.0, n)
    d = 0.6 * c + rng.normal(0.0, 3.0, n)
    e = np.exp(rng.normal(1.0, 0.4, n))
    f = rng.normal(0.0, 1.0, n)
    return {"c": c, "d": d, "e": e, "f": f}


def _frame(ids, a, b, others, labels=None) -> pd.DataFrame:
    df = pd.DataFrame({"id": list(ids), "a": a, "b": b, **others})
    if labels is not None:
        df["label"] = labels
    return df


def _planted_pairs(kind: str, rng: np.random.Generator, train_a: np.ndarray, train_b: np.ndarray,
                   n: int, shift: float) -> tuple[np.ndarray, np.ndarray]:
    """Failures whose a and b each sit inside their normal 5th-95th percentile but break the relation."""
    lo_a, hi_a = np.quantile(train_a, [0.05, 0.95])
    lo_b, hi_b = np.quantile(train_b, [0.05, 0.95])
    out_a, out_b = [], []
    k = 0
    while len(out_a) < n:
        k += 1
        if k > 100_000:  # pragma: no cover - generator bug, not a test result
            raise RuntimeError("could not plant in-range failures")
        a = rng.uniform(lo_a, hi_a)
        if kind == "signed_square":  # stay on the normal support |a| >= 3 (and inside the 5th-95th percentile)
            a = rng.choice([-1.0, 1.0]) * rng.uniform(4.0, 8.0)
        up = len(out_a) % 2 == 0  # alternate the direction of the break
        if kind == "ratio":
            b = RATIO_K * a / ((1.0 + shift) if up else (1.0 - shift))
        elif kind == "difference":
            b = a - DIFF_OFFSET + (shift if up else -shift)
        else:  # square, signed_square
            b = a**2 * ((1.0 + shift) if up else (1.0 - shift))
        if lo_b < b < hi_b:
            out_a.append(a)
            out_b.append(b)
    return np.array(out_a), np.array(out_b)


def make_fleet(kind: str, seed: int = 0, n_train: int = N_TRAIN, n_normal_cases: int = N_NORMAL_CASES,
               n_planted: int = N_PLANTED, n_loud: int = N_LOUD, shift: float | None = None) -> Fleet:
    """A seeded fleet with a planted relation of ``kind`` (see the module docstring).

    ``shift`` overrides the size of the planted break: the relative error of
    ``b`` against ``K a`` or ``a ** 2`` (default 0.4), or the shift of
    ``a - b`` in noise sd (default 8).
    """
    if shift is None:
        shift = DIFF_SHIFT_SD if kind == "difference" else RELATION_SHIFT
    rng = np.random.default_rng([seed, KINDS[kind]])
    a, b = _relation(kind, rng, n_train)
    train = _frame([f"t{i}" for i in range(n_train)], a, b, _others(rng, n_train))

    a, b = _relation(kind, rng, n_normal_cases)
    normal = _frame([f"n{i}" for i in range(n_normal_cases)], a, b, _others(rng, n_normal_cases),
                    ["normal"] * n_normal_cases)

    a, b = _relation(kind, rng, n_loud)
    loud_others = _others(rng, n_loud)
    loud_others["e"] = np.exp(1.0 + 0.4 * rng.uniform(7.0, 9.0, n_loud))  # 7-9 sd out on the log scale
    loud = _frame([f"loud{i}" for i in range(n_loud)], a, b, loud_others, ["anomaly"] * n_loud)

    parts = [normal, loud]
    planted_ids: list[str] = []
    null_ids: list[str] = []
    if kind == "null":
        a, b = _relation(kind, rng, n_planted)
        null = _frame([f"x{i}" for i in range(n_planted)], a, b, _others(rng, n_planted), ["anomaly"] * n_planted)
        null_ids = list(null["id"])
        parts.append(null)
    else:
        a, b = _planted_pairs(kind, rng, train["a"].to_numpy(), train["b"].to_numpy(), n_planted, shift)
        planted = _frame([f"p{i}" for i in range(n_planted)], a, b, _others(rng, n_planted),
                         ["anomaly"] * n_planted)
        planted_ids = list(planted["id"])
        parts.append(planted)
    cases = pd.concat(parts, ignore_index=True)
    # shuffle the rows so that nothing depends on the order of the table
    cases = cases.iloc[rng.permutation(len(cases))].reset_index(drop=True)
    return Fleet(kind, seed, train, cases, planted_ids, list(loud["id"]), null_ids)


@dataclass
class FittedFleet:
    fleet: Fleet
    model: object  # afterlook Model

    @property
    def train(self) -> pd.DataFrame:
        return self.fleet.train

    @property
    def cases(self) -> pd.DataFrame:
        return self.fleet.cases

    def unflagged(self, ids) -> list[str]:
        """Those of ``ids`` the fitted model leaves unflagged (misses, for anomalies)."""
        from afterlook.analysis.session import scored_cases

        sc = scored_cases(self.model, self.cases)
        flagged = dict(zip((str(i) for i in sc.table.ids), sc.flagged))
        return [i for i in ids if not flagged[i]]


def fit_fleet(fleet: Fleet) -> FittedFleet:
    """The per-column (independent) Gaussian: the kind that misses relation breaks."""
    import afterlook

    return FittedFleet(fleet, afterlook.fit(fleet.train, cases=fleet.cases, kind="independent"))


@pytest.fixture(scope="session")
def fleet_builder():
    """``fleet_builder(kind, seed=0, **make_fleet_options) -> FittedFleet`` (not cached)."""
    return lambda kind, seed=0, **options: fit_fleet(make_fleet(kind, seed, **options))


@pytest.fixture(scope="session")
def fleet_factory():
    """``fleet_factory(kind, seed=0, shift=None) -> FittedFleet`` (cached; treat as read-only)."""
    cache: dict = {}

    def get(kind: str, seed: int = 0, shift: float | None = None) -> FittedFleet:
        key = (kind, seed, shift)
        if key not in cache:
            cache[key] = fit_fleet(make_fleet(kind, seed, shift=shift))
        return cache[key]

    return get


# --------------------------------------------------------------------------
# the real console script
# --------------------------------------------------------------------------

@dataclass
class FleetFiles:
    dir: Path
    train: Path
    cases: Path
    model: Path
    fleet: Fleet


def write_fleet_files(fleet: Fleet, folder: Path, fit_model: bool = True) -> FleetFiles:
    """train.csv and cases.csv in ``folder``; model.json fitted by ``afterlook fit`` (absolute paths)."""
    folder.mkdir(parents=True, exist_ok=True)
    files = FleetFiles(folder, folder / "train.csv", folder / "cases.csv", folder / "model.json", fleet)
    fleet.train.to_csv(files.train, index=False)
    fleet.cases.to_csv(files.cases, index=False)
    if fit_model:
        code, out, err = run_cli_script("fit", files.train, "--out", files.model, "--cases", files.cases,
                                  "--kind", "independent", "--json")
        assert code == 0, err
    return files


@pytest.fixture(scope="session")
def fleet_files(tmp_path_factory):
    """``fleet_files(kind, seed=0) -> FleetFiles`` on disk, shared: copy before changing anything."""
    cache: dict = {}

    def get(kind: str, seed: int = 0) -> FleetFiles:
        if (kind, seed) not in cache:
            cache[kind, seed] = write_fleet_files(make_fleet(kind, seed), tmp_path_factory.mktemp(f"{kind}{seed}"))
        return cache[kind, seed]

    return get


@pytest.fixture(scope="session")
def fleet_maker():
    """``make_fleet`` and ``write_fleet_files`` for tests that need their own copy on disk."""
    return make_fleet, write_fleet_files
