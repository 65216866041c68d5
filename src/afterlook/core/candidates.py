"""Candidate derived features for misses, ranked, with a guard against chance.

Given the normal population (a seeded sample of at most 50,000 rows) and
one or more target misses, every pair ``(a, b)`` of the recipe's columns
yields candidates:

=====================  ==========================================  ==============
kind                   expression                                  needs
=====================  ==========================================  ==============
ratio                  ``a / b`` and ``b / a``                      both positive
log_ratio              ``log(a / b)``                               both positive
standardized_difference ``(a - ma)/sa - (b - mb)/sb`` (``+`` when     -
                       the pair is negatively correlated)
product                ``a * b``                                   -
square_ratio           ``a ** 2 / b`` and ``b ** 2 / a``            divisor positive
shaped_difference      standardized difference of the shaped        a shaping
                       columns (log or power transform)             transform
=====================  ==========================================  ==============

**Three passes.**

1. *Moments without materialising anything.* The mean and variance of every
   candidate over the sample follow from a handful of ``d x d`` matrix
   products (``A^T A``, ``(A^2)^T (A^2)``, ``A^T (1/A)``, ...), so thousands of
   candidates cost a few BLAS calls. The first-pass statistic is the plain
   z of the target, ``(t - mean) / sd``; for several targets, the median
   ``|z|``.
2. *Exact, robust statistics for the best few hundred* (and a reserve of
   the best pairs correlated at ``|r| >= min_correlation``, so related pairs
   are always looked at): the columns are built with the expression engine
   (the exact values ``try`` will use), and for each target the robust z
   ``(t - median) / (1.4826 MAD)``, the empirical two-sided tail
   ``(1 + #{|v - med| >= |t - med|}) / (n + 1)`` (the add-one estimate of
   North, Curtis and Sham, Am. J. Hum. Genet. 71, 2002, 439-441) and the
   number of *other* labelled anomalies the candidate separates at the
   false-alarm rate ``alarm_rate`` (beyond the ``1 - alarm_rate`` quantile
   of ``|v - med|`` over normal rows).
3. *Exact re-fit* of the top few (done by :func:`afterlook.analysis.discovery.suggest`,
   which owns files and models): false alarms added when the candidate joins
   the model and the threshold is re-picked.

**Chance guard.** With ``m`` candidates tried, one will separate a single
case by luck. Each candidate's tail is

* the empirical add-one tail whenever at least one normal row is as
  extreme as the target (inside the empirical range nothing is
  extrapolated, so nothing there can look rarer than the data show);
* beyond the empirical range, a generalized Pareto tail fitted to the
  largest 5% (at least 50) of ``|v - med|`` (peaks over threshold; parameters by
  the probability-weighted moments of Hosking and Wallis, Technometrics
  29(3), 1987, 339-349, cited from memory), with the shape clamped at
  ``>= 0`` so that a light tail is extrapolated no thinner than an
  exponential one (conservative for Gaussian-like candidates).

``adjusted_tail = min(1, m * k * tail)`` for ``k`` targets (Bonferroni over
*all* candidates tried and all targets searched; conservative because the
candidates are correlated) and ``beyond_chance`` is ``adjusted_tail < 0.05``.
With several targets, ``targets_exposed`` counts the targets beyond chance,
``adjusted_tail`` is that of the best-exposed target, ``case_z`` the median
robust z, and the ranking puts candidates exposing more targets first.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping

import numpy as np

from . import expressions
from .errors import AfterlookError
from .numbers import finite_or_none

KINDS = ("ratio", "log_ratio", "standardized_difference", "product", "square_ratio", "shaped_difference")
MAD_TO_SD = 1.4826  # consistency constant of the MAD for a normal distribution
MIN_TAIL_COUNT = 1  # any normal row as extreme as the target: no extrapolation
TAIL_FRACTION = 0.05  # share of rows in the generalized Pareto tail fit
MIN_EXCESSES = 50  # at least this many excesses in the tail fit
CHANCE_LEVEL = 0.05
TAIL_TIERS = (1e-6, 1e-3, CHANCE_LEVEL)  # ranking tiers of the adjusted tail


@dataclass(frozen=True)
class Settings:
    """Options of the candidate search (one explicit settings object)."""

    sample_size: int = 50_000
    random_state: int = 0
    min_correlation: float = 0.3
    second_pass: int = 120  # candidates re-scored exactly after the moment pass
    correlated_reserve: int = 40  # extra slots for correlated pairs in the second pass
    alarm_rate: float = 0.01
    chance_level: float = CHANCE_LEVEL

    def check(self) -> "Settings":
        """Raise :class:`AfterlookError` naming the first setting out of its range."""
        def whole(name: str, low: int) -> None:
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < low:
                raise AfterlookError(f"setting {name} must be a whole number of at least {low}, got {v!r}")

        def fraction(name: str, closed: bool) -> None:
            v = getattr(self, name)
            ok = isinstance(v, (int, float, np.floating)) and not isinstance(v, bool) and math.isfinite(v)
            if ok:
                ok = 0 <= v <= 1 if closed else 0 < v < 1
            if not ok:
                where = "between 0 and 1" if closed else "strictly between 0 and 1"
                raise AfterlookError(f"setting {name} must lie {where}, got {v!r}")

        whole("sample_size", 100)
        if self.random_state is not None:  # None: a fresh seed, as numpy's default_rng takes it
            whole("random_state", 0)
        whole("second_pass", 1)
        whole("correlated_reserve", 0)
        fraction("min_correlation", closed=True)
        fraction("alarm_rate", closed=False)
        fraction("chance_level", closed=False)
        return self


@dataclass
class Candidate:
    """One candidate derived feature and its evidence."""

    expression: str
    kind: str
    inputs: tuple[str, str]
    r: float  # correlation of the input pair in the normal population
    first_pass_z: float = float("nan")
    case_z: float = float("nan")  # robust z of the target (median over several)
    case_z_by_case: dict = field(default_factory=dict)
    tail: float = float("nan")
    tail_method: str = ""
    adjusted_tail: float = float("nan")
    beyond_chance: bool = False
    other_anomalies_separated: int = 0
    other_anomalies: int = 0
    other_misses_separated: int = 0
    other_misses: int = 0
    targets_exposed: int = 0
    false_alarms_added: int | None = None
    catches_targets: int | None = None
    # the parsed expression, kept from the exact pass so the re-fit does not parse it again
    parsed: expressions.Expression | None = field(default=None, repr=False, compare=False)

    @property
    def name(self) -> str:
        """A derived-feature name for the candidate (identifier-safe)."""
        a, b = (_ident(x) for x in self.inputs)
        pattern = {
            "ratio": "{a}_per_{b}", "log_ratio": "log_{a}_per_{b}", "product": "{a}_times_{b}",
            "square_ratio": "{a}_sq_per_{b}", "standardized_difference": "{a}_vs_{b}",
            "shaped_difference": "shaped_{a}_vs_{b}",
        }.get(self.kind, "{a}_{b}")
        if self.kind in ("ratio", "square_ratio"):
            # the orientation is in the expression: numerator first
            first = self.expression.split(" ")[0].strip("`")
            if _ident(first) == b:
                a, b = b, a
        elif self.kind == "log_ratio":
            first = self.expression[4:].split(" ")[0].strip("`")
            if _ident(first) == b:
                a, b = b, a
        return pattern.format(a=a, b=b)[:80]

    def rank_key(self, min_correlation: float = 0.3):
        """Order of the candidate list.

        1. targets exposed beyond chance (more first);
        2. how extreme, in tiers of the adjusted tail: < 1e-6, < 1e-3, < 0.05,
           the rest. Tiers rather than the raw value, because once a tail is
           that small its exact size is mostly tail-model noise, and the next
           keys are what a reviewer weighs;
        3. other labelled anomalies separated (more first);
        4. target misses flagged after the exact re-fit (more first);
        5. false alarms added on re-fit (fewer first; unknown last);
        6. pairs correlated at ``|r| >= min_correlation`` first;
        7. the simpler expression (shorter text) first;
        8. larger |robust z|.
        """
        tail = self.adjusted_tail if math.isfinite(self.adjusted_tail) else 1.0
        tier = next((k for k, cut in enumerate(TAIL_TIERS) if tail < cut), len(TAIL_TIERS))
        fa = self.false_alarms_added if self.false_alarms_added is not None else math.inf
        caught = self.catches_targets if self.catches_targets is not None else -1
        return (-self.targets_exposed, tier, -self.other_anomalies_separated, -caught, fa,
                -(abs(self.r) >= min_correlation), len(self.expression),
                -abs(self.case_z) if math.isfinite(self.case_z) else 0.0)

    def to_dict(self) -> dict:
        return {
            "name": self.name,
            "expression": self.expression,
            "kind": self.kind,
            "inputs": list(self.inputs),
            "pair_correlation": finite_or_none(self.r),
            "case_z": finite_or_none(self.case_z),
            "case_z_by_case": {k: finite_or_none(v) for k, v in self.case_z_by_case.items()},
            "first_pass_z": finite_or_none(self.first_pass_z),
            "tail": finite_or_none(self.tail),
            "tail_method": self.tail_method,
            "adjusted_tail": finite_or_none(self.adjusted_tail),
            "beyond_chance": bool(self.beyond_chance),
            "targets_exposed": int(self.targets_exposed),
            "other_anomalies_separated": int(self.other_anomalies_separated),
            "other_anomalies": int(self.other_anomalies),
            "other_misses_separated": int(self.other_misses_separated),
            "other_misses": int(self.other_misses),
            "false_alarms_added": self.false_alarms_added,
            "catches_targets": self.catches_targets,
        }


def _ident(text: str) -> str:
    out = "".join(ch if ch.isalnum() or ch == "_" else "_" for ch in text).strip("_")
    return out if out and not out[0].isdigit() else f"c_{out}"


# --------------------------------------------------------------------------
# Generalized Pareto tail (probability-weighted moments)
# --------------------------------------------------------------------------


def gpd_pwm(excess: np.ndarray) -> tuple[float, float]:
    """Shape ``xi`` and scale ``sigma`` of a generalized Pareto fit to excesses.

    Probability-weighted moments (Hosking and Wallis 1987): with the sorted
    excesses ``y_(1) <= ... <= y_(n)`` and plotting positions
    ``p_j = (j - 0.35) / n``, ``a0 = mean(y)``, ``a1 = mean((1 - p_j) y_(j))``,
    their shape ``k = a0 / (a0 - 2 a1) - 2`` and scale
    ``alpha = 2 a0 a1 / (a0 - 2 a1)``; here ``xi = -k`` (scipy's ``c``).
    """
    y = np.sort(np.asarray(excess, dtype=np.float64))
    n = y.size
    if n < 5 or not np.any(y > 0):
        return 0.0, float(max(y.mean() if n else 1.0, 1e-12))
    p = (np.arange(1, n + 1) - 0.35) / n
    a0 = y.mean()
    a1 = np.mean((1.0 - p) * y)
    denom = a0 - 2.0 * a1
    if denom <= 0:
        return 0.0, float(a0)
    k = a0 / denom - 2.0
    alpha = 2.0 * a0 * a1 / denom
    return float(-k), float(alpha)


def gpd_tail(abs_dev: np.ndarray, target_dev: float, fraction: float = TAIL_FRACTION) -> float:
    """P(|V - med| >= target_dev) extrapolated with a generalized Pareto tail.

    The shape is clamped at ``>= 0`` (an exponential tail at the thinnest),
    so light tails are never extrapolated as bounded.
    """
    d = np.sort(np.asarray(abs_dev, dtype=np.float64))
    n = d.size
    n_tail = max(MIN_EXCESSES, int(math.ceil(fraction * n)))
    n_tail = min(n_tail, n - 1)
    u = d[n - n_tail - 1]
    excess = d[n - n_tail:] - u
    xi, sigma = gpd_pwm(excess)
    if sigma <= 0:
        return 1.0 / (n + 1)
    x = max(target_dev - u, 0.0)
    if xi < 1e-9:
        xi, sigma = 0.0, float(excess.mean()) if excess.mean() > 0 else sigma
        sf = math.exp(-x / sigma)
    else:
        sf = (1.0 + xi * x / sigma) ** (-1.0 / xi)
    return float((n_tail / n) * sf)


def tail_probability(values: np.ndarray, target: float) -> tuple[float, str, int]:
    """Two-sided tail of ``target`` among normal ``values`` (see module docstring).

    Returns ``(tail, method, count)`` with ``count`` the normal rows at least
    as extreme.
    """
    med = np.median(values)
    dev = np.abs(values - med)
    t = abs(target - med)
    count = int(np.sum(dev >= t))
    n = values.size
    if count >= MIN_TAIL_COUNT:
        return (count + 1) / (n + 1), "empirical", count
    return gpd_tail(dev, t), "pareto tail", count


def robust_z(values: np.ndarray, target: np.ndarray | float) -> np.ndarray:
    """``(t - median) / (1.4826 MAD)``; falls back to the sd when the MAD is 0."""
    med = np.median(values)
    mad = MAD_TO_SD * np.median(np.abs(values - med))
    if not mad > 0:
        mad = values.std()
    if not mad > 0:
        return np.full(np.shape(target), np.nan)
    return (np.asarray(target) - med) / mad


# --------------------------------------------------------------------------
# Candidate generation and the moment pass
# --------------------------------------------------------------------------


@dataclass
class _Group:
    kind: str
    i: np.ndarray
    j: np.ndarray
    mean: np.ndarray
    var: np.ndarray
    target: np.ndarray  # (n_targets, n_in_group)
    texts: object  # list of str, or a callable k -> str (built only when needed)

    def text(self, k: int) -> str:
        return self.texts(k) if callable(self.texts) else self.texts[k]


def _fmt(x: float) -> str:
    return f"{x:.6g}"


def _std_expr(name: str, mean: float, sd: float) -> str:
    q = expressions.quote_name(name)
    sign = "-" if mean >= 0 else "+"
    return f"({q} {sign} {_fmt(abs(mean))}) / {_fmt(sd)}"


def generate_and_screen(
    names: list[str],
    sample: Mapping[str, np.ndarray],
    targets: np.ndarray,
    shaped: Mapping[str, str] | None = None,
    settings: Settings = Settings(),
    select: bool = False,
) -> tuple[list[Candidate], int, np.ndarray]:
    """Generate every candidate and compute its first-pass z from moments.

    Parameters
    ----------
    names : column names (raw features of the recipe)
    sample : name -> values over the normal sample (finite)
    targets : (n_targets, d) raw feature values of the target misses
    shaped : name -> expression text of a shaping transform of that column
    select : return only the candidates the second pass will look at (the best
        ``second_pass`` by first-pass z plus the correlated reserve); ``n_tried``
        still counts every candidate generated

    Returns
    -------
    (candidates, n_tried, correlation matrix)
    """
    A = np.column_stack([np.asarray(sample[n], dtype=np.float64) for n in names])
    T = np.atleast_2d(np.asarray(targets, dtype=np.float64))
    n, d = A.shape
    if n < 30:
        raise AfterlookError(f"the candidate search needs at least 30 normal rows, got {n}")
    mu = A.mean(axis=0)
    Ac = A - mu
    C = Ac.T @ Ac / n
    del Ac
    sd = np.sqrt(np.clip(np.diag(C), 0, None))
    ok = sd > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        R = C / np.outer(sd, sd)
    R[~np.isfinite(R)] = 0.0
    positive = np.all(A > 0, axis=0) & np.all(T > 0, axis=0) & ok
    iu, ju = np.triu_indices(d, k=1)
    keep = ok[iu] & ok[ju]
    iu, ju = iu[keep], ju[keep]
    groups: list[_Group] = []
    q = [expressions.quote_name(x) for x in names]

    def add(kind, i, j, mean, var, target, texts):
        if len(i):
            groups.append(_Group(kind, i, j, mean, var, target, texts))

    # standardized difference / sum: mean 0, var 2 - 2|r|
    r = R[iu, ju]
    sgn = np.where(r >= 0, -1.0, 1.0)
    Z_t = (T - mu) / np.where(ok, sd, 1.0)
    add("standardized_difference", iu, ju, np.zeros(len(iu)), 2.0 - 2.0 * np.abs(r),
        Z_t[:, iu] + sgn * Z_t[:, ju],
        lambda k, iu=iu, ju=ju, sgn=sgn: (
            f"{_std_expr(names[iu[k]], mu[iu[k]], sd[iu[k]])} {'-' if sgn[k] < 0 else '+'} "
            f"{_std_expr(names[ju[k]], mu[ju[k]], sd[ju[k]])}"))

    # product: E[ab], E[a^2 b^2] from two Gram matrices (columns scaled for range)
    scale = np.where(ok, np.sqrt(np.mean(A**2, axis=0)), 1.0)
    As = A / scale
    G1 = As.T @ As / n
    A2 = As**2
    G2 = A2.T @ A2 / n
    s2 = scale[iu] * scale[ju]
    add("product", iu, ju, G1[iu, ju] * s2, (G2[iu, ju] - G1[iu, ju] ** 2) * s2**2,
        T[:, iu] * T[:, ju], lambda k, iu=iu, ju=ju: f"{q[iu[k]]} * {q[ju[k]]}")

    # ratios and log ratio need both columns positive; a square ratio only
    # needs a positive divisor (the numerator is squared).
    P = np.flatnonzero(positive)
    if len(P):
        inv = 1.0 / As[:, P]
        pos_index = {c: k for k, c in enumerate(P)}
        A2s = As**2
        S1 = A2s.T @ inv / n  # E[a^2 / b] (scaled), every numerator, positive divisors
        S2 = (A2s**2).T @ (inv**2) / n  # E[a^4 / b^2]
        for a_, b_ in ((iu, ju), (ju, iu)):
            keep_sq = positive[b_]
            x_, y_ = a_[keep_sq], b_[keep_sq]
            if len(x_):
                iy = np.array([pos_index[y] for y in y_])
                g = scale[x_] ** 2 / scale[y_]
                add("square_ratio", x_, y_, S1[x_, iy] * g, (S2[x_, iy] - S1[x_, iy] ** 2) * g**2,
                    T[:, x_] ** 2 / T[:, y_], lambda k, x_=x_, y_=y_: f"{q[x_[k]]} ** 2 / {q[y_[k]]}")
    pmask = positive[iu] & positive[ju]
    pi, pj = iu[pmask], ju[pmask]
    if len(pi):
        Ap = As[:, P]
        a_idx = np.array([pos_index[x] for x in pi])
        b_idx = np.array([pos_index[x] for x in pj])
        M1 = Ap.T @ inv / n  # E[a / b] (scaled)
        M2 = (Ap**2).T @ (inv**2) / n  # E[(a / b)^2]
        sc = scale[P]
        for a_, b_, ia, ib in ((pi, pj, a_idx, b_idx), (pj, pi, b_idx, a_idx)):
            f = sc[ia] / sc[ib]
            add("ratio", a_, b_, M1[ia, ib] * f, (M2[ia, ib] - M1[ia, ib] ** 2) * f**2,
                T[:, a_] / T[:, b_], lambda k, a_=a_, b_=b_: f"{q[a_[k]]} / {q[b_[k]]}")
        L = np.log(A[:, P])
        Lmu = L.mean(axis=0)
        LC = np.cov(L, rowvar=False, bias=True) if len(P) > 1 else np.zeros((1, 1))
        LT = np.log(T[:, P])
        add("log_ratio", pi, pj, Lmu[a_idx] - Lmu[b_idx],
            LC[a_idx, a_idx] + LC[b_idx, b_idx] - 2 * LC[a_idx, b_idx],
            LT[:, a_idx] - LT[:, b_idx], lambda k, pi=pi, pj=pj: f"log({q[pi[k]]} / {q[pj[k]]})")

    # shaped columns: standardized difference of the transformed columns
    if shaped:
        env_names = [x for x in names if x in shaped]
        if env_names:
            sh_cols = {}
            sh_t = {}
            for x in env_names:
                expr = expressions.parse(shaped[x])
                v = expr.evaluate({x: sample[x]})
                tv = expr.evaluate({x: T[:, names.index(x)]})
                if np.all(np.isfinite(v)) and np.all(np.isfinite(tv)) and v.std() > 0:
                    sh_cols[x], sh_t[x] = v, tv
            texts, ii, jj, means, vars_, tg = [], [], [], [], [], []
            cols = {x: (sh_cols[x] if x in sh_cols else A[:, names.index(x)]) for x in names}
            tcols = {x: (sh_t[x] if x in sh_t else T[:, names.index(x)]) for x in names}
            for a, b in zip(iu, ju):
                na, nb = names[a], names[b]
                if na not in sh_cols and nb not in sh_cols:
                    continue
                va, vb = cols[na], cols[nb]
                ma, sa, mb, sb = va.mean(), va.std(), vb.mean(), vb.std()
                rr = float(np.mean((va - ma) * (vb - mb)) / (sa * sb))
                s = -1.0 if rr >= 0 else 1.0
                ea = shaped[na] if na in sh_cols else q[a]
                eb = shaped[nb] if nb in sh_cols else q[b]
                texts.append(f"(({ea}) - {_fmt(ma)}) / {_fmt(sa)} {'-' if s < 0 else '+'} (({eb}) - {_fmt(mb)}) / {_fmt(sb)}")
                ii.append(a); jj.append(b); means.append(0.0); vars_.append(2.0 - 2.0 * abs(rr))
                tg.append((tcols[na] - ma) / sa + s * (tcols[nb] - mb) / sb)
            if ii:
                add("shaped_difference", np.array(ii), np.array(jj), np.array(means), np.array(vars_),
                    np.column_stack(tg), texts)

    # Collect every candidate's first-pass z as arrays; build Candidate
    # objects (and their text) only for the ones kept.
    zs, gid, kid = [], [], []
    for g_index, g in enumerate(groups):
        with np.errstate(invalid="ignore", divide="ignore"):
            z = (g.target - g.mean) / np.sqrt(np.clip(g.var, 0, None))
        zmed = np.median(np.abs(z), axis=0)
        zmed[~np.isfinite(zmed)] = np.nan
        zs.append(zmed)
        gid.append(np.full(len(g.i), g_index))
        kid.append(np.arange(len(g.i)))
    if not zs:
        return [], 0, R
    z_all, g_all, k_all = np.concatenate(zs), np.concatenate(gid), np.concatenate(kid)
    r_all = np.array([R[groups[g].i[k], groups[g].j[k]] for g, k in zip(g_all, k_all)]) if len(z_all) else np.zeros(0)
    n_tried = int(len(z_all))
    if select:
        keep = _select(z_all, r_all, settings)
    else:
        keep = np.arange(n_tried)
    candidates = []
    for idx in keep:
        g = groups[g_all[idx]]
        k = int(k_all[idx])
        candidates.append(Candidate(g.text(k), g.kind, (names[g.i[k]], names[g.j[k]]),
                                    float(r_all[idx]), first_pass_z=float(z_all[idx])))
    return candidates, n_tried, R


def _select(z: np.ndarray, r: np.ndarray, settings: Settings) -> np.ndarray:
    """Indices of the best ``second_pass`` by first-pass z, plus a reserve of
    the best pairs correlated at ``|r| >= min_correlation``."""
    finite = np.flatnonzero(np.isfinite(z))
    order = finite[np.argsort(-z[finite], kind="stable")]
    top = order[: settings.second_pass]
    rest = order[settings.second_pass:]
    reserve = rest[np.abs(r[rest]) >= settings.min_correlation][: settings.correlated_reserve]
    return np.concatenate([top, reserve])


def second_pass(
    candidates: list[Candidate],
    n_tried: int,
    sample: Mapping[str, np.ndarray],
    targets: Mapping[str, np.ndarray],
    target_ids: list[str],
    other_anomalies: Mapping[str, np.ndarray] | None,
    other_is_miss: np.ndarray | None,
    settings: Settings = Settings(),
) -> list[Candidate]:
    """Exact robust statistics for the best candidates of the moment pass.

    ``targets`` and ``other_anomalies`` map column name -> raw values of the
    target misses and of the other labelled anomalies.
    """
    scored = [c for c in candidates if np.isfinite(c.first_pass_z)]
    scored.sort(key=lambda c: -c.first_pass_z)
    chosen = scored[: settings.second_pass]
    seen = {c.expression for c in chosen}
    reserve = [c for c in scored if abs(c.r) >= settings.min_correlation and c.expression not in seen]
    chosen += reserve[: settings.correlated_reserve]
    out = []
    for c in chosen:
        expr = c.parsed = expressions.parse(c.expression)
        v = expr.evaluate(sample)
        v = v[np.isfinite(v)]
        if v.size < 30 or v.std() == 0:
            continue
        tv = expr.evaluate(targets)
        if not np.all(np.isfinite(tv)):
            continue
        zs = robust_z(v, tv)
        tails = [tail_probability(v, float(t)) for t in tv]
        # Bonferroni over every candidate tried and every target searched.
        family = n_tried * len(tv)
        adjusted = np.array([min(1.0, t[0] * family) for t in tails])
        best = int(np.argmin(adjusted))
        c.case_z_by_case = {cid: float(z) for cid, z in zip(target_ids, zs)}
        c.case_z = float(np.median(zs)) if len(zs) > 1 else float(zs[0])
        c.tail, c.tail_method = float(tails[best][0]), tails[best][1]
        c.adjusted_tail = float(adjusted[best])
        c.targets_exposed = int(np.sum(adjusted < settings.chance_level))
        c.beyond_chance = bool(c.targets_exposed > 0)
        if other_anomalies is not None and other_is_miss is not None and len(other_is_miss):
            ov = expr.evaluate(other_anomalies)
            med = np.median(v)
            cut = np.quantile(np.abs(v - med), 1.0 - settings.alarm_rate)
            sep = np.isfinite(ov) & (np.abs(ov - med) > cut)
            c.other_anomalies = int(len(ov))
            c.other_anomalies_separated = int(sep.sum())
            c.other_misses = int(other_is_miss.sum())
            c.other_misses_separated = int((sep & other_is_miss).sum())
        out.append(c)
    out.sort(key=lambda c: c.rank_key(settings.min_correlation))
    return out
