"""Fleet-relative features: each unit's baseline frozen at fit, and a unit's recent past.

A fleet's units each have their own normal (a station higher up the hill
has a lower suction pressure all year). A reading compared with the
fleet's spread can sit well inside it while being far outside its own
unit's normal; ``x - unit_median(x)`` and ``x / unit_scale(x)`` compare it
with its unit's baseline instead.

Baselines (frozen at fit, per unit, from the unit's normal training rows)
-------------------------------------------------------------------------
``unit_median(x)``
    The median of the unit's finite training values of ``x``.
``unit_scale(x)``
    The unit's median absolute deviation times 1.4826, the normal
    consistency constant (1 / Phi^-1(3/4)), so that it estimates the
    standard deviation of Gaussian data: ``scipy.stats.median_abs_deviation
    (x, scale="normal")`` (F. R. Hampel (1974), JASA 69(346), 383-393;
    P. J. Rousseeuw and C. Croux (1993), JASA 88(424), 1273-1283).

A unit with fewer than :data:`MIN_UNIT_ROWS` finite training values, or a
unit never seen in training, falls back to the fleet's statistic (over
every normal training row); the rows that fell back are counted and
reported (:func:`fallbacks`). Why 30: the sample median of Gaussian data has
a standard error of about ``sqrt(pi / 2) * sd / sqrt(n)`` (its asymptotic
variance is ``pi sd^2 / (2 n)``), 0.23 sd at n = 30: a baseline no more
uncertain than a quarter of the unit's spread; fewer rows give a baseline
that moves with a handful of readings (30 is also the common rule of thumb
for "enough rows"). A unit whose MAD is 0 (a reading that never moves)
falls back too; a fleet MAD of 0 is refused at fit.

Recent past (no frozen statistics; read from the rows evaluated, in time order)
-----------------------------------------------------------------------------
``lag(x, k)``
    The unit's k-th previous reading of ``x`` (rows of a unit ordered by
    the time column); NaN for the first k rows of each unit.
``rolling_median(x, n)``
    The median of the unit's last ``n`` readings, the current one
    included (as ``pandas ... rolling(n, min_periods=n).median()``); NaN
    for the first ``n - 1`` rows of a unit and for a window holding a NaN.
    ``rolling_median(lag(x, 1), n)`` is the median of the n readings before.

Both are undefined on a unit's first rows: such rows are NaN features,
counted and handled like any undefined feature (``--undefined``).

The unit labels and time keys reach an expression as two reserved entries of
the column mapping (:data:`UNITS`, :data:`TIMES`), put there by the layer
that read the table.
"""

from __future__ import annotations

import weakref

import numpy as np

from .errors import AfterlookError

#: Reserved keys of a column mapping: the unit label of each row (str objects) and its time key (numbers).
UNITS = "\x00unit"
TIMES = "\x00time"
#: Reserved key of the readings that precede the rows evaluated (``--context``): a mapping of column name ->
#: values with its own UNITS and TIMES; ``lag`` and ``rolling_median`` read them as the units' past.
PAST = "\x00past"
#: Fewest finite training values for a unit's own baseline (see the module docstring).
MIN_UNIT_ROWS = 30
#: MAD to standard deviation under normality: 1 / Phi^-1(3/4) (scipy.stats.median_abs_deviation, scale="normal").
NORMAL_MAD_SCALE = 1.482602218505602

BASELINES = ("unit_median", "unit_scale")
RECENT = {"lag": "k", "rolling_median": "n"}


def _statistic(function: str, x: np.ndarray) -> float:
    if function == "unit_median":
        return float(np.median(x))
    return float(np.median(np.abs(x - np.median(x))) * NORMAL_MAD_SCALE)


def fit_baseline(function: str, argument: str, key: str, values: np.ndarray, units) -> dict:
    """Per-unit statistic of ``values`` (the argument over the normal rows) and the fleet's."""
    if units is None:
        raise AfterlookError(f"{key} needs the unit of each row (--unit-col)")
    x = np.asarray(values, dtype=np.float64)
    labels = np.asarray(units, dtype=object)
    ok = np.isfinite(x)
    if ok.sum() < 2:
        raise AfterlookError(f"{key}: {int(ok.sum())} finite normal value(s); a baseline needs at least 2")
    fleet = _statistic(function, x[ok])
    if function == "unit_scale" and not (fleet > 0):
        raise AfterlookError(f"{key}: the fleet's MAD is 0 on the normal rows; there is no scale to divide by")
    per_unit: dict[str, float] = {}
    too_few: dict[str, int] = {}
    names, inverse = np.unique(labels[ok].astype(str), return_inverse=True)
    xs = x[ok]
    for u, name in enumerate(names):
        xu = xs[inverse == u]
        if xu.size < MIN_UNIT_ROWS:
            too_few[str(name)] = int(xu.size)
            continue
        value = _statistic(function, xu)
        if function == "unit_scale" and not (value > 0):
            too_few[str(name)] = int(xu.size)  # a MAD of 0: no own scale
            continue
        per_unit[str(name)] = value
    return {"function": function, "argument": argument, "fleet": fleet, "units": per_unit,
            "fallback_units": too_few, "min_rows": MIN_UNIT_ROWS, "rows": int(ok.sum())}


#: The distinct labels and each row's code of the last few unit-label arrays seen, and the (unit, time)
#: order of the last few pairs of unit and time arrays (by identity, checked by weak references): a search
#: evaluates hundreds of unit candidates on the same few row sets, and sorting the labels (and the rows)
#: again for each call was most of its cost (225 lags of one search over 100,000 cases re-sorted their
#: rows each time: 2.4 s). Label and time arrays are never changed in place.
_CODES: dict[tuple, tuple] = {}
_ORDERS: dict[tuple, tuple] = {}
_JOINED: dict[tuple, tuple] = {}
_CODES_SIZE = 8


def _remembered(cache: dict, arrays: tuple, compute):
    """``compute()``, remembered in ``cache`` for these arrays (numpy arrays only; an entry goes with them)."""
    if not all(isinstance(a, np.ndarray) for a in arrays):
        return compute()
    key = tuple(id(a) for a in arrays)
    shapes = tuple(a.shape for a in arrays)
    hit = cache.get(key)
    if hit is not None and all(ref() is a for ref, a in zip(hit[0], arrays)) and hit[1] == shapes:
        return hit[2]
    value = compute()
    try:
        while len(cache) >= _CODES_SIZE:
            cache.pop(next(iter(cache)), None)
    except (StopIteration, RuntimeError):  # another thread emptied or changed it: nothing to drop
        pass
    # a dead array's entry is dropped with it (its id can be reused)
    cache[key] = (tuple(weakref.ref(a, lambda _, key=key: cache.pop(key, None)) for a in arrays), shapes, value)
    return value


def with_past(past_units, past_times, units, times) -> tuple[np.ndarray, np.ndarray]:
    """The units' earlier readings' labels and times, then the rows' own: one pair of arrays per four
    (remembered, so that every lag of the same rows finds its row order already made)."""
    return _remembered(_JOINED, (past_units, past_times, units, times), lambda: (
        np.concatenate([np.asarray(past_units, dtype=object), np.asarray(units, dtype=object)]),
        np.concatenate([np.asarray(past_times), np.asarray(times)])))


def _label_codes(units) -> tuple[np.ndarray, np.ndarray]:
    """``np.unique(labels as str, return_inverse=True)`` of a unit-label array, remembered per array."""
    return _remembered(_CODES, (units,), lambda: np.unique(np.asarray(units, dtype=object).astype(str),
                                                           return_inverse=True))


def apply_baseline(params: dict, units, n: int, key: str) -> np.ndarray:
    """Each row's unit statistic (the fleet's for a unit without its own)."""
    if units is None:
        raise AfterlookError(f"{key} needs the unit of each row (--unit-col)")
    names, inverse = _label_codes(units)
    table = np.array([params["units"].get(str(u), params["fleet"]) for u in names], dtype=np.float64)
    out = table[inverse] if len(names) else np.empty(0)
    return np.broadcast_to(out, (n,)) if out.size != n else out


def fallbacks(params: dict, units) -> tuple[int, list[str]]:
    """Rows (and their units) that use the fleet's statistic: a unit unseen or with too few training rows."""
    if units is None:
        return 0, []
    labels = np.asarray(units, dtype=object).astype(str)
    names, counts = np.unique(labels, return_counts=True)
    fell = [(str(u), int(c)) for u, c in zip(names, counts) if str(u) not in params["units"]]
    return sum(c for _, c in fell), [u for u, _ in fell]


def _unit_order(units, times, n: int, key: str) -> tuple[np.ndarray, np.ndarray]:
    """Row positions sorted by (unit, time) and the unit code of each sorted row."""
    if units is None:
        raise AfterlookError(f"{key} needs the unit of each row (--unit-col)")
    if times is None:
        raise AfterlookError(f"{key} needs the time of each row (--time-col)")

    def order_of():
        _, codes = _label_codes(units)
        order = np.lexsort((np.asarray(times), codes))  # by unit, then time; stable
        sorted_codes = codes[order]
        order.flags.writeable = sorted_codes.flags.writeable = False  # shared by every caller from now on
        return order, sorted_codes

    return _remembered(_ORDERS, (units, times), order_of)


def lag(values: np.ndarray, k: int, units, times, key: str = "lag") -> np.ndarray:
    """The unit's k-th previous reading of each row (NaN for a unit's first k rows)."""
    x = np.asarray(values, dtype=np.float64)
    n = x.shape[0]
    order, codes = _unit_order(units, times, n, key)
    xs = x[order]
    shifted = np.full(n, np.nan)
    if k < n:
        shifted[k:] = xs[:-k] if k else xs
        shifted[k:][codes[k:] != codes[:-k]] = np.nan  # another unit's reading is not this unit's past
    out = np.empty(n)
    out[order] = shifted
    return out


def rolling_median(values: np.ndarray, window: int, units, times, key: str = "rolling_median") -> np.ndarray:
    """Median of the unit's last ``window`` readings, the current one included (NaN until there are that many)."""
    x = np.asarray(values, dtype=np.float64)
    n = x.shape[0]
    order, codes = _unit_order(units, times, n, key)
    xs = x[order]
    med = np.full(n, np.nan)
    if window <= n:
        windows = np.lib.stride_tricks.sliding_window_view(xs, window)  # (n - window + 1, window)
        wc = np.lib.stride_tricks.sliding_window_view(codes, window)
        same = wc[:, 0] == wc[:, -1]  # codes are sorted: one unit when first and last agree
        with np.errstate(all="ignore"):
            m = np.median(windows, axis=1)  # NaN in a window gives NaN, as min_periods=window
        med[window - 1:] = np.where(same, m, np.nan)
    out = np.empty(n)
    out[order] = med
    return out


def with_history(units, times, need: int, past: dict | None = None) -> np.ndarray:
    """Rows that have at least ``need`` earlier readings of their unit (all rows when ``need`` is 0);
    ``past``: the preceding readings (:data:`PAST`), counted as earlier readings."""
    if need <= 0 or units is None or times is None:
        return np.ones(len(units) if units is not None else 0, dtype=bool) if units is not None else np.ones(0, bool)
    if past is not None and len(past.get(UNITS, ())):
        m = len(past[UNITS])
        both = with_history(np.concatenate([past[UNITS], np.asarray(units, dtype=object)]),
                            np.concatenate([past[TIMES], np.asarray(times)]), need)
        return both[m:]
    labels = np.asarray(units, dtype=object).astype(str)
    n = labels.shape[0]
    order, codes = _unit_order(units, times, n, "history")
    start = np.r_[True, codes[1:] != codes[:-1]]
    first = np.maximum.accumulate(np.where(start, np.arange(n), 0))
    position = np.empty(n, dtype=np.int64)
    position[order] = np.arange(n) - first  # 0 for a unit's first reading
    return position >= need


def duplicate_pairs(units, times) -> tuple[int, tuple[str, object] | None]:
    """How many rows repeat an earlier (unit, time) pair, and the first such pair."""
    labels = np.asarray(units, dtype=object).astype(str)
    _, codes = np.unique(labels, return_inverse=True)
    t = np.asarray(times)
    order = np.lexsort((t, codes))
    cs, ts = codes[order], t[order]
    dup = (cs[1:] == cs[:-1]) & (ts[1:] == ts[:-1])
    if not dup.any():
        return 0, None
    i = order[1:][dup][0]
    return int(dup.sum()), (str(labels[i]), t[i])
