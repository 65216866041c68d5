"""Histogram counts for one feature: a normal population, one case, other anomalies.

The workbench draws the normal population of a feature (or of a candidate
derived feature) as bars, marks the case under review and shows the other
labelled anomalies on the *same* bins, so the eye can judge whether the case
and its fellow failures stand apart from normal operation.

Bins
----
The bins are ``bins`` equal-width intervals over the normal values between
their ``tail`` and ``1 - tail`` quantiles, widened to include the case value
when it lies outside. Quantiles rather than the extremes keep one stray
reading from squashing the whole population into a few bins; the normal
values left outside are counted (``normal_below`` / ``normal_above``), never
dropped silently. Widening to the case keeps the case on the picture even
when it is far out, which is the point of the view. Interval convention as
:func:`numpy.histogram`: ``[e_k, e_{k+1})`` except the last bin, which is
closed on the right.

Heights
-------
:func:`bar_heights` maps counts to bar heights in eighths of a character
cell (the terminal's eighth-block glyphs), scaled to the tallest bin; a
non-empty bin is at least one eighth tall so a sparse tail never vanishes.

Pure numpy; no files, no UI.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import AfterlookError

#: Share of the normal values left out at each end when placing the bins.
DEFAULT_TAIL = 0.001
#: Eighth-block glyphs give eight steps per character cell.
STEPS_PER_CELL = 8

__all__ = ["DEFAULT_TAIL", "STEPS_PER_CELL", "HistogramCounts", "shared_edges", "histogram_counts", "range_counts",
           "bar_heights"]


@dataclass(frozen=True)
class HistogramCounts:
    """Counts of a normal population, one case and other anomalies on shared bins.

    Attributes
    ----------
    edges : ndarray, shape (bins + 1,)
        Bin edges, increasing.
    normal : ndarray of int, shape (bins,)
        Normal values per bin.
    normal_below, normal_above : int
        Finite normal values left of ``edges[0]`` / right of ``edges[-1]``.
    normal_nonfinite : int
        Normal values that were NaN or infinite (not counted anywhere else).
    case_value : float
        The case's value (NaN when it has none).
    case_bin : int
        Bin holding the case, or -1 when the case value is not finite.
    others : ndarray of int, shape (bins,)
        Other labelled anomalies per bin.
    others_below, others_above, others_nonfinite : int
        Other anomalies left of, right of the bins, or not finite.
    """

    edges: np.ndarray
    normal: np.ndarray
    normal_below: int
    normal_above: int
    normal_nonfinite: int
    case_value: float
    case_bin: int
    others: np.ndarray
    others_below: int
    others_above: int
    others_nonfinite: int

    @property
    def bins(self) -> int:
        return int(self.normal.size)

    @property
    def n_normal(self) -> int:
        """Finite normal values (inside the bins or beside them)."""
        return int(self.normal.sum()) + self.normal_below + self.normal_above

    @property
    def n_others(self) -> int:
        """Finite other anomalies (inside the bins or beside them)."""
        return int(self.others.sum()) + self.others_below + self.others_above


def _finite(values) -> tuple[np.ndarray, int]:
    x = np.asarray(values, dtype=np.float64).ravel()
    ok = np.isfinite(x)
    return x[ok], int((~ok).sum())


def shared_edges(normal, case_value: float, bins: int, tail: float = DEFAULT_TAIL) -> np.ndarray:
    """Bin edges over the normal values' ``[tail, 1 - tail]`` quantiles, widened to the case.

    Parameters
    ----------
    normal : array_like, shape (n,)
        Normal values (NaN and infinite values are ignored).
    case_value : float
        The case; the range is widened to include it when finite.
    bins : int
        Number of bins (>= 1).
    tail : float
        Quantile left out at each end, ``0 <= tail < 0.5``.

    Returns
    -------
    ndarray, shape (bins + 1,)
        ``numpy.linspace`` edges. A zero-width range (a constant column) is
        widened symmetrically so that the bins still have positive width.
    """
    if int(bins) < 1:
        raise AfterlookError(f"a histogram needs at least one bin, got {bins}")
    if not 0.0 <= tail < 0.5:
        raise AfterlookError(f"histogram tail must lie in [0, 0.5), got {tail}")
    x, _ = _finite(normal)
    if x.size == 0:
        raise AfterlookError("no finite normal values to draw a histogram of")
    lo, hi = (float(v) for v in np.quantile(x, [tail, 1.0 - tail]))
    if np.isfinite(case_value):
        lo, hi = min(lo, float(case_value)), max(hi, float(case_value))
    if hi <= lo:
        half = max(abs(lo) * 0.01, 0.5)
        lo, hi = lo - half, hi + half
    return np.linspace(lo, hi, int(bins) + 1)


def _count(x: np.ndarray, edges: np.ndarray) -> tuple[np.ndarray, int, int]:
    below = int((x < edges[0]).sum())
    above = int((x > edges[-1]).sum())
    inside = x[(x >= edges[0]) & (x <= edges[-1])]
    counts, _ = np.histogram(inside, bins=edges)
    return counts.astype(np.int64), below, above


def histogram_counts(normal, case_value: float, others=(), *, bins: int = 40,
                     tail: float = DEFAULT_TAIL) -> HistogramCounts:
    """Count the normal values and the other anomalies on :func:`shared_edges`.

    Parameters
    ----------
    normal : array_like, shape (n,)
    case_value : float
    others : array_like, shape (m,)
        Values of the other labelled anomalies (the case itself excluded).
    bins, tail : see :func:`shared_edges`.
    """
    edges = shared_edges(normal, case_value, bins, tail)
    x, normal_nonfinite = _finite(normal)
    o, others_nonfinite = _finite(others)
    normal_counts, n_below, n_above = _count(x, edges)
    other_counts, o_below, o_above = _count(o, edges)
    case_value = float(case_value)
    if np.isfinite(case_value):
        # searchsorted(side="right") - 1 is numpy.histogram's [e_k, e_k+1) rule;
        # the right edge belongs to the last bin.
        case_bin = int(min(np.searchsorted(edges, case_value, side="right") - 1, edges.size - 2))
    else:
        case_bin = -1
    return HistogramCounts(edges, normal_counts, n_below, n_above, normal_nonfinite, case_value, case_bin,
                           other_counts, o_below, o_above, others_nonfinite)


def range_counts(values, bins: int) -> tuple[np.ndarray, np.ndarray, int]:
    """Counts of the finite ``values`` on ``bins`` equal bins from their minimum to their maximum.

    The plain binning (:func:`numpy.histogram` over the full range) of a
    single population: the ``shape`` panels and a casebook entry's stored
    histogram. Returns ``(counts, edges, n_finite)``; empty arrays when no
    value is finite.
    """
    x, _ = _finite(values)
    if x.size == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0), 0
    counts, edges = np.histogram(x, bins=int(bins))
    return counts, edges, int(x.size)


def bar_heights(counts, rows: int, steps: int = STEPS_PER_CELL) -> np.ndarray:
    """Bar heights in ``1/steps`` of a cell for ``rows`` rows, scaled to the tallest bin.

    ``height_k = round(counts_k / max(counts) * rows * steps)``, at least 1
    for a non-empty bin, 0 for an empty one; all zeros when every bin is empty.
    """
    if int(rows) < 1 or int(steps) < 1:
        raise AfterlookError("bar heights need at least one row and one step per row")
    c = np.asarray(counts, dtype=np.float64)
    if c.size == 0 or c.max() <= 0:
        return np.zeros(c.shape, dtype=np.int64)
    full = int(rows) * int(steps)
    h = np.rint(c / c.max() * full).astype(np.int64)
    return np.where(c > 0, np.maximum(h, 1), 0)


# --------------------------------------------------------------------------
# two readings against each other (the pair view)
# --------------------------------------------------------------------------

#: The candidate's normal band: its values between these quantiles over the normal rows.
PAIR_BAND = (0.01, 0.99)


@dataclass(frozen=True)
class PairCounts:
    """Counts of two readings against each other on a grid, with one case and the candidate's normal band.

    Grids are ``(ny, nx)``; row 0 is the lowest ``y`` bin. Edges are
    :func:`shared_edges` of each reading (the same window rule as the
    one-feature histogram), so the case is always inside the picture.
    """

    x_edges: np.ndarray
    y_edges: np.ndarray
    normal: np.ndarray  # normal rows per cell
    others: np.ndarray  # other labelled anomalies per cell
    case_cell: tuple[int, int] | None  # (column, row) of the case; None when a reading is missing
    in_band: np.ndarray | None  # the candidate at the cell's centre lies inside its normal band
    band: tuple[float, float] | None  # the band's two quantiles of the candidate over normal rows
    n_normal: int  # finite normal pairs
    normal_outside: int  # finite normal pairs outside the window
    others_outside: int


def _grid_counts(x, y, x_edges, y_edges) -> tuple[np.ndarray, int, int]:
    x = np.asarray(x, dtype=np.float64).ravel()
    y = np.asarray(y, dtype=np.float64).ravel()
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    inside = (x >= x_edges[0]) & (x <= x_edges[-1]) & (y >= y_edges[0]) & (y <= y_edges[-1])
    counts, _, _ = np.histogram2d(y[inside], x[inside], bins=[y_edges, x_edges])
    return counts.astype(np.int64), int(ok.sum()), int((~inside).sum())


def _bin_of(value: float, edges: np.ndarray) -> int:
    return int(min(np.searchsorted(edges, value, side="right") - 1, edges.size - 2))


def pair_counts(x, y, case_xy, others_x=(), others_y=(), *, nx: int = 40, ny: int = 12, feature=None,
                band: tuple[float, float] = PAIR_BAND, tail: float = DEFAULT_TAIL) -> PairCounts:
    """Normal rows, other anomalies and one case on an ``nx`` x ``ny`` grid of two readings.

    Parameters
    ----------
    x, y : array_like, shape (n,)
        The two readings over the normal rows (pairs with a NaN or infinite
        value are left out and not counted).
    case_xy : (float, float)
    others_x, others_y : array_like, shape (m,)
        The other labelled anomalies' readings (the case itself excluded).
    feature : callable(x, y) -> values, optional
        The candidate as a function of the two readings. Its normal band is
        its ``band`` quantiles over the normal rows; ``in_band`` marks the
        cells whose centre falls inside (for a ratio ``y / x``: the wedge
        between the lines through the origin with those two slopes).
    """
    cx, cy = (float(v) for v in case_xy)
    x_edges = shared_edges(x, cx, nx, tail)
    y_edges = shared_edges(y, cy, ny, tail)
    normal, n_normal, normal_outside = _grid_counts(x, y, x_edges, y_edges)
    others, _, others_outside = _grid_counts(others_x, others_y, x_edges, y_edges)
    case_cell = (_bin_of(cx, x_edges), _bin_of(cy, y_edges)) if np.isfinite(cx) and np.isfinite(cy) else None
    in_band = quantiles = None
    if feature is not None:
        xs = np.asarray(x, dtype=np.float64).ravel()
        ys = np.asarray(y, dtype=np.float64).ravel()
        ok = np.isfinite(xs) & np.isfinite(ys)
        with np.errstate(all="ignore"):
            values = np.asarray(feature(xs[ok], ys[ok]), dtype=np.float64)
        values = values[np.isfinite(values)]
        if values.size:
            lo, hi = (float(q) for q in np.quantile(values, band))
            quantiles = (lo, hi)
            gx, gy = np.meshgrid(0.5 * (x_edges[:-1] + x_edges[1:]), 0.5 * (y_edges[:-1] + y_edges[1:]))
            with np.errstate(all="ignore"):
                at = np.asarray(feature(gx.ravel(), gy.ravel()), dtype=np.float64).reshape(gx.shape)
            in_band = np.isfinite(at) & (at >= lo) & (at <= hi)
    return PairCounts(x_edges, y_edges, normal, others, case_cell, in_band, quantiles, n_normal, normal_outside,
                      others_outside)


def band_edge(in_band: np.ndarray) -> np.ndarray:
    """Cells inside the band with a 4-neighbour outside it: the band's boundary, drawn as lines.

    The grid's own border does not count as outside (``numpy.pad`` in edge mode).
    """
    b = np.asarray(in_band, dtype=bool)
    padded = np.pad(b, 1, mode="edge")
    inner = padded[:-2, 1:-1] & padded[2:, 1:-1] & padded[1:-1, :-2] & padded[1:-1, 2:]
    return b & ~inner


def density_shares(counts) -> np.ndarray:
    """Each cell's count on a log scale relative to the densest cell: ``log1p(c) / log1p(max)`` (0 for an
    empty cell, 1 for the densest). The pair view's shades and the report's opacities both read it, so a
    sparse tail stays visible next to a dense core."""
    c = np.asarray(counts, dtype=np.float64)
    top = c.max() if c.size else 0.0
    if top <= 0:
        return np.zeros(c.shape)
    return np.log1p(np.maximum(c, 0.0)) / np.log1p(top)
