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


def ratio_groups(m: Moments, groups: list, tick=None) -> None:
    """Ratios and log ratios (both columns positive) and square ratios (a positive divisor).

    ``tick``: optional callable, called between the matrix products (the place a
    stale search can be stopped; each is a few d x d products over the sample).
    """
    tick = tick or (lambda: None)
    q, iu, ju, T, positive, scale, As = m.quoted, m.iu, m.ju, m.T, m.positive, m.scale, m.As
    n = m.A.shape[0]
    P = np.flatnonzero(positive)
    if not len(P):
        return
    # At most three n x d matrices besides the sample at any time (a wide table's peak memory):
    # squares are taken in place, and each matrix is dropped as soon as its products are done.
    every = len(P) == As.shape[1]
    inv = 1.0 / (As if every else As[:, P])
    pos_index = {c: k for k, c in enumerate(P)}
    A2s = As**2
    S1 = A2s.T @ inv / n  # E[a^2 / b] (scaled), every numerator, positive divisors
    tick()
    np.multiply(A2s, A2s, out=A2s)  # a^4 (scaled)
    inv2 = inv * inv
    S2 = A2s.T @ inv2 / n  # E[a^4 / b^2]
    del A2s
    tick()
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
    Ap = As if every else As[:, P]
    a_idx = np.array([pos_index[x] for x in pi])
    b_idx = np.array([pos_index[x] for x in pj])
    M1 = Ap.T @ inv / n  # E[a / b] (scaled)
    del inv
    tick()
    Ap2 = Ap * Ap
    M2 = Ap2.T @ inv2 / n  # E[(a / b)^2]
    del Ap2, inv2
    tick()
    sc = scale[P]
    for a_, b_, ia, ib in ((pi, pj, a_idx, b_idx), (pj, pi, b_idx, a_idx)):
        f = sc[ia] / sc[ib]
        _add(groups, "ratio", a_, b_, M1[ia, ib] * f, (M2[ia, ib] - M1[ia, ib] ** 2) * f**2,
             T[:, a_] / T[:, b_], lambda k, a_=a_, b_=b_: f"{q[a_[k]]} / {q[b_[k]]}")
    L = np.log(m.A if every else m.A[:, P])
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
    is_shaped = np.array([x in sh_cols for x in names])
    pick = is_shaped[m.iu] | is_shaped[m.ju]
    if not pick.any():
        return
    ii, jj = m.iu[pick], m.ju[pick]
    # means and sds column by column, as the texts print them; correlations from one product
    W = np.empty(A.shape, order="F")
    Wt = np.array(T, dtype=np.float64, copy=True)
    for k, x in enumerate(names):
        if x in sh_cols:
            W[:, k], Wt[:, k] = sh_cols[x], sh_t[x]
        else:
            W[:, k] = A[:, k]
    mw = np.array([W[:, k].mean() for k in range(W.shape[1])])
    sw = np.array([W[:, k].std() for k in range(W.shape[1])])
    Wc = W - mw
    with np.errstate(invalid="ignore", divide="ignore"):
        Rw = (Wc.T @ Wc / W.shape[0]) / np.outer(sw, sw)
    del W, Wc
    rr = Rw[ii, jj]
    s = np.where(rr >= 0, -1.0, 1.0)
    Zt = (Wt - mw) / sw

    def text(k: int) -> str:  # z-scores frozen on this normal sample when the candidate is evaluated
        na, nb = names[ii[k]], names[jj[k]]
        ea = standardized_text(na, shaped[na] if na in sh_cols else None)
        eb = standardized_text(nb, shaped[nb] if nb in sh_cols else None)
        return f"{ea} {'-' if s[k] < 0 else '+'} {eb}"

    _add(groups, "shaped_difference", ii, jj, np.zeros(len(ii)), 2.0 - 2.0 * np.abs(rr),
         Zt[:, ii] + s * Zt[:, jj], text)
