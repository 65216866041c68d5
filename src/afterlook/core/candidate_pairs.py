"""Every pair candidate of the search, as groups whose mean and variance come from a few matrix products.

For the normal sample ``A`` (n x d) and the target misses ``T``, each kind
(standardized difference, product, ratio, log ratio, square ratio, shaped
difference) is a group: for all its pairs at once, the candidate's mean and
variance over the normal rows and its values on the targets. The first
pass of :mod:`afterlook.core.candidates` turns them into z-scores; nothing
here builds an expression until a candidate is kept (texts are lazy).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

import numpy as np

from . import expressions
from .errors import AfterlookError
from .shaped_text import standardized_text

__all__ = ["Group", "Moments", "moments", "difference_and_product_groups", "ratio_groups", "shaped_groups"]


@dataclass
class Group:
    """One kind of candidate over many pairs: means and variances over the normal rows, values on the targets."""
    kind: str
    i: np.ndarray
    j: np.ndarray
    mean: np.ndarray
    var: np.ndarray
    target: np.ndarray  # (n_targets, n_in_group)
    texts: object  # list of str, or a callable k -> str (built only when needed)

    def text(self, k: int) -> str:
        return self.texts(k) if callable(self.texts) else self.texts[k]


@dataclass
class Moments:
    """What every group of candidates is built from: the normal sample, the targets, their moments."""

    names: list[str]
    quoted: list[str]  # names as written in an expression
    A: np.ndarray  # (n, d) normal sample
    T: np.ndarray  # (n_targets, d) targets
    mu: np.ndarray
    sd: np.ndarray
    ok: np.ndarray  # columns that vary
    R: np.ndarray  # correlation matrix
    iu: np.ndarray  # pairs (i < j) of varying columns
    ju: np.ndarray
    scale: np.ndarray  # root mean square per column, to keep products in range
    As: np.ndarray  # A / scale
    positive: np.ndarray  # columns positive on every normal row and target


def moments(names, sample, targets) -> Moments:
    """Means, standard deviations, correlations and scaled columns of the normal sample, and the pairs to try."""
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
    scale = np.where(ok, np.sqrt(np.mean(A**2, axis=0)), 1.0)
    return Moments(list(names), [expressions.quote_name(x) for x in names], A, T, mu, sd, ok, R,
                    iu[keep], ju[keep], scale, A / scale, positive)


def _add(groups: list, kind, i, j, mean, var, target, texts) -> None:
    if len(i):
        groups.append(Group(kind, i, j, mean, var, target, texts))


def difference_and_product_groups(m: Moments, groups: list) -> None:
    """Standardized differences (mean 0, var 2 - 2|r|) and products (two Gram matrices)."""
    names, q, iu, ju, mu, sd, T = m.names, m.quoted, m.iu, m.ju, m.mu, m.sd, m.T
    r = m.R[iu, ju]
    sgn = np.where(r >= 0, -1.0, 1.0)
    Z_t = (T - mu) / np.where(m.ok, sd, 1.0)
    _add(groups, "standardized_difference", iu, ju, np.zeros(len(iu)), 2.0 - 2.0 * np.abs(r),
         Z_t[:, iu] + sgn * Z_t[:, ju],
         lambda k, iu=iu, ju=ju, sgn=sgn: (
             f"{standardized_text(names[iu[k]])} {'-' if sgn[k] < 0 else '+'} {standardized_text(names[ju[k]])}"))
    n = m.A.shape[0]
    G1 = m.As.T @ m.As / n  # E[ab] (scaled)
    A2 = m.As**2
    G2 = A2.T @ A2 / n  # E[a^2 b^2]
    s2 = m.scale[iu] * m.scale[ju]
    _add(groups, "product", iu, ju, G1[iu, ju] * s2, (G2[iu, ju] - G1[iu, ju] ** 2) * s2**2,
         T[:, iu] * T[:, ju], lambda k, iu=iu, ju=ju: f"{q[iu[k]]} * {q[ju[k]]}")


def ratio_groups(m: Moments, groups: list) -> None:
    """Ratios and log ratios (both columns positive) and square ratios (a positive divisor)."""
    q, iu, ju, T, positive, scale, As = m.quoted, m.iu, m.ju, m.T, m.positive, m.scale, m.As
    n = m.A.shape[0]
    P = np.flatnonzero(positive)
    if not len(P):
        return
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
            _add(groups, "square_ratio", x_, y_, S1[x_, iy] * g, (S2[x_, iy] - S1[x_, iy] ** 2) * g**2,
                 T[:, x_] ** 2 / T[:, y_], lambda k, x_=x_, y_=y_: f"{q[x_[k]]} ** 2 / {q[y_[k]]}")
    pmask = positive[iu] & positive[ju]
    pi, pj = iu[pmask], ju[pmask]
    if not len(pi):
        return
    Ap = As[:, P]
    a_idx = np.array([pos_index[x] for x in pi])
    b_idx = np.array([pos_index[x] for x in pj])
    M1 = Ap.T @ inv / n  # E[a / b] (scaled)
    M2 = (Ap**2).T @ (inv**2) / n  # E[(a / b)^2]
    sc = scale[P]
    for a_, b_, ia, ib in ((pi, pj, a_idx, b_idx), (pj, pi, b_idx, a_idx)):
        f = sc[ia] / sc[ib]
        _add(groups, "ratio", a_, b_, M1[ia, ib] * f, (M2[ia, ib] - M1[ia, ib] ** 2) * f**2,
             T[:, a_] / T[:, b_], lambda k, a_=a_, b_=b_: f"{q[a_[k]]} / {q[b_[k]]}")
    L = np.log(m.A[:, P])
    Lmu = L.mean(axis=0)
    LC = np.cov(L, rowvar=False, bias=True) if len(P) > 1 else np.zeros((1, 1))
    LT = np.log(T[:, P])
    _add(groups, "log_ratio", pi, pj, Lmu[a_idx] - Lmu[b_idx],
         LC[a_idx, a_idx] + LC[b_idx, b_idx] - 2 * LC[a_idx, b_idx],
         LT[:, a_idx] - LT[:, b_idx], lambda k, pi=pi, pj=pj: f"log({q[pi[k]]} / {q[pj[k]]})")


def shaped_groups(m: Moments, sample, shaped: Mapping[str, str], groups: list) -> None:
    """Standardized differences of shaped columns (at least one of the pair shaped)."""
    names, q, A, T = m.names, m.quoted, m.A, m.T
    env_names = [x for x in names if x in shaped]
    if not env_names:
        return
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
    for a, b in zip(m.iu, m.ju):
        na, nb = names[a], names[b]
        if na not in sh_cols and nb not in sh_cols:
            continue
        va, vb = cols[na], cols[nb]
        ma, sa, mb, sb = va.mean(), va.std(), vb.mean(), vb.std()
        rr = float(np.mean((va - ma) * (vb - mb)) / (sa * sb))
        s = -1.0 if rr >= 0 else 1.0
        ea = standardized_text(na, shaped[na] if na in sh_cols else None)
        eb = standardized_text(nb, shaped[nb] if nb in sh_cols else None)
        texts.append(f"{ea} {'-' if s < 0 else '+'} {eb}")  # z-scores frozen on this normal sample
        ii.append(a)
        jj.append(b)
        means.append(0.0)
        vars_.append(2.0 - 2.0 * abs(rr))
        tg.append((tcols[na] - ma) / sa + s * (tcols[nb] - mb) / sb)
    if ii:
        _add(groups, "shaped_difference", np.array(ii), np.array(jj), np.array(means), np.array(vars_),
             np.column_stack(tg), texts)
