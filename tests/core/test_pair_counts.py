"""The pair view's counts: two readings on a grid, one case, the candidate's normal band.

References: a plain Python loop over the rows (an independent count of the
same half-open cells, the last bin closed, as numpy.histogram documents) and
numpy.quantile for the band.
"""

from __future__ import annotations

import numpy as np
import pytest

from afterlook.core.histograms import PAIR_BAND, band_edge, pair_counts


def loop_count(x, y, xe, ye):
    """Count by hand: bin k holds [e_k, e_k+1), the last bin also its right edge."""
    def which(v, e):
        if not (e[0] <= v <= e[-1]):
            return None
        for k in range(len(e) - 1):
            if e[k] <= v < e[k + 1] or (k == len(e) - 2 and v == e[-1]):
                return k
        return None
    out = np.zeros((len(ye) - 1, len(xe) - 1), dtype=int)
    for a, b in zip(x, y):
        i, j = which(a, xe), which(b, ye)
        if i is not None and j is not None:
            out[j, i] += 1
    return out


def test_counts_agree_with_a_plain_loop_and_nothing_is_lost():
    rng = np.random.default_rng(3)
    x = rng.gamma(3.0, 2.0, 800)
    y = 0.5 * x + rng.normal(0, 1, 800)
    x[:5] = np.nan  # a pair with a missing reading is left out
    others_x, others_y = rng.normal(6, 3, 40), rng.normal(3, 3, 40)
    c = pair_counts(x, y, (30.0, -2.0), others_x, others_y, nx=17, ny=9)
    assert c.normal.shape == (9, 17)
    assert np.array_equal(c.normal, loop_count(x[5:], y[5:], c.x_edges, c.y_edges))
    assert np.array_equal(c.others, loop_count(others_x, others_y, c.x_edges, c.y_edges))
    assert c.n_normal == 795 and c.normal.sum() + c.normal_outside == 795
    # the window is widened to the case, which sits in the last column and the first row
    assert c.x_edges[-1] == 30.0 and c.case_cell == (16, 0)


def test_the_band_of_a_ratio_is_the_wedge_around_its_normal_slope():
    rng = np.random.default_rng(5)
    x = rng.uniform(100, 1000, 5000)
    y = x * rng.normal(2.0, 0.05, 5000)  # y normally moves with x: y / x near 2
    c = pair_counts(x, y, (500.0, 1500.0), nx=30, ny=30, feature=lambda a, b: b / a)
    lo, hi = np.quantile(y / x, PAIR_BAND)  # numpy.quantile as the reference
    assert c.band == pytest.approx((lo, hi), rel=1e-12)
    cx = 0.5 * (c.x_edges[:-1] + c.x_edges[1:])
    cy = 0.5 * (c.y_edges[:-1] + c.y_edges[1:])
    ratio = cy[:, None] / cx[None, :]
    assert np.array_equal(c.in_band, (ratio >= lo) & (ratio <= hi))
    # the case (ratio 3) lies outside the band; most normal rows fall in band cells
    col, row = c.case_cell
    assert not c.in_band[row, col]
    assert c.normal[c.in_band].sum() > 0.8 * c.normal.sum()


def test_no_band_without_the_candidate_and_edges_of_a_block():
    c = pair_counts(np.arange(50.0), np.arange(50.0), (3.0, 4.0), nx=5, ny=5)
    assert c.in_band is None and c.band is None
    mask = np.zeros((6, 6), bool)
    mask[1:5, 1:5] = True
    edge = band_edge(mask)
    expected = mask.copy()
    expected[2:4, 2:4] = False  # the inside of the block is not an edge
    assert np.array_equal(edge, expected)
    full = np.ones((4, 4), bool)
    assert not band_edge(full).any()  # the grid's own border is not an edge


def test_density_shares_are_the_log_count_relative_to_the_densest_cell():
    from afterlook.core.histograms import density_shares

    c = np.array([[0, 1, 9], [99, 0, 3]])
    expected = np.log1p(c) / np.log(100.0)  # written out: log(1 + c) / log(1 + max)
    assert np.allclose(density_shares(c), expected, rtol=0, atol=1e-15)
    assert density_shares(c)[1, 0] == 1.0 and density_shares(c)[0, 0] == 0.0
    assert not density_shares(np.zeros((2, 2))).any()
