"""Tests of the workbench's histogram counts (afterlook.core.histograms).

Reference: a deliberately naive loop written here, bin by bin, using the
interval rule of ``numpy.histogram`` ([e_k, e_k+1), the last bin closed), and
``numpy.quantile`` for the range.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from afterlook.core.errors import AfterlookError
from afterlook.core.histograms import bar_heights, histogram_counts, shared_edges


def naive_counts(values, edges):
    """Loop over values and bins: below, per-bin counts, above."""
    counts = [0] * (len(edges) - 1)
    below = above = 0
    for v in values:
        if not np.isfinite(v):
            continue
        if v < edges[0]:
            below += 1
            continue
        if v > edges[-1]:
            above += 1
            continue
        for k in range(len(edges) - 1):
            last = k == len(edges) - 2
            if edges[k] <= v < edges[k + 1] or (last and v == edges[-1]):
                counts[k] += 1
                break
    return counts, below, above


def naive_bin(value, edges):
    for k in range(len(edges) - 1):
        if edges[k] <= value < edges[k + 1]:
            return k
    return len(edges) - 2 if value == edges[-1] else None


def test_counts_match_a_naive_loop():
    rng = np.random.default_rng(3)
    normal = np.concatenate([rng.normal(10.0, 2.0, 3000), [np.nan, np.inf, 55.0, -40.0]])
    others = np.array([4.0, 9.5, 16.0, 70.0, np.nan, -1e3])
    h = histogram_counts(normal, 17.25, others, bins=25)
    counts, below, above = naive_counts(normal, h.edges)
    assert h.normal.tolist() == counts
    assert (h.normal_below, h.normal_above, h.normal_nonfinite) == (below, above, 2)
    counts, below, above = naive_counts(others, h.edges)
    assert h.others.tolist() == counts
    assert (h.others_below, h.others_above, h.others_nonfinite) == (below, above, 1)
    assert h.case_bin == naive_bin(17.25, h.edges)
    assert h.n_normal == 3002 and h.n_others == 5


def test_edges_span_the_quantiles_and_widen_to_the_case():
    rng = np.random.default_rng(4)
    x = rng.normal(0.0, 1.0, 5000)
    lo, hi = np.quantile(x, [0.001, 0.999])
    inside = shared_edges(x, 0.5, 10)
    np.testing.assert_allclose(inside[[0, -1]], [lo, hi], rtol=0, atol=1e-12)
    assert inside.size == 11 and np.all(np.diff(inside) > 0)
    far = shared_edges(x, 12.0, 10)
    assert far[0] == pytest.approx(lo) and far[-1] == 12.0
    low = shared_edges(x, -9.0, 10)
    assert low[0] == -9.0 and low[-1] == pytest.approx(hi)


def test_a_case_far_out_sits_in_an_edge_bin_and_extremes_are_counted_beside():
    x = np.r_[np.linspace(0.0, 1.0, 2001), 50.0]  # one stray reading beyond the 99.9 % quantile
    h = histogram_counts(x, 5.0, [], bins=10)
    assert h.case_bin == 9  # the right edge belongs to the last bin
    lo = np.quantile(x, 0.001)
    assert h.edges[0] == pytest.approx(lo) and h.edges[-1] == 5.0
    # the stray reading is counted beside the bins, as are the values under the low quantile
    assert h.normal_above == 1 and h.normal_below == int((x < lo).sum()) == 3
    h = histogram_counts(x, -5.0, [], bins=10)
    assert h.case_bin == 0


def test_nan_case_has_no_bin_and_constant_population_still_bins():
    h = histogram_counts(np.full(50, 3.0), float("nan"), [3.0], bins=4)
    assert h.case_bin == -1
    assert np.all(np.diff(h.edges) > 0)
    assert h.normal.sum() == 50 and h.others.sum() == 1


def test_bad_arguments_are_clear_errors():
    with pytest.raises(AfterlookError, match="no finite normal values"):
        histogram_counts([np.nan, np.inf], 1.0)
    with pytest.raises(AfterlookError, match="at least one bin"):
        shared_edges([1.0, 2.0], 1.0, 0)
    with pytest.raises(AfterlookError, match="tail"):
        shared_edges([1.0, 2.0], 1.0, 5, tail=0.5)
    with pytest.raises(AfterlookError, match="at least one row"):
        bar_heights([1, 2], 0)


def test_bar_heights_scale_to_the_tallest_bin():
    h = bar_heights([0, 1, 50, 100], rows=4, steps=8)
    assert h.tolist() == [0, 1, 16, 32]  # 1/100 of 32 rounds to 0 but a non-empty bin shows
    assert bar_heights([0, 0], rows=3).tolist() == [0, 0]


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=1, max_size=80),
    st.floats(-1e7, 1e7, allow_nan=False),
    st.lists(st.floats(-1e7, 1e7, allow_nan=False), max_size=20),
    st.integers(1, 30),
)
def test_every_finite_value_is_counted_once(normal, case, others, bins):
    h = histogram_counts(normal, case, others, bins=bins)
    assert h.n_normal == len(normal)
    assert h.n_others == len(others)
    assert 0 <= h.case_bin < bins
    assert h.edges[0] <= case <= h.edges[-1]
