"""Gaussian density models scored in log space.

Two kinds:

* **independent**: ``log p(x) = sum_j log N(x_j; mu_j, sigma_j^2)``;
* **full**: ``log p(x) = -1/2 (d log 2 pi + log|S| + (x - mu)^T S^-1 (x - mu))``
  evaluated through the Cholesky factor ``S = L L^T`` so that nothing is
  inverted explicitly and the log-determinant is ``2 sum log diag L``.

Estimates are maximum likelihood (divide by ``n``), the convention of
scikit-learn's ``EmpiricalCovariance``. The full model may be shrunk
(Ledoit and Wolf, "A well-conditioned estimator for large-dimensional
covariance matrices", J. Multivariate Analysis 88(2), 2004, 365-411, as
implemented by ``sklearn.covariance.ledoit_wolf``) and either kind may be
fitted robustly with the minimum covariance determinant (Rousseeuw, "Least
median of squares regression", JASA 79, 1984, 871-880; the FAST-MCD
algorithm of Rousseeuw and Van Driessen, Technometrics 41, 1999, 212-223, as
implemented by ``sklearn.covariance.MinCovDet``), which resists the
*masking* of anomalies hidden among the training rows.

Each algorithm is a pure function; :class:`GaussianModel` only stores the
fitted values (names ending in ``_``).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .density_rows import (  # noqa: F401  (full_log_density, triangular_inverse: public here too)
    RowMoments, as_columns, _independent_log_density_columns, full_log_density, triangular_inverse)
from .errors import AfterlookError
from .numbers import refuse_overflow

LOG_2PI = float(np.log(2.0 * np.pi))
KINDS = ("independent", "full")

# A column whose variance, after regressing it on the columns before it, is
# below this share of its own variance is called collinear (1 - R^2 < tol).
COLLINEAR_TOL = 1e-10


# --------------------------------------------------------------------------
# Sufficient statistics (count, mean, centred scatter), mergeable in any order
# --------------------------------------------------------------------------


@dataclass
class SufficientStats:
    """Count, mean and centred scatter matrix ``sum (x - mean)(x - mean)^T``.

    Chunks are merged with the pairwise update of Chan, Golub and LeVeque
    ("Updating formulae and a pairwise algorithm for computing sample
    variances", Stanford CS tech. report STAN-CS-79-773, 1979), which avoids
    the cancellation of the textbook ``sum x x^T - n mean mean^T``.
    """

    n: int
    mean: np.ndarray
    scatter: np.ndarray

    @classmethod
    def empty(cls, d: int) -> "SufficientStats":
        """Statistics of no rows (the identity of :meth:`merge`)."""
        return cls(0, np.zeros(d), np.zeros((d, d)))

    @classmethod
    def of(cls, X: np.ndarray) -> "SufficientStats":
        """Statistics of the rows of ``X`` (n, d)."""
        X = np.asarray(X, dtype=np.float64)
        n = X.shape[0]
        if n == 0:
            return cls.empty(X.shape[1])
        mean = X.mean(axis=0)
        Xc = X - mean
        return cls(n, mean, Xc.T @ Xc)

    def merge(self, other: "SufficientStats") -> "SufficientStats":
        """Statistics of both row sets (Chan, Golub and LeVeque's pairwise update)."""
        if other.n == 0:
            return self
        if self.n == 0:
            return other
        n = self.n + other.n
        delta = other.mean - self.mean
        mean = self.mean + delta * (other.n / n)
        scatter = self.scatter + other.scatter + np.outer(delta, delta) * (self.n * other.n / n)
        return SufficientStats(n, mean, scatter)

    def covariance(self) -> np.ndarray:
        """Maximum-likelihood covariance (divides by n)."""
        return self.scatter / self.n


# --------------------------------------------------------------------------
# Pure functions
# --------------------------------------------------------------------------


def collinear_columns(cov: np.ndarray, names: list[str], tol: float = COLLINEAR_TOL) -> list[tuple[str, list[str]]]:
    """Columns that are (nearly) linear combinations of earlier ones.

    Works on the correlation matrix: for each column in turn, its unexplained
    share ``1 - R^2`` given the kept columns is ``1 / (C_kept^-1)_jj`` of the
    augmented block; below ``tol`` the column is reported together with the
    kept columns that carry weight in the combination.
    """
    sd = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    problems: list[tuple[str, list[str]]] = []
    kept: list[int] = []
    for j in range(cov.shape[0]):
        if sd[j] == 0 or not np.isfinite(sd[j]):
            problems.append((names[j], []))
            continue
        if kept:
            idx = np.array(kept)
            C = cov[np.ix_(idx, idx)] / np.outer(sd[idx], sd[idx])
            c = cov[idx, j] / (sd[idx] * sd[j])
            beta, *_ = np.linalg.lstsq(C, c, rcond=None)
            unexplained = 1.0 - float(c @ beta)
            if unexplained < tol:
                weight = np.abs(beta)
                partners = [names[idx[k]] for k in np.argsort(-weight) if weight[k] > 1e-6 * weight.max()]
                problems.append((names[j], partners))
                continue
        kept.append(j)
    return problems


def fit_moments(X: np.ndarray, robust: bool = False, random_state: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """Location and covariance, classical or robust (minimum covariance determinant).

    Returns ``(mean, covariance, support)``; ``support`` is the boolean mask of
    rows the robust fit kept (None for the classical fit).
    """
    X = np.asarray(X, dtype=np.float64)
    if not robust:
        stats = SufficientStats.of(X)
        return stats.mean, stats.covariance(), None
    from sklearn.covariance import MinCovDet  # local import: scikit-learn is slow to load

    try:
        mcd = MinCovDet(random_state=random_state).fit(X)
    except ValueError as exc:
        raise AfterlookError(f"robust fit failed: {exc}") from None
    return mcd.location_, mcd.covariance_, mcd.support_


def ledoit_wolf_shrink(X: np.ndarray) -> tuple[np.ndarray, float]:
    """Ledoit-Wolf shrunk covariance and shrinkage intensity (scikit-learn)."""
    from sklearn.covariance import ledoit_wolf

    cov, shrinkage = ledoit_wolf(np.asarray(X, dtype=np.float64), assume_centered=False)
    return cov, float(shrinkage)


def shrink_towards_diagonal(cov: np.ndarray, shrinkage: float) -> np.ndarray:
    """``(1 - a) S + a mu I`` with ``mu = trace(S) / d`` (the Ledoit-Wolf target)."""
    d = cov.shape[0]
    mu = np.trace(cov) / d
    return (1.0 - shrinkage) * cov + shrinkage * mu * np.eye(d)


# --------------------------------------------------------------------------
# Thin model class
# --------------------------------------------------------------------------


@dataclass
class GaussianModel:
    """A fitted Gaussian density over named features.

    Options are stored by ``__init__``; :meth:`fit` sets the fitted values
    (``mean_``, ``covariance_``, ``chol_``, ``shrinkage_``).

    Parameters
    ----------
    kind : {"independent", "full"}
    shrinkage : None, "ledoit-wolf", or float in [0, 1]
        Full model only. None fits the plain covariance and refuses a
        singular one with an error naming the collinear columns.
    robust : bool
        Fit location and scatter with the minimum covariance determinant.
    """

    kind: str = "full"
    shrinkage: object = None
    robust: bool = False
    random_state: int = 0
    names: list[str] = field(default_factory=list)
    mean_: np.ndarray | None = None
    covariance_: np.ndarray | None = None
    chol_: np.ndarray | None = None
    shrinkage_: float = 0.0
    support_fraction_: float | None = None

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise AfterlookError(f"unknown model kind '{self.kind}' (choose: {', '.join(KINDS)})")
        if self.shrinkage not in (None, "ledoit-wolf"):
            try:
                value = float(self.shrinkage)
            except (TypeError, ValueError):
                raise AfterlookError(f"shrinkage must be 'ledoit-wolf' or a number in [0, 1], got {self.shrinkage!r}") from None
            if not 0.0 <= value <= 1.0:
                raise AfterlookError(f"shrinkage must lie in [0, 1], got {value}")
            self.shrinkage = value

    # -- fitting ---------------------------------------------------------
    def fit(self, X: np.ndarray, names: list[str] | None = None, *,
            moments: RowMoments | None = None) -> "GaussianModel":
        """Fit on the rows of ``X`` (all finite; the caller drops the rest).

        ``X``: an (n, d) array, or a list of d columns (1-D arrays of length n, e.g.
        views of a DataFrame's columns: the classical fit reads them through
        ``moments`` and makes no (n, d) copy; the robust and Ledoit-Wolf fits
        stack them). ``moments`` may pass :meth:`RowMoments.of` of the same rows
        when the caller needs them too (the training summary), so the rows are read once.
        """
        if isinstance(X, (list, tuple)) and (self.robust or self.shrinkage == "ledoit-wolf" or not X):
            X = np.asfortranarray(np.column_stack(X)) if X else np.empty((0, 0))  # these fits read the rows
        if isinstance(X, (list, tuple)):
            n, d = len(X[0]), len(X)
        else:
            X = np.asarray(X, dtype=np.float64)
            if X.ndim != 2 or X.shape[1] == 0:
                raise AfterlookError("nothing to fit: no feature columns")
            n, d = X.shape
        self.names = list(names) if names is not None else [f"x{j}" for j in range(d)]
        if n < 2:
            raise AfterlookError(f"nothing to fit on: {n} normal row(s) with finite values; need at least 2")
        if moments is None:
            moments = RowMoments.of(X)
        if not moments.all_finite:
            raise AfterlookError("training rows contain NaN or infinite values")
        refuse_overflow(np.maximum(np.abs(moments.minimum), np.abs(moments.maximum)), self.names)
        if self.kind == "independent" and not self.robust:
            mean, var, support = moments.mean, np.diag(moments.scatter) / n, None
            cov = None
        elif not self.robust:
            mean, cov, support = moments.mean, moments.scatter / n, None
            var = np.diag(cov).copy()
        else:
            mean, cov, support = fit_moments(X, robust=self.robust, random_state=self.random_state)
            var = np.diag(cov).copy()
        self.support_fraction_ = None if support is None else float(np.mean(support))
        self.mean_ = mean
        if self.kind == "independent":
            return self._set_variances(var)
        if self.shrinkage == "ledoit-wolf":
            if self.robust:
                # Ledoit-Wolf's intensity needs the rows; use the robust support.
                _, a = ledoit_wolf_shrink(X[support])
                cov = shrink_towards_diagonal(cov, a)
            else:
                cov, a = ledoit_wolf_shrink(X)
            self.shrinkage_ = a
        elif isinstance(self.shrinkage, float) and self.shrinkage > 0:
            cov = shrink_towards_diagonal(cov, self.shrinkage)
            self.shrinkage_ = self.shrinkage
        self.covariance_ = cov
        self.chol_ = self.cholesky_factor(cov)
        return self

    def _set_variances(self, var: np.ndarray) -> "GaussianModel":
        zero = [self.names[j] for j in np.flatnonzero(~(var > 0))]
        if zero:
            raise AfterlookError(f"zero variance in the normal rows for column(s): {', '.join(zero)}")
        self.covariance_ = np.diag(var)
        self.chol_ = np.diag(np.sqrt(var))
        return self

    def fit_stats(self, stats: SufficientStats, names: list[str]) -> "GaussianModel":
        """Fit from sufficient statistics (count, mean, scatter) gathered in chunks.

        Gives the same parameters as :meth:`fit` on the same rows. The robust
        fit and Ledoit-Wolf shrinkage need the rows themselves and are refused.
        """
        if self.robust:
            raise AfterlookError("the robust fit needs every row in memory; fit without --engine, or drop --robust")
        if self.shrinkage == "ledoit-wolf":
            raise AfterlookError("Ledoit-Wolf shrinkage needs every row in memory; use a fixed --shrinkage A or no --engine")
        self.names = list(names)
        if stats.n < 2:
            raise AfterlookError(f"nothing to fit on: {stats.n} normal row(s) with finite values; need at least 2")
        self.mean_ = stats.mean.copy()
        with np.errstate(over="ignore", invalid="ignore"):
            cov = stats.covariance()
        refuse_overflow(np.where(np.isfinite(np.diag(cov)) & np.isfinite(self.mean_), np.abs(self.mean_), np.inf),
                         self.names)
        if self.kind == "independent":
            return self._set_variances(np.diag(cov).copy())
        if isinstance(self.shrinkage, float) and self.shrinkage > 0:
            cov = shrink_towards_diagonal(cov, self.shrinkage)
            self.shrinkage_ = self.shrinkage
        self.covariance_ = cov
        self.chol_ = self.cholesky_factor(cov)
        return self

    def cholesky_factor(self, cov: np.ndarray) -> np.ndarray:
        """Lower Cholesky factor of ``cov``; a singular covariance is refused with its collinear columns named."""
        # Fast path: factor first. diag(L)^2 / diag(S) is exactly each column's
        # unexplained share 1 - R^2 given the columns before it, so the same
        # collinearity test costs nothing; the slow naming pass runs only on failure.
        try:
            chol = np.linalg.cholesky(cov)
            with np.errstate(divide="ignore", invalid="ignore"):
                share = np.diag(chol) ** 2 / np.diag(cov)
            if np.all(share >= COLLINEAR_TOL):
                return chol
        except (np.linalg.LinAlgError, ValueError):
            pass
        problems = collinear_columns(cov, self.names)
        if problems:
            parts = []
            for col, partners in problems[:3]:
                if partners:
                    parts.append(f"'{col}' is a linear combination of {', '.join(repr(p) for p in partners[:4])}")
                else:
                    parts.append(f"'{col}' is constant")
            raise AfterlookError(
                "covariance is singular: " + "; ".join(parts)
                + " (drop the column(s) or fit with shrinkage, e.g. --shrinkage ledoit-wolf)"
            )
        raise AfterlookError(
            "covariance is not positive definite (near-collinear columns); fit with shrinkage, e.g. --shrinkage ledoit-wolf"
        )

    # -- scoring ---------------------------------------------------------
    @property
    def var_(self) -> np.ndarray:
        return np.diag(self.covariance_)

    def log_density(self, X) -> np.ndarray:
        """Log-density of each row: NaN where a value is missing (NaN/inf), -inf where a finite
        reading is so extreme (-4.5e205) that its squared distance overflows: flagged, not missing.

        ``X``: an (n, d) array in any memory order, or a sequence of d columns
        (1-D arrays, e.g. views of a DataFrame's columns: no (n, d) copy is made).
        """
        self._check_fitted()
        if isinstance(X, np.ndarray) or not isinstance(X, (list, tuple)):
            X = np.asarray(X, dtype=np.float64)
            if X.ndim != 2 or X.shape[1] != len(self.mean_):
                raise AfterlookError(f"expected {len(self.mean_)} feature columns, got {X.shape[-1] if X.ndim else 0}")
        elif len(X) != len(self.mean_):
            raise AfterlookError(f"expected {len(self.mean_)} feature columns, got {len(X)}")
        columns = as_columns(X)
        with np.errstate(over="ignore", invalid="ignore"):
            if self.kind == "independent":
                out = _independent_log_density_columns(columns, self.mean_, self.var_)
            else:
                out = full_log_density(X if isinstance(X, np.ndarray) else columns, self.mean_, self.chol_)
        # A non-finite input always gives a non-finite result (NaN and inf
        # propagate through the sums, and L^-1 has a non-zero diagonal), so
        # only those rows need their inputs looked at: NaN when one is missing,
        # -inf when all are finite and the distance overflowed.
        bad = np.flatnonzero(~np.isfinite(out))
        if bad.size:
            finite_inputs = np.ones(bad.size, dtype=bool)
            for col in columns:
                finite_inputs &= np.isfinite(col[bad])
            out[bad] = np.where(finite_inputs, -np.inf, np.nan)
        return out

    def precision(self) -> np.ndarray:
        """Inverse covariance, from the Cholesky factor."""
        self._check_fitted()
        d = len(self.mean_)
        Linv = triangular_inverse(self.chol_)
        return Linv.T @ Linv

    def _check_fitted(self) -> None:
        if self.mean_ is None:
            raise AfterlookError("model is not fitted")

    # -- serialisation ---------------------------------------------------
    def to_dict(self) -> dict:
        self._check_fitted()
        out = {
            "kind": self.kind,
            "robust": bool(self.robust),
            "shrinkage": self.shrinkage,
            "shrinkage_used": float(self.shrinkage_),
            "features": list(self.names),
            "mean": self.mean_.tolist(),
        }
        if self.kind == "independent":
            out["variance"] = self.var_.tolist()
        else:
            out["covariance"] = self.covariance_.tolist()
        if self.support_fraction_ is not None:
            out["robust_support_fraction"] = self.support_fraction_
        return out

    @classmethod
    def from_dict(cls, data: dict) -> "GaussianModel":
        try:
            model = cls(
                kind=data["kind"],
                shrinkage=data.get("shrinkage"),
                robust=bool(data.get("robust", False)),
                names=list(data["features"]),
            )
            model.mean_ = np.asarray(data["mean"], dtype=np.float64)
            d = len(model.mean_)
            if model.kind == "independent":
                var = np.asarray(data["variance"], dtype=np.float64)
                if var.shape != (d,) or not np.all(var > 0):
                    raise ValueError("variance")
                model.covariance_ = np.diag(var)
                model.chol_ = np.diag(np.sqrt(var))
            else:
                cov = np.asarray(data["covariance"], dtype=np.float64)
                if cov.shape != (d, d):
                    raise ValueError("covariance shape")
                model.covariance_ = cov
                model.chol_ = model.cholesky_factor(cov)
            if len(model.names) != d:
                raise ValueError("feature count")
            model.shrinkage_ = float(data.get("shrinkage_used", 0.0))
            model.support_fraction_ = data.get("robust_support_fraction")
        except AfterlookError:
            raise
        except (KeyError, TypeError, ValueError) as exc:
            raise AfterlookError(f"model parameters are incomplete or malformed ({exc})") from None
        return model
