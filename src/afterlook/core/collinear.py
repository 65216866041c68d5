"""Can a candidate feature be added to a full-covariance model at all?

A full Gaussian over features ``X`` cannot take a new feature that is an
affine combination of them (``a + b'X``): the covariance of ``[X, c]`` is
singular. Standardized and shaped differences of two model features are
exactly that, so for a full-covariance model they must not be listed. The
test is the share of the candidate's variance that the model's features do
*not* explain (ordinary least squares of the centred candidate on the centred
features, ``numpy.linalg.lstsq``); below :data:`UNEXPLAINED_FLOOR` the
candidate adds nothing the covariance could hold.
"""

from __future__ import annotations

import numpy as np

UNEXPLAINED_FLOOR = 1e-9


def unexplained_share(candidate: np.ndarray, features: np.ndarray) -> float:
    """``1 - R^2`` of the least-squares fit of ``candidate`` on ``[1, features]`` over rows finite in both.

    Returns 1.0 when there is nothing to fit on and 0.0 for a constant candidate.
    """
    c = np.asarray(candidate, dtype=np.float64)
    X = np.asarray(features, dtype=np.float64)
    if X.ndim == 1:
        X = X[:, None]
    ok = np.isfinite(c) & np.all(np.isfinite(X), axis=1)
    c, X = c[ok], X[ok]
    if c.size < 3 or X.shape[1] == 0:
        return 1.0
    c = c - c.mean()
    total = float(c @ c)
    if total == 0.0:
        return 0.0
    Xc = X - X.mean(axis=0)
    coef, *_ = np.linalg.lstsq(Xc, c, rcond=None)
    resid = c - Xc @ coef
    return max(0.0, float(resid @ resid) / total)


def is_linear_combination(candidate: np.ndarray, features: np.ndarray, floor: float = UNEXPLAINED_FLOOR) -> bool:
    return unexplained_share(candidate, features) < floor


class LinearSpan:
    """The span of ``[1, features]`` over a fixed set of rows, factored once (QR) for many candidates.

    ``unexplained_share(v)`` equals :func:`unexplained_share` of ``v`` on the
    same features; rows where ``v`` is not finite fall back to that function.
    """

    def __init__(self, features: np.ndarray):
        X = np.asarray(features, dtype=np.float64)
        if X.ndim == 1:
            X = X[:, None]
        self.features = X
        self.rows_ok = np.all(np.isfinite(X), axis=1)
        Xc = X[self.rows_ok] - X[self.rows_ok].mean(axis=0)
        q, r = np.linalg.qr(Xc)
        keep = np.abs(np.diag(r)) > 1e-12 * max(1.0, float(np.abs(np.diag(r)).max(initial=0.0)))
        self.q = q[:, keep]

    def unexplained_share(self, candidate: np.ndarray) -> float:
        c = np.asarray(candidate, dtype=np.float64)
        if not np.all(np.isfinite(c[self.rows_ok])):
            return unexplained_share(c, self.features)
        c = c[self.rows_ok]
        c = c - c.mean()
        total = float(c @ c)
        if total == 0.0:
            return 0.0
        resid = c - self.q @ (self.q.T @ c)
        return max(0.0, float(resid @ resid) / total)

    def contains(self, candidate: np.ndarray, floor: float = UNEXPLAINED_FLOOR) -> bool:
        return self.unexplained_share(candidate) < floor
