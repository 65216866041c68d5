"""Seeded generator for the afterlook demo scenario.

INVENTED DATA, FOR THE DEMO ONLY. Every station, reading, failure and review
note below is made up by this code. Nothing here was measured at a real site,
and the numbers must not be used to size, tune or judge real equipment.

The scenario: a water utility runs a fleet of twelve booster pump stations
("PS-01" .. "PS-12"), each with one variable-speed pump. Telemetry is kept as
one row per pump-hour. A Gaussian-density detector is trained on a quiet
period (``train``), then an incident review labels the rows of a later period
(``cases``). Some failures were caught because a single reading went far out
of range; others slipped through because every reading looked ordinary on its
own while a *relation* between readings was broken. Those misses are what the
workbench is for.

Physics, simplified but kept consistent (all of it invented):

* Demand follows the hour of day (morning and evening peaks, low at night)
  and the station's size, so flow varies over a wide range.
* Each pump works on its station's system curve:
  ``pressure_rise = static_lift + friction * (flow / rated_flow) ** 2``.
  ``pressure_rise`` is ``discharge_bar - suction_bar``; it is deliberately not
  stored as a column (it would be an exact linear function of two others and
  make a full-covariance model singular).
* Hydraulic power is ``flow * pressure_rise``; electrical power is hydraulic
  power over pump and motor efficiency, and motor current is proportional to
  electrical power plus a small no-load current. So
  ``motor_current ~ k * flow * pressure_rise / efficiency``.
* Pump efficiency peaks near 80 % of rated flow and drifts down slowly with
  hours since service (ordinary wear).
* Bearing temperature is ambient plus a term that grows with load (current).
* Vibration has a per-station baseline with a mild load and age dependence.
* Hours since service is right-skewed: most pumps were serviced recently, a
  minority has run for thousands of hours.

Failure kinds in ``cases`` (see :data:`FAILURE_KINDS`): a worn impeller
(current normal for too little water), bearing wear (too hot for the load and
ambient), seal failure or cavitation (vibration far too high, sometimes with
a very low suction pressure), a partly blocked suction strainer at a station
whose inlet is normally high (suction and discharge pressure low for *that*
station, still inside the fleet's range: only visible against the station's
own normal) and a couple of disputed reports whose readings are entirely
ordinary.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

__all__ = [
    "DemoScenario",
    "FAILURE_KINDS",
    "FEATURE_COLUMNS",
    "STATIONS",
    "generate",
]

#: The numeric model columns, in order.
FEATURE_COLUMNS: tuple[str, ...] = (
    "flow_m3h",
    "suction_bar",
    "discharge_bar",
    "motor_current_a",
    "vibration_mm_s",
    "bearing_temp_c",
    "ambient_temp_c",
    "hours_since_service",
)

#: Failure kind -> one-line plain description (invented failure modes).
FAILURE_KINDS: dict[str, str] = {
    "worn_impeller": (
        "impeller worn: the pump draws a normal current but moves too little "
        "water for it; every single reading stays in its usual range"
    ),
    "bearing_wear": (
        "bearing wearing out: bearing temperature too high for the load and "
        "the ambient temperature; every single reading stays in its usual range"
    ),
    "seal_or_cavitation": (
        "mechanical seal failure or cavitation: vibration far above normal, "
        "sometimes with a very low suction pressure"
    ),
    "blocked_strainer": ("suction strainer partly blocked: suction and discharge pressure well below the "
                         "station's own normal, yet inside the fleet's range (only its baseline shows it)"),
    "disputed": (
        "reported as a failure, but nothing was found at inspection; the "
        "readings are ordinary (label disputed)"
    ),
}

# Review notes per kind (invented wording, picked at random per case).
_NOTES: dict[str, tuple[str, ...]] = {
    "worn_impeller": (
        "impeller wear found at inspection",
        "impeller vanes eroded, wear ring clearance high",
        "low output reported; worn impeller replaced",
    ),
    "bearing_wear": (
        "drive-end bearing pitted, grease discoloured",
        "bearing wear found at inspection",
        "bearing replaced after hot-running report",
    ),
    "seal_or_cavitation": (
        "mechanical seal leaking, pump tripped",
        "seal failure found by site crew",
    ),
    # used for the seal_or_cavitation rows simulated as cavitation
    "cavitation": (
        "cavitation damage at impeller eye, low inlet level",
        "inlet tank drawn down, pump cavitating",
    ),
    "blocked_strainer": ("suction strainer half clogged with debris, cleaned",
                         "low inlet pressure traced to a fouled strainer basket",
                         "strainer differential high; basket cleared by site crew"),
    "disputed": (
        "operator reported unusual noise; nothing found at inspection",
        "alarm raised by site crew; inspection found no fault",
    ),
}

# Station table (invented). Columns:
#   rated flow m3/h, static lift bar, friction rise at rated flow bar,
#   suction base bar (inlet reservoir level), best pump efficiency,
#   pump-hall ambient base degC, vibration baseline mm/s.
# The stations share one pump family, so their sizes are similar enough that
# flow and current are strongly related across the whole fleet.
STATIONS: dict[str, tuple[float, float, float, float, float, float, float]] = {
    "PS-01": (300.0, 3.8, 1.6, 1.7, 0.78, 17.0, 1.7),
    "PS-02": (360.0, 4.1, 1.7, 1.5, 0.80, 18.5, 1.9),
    "PS-03": (260.0, 3.6, 1.4, 1.9, 0.77, 16.0, 1.6),
    "PS-04": (400.0, 4.3, 1.8, 1.4, 0.81, 19.5, 2.1),
    "PS-05": (280.0, 3.9, 1.5, 1.8, 0.78, 21.0, 1.8),
    "PS-06": (340.0, 3.7, 1.7, 1.6, 0.79, 15.5, 2.0),
    "PS-07": (270.0, 4.2, 1.4, 2.0, 0.77, 20.0, 1.5),
    "PS-08": (380.0, 4.0, 1.9, 1.5, 0.80, 18.0, 2.2),
    "PS-09": (320.0, 3.8, 1.6, 1.7, 0.79, 22.0, 1.8),
    "PS-10": (420.0, 4.2, 1.8, 1.3, 0.81, 17.5, 2.3),
    "PS-11": (250.0, 3.7, 1.5, 2.1, 0.77, 16.5, 1.6),
    "PS-12": (350.0, 3.9, 1.7, 1.6, 0.79, 19.0, 1.9),
}

# Invented dates. Training is a quiet stretch starting here; the incident
# review covers the weeks right after it (the two periods never overlap).
_TRAIN_START = np.datetime64("2026-01-05T00:00")

# Share of each kind among the review cases (about 3 % anomalous overall, with the strainers).
_KIND_SHARE = {
    "worn_impeller": 0.0085,
    "bearing_wear": 0.0085,
    "seal_or_cavitation": 0.0075,
}
_MIN_PER_KIND = 15
#: Stations whose inlet sits high enough (suction base >= 1.8 bar) that a blocked
#: strainer's drop keeps the suction pressure inside the fleet's range.
_HIGH_INLET = 1.8
_N_DISPUTED = 2

_MOTOR_EFFICIENCY = 0.93
_AMPS_PER_KW = 1000.0 / (np.sqrt(3.0) * 400.0 * 0.86)  # 400 V three-phase, pf 0.86
_NO_LOAD_CURRENT_A = 2.0


@dataclass
class DemoScenario:
    """The demo tables (invented data).

    ``train`` holds normal operation rows; ``cases`` holds the labelled rows of
    the incident-review period. ``kinds`` maps the id of every case labelled
    ``anomaly`` to its key in :data:`FAILURE_KINDS` (a convenience for tests
    and the demo narrative; it is not a column of either table).
    """

    train: pd.DataFrame
    cases: pd.DataFrame
    kinds: dict[str, str] = field(default_factory=dict)


# ---------------------------------------------------------------------------
# healthy operation
# ---------------------------------------------------------------------------


def _station_arrays(idx: np.ndarray) -> dict[str, np.ndarray]:
    table = np.array(list(STATIONS.values()))[idx]
    names = (
        "rated_flow",
        "static_lift",
        "friction",
        "suction_base",
        "eta_best",
        "ambient_base",
        "vib_base",
    )
    return {name: table[:, j] for j, name in enumerate(names)}


def _demand_fraction(hour_of_day: np.ndarray) -> np.ndarray:
    """Share of rated flow demanded at a given hour (invented diurnal shape)."""
    h = hour_of_day.astype(float)
    morning = 0.55 * np.exp(-0.5 * ((h - 7.5) / 1.6) ** 2)
    evening = 0.40 * np.exp(-0.5 * ((h - 19.0) / 2.0) ** 2)
    midday = 0.15 * np.exp(-0.5 * ((h - 13.0) / 3.0) ** 2)
    return 0.30 + morning + evening + midday


def _period_days(n_rows: int, min_days: int) -> int:
    """Days in a period, long enough that about a third of its slots are used."""
    return max(min_days, int(np.ceil(3.0 * n_rows / (24 * len(STATIONS)))))


def _slots(n_rows: int, start: np.datetime64, days: int, rng) -> tuple:
    """Pick ``n_rows`` distinct (station, hour) slots from a period of ``days``."""
    n_st = len(STATIONS)
    total = days * 24 * n_st
    flat = rng.choice(total, size=n_rows, replace=False)
    station_idx = flat % n_st
    hour_idx = flat // n_st
    stamps = start + hour_idx.astype("timedelta64[h]")
    return station_idx, stamps


def _healthy(station_idx: np.ndarray, stamps: np.ndarray, rng) -> dict[str, np.ndarray]:
    """Simulate healthy pump-hours; returns raw (unrounded) arrays."""
    n = station_idx.size
    st = _station_arrays(station_idx)
    hod = (stamps - stamps.astype("datetime64[D]")).astype("timedelta64[h]").astype(int)

    # Demand: diurnal shape times station size, with day-to-day scatter.
    flow = st["rated_flow"] * _demand_fraction(hod) * (1.0 + rng.normal(0.0, 0.08, n))
    flow = np.clip(flow, 0.15 * st["rated_flow"], 1.15 * st["rated_flow"])
    q_rel = flow / st["rated_flow"]

    # Suction: inlet reservoir drawn down during the day, small inlet losses.
    level = 0.12 * np.sin(2.0 * np.pi * (hod - 9.0) / 24.0)
    suction = st["suction_base"] + level - 0.15 * q_rel**2 + rng.normal(0.0, 0.04, n)

    # Variable-speed pump on the station's system curve.
    rise_noise = rng.normal(0.0, 0.03, n)
    rise = st["static_lift"] + st["friction"] * q_rel**2 + rise_noise
    discharge = suction + rise

    # Hours since service: right-skewed mixture of recently serviced pumps
    # (exponential) and a minority that have run for thousands of hours.
    recent = rng.exponential(450.0, n)
    long_run = rng.lognormal(np.log(2200.0), 0.35, n)
    hours = np.where(rng.random(n) < 0.7, recent, long_run)
    hours = np.clip(np.round(hours), 0.0, 9000.0)

    # Efficiency: best near 80 % of rated flow, slow drift with wear.
    part_load = 1.0 - 0.12 * (q_rel / 0.8 - 1.0) ** 2
    wear = 1.0 - 0.05 * np.minimum(hours, 6000.0) / 6000.0
    eta = st["eta_best"] * part_load * wear

    # Hydraulic power (kW) = flow (m3/s) * pressure rise (kPa).
    hydraulic_kw = flow / 3600.0 * rise * 100.0
    electrical_kw = hydraulic_kw / (eta * _MOTOR_EFFICIENCY)
    current = (_NO_LOAD_CURRENT_A + _AMPS_PER_KW * electrical_kw) * (
        1.0 + rng.normal(0.0, 0.015, n)
    )

    # Pump-hall ambient: station climate plus a daily swing.
    ambient = (
        st["ambient_base"]
        + 3.0 * np.sin(2.0 * np.pi * (hod - 9.0) / 24.0)
        + rng.normal(0.0, 1.2, n)
    )

    # Bearing temperature: ambient plus a load (current) term.
    bearing = ambient + 6.0 + 0.16 * current + 0.0003 * hours + rng.normal(0.0, 0.9, n)

    # Vibration: station baseline, mild load and age dependence.
    vibration = (
        st["vib_base"]
        + 0.006 * current
        + 0.00005 * hours
        + rng.normal(0.0, 0.12, n)
    )
    vibration = np.maximum(vibration, 0.3)

    return {
        "flow_m3h": flow,
        "suction_bar": suction,
        "discharge_bar": discharge,
        "motor_current_a": current,
        "vibration_mm_s": vibration,
        "bearing_temp_c": bearing,
        "ambient_temp_c": ambient,
        "hours_since_service": hours,
        # internals used by the fault models, never written to the tables
        "_rise_noise": rise_noise,
        "_suction_noise": suction - st["suction_base"] - level + 0.15 * q_rel**2,
        "_level": level,
    }


# ---------------------------------------------------------------------------
# faults (applied to healthy rows of the review period)
# ---------------------------------------------------------------------------


def _worn_impeller(rows: dict, station_idx: np.ndarray, rng) -> dict:
    """Same shaft power, less water.

    The drive runs at its usual power, but internal recirculation in the worn
    impeller wastes a large share of it, so the delivered hydraulic power
    (flow x pressure rise) drops to a fraction ``w`` of the healthy value.
    The new flow is the point on the station's system curve that carries
    that reduced hydraulic power. Current (and with it bearing temperature)
    stays where it was.
    """
    st = _station_arrays(station_idx)
    out = {k: v.copy() for k, v in rows.items()}
    n = station_idx.size
    w = rng.uniform(0.55, 0.70, n)
    rise0 = rows["discharge_bar"] - rows["suction_bar"]
    target = w * rows["flow_m3h"] * rise0
    a = st["static_lift"] + rows["_rise_noise"]
    b = st["friction"] / st["rated_flow"] ** 2
    q = rows["flow_m3h"] * w  # Newton on q * (a + b q^2) = target (monotone)
    for _ in range(12):
        q = q - (q * (a + b * q**2) - target) / (a + 3.0 * b * q**2)
    q_rel = q / st["rated_flow"]
    suction = st["suction_base"] + rows["_level"] - 0.15 * q_rel**2 + rows["_suction_noise"]
    out["flow_m3h"] = q
    out["suction_bar"] = suction
    out["discharge_bar"] = suction + a + st["friction"] * q_rel**2
    out["vibration_mm_s"] = rows["vibration_mm_s"] + rng.uniform(0.05, 0.25, n)
    return out


def _bearing_wear(rows: dict, station_idx: np.ndarray, rng) -> dict:
    """Friction in a wearing bearing: hotter than load and ambient explain."""
    out = {k: v.copy() for k, v in rows.items()}
    n = station_idx.size
    out["bearing_temp_c"] = rows["bearing_temp_c"] + rng.uniform(7.0, 12.0, n)
    out["vibration_mm_s"] = rows["vibration_mm_s"] + rng.uniform(0.0, 0.2, n)
    return out


def _seal_or_cavitation(rows: dict, station_idx: np.ndarray, rng) -> tuple[dict, np.ndarray]:
    """Seal failure (heavy vibration) or cavitation (very low suction, noise)."""
    st = _station_arrays(station_idx)
    out = {k: v.copy() for k, v in rows.items()}
    n = station_idx.size
    cavitation = rng.random(n) < 0.5
    # Seal failure: rubbing and leakage shake the pump hard.
    vib_add = np.where(cavitation, rng.uniform(5.0, 9.0, n), rng.uniform(6.0, 12.0, n))
    out["vibration_mm_s"] = rows["vibration_mm_s"] + vib_add
    # Cavitation: the inlet level collapses, suction pressure near zero and
    # the pump loses some flow; pressure rise follows the system curve.
    new_suction = rng.uniform(0.03, 0.25, n)
    q = np.where(cavitation, rows["flow_m3h"] * rng.uniform(0.8, 0.95, n), rows["flow_m3h"])
    q_rel = q / st["rated_flow"]
    rise = st["static_lift"] + rows["_rise_noise"] + st["friction"] * q_rel**2
    out["flow_m3h"] = q
    out["suction_bar"] = np.where(cavitation, new_suction, rows["suction_bar"])
    out["discharge_bar"] = np.where(
        cavitation, new_suction + rise, rows["discharge_bar"]
    )
    return out, cavitation


def _blocked_strainer(rows: dict, station_idx: np.ndarray, rng) -> dict:
    """A partly blocked suction strainer: the inlet loses pressure across the clogged basket.

    Suction pressure drops by 0.7-1.0 bar; the pump still adds its usual rise for the flow
    asked, so the discharge pressure falls as much; the turbulent inlet adds a little
    vibration. At a high-inlet station the lowered readings are ordinary for the fleet
    (other stations run that low every day): only the station's own baseline shows it.
    """
    out = {k: v.copy() for k, v in rows.items()}
    drop = rng.uniform(0.7, 1.0, station_idx.size)
    out["suction_bar"], out["discharge_bar"] = rows["suction_bar"] - drop, rows["discharge_bar"] - drop
    out["vibration_mm_s"] = rows["vibration_mm_s"] + rng.uniform(0.1, 0.3, station_idx.size)
    return out


# ---------------------------------------------------------------------------
# assembly
# ---------------------------------------------------------------------------

_ROUNDING = {
    "flow_m3h": 1,
    "suction_bar": 3,
    "discharge_bar": 3,
    "motor_current_a": 1,
    "vibration_mm_s": 2,
    "bearing_temp_c": 1,
    "ambient_temp_c": 1,
    "hours_since_service": 0,
}


def _frame(rows: dict, station_idx: np.ndarray, stamps: np.ndarray) -> pd.DataFrame:
    names = np.array(list(STATIONS))[station_idx]
    hours = np.datetime_as_string(stamps, unit="m")
    data: dict[str, object] = {
        "id": [f"{s}/{h}" for s, h in zip(names, hours)],
        "station": list(names),
        "hour": list(hours),
    }
    for col in FEATURE_COLUMNS:
        data[col] = np.round(np.asarray(rows[col], dtype=float), _ROUNDING[col])
    return pd.DataFrame(data)


def _take(rows: dict, pos: np.ndarray) -> dict:
    return {k: v[pos] for k, v in rows.items()}


def _in_usual_range(rows: dict, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    mat = np.column_stack([np.round(rows[c], _ROUNDING[c]) for c in FEATURE_COLUMNS])
    return np.all((mat >= lo) & (mat <= hi), axis=1)


def _kind_counts(n_cases: int) -> dict[str, int]:
    counts = {
        kind: max(_MIN_PER_KIND, int(round(share * n_cases)))
        for kind, share in _KIND_SHARE.items()
    }
    counts["blocked_strainer"] = _MIN_PER_KIND
    counts["disputed"] = _N_DISPUTED
    if sum(counts.values()) > n_cases // 2:
        raise ValueError(
            f"n_cases={n_cases} is too small for the demo: it needs at least "
            f"{2 * sum(counts.values())} cases"
        )
    return counts


def generate(seed: int = 7, n_train: int = 6000, n_cases: int = 2400) -> DemoScenario:
    """Generate the demo tables (invented data) from a seed.

    Same seed and sizes give identical frames. ``train`` contains only
    healthy rows. ``cases`` contains healthy rows labelled ``normal`` and the
    failures of :data:`FAILURE_KINDS` labelled ``anomaly`` with a short
    ``review_note``. Worn-impeller and bearing-wear rows are kept only when
    every reading lies inside the training rows' 2nd-98th percentile range,
    which is what makes them slip past a per-column detector.
    """
    if n_train < 200:
        raise ValueError(f"n_train={n_train} is too small for the demo (need >= 200)")
    counts = _kind_counts(n_cases)
    rng = np.random.default_rng(seed)

    # --- training period: healthy rows only --------------------------------
    train_days = _period_days(n_train, 42)
    tr_st, tr_stamps = _slots(n_train, _TRAIN_START, train_days, rng)
    order = np.lexsort((tr_st, tr_stamps))
    tr_st, tr_stamps = tr_st[order], tr_stamps[order]
    train_rows = _healthy(tr_st, tr_stamps, rng)
    train = _frame(train_rows, tr_st, tr_stamps)

    feats = train.loc[:, list(FEATURE_COLUMNS)].to_numpy()
    lo = np.percentile(feats, 2.0, axis=0)
    hi = np.percentile(feats, 98.0, axis=0)

    # --- review period: a pool of healthy slots, some turned into failures --
    n_pool = max(3 * n_cases, n_cases + 400 * len(counts))
    cases_start = _TRAIN_START + np.timedelta64(train_days, "D")
    pool_st, pool_stamps = _slots(n_pool, cases_start, _period_days(n_pool, 28), rng)
    pool = _healthy(pool_st, pool_stamps, rng)

    available = np.ones(n_pool, dtype=bool)
    chosen: list[tuple[str, np.ndarray, dict]] = []

    faulty_worn = _worn_impeller(pool, pool_st, rng)
    faulty_bear = _bearing_wear(pool, pool_st, rng)
    faulty_seal, cavitation = _seal_or_cavitation(pool, pool_st, rng)
    # its own stream, so adding this kind left the other kinds' draws as they were
    strainer_rng = np.random.default_rng([seed, 15])
    faulty_strainer = _blocked_strainer(pool, pool_st, strainer_rng)
    high_inlet = _station_arrays(pool_st)["suction_base"] >= _HIGH_INLET
    candidates = {
        # Misses by design: every reading in its usual range.
        "worn_impeller": (faulty_worn, _in_usual_range(faulty_worn, lo, hi)),
        "bearing_wear": (faulty_bear, _in_usual_range(faulty_bear, lo, hi)),
        # Caught by single features: no range condition.
        "seal_or_cavitation": (faulty_seal, np.ones(n_pool, dtype=bool)),
        # Healthy readings reported as a failure.
        "disputed": (pool, _in_usual_range(pool, lo, hi)),
        # Misses by design: in the fleet's usual range, low only for their own station.
        "blocked_strainer": (faulty_strainer, high_inlet & _in_usual_range(faulty_strainer, lo, hi)),
    }
    for kind, (rows, ok) in candidates.items():
        eligible = np.flatnonzero(ok & available)
        if eligible.size < counts[kind]:
            raise RuntimeError(f"not enough eligible rows for {kind}")  # pragma: no cover
        draw = strainer_rng if kind == "blocked_strainer" else rng
        pos = np.sort(draw.choice(eligible, size=counts[kind], replace=False))
        available[pos] = False
        chosen.append((kind, pos, _take(rows, pos)))

    n_normal = n_cases - sum(counts.values())
    normal_pos = np.sort(rng.choice(np.flatnonzero(available), size=n_normal, replace=False))

    parts = [_frame(_take(pool, normal_pos), pool_st[normal_pos], pool_stamps[normal_pos])]
    parts[0]["label"] = "normal"
    parts[0]["review_note"] = ""
    kinds: dict[str, str] = {}
    for kind, pos, rows in chosen:
        part = _frame(rows, pool_st[pos], pool_stamps[pos])
        part["label"] = "anomaly"
        groups = np.full(pos.size, kind, dtype=object)
        if kind == "seal_or_cavitation":
            groups[cavitation[pos]] = "cavitation"
        pick = rng.integers(0, 6, pos.size)  # 6 is a multiple of every group's size
        part["review_note"] = [_NOTES[g][i % len(_NOTES[g])] for g, i in zip(groups, pick)]
        kinds.update(dict.fromkeys(part["id"], kind))
        parts.append(part)

    cases = pd.concat(parts, ignore_index=True)
    cases = cases.sort_values(["hour", "station"], kind="stable").reset_index(drop=True)
    return DemoScenario(train=train, cases=cases, kinds=kinds)
