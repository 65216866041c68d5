"""Shaping choices for many columns at once, in numpy: the candidate search's fast path.

:func:`afterlook.core.shaping.chosen_transform` searches one column through
scipy.stats (and the ``shape`` command keeps using it). The candidate search
(:func:`afterlook.analysis.discovery.suggest`) needs a choice for every
column of the model on every search, so this module makes the same choice
for all columns together, without importing scipy.stats:

* the same seeded sample of each column (``sample_rows(n, sample_size,
  random_state)``; the columns of the search's normal sample share their
  length, so one index serves all);
* the same candidates (:func:`afterlook.core.shaping.candidate_specs`: the
  shifted logs and listed powers valid on the whole column, then Box-Cox for
  a positive column and Yeo-Johnson), in the same order;
* D'Agostino-Pearson ``K^2`` from the sample's moments, with the formulas
  of ``scipy.stats.skewtest`` (D'Agostino 1970) and ``kurtosistest``
  (Anscombe and Glynn 1983), both as summarised in D'Agostino, Belanger and
  D'Agostino, The American Statistician 44(4), 1990, 316-321; the p-value of
  ``K^2`` is the chi-squared(2) tail ``exp(-K^2 / 2)``;
* the Box-Cox lambda maximises the profile log-likelihood of
  ``scipy.stats.boxcox_llf``: with ``D = log(x) - mean(log(x))`` it is
  ``-(n/2) log(var(exp(lambda D)) / lambda^2)`` plus a constant, found by a
  grid on a tenth of the sample and then safeguarded Newton steps on its
  derivative over the whole sample, converged to ``1e-11``. scipy's Brent
  search resolves lambda only to about ``1e-7`` on a flat likelihood (the
  square root of the machine epsilon, relative to the curvature), so the two
  lambdas agree to about that (tests check ``1e-6``, and that the likelihood
  here is at least scipy's): a lambda's 6-digit text (what ``suggest``
  writes) may differ from the ``shape`` command's in its last digits.
  Yeo-Johnson on a column without negative values is the Box-Cox of ``1 + x``
  (same likelihood), so the same solver serves it;
* the selection rule of :mod:`afterlook.core.shaping` (rule 2 here; rules 3
  and 4 are the shared :func:`afterlook.core.shaping.rule_choice`).

A column outside what this computes exactly (non-finite values, a length
other than the rest, Yeo-Johnson with negative values, a lambda within
``1e-3`` of zero or beyond about 6.75 from it, where the search found no
bracket) goes through
:func:`afterlook.core.shaping.chosen_transform` instead (which imports
scipy.stats once).
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np

from . import order_stats, shaping
from .numbers import sample_rows
from .recipe import Transform, parse_transform
from .shape_result import TransformTried

__all__ = ["chosen_transforms", "k2_statistics", "power_mle"]

_EPS_RESOLUTION = 10 * np.finfo(np.float64).resolution  # scipy.stats.skew's precision-loss rule
_GRID = np.arange(-3.25, 3.26, 0.5)  # lambda grid (no point at 0)
_BLOCK = 16  # candidate columns scored per K^2 call: 16 x 5,000 values (640 KB) per buffer stay in a core's L2 cache


def k2_statistics(V: np.ndarray, scratch: "_Scratch | None" = None) -> tuple[np.ndarray, np.ndarray]:
    """D'Agostino-Pearson ``K^2`` and the biased skewness of every column of ``V`` (m x k, m >= 8).

    ``K^2`` equals ``scipy.stats.normaltest(V, axis=0).statistic``; NaN where
    scipy returns NaN (a column whose variance is lost to rounding). ``scratch``: two buffers
    of at least V's size for the temporaries (the same numbers either way).
    """
    V = np.asarray(V, dtype=np.float64)
    n = V.shape[0]
    mean = V.mean(axis=0)
    if scratch is None:
        scratch = _Scratch(V.size, 2)
    C = np.subtract(V, mean, out=scratch.like(0, V))
    C2 = np.multiply(C, C, out=scratch.like(1, V))
    m2 = C2.mean(axis=0)
    m3 = np.einsum("ij,ij->j", C2, C) / n
    m4 = np.einsum("ij,ij->j", C2, C2) / n
    with np.errstate(all="ignore"):
        lost = m2 <= (_EPS_RESOLUTION * mean) ** 2
        g1 = np.where(lost, np.nan, m3 / m2**1.5)
        b2 = np.where(lost, np.nan, m4 / m2**2)
        # skewness test (scipy.stats.skewtest)
        y = g1 * math.sqrt(((n + 1) * (n + 3)) / (6.0 * (n - 2)))
        beta2 = (3.0 * (n**2 + 27 * n - 70) * (n + 1) * (n + 3)
                 / ((n - 2.0) * (n + 5) * (n + 7) * (n + 9)))
        w2 = -1 + math.sqrt(2 * (beta2 - 1))
        delta = 1 / math.sqrt(0.5 * math.log(w2))
        alpha = math.sqrt(2.0 / (w2 - 1))
        y = np.where(y == 0, 1, y)
        z_skew = delta * np.log(y / alpha + np.sqrt((y / alpha) ** 2 + 1))
        # kurtosis test (scipy.stats.kurtosistest)
        e = 3.0 * (n - 1) / (n + 1)
        var_b2 = 24.0 * n * (n - 2) * (n - 3) / ((n + 1) * (n + 1.0) * (n + 3) * (n + 5))
        x = (b2 - e) / math.sqrt(var_b2)
        sqrt_beta1 = (6.0 * (n * n - 5 * n + 2) / ((n + 7) * (n + 9))
                      * math.sqrt((6.0 * (n + 3) * (n + 5)) / (n * (n - 2) * (n - 3))))
        a = 6.0 + 8.0 / sqrt_beta1 * (2.0 / sqrt_beta1 + math.sqrt(1 + 4.0 / sqrt_beta1**2))
        term1 = 1 - 2 / (9.0 * a)
        denom = 1 + x * math.sqrt(2 / (a - 4.0))
        term2 = np.sign(denom) * np.where(denom == 0.0, np.nan, np.power((1 - 2.0 / a) / np.abs(denom), 1 / 3.0))
        z_kurt = (term1 - term2) / math.sqrt(2 / (9.0 * a))
    return z_skew**2 + z_kurt**2, g1


def _log_var_ratio(lam: np.ndarray, D: np.ndarray) -> np.ndarray:
    """``log(var(exp(lam D)) / lam^2)`` per column (the Box-Cox objective to minimise)."""
    Z = np.exp(D * lam)
    return np.log(Z.var(axis=0)) - 2.0 * np.log(np.abs(lam))


class _Scratch:
    """Reused buffers for the (m x k) temporaries of a loop: a call that allocates a few MB afresh on every
    step has each block page-faulted again (glibc gives such blocks back to the kernel when they are freed:
    about 50,000 faults and half the time of a shaping search measured here), where one buffer per role is
    faulted once. Each buffer is viewed with the memory order of the array it stands in for, so every
    reduction sums in the same order as on a fresh temporary: the same numbers to the last bit."""

    def __init__(self, size: int, roles: int):
        self._flat = [np.empty(size) for _ in range(roles)]

    def view(self, role: int, shape: tuple[int, int], fortran: bool = False) -> np.ndarray:
        """Buffer ``role`` as an (m, k) array in C order, or in Fortran order."""
        m, k = shape
        flat = self._flat[role][: m * k]
        return flat.reshape(k, m).T if fortran else flat.reshape(m, k)

    def like(self, role: int, a: np.ndarray) -> np.ndarray:
        """Buffer ``role`` as an array of ``a``'s shape and memory order."""
        return self.view(role, a.shape, fortran=a.flags.f_contiguous and not a.flags.c_contiguous)


def _slope(lam: np.ndarray, D: np.ndarray, scratch: _Scratch | None = None,
           second: bool = True) -> tuple[np.ndarray, np.ndarray | None]:
    """First and (``second``) second derivative in lambda of :func:`_log_var_ratio`, per column (``scratch``:
    buffers for the temporaries, at least five of D's size; the same numbers either way)."""
    if scratch is None:
        scratch = _Scratch(D.size, 5)
    Z = np.multiply(D, lam, out=scratch.like(0, D))
    np.exp(Z, out=Z)
    a1 = Z.mean(axis=0)
    Zc = np.subtract(Z, a1, out=scratch.like(1, D))
    ZD = np.multiply(Z, D, out=scratch.like(2, D))
    v = np.einsum("ij,ij->j", Zc, Zc)
    v1 = 2.0 * np.einsum("ij,ij->j", Zc, ZD)
    if not second:  # the bracket's sign tests need the first only
        return v1 / v - 2.0 / lam, None
    ZDc = np.subtract(ZD, ZD.mean(axis=0), out=scratch.like(3, D))
    ZDD = np.multiply(ZD, D, out=scratch.like(4, D))
    v2 = 2.0 * np.einsum("ij,ij->j", Zc, ZDD) + 2.0 * np.einsum("ij,ij->j", ZDc, ZDc)
    g1 = v1 / v - 2.0 / lam
    g2 = v2 / v - (v1 / v) ** 2 + 2.0 / lam**2
    return g1, g2


def power_mle(L: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Maximum-likelihood Box-Cox lambda per column of ``L = log(x)`` (m x k), and whether it was found.

    ``scipy.stats.boxcox_normmax(x, method="mle")`` for each column (within
    about 1e-7, see the module notes); a column whose lambda lies within 1e-3 of
    zero, or for which no bracket of the optimum was found (beyond about
    +-6.75), is marked not found (``ok`` False).
    """
    L = np.asarray(L, dtype=np.float64)
    D = L - L.mean(axis=0)
    k = D.shape[1]
    if k == 0:
        return np.zeros(0), np.zeros(0, bool)
    sub = D[:: max(1, D.shape[0] // 500)]
    with np.errstate(all="ignore"):
        objective = np.array([_log_var_ratio(np.full(k, g), sub) for g in _GRID])
    objective[~np.isfinite(objective)] = np.inf
    start = _GRID[np.argmin(objective, axis=0)]
    lo, hi = start - 0.5, start + 0.5
    scratch = _Scratch(D.size, 5)
    with np.errstate(all="ignore"):
        f_lo, f_hi = _slope(lo, D, scratch, second=False)[0], _slope(hi, D, scratch, second=False)[0]
        for _ in range(3):  # widen a side until the derivative changes sign across the bracket (columns that need it)
            for bound, f, step, good in ((lo, f_lo, -1.0, lambda x: x < 0), (hi, f_hi, 1.0, lambda x: x > 0)):
                bad = np.flatnonzero(~good(f))
                if bad.size:
                    bound[bad] += step
                    f[bad] = _slope(bound[bad], D[:, bad], scratch, second=False)[0]
        ok = (f_lo < 0) & (f_hi > 0)
        lam = np.clip(start, lo, hi)
        lam = np.where(lam == 0, 0.25, lam)
        active = np.flatnonzero(ok)
        for _ in range(60):  # safeguarded Newton steps, on the columns not yet converged
            if not active.size:
                break
            x, a, b = lam[active], lo[active], hi[active]
            # D[:, active] is a column-major copy: D itself serves when it is one already and every column is
            # active (a row-major D would be summed in another order)
            g1, g2 = _slope(x, D if active.size == k and D.flags.f_contiguous else D[:, active], scratch)
            a = np.where(g1 < 0, x, a)
            b = np.where(g1 > 0, x, b)
            newton = x - g1 / g2
            inside = (g2 > 0) & (newton > a) & (newton < b) & np.isfinite(newton)
            new = np.where(inside, newton, 0.5 * (a + b))
            new = np.where(new == 0, 0.5 * (a + new), new)
            done = (np.abs(new - x) <= 1e-11 * np.maximum(1.0, np.abs(x))) | (g1 == 0)
            lam[active], lo[active], hi[active] = np.where(g1 == 0, x, new), a, b
            active = active[~done]
        ok[active] = False  # not converged in 60 steps
    ok &= np.isfinite(lam) & (np.abs(lam) >= 1e-3)
    return lam, ok


def chosen_transforms(columns: Mapping[str, np.ndarray], *, sample_size: int = 5000,
                      random_state=0, progress=None) -> dict[str, Transform | None]:
    """``{name: shaping.chosen_transform(values, name=name, ...)}`` for every column (statistic K^2).

    ``progress``: optional callable(fraction done), called between the steps (a
    stale search is stopped by raising from it).
    """
    progress = progress or (lambda fraction: None)
    out: dict[str, Transform | None] = {}
    arrays = {n: np.asarray(v, dtype=np.float64).ravel() for n, v in columns.items()}
    sizes = [a.size for a in arrays.values()]
    size = max(set(sizes), key=sizes.count) if sizes else 0
    fast = [n for n, a in arrays.items() if a.size == size and size >= shaping.MIN_VALUES and np.all(np.isfinite(a))]
    for n in arrays:
        if n not in fast:
            out[n] = _exact(arrays[n], n, sample_size, random_state)
    if fast:
        out.update(_fast_choices(fast, arrays, sample_size, random_state, progress))
    return {n: out[n] for n in arrays}


def _exact(values, name, sample_size, random_state):
    return shaping.chosen_transform(values, name=name, sample_size=sample_size, random_state=random_state)


def _fast_choices(names: list[str], arrays: dict, sample_size: int, random_state,
                  progress) -> dict[str, Transform | None]:
    # column by column on the caller's (contiguous) arrays: no (n, d) copy, no (n, d) temporaries
    rows = sample_rows(arrays[names[0]].size, sample_size, random_state)
    S = np.array([arrays[n][rows] for n in names]).T  # (m, d), each column contiguous
    cols = [arrays[n] for n in names]
    x_min = np.array([c.min() for c in cols])
    varies = (np.array([np.ptp(c) for c in cols]) > 0) & (np.ptp(S, axis=0) > 0)
    # the numbers of np.percentile(X, [75, 25], axis=0), column by column (one copy, one-position partitions)
    q75, q25 = np.array([order_stats.percentile_pair(c, 75, 25) for c in cols]).T
    iqr = q75 - q25
    spread = np.array([iqr[k] if iqr[k] != 0 else cols[k].std() for k in range(len(cols))])
    # integer-valued: the sample rows first (a column with a fraction there is not), then every row
    is_count = np.array([x_min[k] >= 0 and np.all(S[:, k] == np.round(S[:, k])) and np.all(c == np.round(c))
                         for k, c in enumerate(cols)])
    progress(0.2)
    k2_identity, skew = k2_statistics(S)
    with np.errstate(over="ignore"):
        near_gaussian = (np.abs(skew) < shaping.SYMMETRIC_SKEW) & (np.exp(-k2_identity / 2) >= shaping.NEAR_GAUSSIAN_P)
    out: dict[str, Transform | None] = {}
    search = []
    for j, n in enumerate(names):
        if not varies[j] or not np.isfinite(k2_identity[j]) or near_gaussian[j]:
            out[n] = None
        else:
            search.append(j)
    if not search:
        return out
    # every log and power candidate of every searched column, scored in blocks; each candidate's values
    # are made in its row of the block (not all kept at once: 800 candidates of 5,000 rows were 32 MB of
    # fresh memory), by the same operations, so the same numbers to the last bit
    specs = []  # (column j, text, complexity)
    makers = []  # fills its candidate's values into the given row
    with np.errstate(all="ignore"):
        logs = {j: np.log(S[:, j]) for j in search if x_min[j] > 0}
        for j in search:
            for text, complexity, family, param in shaping.candidate_specs(names[j], float(x_min[j]),
                                                                           float(spread[j]), bool(is_count[j])):
                specs.append((j, text, complexity))
                makers.append(_maker(family, param, S[:, j], logs.get(j)))
        progress(0.4)
        fitted, exact = _fitted(names, S, search, x_min, logs)
        progress(0.6)
    for j, text, complexity, v in fitted:
        specs.append((j, text, complexity))
        makers.append(lambda out, v=v: np.copyto(out, v))
    stats = np.full(len(makers), np.nan)
    m = S.shape[0]
    scratch = _Scratch(_BLOCK * m, 3)  # the block itself and k2_statistics' two temporaries
    for start in range(0, len(makers), _BLOCK):
        progress(0.6 + 0.4 * start / len(makers))
        block = makers[start:start + _BLOCK]
        # each candidate contiguous: row i of a (k, m) C-order buffer, the layout of np.array(values).T
        rows = scratch.view(2, (len(block), m))
        with np.errstate(all="ignore"):
            for i, make in enumerate(block):
                make(rows[i])
        V = rows.T
        usable = np.all(np.isfinite(V), axis=0) & (np.ptp(V, axis=0) > 0)
        k2, _ = k2_statistics(V, scratch)
        stats[start:start + _BLOCK] = np.where(usable, k2, np.nan)
    tried = {j: [TransformTried("none", None, 0, float(k2_identity[j]))] for j in search}
    for (j, text, complexity), s in zip(specs, stats):
        if math.isfinite(s):
            tried[j].append(TransformTried(text, text, complexity, float(s)))  # parsed only when chosen
    critical = shaping._CRITICAL_5PCT["dagostino"]
    for j in search:
        n = names[j]
        if j in exact:
            out[n] = _exact(arrays[n], n, sample_size, random_state)
            continue
        choice = shaping.rule_choice(tried[j], critical)
        out[n] = None if choice.transform is None else parse_transform(n, choice.description)
    return out


def _maker(family: str, param, s: np.ndarray, log_s: np.ndarray | None):
    """A function writing a log or power candidate of column ``s`` into its ``out`` row (``log_s``:
    log(s) when s is positive): the operations of ``np.log(s + param)``, ``np.exp(param * log(s))`` or
    ``np.power(s, param)``, each into ``out``."""
    if family == "log":
        if not param:
            return lambda out: np.copyto(out, log_s)
        return lambda out: np.log(np.add(s, param, out=out), out=out)
    if log_s is not None:
        return lambda out: np.exp(np.multiply(param, log_s, out=out), out=out)
    return lambda out: np.power(s, param, out=out)


def _fitted(names, S, search, x_min, logs) -> tuple[list, set]:
    """Box-Cox (positive columns) and Yeo-Johnson candidates: (j, text, complexity, values) and the
    columns the fast path cannot fit (they go the exact way)."""
    bc = [j for j in search if x_min[j] > 0]
    yj = [j for j in search if x_min[j] >= 0]
    exact = {j for j in search if x_min[j] < 0}
    found = {}
    for kind, cols, L in (("boxcox", bc, lambda j: logs[j]), ("yeojohnson", yj, lambda j: np.log1p(S[:, j]))):
        if not cols:
            continue
        Lm = np.array([L(j) for j in cols]).T  # column-major, each column contiguous
        lam, ok = power_mle(Lm)
        for k, j in enumerate(cols):
            if not ok[k]:
                exact.add(j)
            else:
                found[(kind, j)] = (float(lam[k]), Lm[:, k])
    rows = []
    for j in search:  # the order of shaping's candidates: Box-Cox, then Yeo-Johnson
        for kind in ("boxcox", "yeojohnson"):
            if (kind, j) in found and j not in exact:
                lam, Lj = found[(kind, j)]
                # exp(lam * L) is an affine image of the transform: the same K^2
                rows.append((j, f"{kind}({lam!r})", 3, np.exp(lam * (Lj - Lj.mean()))))
    return rows, exact
