"""What the transform search returns: one transform tried, and the outcome for one column."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .numbers import finite_or_none
from .recipe import Transform


@dataclass(frozen=True)
class TransformTried:
    """One transform tried: its text, complexity rank and statistic on the sample."""

    description: str
    transform: Transform | None
    complexity: int  # 0 none, 1 log / listed power, 2 shifted log, 3 fitted Box-Cox / Yeo-Johnson
    statistic: float


@dataclass
class ShapeResult:
    """The outcome of the transform search for one column.

    Attributes
    ----------
    name : str
        Column name.
    transform : Transform or None
        The chosen transform; ``None`` when the column is left alone.
    description : str
        The text to pass as ``--transform NAME=TEXT`` (``"none"`` when left alone).
    skew_before, skew_after : float
        Sample skewness (``scipy.stats.skew``, biased) before and after; NaN
        for a constant column.
    normality_before, normality_after : float
        The normality statistic before and after (lower = more Gaussian).
    statistic : str
        ``"dagostino"`` or ``"anderson"``.
    pvalue_before, pvalue_after : float
        D'Agostino-Pearson K^2 p-values (whatever ``statistic`` is).
    sample_before, sample_after : ndarray
        The seeded sample the statistics were computed on, and the same rows
        after the transform (not serialised).
    tried : list of (description, statistic)
        Every candidate that was valid on the column, in the order tried
        (``"none"`` first).
    verdict : str
        The decision in words.
    n_values, n_nonfinite : int
        Finite values in the column, and values left out as NaN/infinite.
    note : str
        Why a column was left alone without a search, else empty.
    """

    name: str
    transform: Transform | None
    description: str
    skew_before: float
    skew_after: float
    normality_before: float
    normality_after: float
    statistic: str
    pvalue_before: float = math.nan
    pvalue_after: float = math.nan
    sample_before: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)
    sample_after: np.ndarray = field(default_factory=lambda: np.empty(0), repr=False)
    tried: list[tuple[str, float]] = field(default_factory=list, repr=False)
    verdict: str = ""
    n_values: int = 0
    n_nonfinite: int = 0
    note: str = ""
    separation_before: float | None = None  # share of labelled anomalies beyond the 1% normal tail, raw column
    separation_after: float | None = None  # the same with the transform
    held_back: str = ""  # why a transform that looks more Gaussian is not recommended (it hides anomalies)

    @property
    def recommended(self) -> bool:
        """A transform that makes the column more Gaussian and does not hide labelled anomalies."""
        return self.transform is not None and not self.held_back

    @property
    def transform_text(self) -> str | None:
        """Right-hand side of ``--transform NAME=TEXT``, or None."""
        return None if self.transform is None else self.description

    @property
    def fit_option(self) -> str | None:
        """``NAME=TEXT`` exactly as ``afterlook fit --transform`` takes it, or None."""
        return None if self.transform is None else f"{self.name}={self.description}"

    def to_dict(self) -> dict:
        doc = {
            "name": self.name,
            "transform": self.transform_text,
            "skew_before": finite_or_none(self.skew_before),
            "skew_after": finite_or_none(self.skew_after),
            "normality_before": finite_or_none(self.normality_before),
            "normality_after": finite_or_none(self.normality_after),
            "statistic": self.statistic,
        }
        if self.separation_before is not None or self.held_back:
            doc.update(separation_before=self.separation_before, separation_after=self.separation_after,
                       recommended=self.recommended, held_back=self.held_back or None)
        return doc
